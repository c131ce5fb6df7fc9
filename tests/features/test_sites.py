"""Site catalog and perception checked against textbook chemistry and the open DataWarrior pKa set.

Expected sites are written as atom-mapped SMILES: map 1 marks an acid site, 2 a base site, 3 both.
Maps are stripped before perception, which keeps atom order, so indices are checked exactly.
"""

from __future__ import annotations

import csv
import math
import os
import textwrap
import time
from pathlib import Path

import pytest
from rdkit import Chem, RDLogger

from pkasite.features.standardize import StructureError, parse_smiles, smiles_text_problem, standardize_mol
from pkasite.features.sites import (
    Assignment,
    CatalogError,
    NoSiteError,
    RankWithoutSiteError,
    SiteAssignmentError,
    SiteError,
    assign_site,
    assignment_confidence,
    drawn_titration,
    find_sites,
    group_site,
    load_catalog,
    numbering_contradicted,
)

RDLogger.DisableLog("rdApp.*")

HB = "handbook knowledge, from memory"
CRC = "CRC Handbook of Chemistry and Physics, 97th ed., from memory"
DRUG = "textbook drug chemistry (Foye's Principles of Medicinal Chemistry), from memory"
PHYS = "physical organic chemistry (carbon and N-H acids in water), rough values from memory"

# (name, mapped SMILES, source of the expected sites)
KNOWN = [
    ("acetic acid", "CC(=O)[OH:1]", CRC),
    ("acetate ion", "CC(=O)[O-:1]", CRC),
    ("formic acid", "[OH:1]C=O", CRC),
    ("benzoic acid", "[OH:1]C(=O)c1ccccc1", CRC),
    ("phenol", "[OH:1]c1ccccc1", CRC),
    ("phenolate ion", "[O-:1]c1ccccc1", CRC),
    ("ethanol", "CC[OH:1]", CRC),
    ("methanesulfonic acid", "CS(=O)(=O)[OH:1]", CRC),
    ("benzenesulfonic acid", "[OH:1]S(=O)(=O)c1ccccc1", CRC),
    ("phenylphosphonic acid", "[OH:1]P(=O)([OH:1])c1ccccc1", CRC),
    ("thiophenol", "[SH:1]c1ccccc1", CRC),
    ("ethanethiol", "CC[SH:1]", CRC),
    ("methanesulfonamide", "CS([NH2:1])(=O)=O", HB),
    ("acetohydroxamic acid", "CC(=[O:2])N[OH:1]", HB),
    ("acetone oxime", "CC(C)=N[OH:1]", HB),
    ("acetylacetone", "CC(=O)[CH2:1]C(C)=O", HB),
    ("nitromethane", "[CH3:1][N+](=O)[O-]", HB),
    ("succinimide", "[O:2]=C1CCC(=[O:2])[NH:1]1", HB),
    ("phthalimide", "[O:2]=C1[NH:1]C(=[O:2])c2ccccc21", HB),
    ("saccharin", "[O:2]=C1[NH:1]S(=O)(=O)c2ccccc21", HB),
    ("hydantoin", "[O:2]=C1CNC(=[O:2])[NH:1]1", HB),
    ("barbital", "CCC1(CC)C(=[O:2])[NH:1]C(=[O:2])[NH:1]C1=[O:2]", DRUG),
    ("phenobarbital", "CCC1(c2ccccc2)C(=[O:2])[NH:1]C(=[O:2])[NH:1]C1=[O:2]", DRUG),
    ("uracil", "[O:2]=c1cc[nH:1]c(=[O:2])[nH:1]1", HB),
    ("2-pyridone", "[O:2]=c1cccc[nH:1]1", HB),
    ("tetrazole", "c1[n:2][n:2][n:2][nH:1]1", HB),
    ("5-phenyltetrazole", "c1ccc(cc1)-c1[n:2][n:2][nH:1][n:2]1", HB),
    ("1,2,4-triazole", "c1[n:2]c[nH:1][n:2]1", HB),
    ("ascorbic acid", "[OH:1]C[C@H]([OH:1])[C@H]1OC(=O)C([OH:1])=C1[OH:1]", HB),
    ("pyridine", "c1cc[n:2]cc1", CRC),
    ("pyridinium ion", "c1cc[nH+:2]cc1", CRC),
    ("quinoline", "c1ccc2[n:2]cccc2c1", CRC),
    ("pyrimidine", "c1c[n:2]c[n:2]c1", CRC),
    ("imidazole", "c1c[nH:1]c[n:2]1", CRC),
    ("pyrazole", "c1c[n:2][nH:1]c1", HB),
    ("thiazole", "c1csc[n:2]1", HB),
    ("oxazole", "c1coc[n:2]1", HB),
    ("aniline", "[NH2:2]c1ccccc1", CRC),
    ("anilinium ion", "[NH3+:2]c1ccccc1", CRC),
    ("N-methylaniline", "C[NH:2]c1ccccc1", CRC),
    ("N,N-dimethylaniline", "C[N:2](C)c1ccccc1", CRC),
    ("methylamine", "C[NH2:2]", CRC),
    ("dimethylamine", "C[NH:2]C", CRC),
    ("trimethylamine", "C[N:2](C)C", CRC),
    ("piperidine", "C1CC[NH:2]CC1", CRC),
    ("morpholine", "C1COCC[NH:2]1", CRC),
    ("hydrazine", "[NH2:2][NH2:2]", CRC),
    ("hydroxylamine", "[NH2:2][OH:1]", CRC),
    ("guanidine", "NC(N)=[NH:2]", CRC),
    ("acetamidine", "CC(=[NH:2])N", HB),
    ("benzamidine", "NC(=[NH:2])c1ccccc1", HB),
    ("acetamide", "CC(N)=[O:2]", HB),
    ("4-aminopyridine", "Nc1cc[n:2]cc1", CRC),
    ("2-aminopyridine", "Nc1cccc[n:2]1", CRC),
    ("2-aminopyrimidine", "Nc1[n:2]ccc[n:2]1", HB),
    ("4-dimethylaminopyridine", "CN(C)c1cc[n:2]cc1", HB),
    ("benzene", "c1ccccc1", CRC),
    ("cyclohexane", "C1CCCCC1", CRC),
    ("toluene", "Cc1ccccc1", CRC),
    ("chlorobenzene", "Clc1ccccc1", CRC),
    ("glycine", "[NH2:2]CC(=O)[OH:1]", CRC),
    ("glycine zwitterion", "[NH3+:2]CC(=O)[O-:1]", CRC),
    ("ibuprofen", "CC(C)Cc1ccc(cc1)C(C)C(=O)[OH:1]", DRUG),
    ("aspirin", "CC(=O)Oc1ccccc1C(=O)[OH:1]", DRUG),
    ("diclofenac", "[OH:1]C(=O)Cc1ccccc1[NH:2]c1c(Cl)cccc1Cl", DRUG),
    ("paracetamol", "CC(=[O:2])Nc1ccc([OH:1])cc1", DRUG),
    ("propranolol", "CC(C)[NH:2]CC([OH:1])COc1cccc2ccccc12", DRUG),
    ("lidocaine", "CC[N:2](CC)CC(=[O:2])Nc1c(C)cccc1C", DRUG),
    ("morphine", "C[N:2]1CC[C@]23c4c5ccc([OH:1])c4O[C@H]2[C@@H]([OH:1])C=C[C@H]3[C@H]1C5", DRUG),
    ("ciprofloxacin", "[OH:1]C(=O)c1cn(C2CC2)c2cc([N:2]3CC[NH:2]CC3)c(F)cc2c1=[O:2]", DRUG),
    ("ciprofloxacin zwitterion", "[O-:1]C(=O)c1cn(C2CC2)c2cc([N:2]3CC[NH2+:2]CC3)c(F)cc2c1=[O:2]", DRUG),
    ("cetirizine", "[OH:1]C(=O)COCC[N:2]1CC[N:2](C(c2ccccc2)c2ccc(Cl)cc2)CC1", DRUG),
    ("histamine", "[NH2:2]CCc1c[nH:1]c[n:2]1", DRUG),
    ("nicotine", "C[N:2]1CCC[C@H]1c1ccc[n:2]c1", DRUG),
    ("caffeine", "Cn1c[n:2]c2c1c(=[O:2])n(C)c(=[O:2])n2C", DRUG),
    ("theophylline", "Cn1c(=[O:2])c2[nH:1]c[n:2]c2n(C)c1=[O:2]", DRUG),
    ("metformin", "CN(C)C(=[NH:2])NC(=[NH:2])N", DRUG),
    ("warfarin", "CC(=O)CC(c1ccccc1)c1c([OH:1])c2ccccc2oc1=O", DRUG),
    ("furosemide", "[NH2:1]S(=O)(=O)c1cc(C(=O)[OH:1])c([NH:2]Cc2ccco2)cc1Cl", DRUG),
    ("hydrochlorothiazide", "[NH2:1]S(=O)(=O)c1cc2c(cc1Cl)[NH:2]C[NH:1]S2(=O)=O", DRUG),
    ("sulfanilamide", "[NH2:2]c1ccc(cc1)S([NH2:1])(=O)=O", DRUG),
    ("sulfamethoxazole", "Cc1cc([NH:1]S(=O)(=O)c2ccc([NH2:2])cc2)[n:2]o1", DRUG),
    ("tolbutamide", "CCCCNC(=[O:2])[NH:1]S(=O)(=O)c1ccc(C)cc1", DRUG),
    ("cimetidine", "CN/C(=N/C#N)NCCSCc1[n:2]c[nH:1]c1C", DRUG),
    ("diazepam", "CN1C(=[O:2])C[N:2]=C(c2ccccc2)c2cc(Cl)ccc21", DRUG),
    ("trimethoprim", "COc1cc(Cc2c[n:2]c(N)[n:2]c2N)cc(OC)c1OC", DRUG),
    # less common groups: cyanic acid 3.7; isatin N-H 10.3; cyclohexane-1,2-dione (enol) 10.3;
    # pyrrole 17.5 and indole about 17 (N-H); 4-pyridone N-H 11.1, O-protonation 3.3;
    # protonated trimethylamine oxide 4.65 (one equilibrium, seen as acid and as base; the quaternary N
    # has no lone pair); isatin's carbonyl oxygens are only very weak bases (amide / vinylogous amide)
    ("cyanic acid", "[OH:1]C#N", HB),
    ("isatin", "[O:2]=C1[NH:1]c2ccccc2C1=[O:2]", HB),
    ("cyclohexane-1,2-dione", "O=C1[CH2:1]CC[CH2:1]C1=O", HB),
    ("pyrrole N-H", "c1cc[nH:1]c1", HB),
    ("indole N-H", "c1ccc2[nH:1]ccc2c1", HB),
    ("4-pyridone", "[O:2]=c1cc[nH:1]cc1", HB),
    ("protonated trimethylamine oxide", "C[N+](C)(C)[OH:3]", CRC),
    ("acetamidoxime", "CC(N)=[N:2][OH:1]", HB),
    ("azetidin-2-one", "[O:2]=C1CC[NH:1]1", PHYS),
    ("2-tetralone", "O=C1CCc2ccccc2[CH2:1]1", PHYS),
    ("N-phenacylpyridinium", "O=C([CH2:1][n+]1ccccc1)c1ccccc1", PHYS),
    ("9-(methoxycarbonyl)fluorene", "COC(=O)[CH:1]1c2ccccc2-c2ccccc21", PHYS),
    ("aminomethylenemalononitrile-type tricyanovinylamine", "N#CC(C#N)=C(C#N)[NH2:1]", PHYS),
    # amino groups on benzo-fused azoles: 2-aminobenzimidazole protonates on the ring N (about 7.5), the
    # NH2 is part of that amidine; an NH2 on the benzo ring cannot reach the imidazole N (its double bond
    # goes to C2) and is an aniline-like base of its own, whichever N-H tautomer is drawn. Across a fused
    # six-ring it does reach the ring N: 5-aminoquinoline protonates on N1 (5.5)
    ("2-aminobenzimidazole", "Nc1[n:2]c2ccccc2[nH:1]1", HB),
    ("5-aminobenzimidazole", "[NH2:2]c1ccc2[nH:1]c[n:2]c2c1", HB),
    ("5-aminobenzimidazole, other N-H tautomer", "[NH2:2]c1ccc2[n:2]c[nH:1]c2c1", HB),
    ("4-aminobenzimidazole", "[NH2:2]c1cccc2[nH:1]c[n:2]c12", HB),
    ("1-methylbenzimidazol-5-amine", "Cn1c[n:2]c2cc([NH2:2])ccc21", HB),
    ("benzothiazol-5-amine", "[NH2:2]c1ccc2sc[n:2]c2c1", HB),
    ("5-aminoquinoline", "Nc1cccc2[n:2]cccc12", CRC),
    # amides on the 2- or 4-position of an azine: the ring N takes the anion's charge, N-H about 10.5-12;
    # on the 3-position it cannot, and the N-H stays as weak as an anilide's (HB)
    ("N-(2-pyridyl)acetamide", "CC(=[O:2])[NH:1]c1cccc[n:2]1", HB),
    ("N-(4-pyridyl)acetamide", "CC(=[O:2])[NH:1]c1cc[n:2]cc1", HB),
    ("N-(2-quinolyl)acetamide", "CC(=[O:2])[NH:1]c1ccc2ccccc2[n:2]1", HB),
    ("N-(3-pyridyl)acetamide", "CC(=[O:2])Nc1ccc[n:2]c1", HB),
    ("piroxicam", "CN1C(C(=[O:2])[NH:1]c2cccc[n:2]2)=C([OH:1])c2ccccc2S1(=O)=O", DRUG),
    # 1,4-benzodiazepin-2-ones: N1-H acid conjugated with the C5=N4 imine (nitrazepam 10.8, clonazepam
    # 10.5) and the imine N as base (nitrazepam 3.2); diazepam above is N-methylated and has no acid site
    ("nitrazepam", "[O:2]=C1C[N:2]=C(c2ccccc2)c2cc([N+](=O)[O-])ccc2[NH:1]1", DRUG),
    ("oxazepam", "[OH:1]C1[N:2]=C(c2ccccc2)c2cc(Cl)ccc2[NH:1]C1=[O:2]", DRUG),
]


def _strip(mapped: str) -> tuple[Chem.Mol, set[tuple[int, str]]]:
    """Molecule without atom maps and the expected (atom, kind) pairs read from the maps."""
    mol = Chem.MolFromSmiles(mapped)
    expected = set()
    for atom in mol.GetAtoms():
        code = atom.GetAtomMapNum()
        if code & 1:
            expected.add((atom.GetIdx(), "acid"))
        if code & 2:
            expected.add((atom.GetIdx(), "base"))
        atom.SetAtomMapNum(0)
    return mol, expected


@pytest.mark.parametrize("name,mapped,source", KNOWN, ids=[k[0] for k in KNOWN])
def test_known_molecules(name, mapped, source):
    mol, expected = _strip(mapped)
    found = {(s.atom, s.kind) for s in find_sites(mol)}
    assert found == expected, f"{name} ({source}): expected {sorted(expected)}, found {sorted(found)}"


def test_enough_reference_molecules():
    assert len(KNOWN) >= 60


@pytest.mark.parametrize(
    "smiles,atom,site_type",
    [
        ("CC(=O)Nc1ccc(O)cc1", 8, "phenol"),  # paracetamol: amide N-H is no site; DRUG
        ("Nc1cc[n:2]cc1", 4, "pyridine_like_n"),  # 4-aminopyridine protonates on ring N; CRC
        ("CC(=O)CC(c1ccccc1)c1c(O)c2ccccc2oc1=O", 13, "vinylogous_acid_aromatic"),  # warfarin; DRUG
        ("CN(C)C(=N)NC(=N)N", 4, "biguanide_n"),  # metformin; DRUG
        ("CCC1(CC)C(=O)NC(=O)NC1=O", 7, "barbiturate_nh"),  # barbital; DRUG
        ("O=C1CNC(=O)N1", 6, "hydantoin_nh"),  # hydantoin; HB
        ("CCCCNC(=O)NS(=O)(=O)c1ccc(C)cc1", 7, "sulfonylurea_nh"),  # tolbutamide; DRUG
        # carbonyl cyanide m-chlorophenylhydrazone, an uncoupler with N-H pKa about 6; PHYS
        ("N#CC(C#N)=NNc1cccc(Cl)c1", 6, "hydrazone_acceptor_nh"),
        ("ON=Nc1ccccc1", 0, "diazohydroxide_oh"),  # benzenediazohydroxide / diazotate; HB
        ("C[N+](C)(C)NC(=O)c1ccccc1", 4, "acyl_hydrazinium_nh"),  # aminimide precursor; PHYS
        ("CN1C(=O)NC(=Cc2ccccc2)C1=O", 4, "arylidene_hydantoin_nh"),  # vinylogous imide N1-H; PHYS
        ("Cc1cc(=O)n(C)[nH]1", 7, "pyrazolone_nh"),  # 1-methylpyrazol-3-one N-H; HB
        ("N#CCc1ccc([N+](=O)[O-])cc1", 2, "nitroaryl_acetonitrile_ch"),  # PHYS
        ("CN=c1sccn1C", 1, "isourea_n"),  # 2-iminothiazoline, isothiourea-like base; HB
        ("O=C1CCCCC1=O", 2, "cyclic_alpha_dione_ch"),  # cyclohexane-1,2-dione; HB
        ("Nc1ccc2[nH]cnc2c1", 0, "aniline"),  # 5-aminobenzimidazole: benzo-ring NH2 is aniline-like; HB
        ("CC(=O)Nc1ccccn1", 3, "acyl_azinylamine_nh"),  # N-(2-pyridyl)acetamide N-H; HB
        ("CC(=O)Nc1ncccn1", 3, "acyl_heteroarylamine_nh"),  # pyrimidin-2-yl: the doubly flanked type wins; HB
        ("O=C1CN=C(c2ccccc2Cl)c2cc([N+](=O)[O-])ccc2N1", 21, "acyl_aminoaryl_imine_nh"),  # clonazepam; DRUG
        # hydroxy-azines drawn as lactims: 2-pyridone's N-H 11.65, 4-pyridone's 11.1 (Albert & Phillips
        # 1956, from memory); the ring N of 3-hydroxypyridine cannot take the lactam form (pyridinium 4.8; CRC)
        ("Oc1ccccn1", 6, "lactim_n"),
        ("Oc1ccncc1", 4, "lactim_n"),
        ("Sc1ccccn1", 6, "lactim_n"),
        ("Oc1cccnc1", 5, "pyridine_like_n"),
        ("Oc1cccc2cccnc12", 9, "pyridine_like_n"),  # 8-hydroxyquinoline: the OH is on the other ring; CRC
        # their O-H and S-H: the lactam's protonation, 2-pyridone 0.75, 4-pyridone 3.2, pyridine-2-thione
        # -1.0 (Albert & Phillips 1956, from memory); 3-hydroxypyridine's O-H is a phenol (8.75; same source)
        ("Oc1ccccn1", 0, "lactim_oh"),
        ("Oc1ccncc1", 0, "lactim_oh"),
        ("Sc1ccccn1", 0, "lactim_oh"),
        ("Oc1cccnc1", 0, "phenol"),
        # 1,8-bis(dimethylamino)naphthalene, the first proton sponge: 12.1 against 5.1 for
        # N,N-dimethylaniline (Alder et al. 1968, from memory); a 2-naphthylamine is a plain dialkylaniline
        ("CN(C)c1cccc2cccc(N(C)C)c12", 1, "peri_diamine_n"),
        ("CN(C)c1cccc2cccc(N(C)C)c12", 12, "peri_diamine_n"),
        ("CN(C)c1ccc2ccccc2c1", 1, "n_dialkyl_aniline"),
        # 1-methyl-4(1H)-pyridinimine (12.5) and 1-methyl-2(1H)-pyridinimine (12.2): the conjugate acids
        # are aminopyridinium ions (Angyal & Angyal 1952, from memory); an N-acyl imine stays a plain imine
        ("Cn1ccc(=N)cc1", 5, "azinylidene_imine"),
        ("Cn1ccccc1=N", 7, "azinylidene_imine"),
        ("CC(=O)N=c1ccccn1C", 3, "imine"),
        ("N=C1CCCCC1", 0, "imine"),
        # saccharin's ring N-H, about 1.6-2.2 against 4.5 for open-chain N-acetylbenzenesulfonamide
        # (handbook, from memory); the open-chain one keeps its type
        ("O=C1NS(=O)(=O)c2ccccc12", 2, "cyclic_acyl_sulfonamide_nh"),
        ("CC(=O)NS(=O)(=O)c1ccccc1", 3, "acyl_sulfonamide_nh"),
        # oxadiazolones, acids about 6-7 (azilsartan's about 6.1; drug data, from memory), had been pyrazole
        # or imidazole N-H (about 14); both N-H tautomers of the 1,2,4 ring, the 1,3,4 ring, the thia
        # analogue; 2(3H)-benzoxazolone, with no second ring N, stays an aromatic lactam N-H
        ("Cc1n[nH]c(=O)o1", 3, "oxadiazolone_nh"),
        ("O=c1[nH]c(C)no1", 2, "oxadiazolone_nh"),
        ("O=c1nc(C)[nH]o1", 5, "oxadiazolone_nh"),
        ("Cc1n[nH]c(=O)s1", 3, "oxadiazolone_nh"),
        ("O=c1[nH]c2ccccc2o1", 2, "lactam_nh_aromatic"),
    ],
)
def test_site_types_of_textbook_groups(smiles, atom, site_type):
    mol, _ = _strip(smiles)
    assert site_type in {s.type for s in find_sites(mol) if s.atom == atom}


def test_amide_nh_is_not_an_acid_site():
    # N-methylacetamide N-H pKa is above 15 in water (handbook knowledge, from memory)
    mol = Chem.MolFromSmiles("CNC(C)=O")
    assert [s for s in find_sites(mol) if s.kind == "acid"] == []


@pytest.mark.parametrize(
    "name,smiles",
    [
        # C-H next to a carboxylic acid, an amide or an ester, or the methyl of a simple aryl ketone,
        # is far too weak an acid for water (acetophenone about 18, esters and amides above 20; PHYS)
        ("diphenylacetic acid", "OC(=O)C(c1ccccc1)c1ccccc1"),
        ("phenylacetamide", "NC(=O)Cc1ccccc1"),
        ("methyl phenylacetate", "COC(=O)Cc1ccccc1"),
        ("acetophenone", "CC(=O)c1ccccc1"),
        ("diphenylacetamide", "NC(=O)C(c1ccccc1)c1ccccc1"),
    ],
)
def test_weak_carbon_acids_are_not_sites(name, smiles):
    mol = Chem.MolFromSmiles(smiles)
    carbon_acids = [s for s in find_sites(mol) if s.kind == "acid" and mol.GetAtomWithIdx(s.atom).GetSymbol() == "C"]
    assert carbon_acids == [], f"{name}: {carbon_acids}"


def test_push_pull_enamine_nitrogen_is_not_a_base():
    # tricyanovinylamines: the amino lone pair is spread onto three nitriles; an N-H acid (pKa 2-6), no base (PHYS)
    mol = Chem.MolFromSmiles("N#CC(C#N)=C(C#N)NC1CCCCC1")
    assert [(s.atom, s.kind) for s in find_sites(mol) if s.atom == 8] == [(8, "acid")]


def test_acidic_hydrazone_nh_beats_phenol():
    # carbonyl cyanide (hydroxyphenyl)hydrazone: hydrazone N-H about 6 against phenol about 10 (PHYS; CRC)
    chosen = assign_site(Chem.MolFromSmiles("N#CC(C#N)=NNc1cccc(O)c1"), "acid")
    assert (chosen.atom, chosen.type) == (6, "hydrazone_acceptor_nh")


def test_element_screen_matches_plain_substructure_search():
    """find_sites skips patterns needing an element the molecule lacks; the result must equal a plain
    RDKit search with freshly compiled SMARTS from the catalog (independent of the screen)."""
    catalog = load_catalog()
    types = [(t, Chem.MolFromSmarts(t.smarts)) for t in catalog.types]
    exclusions = [(e, Chem.MolFromSmarts(e.smarts)) for e in catalog.exclusions]

    def mapped(mol, query):
        index = next(a.GetIdx() for a in query.GetAtoms() if a.GetAtomMapNum() == 1)
        return {m[index] for m in mol.GetSubstructMatches(query, uniquify=False, maxMatches=100000)}

    for _, smiles, _ in KNOWN:
        mol, _ = _strip(smiles)
        for form in (mol, Chem.AddHs(mol)):
            excluded = {"acid": set(), "base": set()}
            for e, q in exclusions:
                excluded[e.kind] |= mapped(form, q)
            plain = {}
            for t, q in types:  # catalog.types is already in priority order
                for atom in mapped(form, q):
                    if (atom, t.kind) not in plain and atom not in excluded[t.kind]:
                        plain[(atom, t.kind)] = t.name
            assert {(s.atom, s.kind): s.type for s in find_sites(form)} == plain, smiles


def test_neutral_and_zwitterion_forms_give_same_sites():
    # glycine and ciprofloxacin in both forms (CRC; DRUG): same site atoms and kinds
    for neutral, zwitterion in [
        ("NCC(=O)O", "[NH3+]CC(=O)[O-]"),
        ("OC(=O)c1cn(C2CC2)c2cc(N3CCNCC3)c(F)cc2c1=O", "[O-]C(=O)c1cn(C2CC2)c2cc(N3CC[NH2+]CC3)c(F)cc2c1=O"),
    ]:
        a = [(s.atom, s.kind, s.type) for s in find_sites(Chem.MolFromSmiles(neutral))]
        b = [(s.atom, s.kind, s.type) for s in find_sites(Chem.MolFromSmiles(zwitterion))]
        assert a == b


def test_explicit_hydrogens_keep_heavy_atom_indices():
    mol = Chem.MolFromSmiles("NCC(=O)O")  # glycine, CRC
    with_h = Chem.AddHs(mol)
    assert [(s.atom, s.kind) for s in find_sites(with_h)] == [(s.atom, s.kind) for s in find_sites(mol)]


def test_find_sites_rejects_none():
    with pytest.raises(SiteError, match="None"):
        find_sites(None)


# ----------------------------------------------------------------------------- catalog priors


def _prior(name):
    return load_catalog().by_name[name].prior


def test_acid_prior_ordering():
    # common practice: sulfonic < carboxylic < phenol < alcohol
    assert _prior("sulfonic_acid") < _prior("carboxylic_acid") < _prior("phenol") < _prior("alcohol")


def test_base_prior_ordering():
    # common practice: aliphatic amine > pyridine > aniline (conjugate-acid pKa)
    for amine in ("aliphatic_amine_primary", "aliphatic_amine_secondary", "aliphatic_amine_tertiary"):
        assert _prior(amine) > _prior("pyridine_like_n") > _prior("aniline")
    assert _prior("guanidine") > _prior("aliphatic_amine_primary")  # CRC: guanidine 13.6


def test_nitrogen_acid_priors_within_9_to_11():
    # common practice: imide and sulfonamide N-H between 9 and 11 (succinimide 9.6, benzenesulfonamide 10.1; CRC)
    for name in ("imide_nh", "sulfonamide_nh"):
        assert 9.0 <= _prior(name) <= 11.0


def test_catalog_shape():
    catalog = load_catalog()
    assert catalog.version
    assert len(catalog.types) >= 40
    assert {t.kind for t in catalog.types} == {"acid", "base"}
    for t in catalog.types:
        assert t.low <= t.prior <= t.high, t.name
        assert t.source, t.name
    assert load_catalog() is catalog  # cached


def _write_catalog(tmp_path: Path, body: str) -> Path:
    path = tmp_path / "catalog.yaml"
    path.write_text(textwrap.dedent(body))
    return path


ENTRY = """\
    - name: {name}
      kind: {kind}
      smarts: "{smarts}"
      prior: 4.0
      range: [3.0, 5.0]
      source: test
"""


@pytest.mark.parametrize(
    "entries,message",
    [
        ([("bad_smarts", "acid", "C(=O)[OH:1"), ], "does not parse"),
        ([("no_map", "acid", "C(=O)[OH]")], "0 mapped atoms"),
        ([("two_maps", "acid", "[C:1](=O)[OH:1]")], "2 mapped atoms"),
        ([("odd_kind", "salt", "C(=O)[OH:1]")], "kind"),
        ([("dup", "acid", "C(=O)[OH:1]"), ("dup", "acid", "c[OH:1]")], "duplicate"),
    ],
)
def test_catalog_validation_names_the_entry(tmp_path, entries, message):
    body = "version: 1\nsite_types:\n" + "".join(
        textwrap.indent(textwrap.dedent(ENTRY.format(name=n, kind=k, smarts=s)), "  ") for n, k, s in entries
    )
    path = _write_catalog(tmp_path, body)
    with pytest.raises(CatalogError, match=message) as info:
        load_catalog(path)
    assert repr(entries[-1][0]) in str(info.value)


def test_custom_catalog_is_used(tmp_path):
    body = "version: test\nsite_types:\n" + textwrap.indent(
        textwrap.dedent(ENTRY.format(name="only_acid", kind="acid", smarts="C(=O)[OH:1]")), "  "
    )
    catalog = load_catalog(_write_catalog(tmp_path, body))
    sites = find_sites(Chem.MolFromSmiles("NCC(=O)O"), catalog)  # glycine: only the acid type exists
    assert [(s.atom, s.type) for s in sites] == [(4, "only_acid")]


# ----------------------------------------------------------------------------- label assignment


def test_assign_by_prior_most_acidic_and_most_basic():
    # cetirizine: carboxylic acid is the acid site; a tertiary amine the base site (DRUG)
    mol = Chem.MolFromSmiles("OC(=O)COCCN1CCN(C(c2ccccc2)c2ccc(Cl)cc2)CC1")
    acid = assign_site(mol, "acid")
    assert (acid.atom, acid.type, acid.confidence) == (0, "carboxylic_acid", 1.0)
    # morphine: phenol (about 9.9) is a stronger acid than the allylic alcohol (DRUG)
    morphine = Chem.MolFromSmiles("CN1CC[C@]23c4c5ccc(O)c4O[C@H]2[C@@H](O)C=C[C@H]3[C@H]1C5")
    chosen = assign_site(morphine, "acid")
    assert chosen.atom == 10 and chosen.type == "phenol"
    expected = assignment_confidence(_prior("alcohol") - _prior("phenol"))
    assert math.isclose(chosen.confidence, expected)
    # nicotine: pyrrolidine N (8.0) over pyridine N (3.1) (DRUG)
    nicotine = assign_site(Chem.MolFromSmiles("CN1CCC[C@H]1c1cccnc1"), "base")
    assert nicotine.atom == 1 and nicotine.confidence > 0.9


def test_assign_explicit_atom_wins():
    mol = Chem.MolFromSmiles("CN1CCC[C@H]1c1cccnc1")  # nicotine
    chosen = assign_site(mol, "base", site_atom=10)
    assert isinstance(chosen, Assignment)
    assert (chosen.atom, chosen.type, chosen.confidence) == (10, "pyridine_like_n", 1.0)
    with pytest.raises(SiteAssignmentError, match="atom 2 is not a base site"):
        assign_site(mol, "base", site_atom=2)


def test_assign_follows_predictions():
    mol = Chem.MolFromSmiles("CN1CCC[C@H]1c1cccnc1")  # nicotine
    sites = find_sites(mol)
    chosen = assign_site(mol, "base", sites=sites, predicted={1: 4.0, 10: 6.0})
    assert chosen.atom == 10
    assert math.isclose(chosen.confidence, 1 - math.exp(-2.0))
    assert "predicted" in chosen.reason


def test_symmetric_sites_count_once():
    # hydrazine: both N equivalent, so the assignment is certain (CRC)
    chosen = assign_site(Chem.MolFromSmiles("NN"), "base")
    assert chosen.atom == 0 and chosen.confidence == 1.0


def test_no_site_of_kind():
    with pytest.raises(NoSiteError, match="no base site"):
        assign_site(Chem.MolFromSmiles("CC(=O)O"), "base")  # acetic acid has no base site (CRC)
    with pytest.raises(NoSiteError):
        assign_site(Chem.MolFromSmiles("c1ccccc1"), "acid")
    assert issubclass(NoSiteError, ValueError)
    with pytest.raises(ValueError, match="kind"):
        assign_site(Chem.MolFromSmiles("CC(=O)O"), "salt")


def test_confidence_is_monotone_and_bounded():
    values = [assignment_confidence(g) for g in (0.0, 0.5, 1.0, 3.0, 10.0)]
    assert values == sorted(values) and values[0] == 0.0 and values[-1] <= 1.0


# ----------------------------------------------------------------------------- real data


def _data_dir() -> Path:
    root = Path(os.environ.get("PKASITE_MIRROR", Path(__file__).resolve().parents[2].parent / "shared" / "data"))
    directory = root / "dwpka"
    if not directory.is_dir():
        pytest.fail(
            f"DataWarrior pKa mirror not found at {directory}; set PKASITE_MIRROR to the data mirror "
            "folder that holds dwpka/*.csv"
        )
    return directory


def test_dwpka_files_never_crash_and_are_covered():
    """Mansouri et al., J. Cheminform. 11, 60 (2019): every structure parses through find_sites, and
    almost every acid (base) record has an acid (base) site."""
    files = sorted(_data_dir().glob("*.csv"))
    assert files, "no CSV files in the dwpka mirror"
    totals = {"acid": 0, "base": 0}
    covered = {"acid": 0, "base": 0}
    mols = []
    for path in files:
        kind = "acid" if "acidic" in path.name else "base"
        with path.open(newline="", encoding="utf-8") as handle:
            for row in csv.DictReader(handle):
                mol = Chem.MolFromSmiles(row["Canonical_QSARr"])
                if mol is None:
                    continue
                mols.append(mol)
                sites = find_sites(mol)
                assert all(0 <= s.atom < mol.GetNumAtoms() for s in sites)
                assert len({(s.atom, s.kind) for s in sites}) == len(sites)
                totals[kind] += 1
                covered[kind] += any(s.kind == kind for s in sites)
    shares = {k: covered[k] / totals[k] for k in totals}
    print(f"dwpka site coverage: acid {shares['acid']:.4f} of {totals['acid']}, base {shares['base']:.4f} of {totals['base']}")
    assert totals["acid"] > 3000 and totals["base"] > 3000
    assert shares["acid"] >= 0.97
    assert shares["base"] >= 0.97

    start = time.perf_counter()
    for mol in mols[:2000]:
        find_sites(mol)
    rate = 2000 / (time.perf_counter() - start)
    print(f"find_sites rate: {rate:.0f} molecules/s")
    assert rate > 500


@pytest.mark.parametrize(
    "name,smiles,acid_types",
    [
        # an O- on a positively charged N that carries no other O is an N-oxide or a nitrone: there is no
        # proton to lose (pyridine N-oxide is a base, pKaH 0.79, CRC Handbook, from memory)
        ("pyridine N-oxide", "[O-][n+]1ccccc1", set()),
        ("quinoxaline 1,4-dioxide", "[O-][n+]1cc[n+]([O-])c2ccccc21", set()),
        ("N-tert-butyl-alpha-phenylnitrone", "CC(C)(C)[N+]([O-])=Cc1ccccc1", set()),
        ("a cyclic nitrone acid", "CC1(C(=O)O)CCC=[N+]1[O-]", {"carboxylic_acid"}),
        # the groups these patterns are for keep their sites (1-hydroxybenzotriazole 4.6, nitronic acids
        # 3-5; handbook knowledge, from memory)
        ("1-hydroxybenzotriazole", "On1nnc2ccccc21", {"n_hydroxy_azole"}),
        ("1-hydroxybenzotriazole anion", "[O-]n1nnc2ccccc21", {"n_hydroxy_azole"}),
        ("pentane nitronic acid", "CCCCC=[N+]([O-])O", {"nitronic_acid"}),
    ],
)
def test_charge_separated_oxides_have_no_acid_site(name, smiles, acid_types):
    mol = standardize_mol(Chem.MolFromSmiles(smiles)).mol
    acids = [s for s in find_sites(mol) if s.kind == "acid"]
    assert {s.type for s in acids} == acid_types, f"{name}: {acids}"
    if name == "pentane nitronic acid":  # the O-H only, not the O- beside it
        assert [mol.GetAtomWithIdx(s.atom).GetTotalNumHs() for s in acids] == [1]
    if "N-oxide" in name or "dioxide" in name:
        assert {s.type for s in find_sites(mol) if s.kind == "base"} == {"aromatic_n_oxide_o"}


@pytest.mark.parametrize(
    "name,smiles,expected",
    [
        # an azide is no base in water (alkyl azides protonate only in strong acid; handbook knowledge,
        # from memory): zidovudine keeps its thymine N-H (pKa 9.7, from memory) and alcohol, no azide N
        ("ethyl azide", "CCN=[N+]=[N-]", set()),
        ("zidovudine", "Cc1cn(C2CC(N=[N+]=[N-])C(CO)O2)c(=O)[nH]c1=O",
         {("alcohol", "acid"), ("amide_o", "base"), ("uracil_nh", "acid")}),
        # a sydnone is mesoionic: its ring n- is no deprotonated N-H acid (common practice: sydnones
        # are neutral, non-acidic heterocycles)
        ("3-phenylsydnone", "O=c1c[n+](-c2ccccc2)[n-]o1", {("isoxazole_n", "base")}),
        # a nitramine N-H is acidic (N-methylnitramine about 6.6, handbook knowledge, from memory), not
        # a hydrazine-type base
        ("N-methylnitramine", "CN[N+](=O)[O-]", {("nitro_amine_nh", "acid")}),
        # real ions beside a charged atom keep their sites: a nitronate anion (its N+ carries two O-)
        # and a betaine's carboxylate (pKa about 1.8, from memory)
        ("nitronate", "[O-][N+]([O-])=C(CO)CO", {("nitronic_acid", "acid"), ("alcohol", "acid")}),
        ("betaine", "C[N+](C)(C)CC(=O)[O-]", {("carboxylic_acid", "acid")}),
        ("azobenzene", "c1ccc(N=Nc2ccccc2)cc1", {("azo_n", "base")}),
    ],
)
def test_charge_separated_pairs_are_not_sites(name, smiles, expected):
    mol = standardize_mol(Chem.MolFromSmiles(smiles)).mol
    assert {(s.type, s.kind) for s in find_sites(mol)} == expected, name


@pytest.mark.parametrize(
    "name,tautomers,base_types",
    [
        # cimetidine's only constant in water is its imidazole, 6.8; a cyanoguanidine takes a proton only
        # in strong acid (pKaH about -0.4); both values from memory. Whichever tautomer is drawn, the
        # cyanoguanidine carries no base site.
        ("cimetidine", ["CN=C(NCCSCc1nc[nH]c1C)NC#N", "CNC(=NC#N)NCCSCc1nc[nH]c1C"], {"imidazole_like_n"}),
        # nitroguanidine pKaH about -0.9 (from memory)
        ("nitroguanidine", ["NC(N)=N[N+](=O)[O-]", "N=C(N)N[N+](=O)[O-]"], set()),
        ("N-cyanoacetamidine", ["CC(=N)NC#N", "CC(N)=NC#N"], set()),
        # plain and acyl guanidines and amidines stay bases (guanidine 13.6, amiloride 8.7, acetamidine
        # 12.5; handbook knowledge, from memory)
        ("guanidine", ["NC(N)=N"], {"guanidine"}),
        ("amiloride", ["NC(=N)NC(=O)c1nc(Cl)c(N)nc1N"], {"guanidine", "amide_o", "pyrimidine_like_n"}),
        ("acetamidine", ["CC(=N)N"], {"amidine"}),
    ],
)
def test_cyano_and_nitro_guanidines_are_not_bases(name, tautomers, base_types):
    for smiles in tautomers:
        mol = Chem.MolFromSmiles(smiles)
        assert {s.type for s in find_sites(mol) if s.kind == "base"} == base_types, (name, smiles)


# drawings of a source that draws the titrating species: (name, SMILES, record kind, sites of that kind
# drawn already titrated, drawn charge against the kind)
DRAWINGS = [
    # a carboxylate drawn beside a phenol OH: one acid site already titrated
    ("salicylate", "O=C([O-])c1ccccc1O", "acid", 1, 0),
    ("citrate trianion", "OC(CC(=O)[O-])(CC(=O)[O-])C(=O)[O-]", "acid", 3, 0),
    # a protonated pyridine N of a 4-aminopyridine: its next constant is the dication's
    ("4-(pyrrolidin-1-yl)pyridinium", "[NH+]1=CC=C(N2CCCC2)C=C1", "base", 1, 0),
    ("ethylenediammonium", "[NH3+]CC[NH3+]", "base", 2, 0),
    # an acid record drawn as a cation: the cation's first deprotonation, whichever site loses the proton
    ("ethylenediammonium, acid record", "[NH3+]CC[NH3+]", "acid", 0, 2),
    ("ethylammonium, acid record", "CC[NH3+]", "acid", 0, 1),
    ("3-hydroxypyridinium", "Oc1ccc[nH+]c1", "acid", 0, 1),
    ("4-aminobutanoic acid cation", "[NH3+]CCCC(=O)O", "acid", 0, 1),
    ("3-hydroxypyridinium, base record", "Oc1ccc[nH+]c1", "base", 1, 0),
    # a base record drawn as an anion: the anion's first protonation
    ("3-pyridinolate", "[O-]c1cccnc1", "base", 0, -1),
    ("glycinate", "NCC(=O)[O-]", "base", 0, -1),
    # a zwitterion drawing does not say which charge came first
    ("glycine zwitterion, acid", "[NH3+]CC(=O)[O-]", "acid", 0, 0),
    ("glycine zwitterion, base", "[NH3+]CC(=O)[O-]", "base", 0, 0),
    # charge-separated groups and permanent charges are no titrated sites
    ("pyridine N-oxide", "[O-][n+]1ccccc1", "base", 0, 0),
    ("4-nitrophenol", "[O-][N+](=O)c1ccc(O)cc1", "acid", 0, 0),
    ("N-methylpyridinium-3-ol", "C[n+]1cccc(O)c1", "acid", 0, 0),
    ("benzoic acid", "OC(=O)c1ccccc1", "acid", 0, 0),
]


@pytest.mark.parametrize("name,smiles,kind,titrated,against", DRAWINGS, ids=[d[0] for d in DRAWINGS])
def test_drawn_charges_of_the_titrating_species(name, smiles, kind, titrated, against):
    drawn = drawn_titration(Chem.MolFromSmiles(smiles), kind)
    assert drawn.titrated == titrated, name
    assert drawn.against_kind == against, name


def test_drawn_charges_need_a_kind():
    with pytest.raises(ValueError, match="kind"):
        drawn_titration(Chem.MolFromSmiles("CC(=O)[O-]"), "zwitterion")


@pytest.mark.parametrize("smiles,kind,rank,value,contradicted", [
    # alpha-hydroxy and alpha-mercapto acids: the second acid site is the alcohol (typical 9-17) or the
    # thiol (7.5-11.5); a value near 3.5 belongs to the carboxylic acid (glycolic acid 3.83, thioglycolic
    # acid 3.6 and 10.5, CRC Handbook of Chemistry and Physics, from memory)
    ("OCC(=O)O", "acid", 2, 3.7, True),
    ("SCC(=O)O", "acid", 2, 3.4, True),
    ("SCC(=O)O", "acid", 2, 10.5, False),
    ("SCC(=O)O", "acid", 1, 3.4, False),     # a first constant is never contradicted
    ("OC(=O)c1ccccc1O", "acid", 2, 13.6, False),  # salicylic acid's phenol, 13.6 (Serjeant & Dempsey, from memory)
    # N,N-dimethylethylenediamine's second base constant is the primary amine's or the tertiary's, both
    # aliphatic amines: any ordinary amine value fits one of them
    ("CN(C)CCN", "base", 2, 6.3, False),
    # a dialkylaniline numbered as the second base beside an aliphatic amine cannot be at 10.9
    ("CN(C)c1ccc(CCN(C)C)cc1", "base", 2, 10.9, True),
    ("CCO", "acid", 2, 3.0, False),          # one site: nothing to compare with
])
def test_numbering_contradicted_by_the_catalog_ranges(smiles, kind, rank, value, contradicted):
    assert numbering_contradicted(Chem.MolFromSmiles(smiles), kind, rank, value) is contradicted


def _site_atom_of(smiles: str, atom: int | None):
    return None if atom is None else Chem.MolFromSmiles(smiles).GetAtomWithIdx(atom)


@pytest.mark.parametrize("smiles,group,symbol", [
    ("Cc1ccc(S(=O)(=O)NCC(=O)O)cc1", "SO2-NH-", "N"),   # N-tosylglycine: the sulfonamide N-H
    ("Cc1ccc(S(=O)(=O)NCC(=O)O)cc1", "SO2NH-H", "N"),
    ("Cc1ccc(S(=O)(=O)NCC(=O)O)cc1", "COOH", "O"),      # the carboxylic acid
    ("OC(=O)c1ccccc1O", "OH", "O"),                     # salicylic acid: a plain OH is the phenol
    ("OC(=O)CCc1nc2ccccc2[nH]1", "NH-C-N", None),       # a name the table does not read
    ("OC(=O)CCc1nc2ccccc2[nH]1", "N-H", "N"),           # the benzimidazole N-H
    ("OC(=O)c1ccc(O)c(O)c1", "OH", None),               # two distinct phenols: the name does not choose
    ("Oc1cccc(O)c1", "OH", None),                       # resorcinol: one distinct site, nothing to choose
    ("CC(=O)O", "COOH", None),                          # one site
    ("OC(=O)c1ccccc1O", "?", None),
    ("OC(=O)c1ccccc1O", "OH, ?", None),
])
def test_group_site_follows_the_source_name(smiles, group, symbol):
    atom = _site_atom_of(smiles, group_site(Chem.MolFromSmiles(smiles), "acid", group))
    assert (atom.GetSymbol() if atom is not None else None) == symbol
    if atom is not None and group == "OH":
        assert atom.GetNeighbors()[0].GetIsAromatic()  # the phenol's O-H, not the carboxylic acid's


def test_group_site_reads_no_base_names():
    assert group_site(Chem.MolFromSmiles("NCCc1ccncc1"), "base", "NH2") is None


@pytest.mark.parametrize("text,problem", [
    ("CC(=O)O", None),
    ("CC=CC(=O)O |t:1|", None),                 # a CXSMILES extension after a space
    ("CC O", "whitespace at position 3"),        # RDKit would read ethane and call "O" its name
    ("CC\tO", "whitespace at position 3"),
    ("CCÖ", "'Ö' at position 3"),                # RDKit stops at the non-ASCII character: ethane again
    ("CC\x00O", "position 3"),
])
def test_smiles_text_that_rdkit_would_misread_is_refused(text, problem):
    got = smiles_text_problem(text)
    assert (got is None) if problem is None else (problem in got)
    if problem is not None:
        with pytest.raises(StructureError, match="position 3"):
            parse_smiles(text)


def test_a_rank_past_the_sites_of_its_kind_has_no_site():
    # 4-pyrrolidinopyridine's second base constant (about -0.5, its dication) belongs to the amino N, which
    # conjugation with the ring N takes out of the sites (CRC Handbook's 4-aminopyridine chemistry, from
    # memory); attached to the ring N it would teach a 4-aminopyridine near -0.5
    mol = Chem.MolFromSmiles("c1cc(N2CCCC2)ccn1")
    assert [s.type for s in find_sites(mol) if s.kind == "base"] == ["pyridine_like_n"]
    with pytest.raises(RankWithoutSiteError, match="constant 2"):
        assign_site(mol, "base", rank=2)
    # resorcinol: two equivalent phenols, so a second acid constant has a site (9.3 and 11.1; CRC, from memory)
    res = Chem.MolFromSmiles("Oc1cccc(O)c1")
    assert assign_site(res, "acid", rank=2).type == "phenol"
    with pytest.raises(RankWithoutSiteError):
        assign_site(res, "acid", rank=3)


def test_kind_contradicted_reads_the_catalog_ranges_of_both_kinds():
    from pkasite.features.sites import kind_contradicted
    # 4-aminobutanoic acid: its amine's pKaH (10.6, CRC, from memory) filed as an acid fits no acid
    # site's range (a carboxylic acid is about 4), the amine's range holds it; filed under their own
    # kinds, the amine's 10.6 and the carboxylic acid's 4.0 are in order
    gaba = Chem.MolFromSmiles("NCCCC(=O)O")
    assert kind_contradicted(gaba, "acid", 10.6)
    assert not kind_contradicted(gaba, "acid", 4.0) and not kind_contradicted(gaba, "base", 10.6)
    # acetic acid's 4.76 (CRC, from memory) filed as a base: no base site, the carboxylic acid holds it
    assert kind_contradicted(Chem.MolFromSmiles("CC(=O)O"), "base", 4.76)
    # 3-nitro-1,2,4-triazole's N-H about 6.0 (rough handbook knowledge, from memory) and a
    # nitro-triazole near 2 are acids of an electron-poor ring, held by the triazole N-H's range
    nitrotriazole = Chem.MolFromSmiles("O=[N+]([O-])c1nc[nH]n1")
    assert not kind_contradicted(nitrotriazole, "acid", 6.0) and not kind_contradicted(nitrotriazole, "acid", 2.0)
    # a molecule without sites of the other kind is never flagged: phenol at an odd value
    assert not kind_contradicted(Chem.MolFromSmiles("Oc1ccccc1"), "acid", 30.0)
