"""The headline figures never use a held-out molecule's measured value before predicting it.

Data: samples of the curated open data (dwpka, CC BY 4.0): 500 training and 300 held-out
measurements, and a small booster so the test stays quick.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from pkasite.pipeline import evaluation as E
from pkasite.pipeline import train as T
from pkasite.pipeline.config import load_config

pytestmark = pytest.mark.slow
CFG = load_config().with_overrides({"model.n_estimators": 80, "model.learning_rate": 0.1, "cv.folds": 3,
                                    "cv.bootstrap": 50, "model.assignment_rounds": 1})


@pytest.fixture(scope="module")
def fitted(subset):
    prep = T.prepare(subset, CFG)
    reg = T.fit_regressor(prep, np.arange(len(prep.table.molecules)), CFG)
    lab, kinds = prep.sites["labeled"].to_numpy(), prep.sites["kind"].to_numpy()
    return prep, reg, {k: prep.bits[lab & (kinds == k)] for k in ("acid", "base")}


def _shuffled(measurements: pd.DataFrame, seed: int) -> pd.DataFrame:
    out = measurements.copy()
    rng = np.random.default_rng(seed)
    for kind in ("acid", "base"):
        idx = out.index[out["kind"] == kind]
        out.loc[idx, "pka"] = rng.permutation(out.loc[idx, "pka"].to_numpy())
    return out


def test_shuffled_values_hurt_the_headline_exactly_as_for_predictions_that_never_saw_them(fitted, heldout):
    prep, reg, bits = fitted
    true_metrics, true_res = T.evaluate_holdout(reg, heldout, CFG, prep, bits)
    shuffled = _shuffled(heldout, 3)
    shuf_metrics, shuf_res = T.evaluate_holdout(reg, shuffled, CFG, prep, bits)
    # predictions made without the values: the same for both runs, molecule by molecule
    a = true_res[true_res["level"] == "molecule"].set_index("mol_id")
    b = shuf_res[shuf_res["level"] == "molecule"].set_index("mol_id")
    assert np.array_equal(a["pred"].to_numpy(), b["pred"].to_numpy())
    for kind in ("acid", "base"):
        sel = a["kind"] == kind
        never_saw = float(np.sqrt(np.mean((a.loc[sel, "pred"] - b.loc[sel, "label"]) ** 2)))
        assert shuf_metrics[f"test_rmse_{kind}"] == pytest.approx(never_saw, rel=1e-12)
        assert shuf_metrics[f"test_rmse_{kind}"] > true_metrics[f"test_rmse_{kind}"] + 1.0
        # the value-attached diagnostic lets the shuffled value pick the site, so it degrades less:
        # this is the leak the headline is protected from, and the test would see it
        assert shuf_metrics[f"site_attribution_check_test_rmse_{kind}"] < never_saw


def test_value_free_reduction_reads_no_value_and_no_attached_site(fitted, heldout):
    prep, reg, bits = fitted
    test = T.prepare(heldout, CFG)
    pred, sim = T.heldout_site_predictions(reg, test, bits)
    reference = E.constants_by_mol(test.table, pred)
    blind = test.table.sites.drop(columns=["label", "labeled", "confidence"])
    got = E.molecule_constants(blind, pred, E.given_atoms(test.table), test.table.interactions(),
                               E.drawn_charges(test.table))
    assert np.array_equal(got["pred"].to_numpy(), reference[got.index.to_numpy()])
    # the site predictions themselves do not change when every value and attachment is scrambled
    test.table.sites["label"] = np.nan
    test.table.sites["labeled"] = np.random.default_rng(0).random(len(test.table.sites)) < 0.5
    again, _ = T.heldout_site_predictions(reg, test, bits)
    assert np.array_equal(again, pred)


def test_cv_predictions_of_a_fold_do_not_depend_on_its_values(subset):
    prep = T.prepare(subset, CFG)
    splits = T.make_splits(prep, "molecule", CFG)[:1]
    before, _, _ = T.oof_site_predictions(prep, splits, CFG)
    _, _, test_mols = splits[0]
    rows = np.isin(prep.sites["mol_id"].to_numpy(), test_mols)
    prep.sites.loc[rows, "label"] = prep.sites.loc[rows, "label"].to_numpy()[::-1] + 3.0
    after, _, _ = T.oof_site_predictions(prep, splits, CFG)
    assert np.array_equal(before[rows], after[rows]) and not np.isnan(before[rows]).any()


def test_molecule_constant_comes_from_the_microstates_or_the_given_site():
    """Two equivalent independent acid sites: the first macro constant is log10(2) below either site
    (statistical factor; Albert & Serjeant, "The Determination of Ionization Constants", from memory).
    Far-apart sites keep their values; a given site atom gives that site's prediction."""
    sites = pd.DataFrame({"mol_id": [0, 0, 1, 1, 2, 2, 3, 3], "kind": ["acid", "acid", "base", "base", "acid", "acid",
                                                                       "acid", "acid"],
                          "atom": [1, 4, 0, 3, 2, 5, 0, 6]})
    pred = np.array([4.2, 9.9, 10.5, 5.2, 4.0, 9.0, 4.5, 4.5])
    got = E.molecule_constants(sites, pred, np.array([np.nan, np.nan, 5.0, np.nan]))
    assert got["pred"].to_numpy() == pytest.approx([4.2, 10.5, 9.0, 4.5 - np.log10(2)], abs=1e-3)
    assert got["row"].tolist() == [0, 2, 5, 6]


def test_a_measurement_drawn_against_its_kind_is_compared_with_the_step_out_of_its_charge():
    """3-hydroxypyridine (OH 8.75, pyridinium 4.79; Albert & Phillips 1956, from memory), twice: an acid
    record drawn as the pyridinium cation (drawn charge +1) is the cation's first deprotonation, the
    pyridinium's step; a base record drawn as the phenolate (-1) is the anion's first protonation, the
    phenol's step.  Without a drawn charge they are the first acid and the first base constant."""
    sites = pd.DataFrame({"mol_id": [0, 0, 1, 1], "kind": ["acid", "base", "acid", "base"],
                          "atom": [0, 5, 0, 5], "role": ["candidate", "context", "context", "candidate"]})
    pred = np.array([8.75, 4.79, 8.75, 4.79])
    given = np.array([np.nan, np.nan])
    drawn = E.molecule_constants(sites, pred, given, drawn_charge=np.array([1, -1]))
    plain = E.molecule_constants(sites, pred, given)
    assert drawn["pred"].to_numpy() == pytest.approx([4.79, 8.75], abs=0.01)
    assert plain["pred"].to_numpy() == pytest.approx([8.75, 4.79], abs=0.01)
    # still credited to the record's own candidate site
    assert drawn["row"].tolist() == plain["row"].tolist() == [0, 3]


def test_unseen_type_blend_never_weighs_a_fold_with_its_own_values(fitted):
    """The prior blend of unseen site types (model.unseen_type_blend) is cross-fitted: the weights that
    blend one fold's predictions come from the other folds' molecules only, so changing a fold's own
    measured values leaves its blended predictions as they were."""
    prep, _, _ = fitted
    cfg = CFG.with_overrides({"cv.site_type_min_count": 15, "cv.site_type_folds": 3})
    splits = T.make_splits(prep, "site_type", cfg)
    jobs = T.site_jobs(prep, splits, cfg, unseen_type=True)
    pred, _, _ = T.site_oof(prep, splits, T.fit_many(jobs, T.booster_params(cfg.model), cfg.seed))
    unseen = T.unseen_type_rows(prep, splits, jobs)
    sites = prep.sites
    # every site of a held-out type is unseen in its fold; the labeled sites of a fold are all of held-out types
    for _, _, te in splits:
        rows = T._test_rows(prep, te)
        lab = rows[sites["labeled"].to_numpy()[rows]]
        assert unseen[lab].all()
    blended = T.blend_unseen_types(prep, splits, pred, unseen, (pred, unseen, ("acid", "base")))
    moved = np.isfinite(pred) & (blended != pred)
    assert moved.any() and not (moved & ~unseen).any()
    name, _, te = splits[0]
    own = T._test_rows(prep, te)
    saved = sites["label"].copy()
    try:
        sites.loc[np.isin(sites["mol_id"], te), "label"] += 5.0
        again = T.blend_unseen_types(prep, splits, pred, unseen, (pred, unseen, ("acid", "base")))
    finally:
        sites["label"] = saved
    np.testing.assert_array_equal(again[own], blended[own])
    others = np.setdiff1d(np.flatnonzero(unseen & np.isfinite(pred)), own)
    assert (again[others] != blended[others]).any()  # the fold's values do weigh the other folds


def test_range_check_splits_known_site_residuals_by_the_catalog_range():
    from pkasite.features.sites import load_catalog
    t = load_catalog().by_name["carboxylic_acid"]
    res = pd.DataFrame({"level": ["site"] * 4 + ["molecule"],
                        "site_type": ["carboxylic_acid"] * 5,
                        "pred": [t.prior, t.high + 0.5, t.high + 3.0, t.low - 2.0, t.high + 5.0],
                        "residual": [0.3, -0.4, 3.0, -4.0, 9.0]})
    rc = T.range_check(res, 1.0)
    assert (rc["n_outside"], rc["n_inside"]) == (2, 2)  # the molecule-level row does not count
    assert rc["rmse_outside"] == pytest.approx(12.5 ** 0.5) and rc["rmse_inside"] == pytest.approx(0.125 ** 0.5)
    assert T.range_check(res, None) == {}
