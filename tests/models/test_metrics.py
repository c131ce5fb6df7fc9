import numpy as np
import pytest
from sklearn.metrics import mean_absolute_error, mean_squared_error, r2_score

from pkasite.models.metrics import bootstrap_metrics, paired_bootstrap_diff, point_metrics


def test_point_metrics_agree_with_scikit_learn():
    rng = np.random.default_rng(0)
    y = rng.normal(7, 3, 200)
    p = y + rng.normal(0, 1, 200)
    m = point_metrics(y, p)
    assert m["rmse"] == pytest.approx(np.sqrt(mean_squared_error(y, p)))
    assert m["mae"] == pytest.approx(mean_absolute_error(y, p))
    assert m["r2"] == pytest.approx(r2_score(y, p))
    assert m["within_1"] == pytest.approx(np.mean(np.abs(p - y) <= 1))


def test_bootstrap_interval_brackets_point_and_narrows_with_n():
    rng = np.random.default_rng(1)
    small_y = rng.normal(0, 1, 50)
    big_y = rng.normal(0, 1, 2000)
    small = bootstrap_metrics(small_y, small_y + rng.normal(0, 1, 50), n_boot=500)
    big = bootstrap_metrics(big_y, big_y + rng.normal(0, 1, 2000), n_boot=500)
    for m in (small, big):
        assert m["rmse_low"] <= m["rmse"] <= m["rmse_high"]
    assert big["rmse_high"] - big["rmse_low"] < small["rmse_high"] - small["rmse_low"]


def test_paired_difference_detects_the_better_model():
    rng = np.random.default_rng(2)
    y = rng.normal(0, 1, 500)
    good, bad = y + rng.normal(0, 0.5, 500), y + rng.normal(0, 1.5, 500)
    d = paired_bootstrap_diff(y, bad, good)
    assert d["rmse_diff"] < 0 and d["rmse_diff_high"] < 0


def test_bootstrap_intervals_equal_resampling_row_by_row():
    """The counts-matrix shortcut gives the intervals of drawing each resample and scoring it directly."""
    rng = np.random.default_rng(3)
    y = rng.uniform(0, 14, 300)
    pred = y + rng.normal(0, 1.2, 300)
    got = bootstrap_metrics(y, pred, n_boot=400, seed=7)
    idx = np.random.default_rng(7).integers(0, 300, size=(400, 300))
    direct = {name: [] for name in ("rmse", "mae", "r2", "within_1", "within_2")}
    for rows in idx:
        m = point_metrics(y[rows], pred[rows])
        for name in direct:
            direct[name].append(m[name])
    for name, vals in direct.items():
        low, high = np.quantile(vals, [0.025, 0.975])
        assert got[f"{name}_low"] == pytest.approx(low, abs=1e-9)
        assert got[f"{name}_high"] == pytest.approx(high, abs=1e-9)
