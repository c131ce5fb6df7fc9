"""Azole N-H tautomers: every drawing of one compound standardizes to one structure.

Reference for "one compound": the standard InChI, whose mobile-H layer treats the two N-H tautomers of
an azole ring as one structure (IUPAC InChI technical manual), computed by RDKit's InChI code.
"""
from __future__ import annotations

import pytest
from rdkit import Chem

from pkasite.features.standardize import canonical_azole_tautomer, standardize_mol, standardize_smiles

PAIRS = [
    ("NCCc1c[nH]cn1", "NCCc1cnc[nH]1"),                      # histamine
    ("Cc1cc[nH]n1", "Cc1n[nH]cc1"),                          # 3(5)-methylpyrazole
    ("Nc1ncnc2[nH]cnc12", "Nc1ncnc2nc[nH]c12"),              # adenine, 9H and 7H
    ("Cc1nn[nH]n1", "Cc1n[nH]nn1"),                          # 5-methyltetrazole, 2H and 1H
    ("OC(=O)c1ccc2[nH]cnc2c1", "OC(=O)c1ccc2nc[nH]c2c1"),    # benzimidazole-5(6)-carboxylic acid
    ("Cc1c[nH]c(-c2nc[nH]c2C)n1", "Cc1[nH]cnc1-c1ncc(C)[nH]1"),  # two azole rings
]


@pytest.mark.parametrize("a,b", PAIRS)
def test_both_drawings_give_one_structure(a, b):
    sa, sb = standardize_smiles(a), standardize_smiles(b)
    assert sa.inchikey == sb.inchikey  # the same compound for InChI
    assert sa.smiles == sb.smiles
    assert sa.azole_tautomers_differ and sb.azole_tautomers_differ


def test_atom_order_is_kept_and_only_ring_hydrogens_move():
    mol = Chem.MolFromSmiles("NCCc1cnc[nH]1")
    out = canonical_azole_tautomer(mol)
    assert [a.GetSymbol() for a in out.GetAtoms()] == [a.GetSymbol() for a in mol.GetAtoms()]
    moved = [a.GetIdx() for a, b in zip(mol.GetAtoms(), out.GetAtoms()) if a.GetTotalNumHs() != b.GetTotalNumHs()]
    assert sorted(moved) == [5, 7]  # the two ring N, nothing else
    assert sum(a.GetTotalNumHs() for a in out.GetAtoms()) == sum(a.GetTotalNumHs() for a in mol.GetAtoms())


@pytest.mark.parametrize("smiles", ["c1c[nH]cn1", "c1ccc2[nH]cnc2c1", "Cn1ccnc1", "Oc1ccccn1", "O=c1cccc[nH]1",
                                    "CC(=O)CC(C)=O"])
def test_other_structures_are_left_as_drawn(smiles):
    # symmetric azoles, N-alkyl azoles, lactim/lactam and keto/enol drawings keep their drawing
    mol = Chem.MolFromSmiles(smiles)
    assert Chem.MolToSmiles(canonical_azole_tautomer(mol)) == Chem.MolToSmiles(mol)
    std = standardize_smiles(smiles)
    assert std.smiles == Chem.MolToSmiles(mol)
    assert not std.azole_tautomers_differ


def test_a_named_site_atom_keeps_the_drawing():
    # moving the H would move a site named on the drawn ring N
    mol = Chem.MolFromSmiles("NCCc1cnc[nH]1")
    named = standardize_mol(mol, site_atom=7)
    assert named.mol.GetAtomWithIdx(named.site_atom).GetTotalNumHs() == 1
    assert named.smiles == Chem.MolToSmiles(mol)
    assert named.inchikey == standardize_mol(mol).inchikey


def test_many_azole_rings_are_left_as_drawn():
    # six rings: 2^6 = 64 combinations, enumerated; seven: more than 64, the drawing is kept as it is
    from pkasite.features.standardize import azole_tautomers
    six = Chem.MolFromSmiles("C" + "C".join(["c1[nH]cnc1"] * 6))
    seven = Chem.MolFromSmiles("C" + "C".join(["c1[nH]cnc1"] * 7))
    assert len(azole_tautomers(six)) == 64
    assert azole_tautomers(seven) == [seven]
    assert canonical_azole_tautomer(seven) is seven
