"""The ``ham_`` feature group: Hammett sigma sums on the aromatic ring of a site."""
from __future__ import annotations

import math

import pytest
from rdkit import Chem

from pkasite.features.hammett import HAM_NAMES, SIGMA
from pkasite.features.site_features import FeatureSettings, describe_site, site_feature_names
from pkasite.features.sites import find_sites

ON = FeatureSettings(radii=(1,), n_bits=8, mol_fp_bits=0, hammett_kinds=("acid", "base"))


def _ham(smiles: str, kind: str, site_type: str | None = None) -> dict[str, float]:
    mol = Chem.MolFromSmiles(smiles)
    sites = [s for s in find_sites(mol) if s.kind == kind and (site_type is None or s.type == site_type)]
    assert len(sites) == 1, (smiles, sites)
    row = describe_site(mol, sites[0].atom, kind, sites[0].type, ON)
    return {k: row[k] for k in HAM_NAMES}


# Substituted benzoic acids in water at 25 C define sigma (rho = 1, pKa of benzoic acid 4.20), so the
# table must give back their measured constants.  Values: CRC Handbook of Chemistry and Physics,
# dissociation constants of organic acids, from memory.
BENZOIC_ACIDS = [
    ("OC(=O)c1ccc(cc1)[N+](=O)[O-]", 3.44),   # 4-nitrobenzoic acid
    ("OC(=O)c1cccc(c1)[N+](=O)[O-]", 3.45),   # 3-nitrobenzoic acid
    ("OC(=O)c1cccc(Cl)c1", 3.83),             # 3-chlorobenzoic acid
    ("OC(=O)c1ccc(Cl)cc1", 3.98),             # 4-chlorobenzoic acid
    ("OC(=O)c1ccc(C)cc1", 4.37),              # 4-methylbenzoic acid
    ("OC(=O)c1ccc(OC)cc1", 4.47),             # 4-methoxybenzoic acid
    ("OC(=O)c1ccc(C#N)cc1", 3.55),            # 4-cyanobenzoic acid
]


@pytest.mark.parametrize("smiles,pka", BENZOIC_ACIDS)
def test_sigma_sums_reproduce_benzoic_acid_constants(smiles, pka):
    ham = _ham(smiles, "acid")
    assert ham["ham_link"] == 2.0  # O-C(=O)-ring: two bonds from the site to the ring
    assert 4.20 - ham["ham_sigma_mp"] == pytest.approx(pka, abs=0.12)


def test_positions_follow_the_ring_from_the_site():
    para = _ham("Oc1ccc(cc1)[N+](=O)[O-]", "acid")     # 4-nitrophenol
    meta = _ham("Oc1cccc(c1)[N+](=O)[O-]", "acid")     # 3-nitrophenol
    ortho = _ham("Oc1ccccc1[N+](=O)[O-]", "acid")      # 2-nitrophenol
    assert para["ham_link"] == meta["ham_link"] == 1.0
    assert (para["ham_sigma_p"], para["ham_sigma_m"], para["ham_sigma_o"]) == pytest.approx((SIGMA["no2"][1], 0, 0))
    assert (meta["ham_sigma_m"], meta["ham_sigma_p"]) == pytest.approx((SIGMA["no2"][0], 0.0))
    assert ortho["ham_sigma_o"] == pytest.approx(SIGMA["no2"][1]) and ortho["ham_sigma_mp"] == 0.0
    # Hammett's order for phenols (common practice): para-nitro strengthens the acid more than meta
    assert para["ham_sigma_mp"] > meta["ham_sigma_mp"] > 0


def test_ring_nitrogen_site_counts_from_itself():
    amino = _ham("Nc1ccncc1", "base", "pyridine_like_n")   # 4-aminopyridine: donor para to the ring N
    chloro = _ham("Clc1cccnc1", "base", "pyridine_like_n")  # 3-chloropyridine
    assert amino["ham_link"] == chloro["ham_link"] == 0.0
    assert amino["ham_sigma_p"] == pytest.approx(SIGMA["nh2"][1]) and SIGMA["nh2"][1] < 0
    assert chloro["ham_sigma_m"] == pytest.approx(SIGMA["cl"][0]) and SIGMA["cl"][0] > 0


def test_no_ring_nearby_and_unknown_substituents():
    acetic = _ham("CC(=O)O", "acid")
    assert math.isnan(acetic["ham_link"]) and acetic["ham_sigma_mp"] == 0.0 and acetic["ham_unknown"] == 0.0
    # a boronic acid group has no entry: counted, not guessed
    boronic = _ham("OC(=O)c1ccc(B(O)O)cc1", "acid", "carboxylic_acid")
    assert boronic["ham_unknown"] == 1.0 and boronic["ham_sigma_p"] == 0.0
    # a fused ring is part of the ring system, not a substituent
    naphthol = _ham("Oc1ccc2ccccc2c1", "acid")
    assert naphthol["ham_unknown"] == 0.0 and naphthol["ham_sigma_mp"] == 0.0


def test_group_is_off_unless_asked_for_and_round_trips():
    off = FeatureSettings(radii=(1,), n_bits=8, mol_fp_bits=0)
    assert not any(n.startswith("ham_") for n in site_feature_names(off))
    assert [n for n in site_feature_names(ON) if n.startswith("ham_")] == list(HAM_NAMES)
    old = {k: v for k, v in ON.to_dict().items() if k != "hammett_kinds"}
    assert FeatureSettings.from_dict(old).hammett_kinds == ()
    assert FeatureSettings.from_dict(ON.to_dict()) == ON
    for bad in ("base", ("acid", "acid"), ("salt",)):
        with pytest.raises(ValueError, match="hammett_kinds"):
            FeatureSettings(hammett_kinds=bad)


def test_group_is_filled_only_for_the_chosen_kinds():
    base_only = FeatureSettings(radii=(1,), n_bits=8, mol_fp_bits=0, hammett_kinds=("base",))
    mol = Chem.MolFromSmiles("Nc1ccc(cc1)C(=O)O")  # 4-aminobenzoic acid: an acid and a base site
    for s in find_sites(mol):
        row = describe_site(mol, s.atom, s.kind, s.type, base_only)
        if s.kind == "base":
            assert row["ham_link"] == 1.0 and row["ham_sigma_p"] == pytest.approx(SIGMA["cooh"][1])
        else:
            assert all(math.isnan(row[k]) for k in HAM_NAMES)


def test_explanations_pool_the_group_and_word_it():
    from pkasite.pipeline.explain import _phrase, feature_groups
    names = site_feature_names(ON)
    groups = feature_groups(names)
    assert [names[i] for i in groups["ham"]] == list(HAM_NAMES)
    para = _ham("Oc1ccc(cc1)[N+](=O)[O-]", "acid")
    assert "+0.78" in _phrase("ham", para, "the O-H", "phenol")
    assert "no six-membered aromatic ring" in _phrase("ham", _ham("CC(=O)O", "acid"), "the O-H", "carboxylic_acid")
