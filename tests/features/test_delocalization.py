"""The ``dl_`` feature group: where a site's charge and lone pair go by resonance.

Each check pairs the walk with a measured difference it explains.  Constants: CRC Handbook of Chemistry
and Physics, dissociation constants of organic acids and bases in water at 25 C, from memory; the
resonance pictures themselves are the curved-arrow bookkeeping of any organic chemistry text (common
practice).
"""
from __future__ import annotations

import random

import pytest
from rdkit import Chem

from pkasite.features.delocalization import DL_NAMES
from pkasite.features.site_features import (FeatureSettings, _MolData, describe_site, featurize_sites,
                                            site_feature_names)

ON = FeatureSettings(radii=(1,), n_bits=8, mol_fp_bits=0, delocalization=True)


def _dl(smiles: str, atom: int, kind: str) -> dict[str, float]:
    mol = Chem.MolFromSmiles(smiles)
    row = describe_site(mol, atom, kind, settings=ON)
    return {k[3:]: row[k] for k in DL_NAMES}


def test_off_by_default_keeps_the_column_layout():
    assert not any(n.startswith("dl_") for n in site_feature_names(FeatureSettings()))
    names = site_feature_names(ON)
    assert [n for n in names if n.startswith("dl_")] == list(DL_NAMES)
    assert FeatureSettings.from_dict(ON.to_dict()) == ON
    with pytest.raises(ValueError, match="delocalization"):
        FeatureSettings(delocalization="yes")


def test_carboxylate_shares_its_charge_with_the_carbonyl_oxygen():
    # acetic acid 4.76 against ethanol about 16: the carboxylate's charge sits on two O
    acetic = _dl("CC(=O)O", 3, "acid")
    assert (acetic["ion_o"], acetic["ion_c"], acetic["ion_far"]) == (1, 0, 2)
    ethanol = _dl("CCO", 2, "acid")
    assert sum(ethanol[k] for k in ("ion_c", "ion_n", "ion_o", "ion_x")) == 0


def test_phenoxide_reaches_ortho_and_para_but_not_meta():
    # 4-nitrophenol 7.15 and 3-nitrophenol 8.36 (phenol 9.99): only the para nitro takes the charge
    para = _dl("Oc1ccc(cc1)[N+](=O)[O-]", 0, "acid")
    meta = _dl("Oc1cccc(c1)[N+](=O)[O-]", 0, "acid")
    phenol = _dl("Oc1ccccc1", 0, "acid")
    assert phenol["ion_c"] == 3 and phenol["ion_o"] == 0
    assert para["ion_o"] == 1 and para["ion_far"] == 6
    assert meta["ion_o"] == 0 and meta["ion_c"] == 3


def test_walks_do_not_depend_on_atom_order_or_kekule_structure():
    # 2-naphthol drawn from different atoms; RDKit kekulizes each drawing its own way
    ref = Chem.MolFromSmiles("Oc1ccc2ccccc2c1")
    rng = random.Random(7)
    base = describe_site(ref, 0, "acid", settings=ON)
    for _ in range(5):
        order = list(range(ref.GetNumAtoms()))
        rng.shuffle(order)
        mol = Chem.MolFromSmiles(Chem.MolToSmiles(Chem.RenumberAtoms(ref, order), canonical=False))
        o = next(a.GetIdx() for a in mol.GetAtoms() if a.GetSymbol() == "O")
        row = describe_site(mol, o, "acid", settings=ON)
        assert [row[k] for k in DL_NAMES] == [base[k] for k in DL_NAMES]


def test_aniline_lone_pair_spreads_into_the_ring():
    # aniline pKaH 4.6 against cyclohexylamine 10.6: the ring holds the lone pair
    aniline = _dl("Nc1ccccc1", 0, "base")
    amine = _dl("NC1CCCCC1", 0, "base")
    assert aniline["lp_c"] == 3 and amine["lp_c"] == 0
    # the anilinium ion's charge cannot spread: it has no lone pair left
    assert aniline["ion_c"] == aniline["ion_n"] == 0


def test_pyridinium_charge_reaches_a_para_amino_but_not_a_meta_one():
    # 4-aminopyridine pKaH 9.17 against 3-aminopyridine 5.98 (pyridine 5.23)
    para = _dl("Nc1ccncc1", 4, "base")
    meta = _dl("Nc1cccnc1", 5, "base")
    assert para["ion_n"] == 1 and meta["ion_n"] == 0
    assert para["ion_c"] == meta["ion_c"] == 3
    # the ring N's lone pair is in the ring plane: it spreads nowhere
    assert para["lp_c"] == para["lp_n"] == para["lp_o"] == 0


def test_guanidinium_spreads_over_three_nitrogens():
    # guanidine pKaH 13.6 (common practice: among the strongest neutral organic bases)
    g = _dl("NC(N)=N", 3, "base")
    assert (g["ion_n"], g["ion_c"]) == (2, 1)


def test_amide_nitrogen_lone_pair_goes_to_the_carbonyl_oxygen():
    # acetamide is protonated on O (pKaH about -0.5), not on its N, whose lone pair the C=O holds
    n_site = _dl("CC(N)=O", 2, "base")
    o_site = _dl("CC(N)=O", 3, "base")
    assert n_site["lp_o"] == 1
    assert o_site["ion_n"] == 1  # the O-protonated amide's charge reaches the N


def test_push_pull_enamine_lone_pair_reaches_the_nitrile():
    # 3-aminoacrylonitrile: the enamine N's lone pair is drawn onto the nitrile N
    e = _dl("N#CC=CN", 4, "base")
    assert e["lp_n"] == 1 and e["lp_c"] == 1


def test_carbon_acids_spread_through_both_acceptors():
    # malononitrile 11.2 against acetonitrile about 25: two nitrile N take the charge
    assert _dl("N#CCC#N", 2, "acid")["ion_n"] == 2
    assert _dl("CC#N", 0, "acid")["ion_n"] == 1


def test_featurize_fills_the_block_for_every_site_of_a_molecule():
    mol = Chem.MolFromSmiles("Nc1ccc(cc1)C(=O)O")
    X = featurize_sites([(mol, 0, "base", "other"), (mol, 9, "acid", "other")], ON)
    names = site_feature_names(ON)
    cols = [names.index(n) for n in DL_NAMES]
    # the amino N's lone pair reaches the carboxyl O through the ring; the acid's anion spreads to its O
    assert X[0, cols[DL_NAMES.index("dl_lp_o")]] == 1
    assert X[1, cols[DL_NAMES.index("dl_ion_o")]] == 1


@pytest.mark.parametrize("smiles", [
    "O=c1cccc[nH]1", "c1cc[n-]c1", "c1nn[n-]n1", "C[n+]1ccccc1", "c1cc[o+]cc1", "OC(=O)[c+]1cccccc1",
    "c1ccc2[nH]cnc2c1", "Cn1cncc1", "c1ccsc1", "[O-][n+]1ccccc1", "Cc1cc(O)nn1-c1ccccc1",
    "Nc1nc(O)c2ncn(C3CC(O)C(CO)O3)c2n1", "O=c1[nH]c(=O)c2[nH]cnc2[nH]1", "c1ccc2c(c1)ccc1ccccc12",
])
def test_pi_partners_are_the_atoms_with_a_kekule_double_bond(smiles):
    # reference: RDKit's own Kekule structure of the molecule
    mol = Chem.MolFromSmiles(smiles)
    kek = Chem.Mol(mol)
    Chem.Kekulize(kek, clearAromaticFlags=False)
    expected = [any(b.GetBondType() in (Chem.BondType.DOUBLE, Chem.BondType.TRIPLE) for b in a.GetBonds())
                for a in kek.GetAtoms()]
    assert _MolData(mol, ON, ()).conjugation.pi == expected
