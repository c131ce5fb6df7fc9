"""Explanations of site predictions with the shipped model.

References outside the project:
- LightGBM documentation, ``Booster.predict(pred_contrib=True)``: the per-feature contributions and the
  last (expected value) column sum to the raw prediction (SHAP values of tree ensembles, Lundberg et al.,
  Nature Machine Intelligence 2, 56 (2020)).
- Sulfonamide N-H acidity (pKa about 10, against 35 or more for an amine N-H) comes from the sulfonyl
  group taking up the negative charge of the anion; carboxylic acid acidity (pKa about 4.8 for acetic
  acid, against about 16 for ethanol) from the carbonyl sharing the carboxylate charge
  (Clayden, Greeves, Warren, Organic Chemistry, 2nd ed., chapter 8, "Acidity, basicity and pKa").
"""
from __future__ import annotations

import re

import numpy as np
import pytest
from rdkit import Chem

from pkasite.features.site_features import featurize_sites, site_feature_names
from pkasite.features.sites import find_sites
from pkasite.pipeline.bundle import load_bundle
from pkasite.pipeline.explain import explain_sites, explain_sites_full, feature_groups, format_explanation
from pkasite.pipeline.predict import default_model_path

SMILES = ["CS(N)(=O)=O", "NS(=O)(=O)c1ccccc1", "CC(=O)O", "OC(=O)C(F)(F)F", "Oc1ccccc1", "c1ccncc1",
          "CCN(CC)CC", "O=C1CCC(=O)N1", "Nc1ccc(cc1)[N+](=O)[O-]"]


@pytest.fixture(scope="module")
def bundle():
    return load_bundle(default_model_path())


def catalogue_sites(smiles: str):
    """All (mol, atom, kind, site_type) items the site catalogue finds in one molecule."""
    mol = Chem.MolFromSmiles(smiles)
    return [(mol, s.atom, s.kind, s.type) for s in find_sites(mol)]


def one_site(smiles: str, site_type: str):
    found = [it for it in catalogue_sites(smiles) if it[3] == site_type]
    assert found, f"the catalogue finds no {site_type} site in {smiles}"
    return found[0]


@pytest.fixture(scope="module")
def items():
    out = [it for smi in SMILES for it in catalogue_sites(smi)]
    assert len(out) >= len(SMILES)
    return out


def test_contributions_and_bias_sum_to_the_prediction(bundle, items):
    """LightGBM: pred_contrib columns (features + expected value) add up to the prediction."""
    X = featurize_sites(items, bundle.settings, bundle.site_types)
    kinds = np.array([it[2] for it in items])
    pred = bundle.regressor.predict(X, kinds)
    contrib = bundle.regressor.predict(X, kinds, contrib=True)
    assert contrib.shape == (len(items), len(site_feature_names(bundle.settings, bundle.site_types)) + 1)
    np.testing.assert_allclose(contrib.sum(axis=1), pred, atol=1e-6)
    # the grouped explanation keeps that sum: every column lands in exactly one group
    full = explain_sites_full(bundle, items)
    for e, p in zip(full, pred):
        assert e is not None
        assert sum(v for _, _, v in e.groups) + e.bias == pytest.approx(p, abs=1e-6)
        assert e.prediction == pytest.approx(p, abs=1e-6)


def test_groups_partition_the_columns(bundle):
    names = site_feature_names(bundle.settings, bundle.site_types)
    cols = np.concatenate(list(feature_groups(names).values()))
    assert sorted(cols.tolist()) == list(range(len(names)))
    groups = feature_groups(names)
    assert "other" not in groups, "every feature family has its own chemistry phrase"


def test_top_items_are_sorted_phrases(bundle, items):
    for pairs in explain_sites(bundle, items, top=4):
        assert len(pairs) in range(1, 5)
        for phrase, value in pairs:
            assert isinstance(phrase, str) and phrase.strip()
            assert np.isfinite(value)
        mags = [abs(v) for _, v in pairs]
        assert mags == sorted(mags, reverse=True)
    every = explain_sites(bundle, items[:1], top=None)[0]
    assert len(every) > 4
    assert [abs(v) for _, v in every] == sorted((abs(v) for _, v in every), reverse=True)


@pytest.mark.parametrize("smiles,group", [("OC(=O)C(F)(F)F", "ind_f"), ("OC(=O)CCl", "ind_cl"),
                                          ("OC(=O)C(Cl)(Cl)Cl", "ind_cl"), ("OCC(F)(F)F", "ind_f")])
def test_halogens_near_the_site_lower_the_pka(bundle, smiles, group):
    """Electron-withdrawing halogens lower the pKa of a nearby O-H (CRC Handbook, 25 C: acetic acid 4.76,
    chloroacetic 2.87, trichloroacetic 0.66, trifluoroacetic about 0.5; ethanol about 16,
    2,2,2-trifluoroethanol 12.4), so the halogen group's contribution must be negative."""
    site_type = "alcohol" if smiles.startswith("OCC") else "carboxylic_acid"
    full = explain_sites_full(bundle, [one_site(smiles, site_type)])[0]
    by_key = {k: (p, v) for k, p, v in full.groups}
    phrase, value = by_key[group]
    assert "bonds away" in phrase
    assert value < 0, (phrase, value)


def test_sulfonamide_nh_names_its_sulfonyl(bundle):
    """The S(=O)2 next to a sulfonamide N-H is what makes it acidic (Clayden et al., ch. 8); the
    explanation must describe it as such, whatever weight the model gives it."""
    for smiles in ("CS(N)(=O)=O", "NS(=O)(=O)c1ccccc1"):
        full = explain_sites_full(bundle, [one_site(smiles, "sulfonamide_nh")])[0]
        phrases = [p for _, p, _ in full.groups]
        assert "two S=O (sulfonyl) next to the N-H" in phrases


def test_acetic_acid_is_explained_by_its_carbonyl(bundle):
    """Carboxylic acid acidity comes from the carbonyl sharing the charge (Clayden et al., ch. 8)."""
    pairs = explain_sites(bundle, [one_site("CC(=O)O", "carboxylic_acid")], top=4)[0]
    phrases = [p for p, _ in pairs]
    assert any("carbonyl" in p or "carboxylic" in p for p in phrases), phrases


def test_phrases_use_the_site_s_own_values(bundle):
    """Counts in the words follow the structure: CF3C(=O)OH has three F three bonds from the O-H."""
    full = explain_sites_full(bundle, [one_site("OC(=O)C(F)(F)F", "carboxylic_acid")])[0]
    phrases = {key: phrase for key, phrase, _ in full.groups}
    assert phrases["ind_f"] == "three fluorines 3 bonds away"
    assert phrases["res_carbonyl"] == "carbonyl conjugated with the O-H"
    assert phrases["res_so2"] == "no sulfonyl next to the O-H"
    assert phrases["type"] == "site type carboxylic_acid"
    sulfonamide = explain_sites_full(bundle, [one_site("CS(N)(=O)=O", "sulfonamide_nh")])[0]
    assert {k: p for k, p, _ in sulfonamide.groups}["res_so2"] == "two S=O (sulfonyl) next to the N-H"
    pyridine = explain_sites_full(bundle, [one_site("c1ccncc1", "pyridine_like_n")])[0]
    assert {k: p for k, p, _ in pyridine.groups}["res_carbonyl"] == "no carbonyl conjugated with the basic N"


def test_format_explanation():
    text = format_explanation([("two S=O (sulfonyl) next to the N-H", -3.14), ("whole-molecule context", 0.26)])
    assert text == "two S=O (sulfonyl) next to the N-H: -3.1; whole-molecule context: +0.3"
    assert format_explanation([]) == ""


def test_explanations_pair_with_their_sites(bundle):
    """Order is kept: each explanation names its own site type."""
    its = [one_site("CC(=O)O", "carboxylic_acid"), one_site("CCN(CC)CC", "aliphatic_amine_tertiary")]
    full = explain_sites_full(bundle, its)
    types = [next(p for k, p, _ in e.groups if k == "type") for e in full]
    assert types == ["site type carboxylic_acid", "site type aliphatic_amine_tertiary"]
    assert re.search(r"the basic N", " ".join(p for _, p, _ in full[1].groups))


def test_resonance_walk_phrases_follow_the_structure(bundle):
    """The guanidinium ion shares its charge with two more N and its carbon (guanidine pKaH 13.6, CRC
    Handbook, from memory); an aniline N's lone pair is shared with the ring (aniline pKaH 4.6 against
    cyclohexylamine 10.6, same source), an amine's is not."""
    guan = explain_sites_full(bundle, [one_site("NC(N)=N", "guanidine")])[0]
    phrases = {key: phrase for key, phrase, _ in guan.groups}
    assert phrases["dl_ion"] == "the positive charge of the ionized site spreads by resonance to two N, one C"
    aniline = explain_sites_full(bundle, [one_site("Nc1ccccc1", "aniline")])[0]
    assert {k: p for k, p, _ in aniline.groups}["dl_lp"] == "the site's lone pair is shared by resonance with three C"
    amine = explain_sites_full(bundle, [one_site("NC1CCCCC1", "aliphatic_amine_primary")])[0]
    assert {k: p for k, p, _ in amine.groups}["dl_lp"] == "the site's lone pair is not shared by resonance"
    acetate = explain_sites_full(bundle, [one_site("CC(=O)O", "carboxylic_acid")])[0]
    assert {k: p for k, p, _ in acetate.groups}["dl_ion"] == \
        "the negative charge of the ionized site spreads by resonance to one O"
