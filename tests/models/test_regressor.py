"""Parallel booster fitting: same numbers whatever the pool size, only the kinds asked for."""
from __future__ import annotations

import numpy as np
import pytest

from pkasite.models.regressor import BoosterParams, FitJob, SiteRegressor, boosters_fitted, fit_many

PARAMS = BoosterParams(n_estimators=40, learning_rate=0.1, num_leaves=8, min_child_samples=5)


def _data(n=400, seed=0):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, 12)).astype(np.float32)
    kinds = np.where(rng.random(n) < 0.5, "acid", "base")
    y = 3 * X[:, 0] - 2 * X[:, 1] * (kinds == "acid") + rng.normal(0, 0.3, n)
    return X, y, kinds


def test_pool_size_does_not_change_the_numbers():
    X, y, kinds = _data()
    folds = [np.arange(0, 300), np.arange(100, 400), np.arange(0, 400, 2)]
    jobs = [FitJob(X, y, kinds, rows) for rows in folds]
    serial = fit_many(jobs, PARAMS, seed=3, workers=1)
    pooled = fit_many(jobs, PARAMS, seed=3, workers=2)
    for a, b in zip(serial, pooled):
        assert a.predict(X, kinds) == pytest.approx(b.predict(X, kinds), abs=0)


def test_fit_many_fits_only_the_kinds_needed_and_counts_them():
    X, y, kinds = _data()
    before = boosters_fitted()
    regs = fit_many([FitJob(X, y, kinds, only_kinds=frozenset({"acid"})), FitJob(X, y, kinds, per_kind=False)],
                    PARAMS, workers=2)
    assert set(regs[0].boosters_) == {"acid"} and set(regs[1].boosters_) == {"all"}
    assert boosters_fitted() - before == 2
    base_rows = kinds == "base"
    assert np.isnan(regs[0].predict(X[base_rows], kinds[base_rows])).all()


def test_learns_the_signal_and_refuses_empty_training_sets():
    X, y, kinds = _data(seed=1)
    reg = SiteRegressor(params=BoosterParams(n_estimators=300, learning_rate=0.05, num_leaves=8,
                                             min_child_samples=5)).fit(X[:300], y[:300], kinds[:300])
    err = reg.predict(X[300:], kinds[300:]) - y[300:]
    assert np.sqrt(np.mean(err ** 2)) < 0.5 * np.std(y[300:])
    with pytest.raises(ValueError, match="no kind has enough training rows"):
        SiteRegressor(params=PARAMS).fit(X[:1], y[:1], kinds[:1])


def test_censored_rows_push_only_where_the_prediction_crosses_the_bound():
    rng = np.random.default_rng(2)
    x = rng.uniform(0, 10, 600)
    X = x[:, None].astype(np.float32)
    y = x.copy()                       # labeled rows: target = x
    kinds = np.full(600, "acid")
    lab = np.arange(600) < 300
    params = BoosterParams(n_estimators=150, learning_rate=0.1, num_leaves=8, min_child_samples=5)
    plain = SiteRegressor(params=params).fit(X[lab], y[lab], kinds[lab])
    grid = np.linspace(0.5, 9.5, 19)[:, None].astype(np.float32)
    base = plain.predict(grid, np.full(19, "acid"))
    # lower bounds far below the function are satisfied: the fit must not move
    low = np.where(lab, y, x - 5)
    bound = np.where(lab, 0, 1).astype(np.int8)
    satisfied = SiteRegressor(params=params).fit(X, low, kinds, bound=bound).predict(grid, np.full(19, "acid"))
    assert satisfied == pytest.approx(base, abs=0.3)
    # lower bounds above the function on x > 5 (and only there) pull those predictions up
    high = np.where(lab, y, np.where(x > 5, x + 3, x - 5))
    pulled = SiteRegressor(params=params).fit(X, high, kinds, bound=bound).predict(grid, np.full(19, "acid"))
    right, left = grid[:, 0] > 6, grid[:, 0] < 4
    assert np.all(pulled[right] > base[right] + 0.5) and pulled[left] == pytest.approx(base[left], abs=0.3)


def test_fits_started_from_another_thread_count_there():
    """Stage timings count the boosters a stage fits; a fit running in the background is not theirs."""
    from concurrent.futures import ThreadPoolExecutor
    X, y, kinds = _data()
    before = boosters_fitted()
    with ThreadPoolExecutor(1) as pool:
        in_thread = pool.submit(lambda: (fit_many([FitJob(X, y, kinds)], PARAMS), boosters_fitted())[1]).result()
    assert in_thread >= 2  # acid and base boosters, counted in the thread that asked for them
    assert boosters_fitted() == before


def test_huber_loss_lets_a_few_wrong_labels_move_the_fit_less():
    """A tenth of the labels 8 units off (a value attached to the wrong site looks like this): the squared
    loss follows them, the Huber loss stays near the clean signal; without outliers the two agree."""
    rng = np.random.default_rng(4)
    x = rng.uniform(0, 10, 800)
    X = x[:, None].astype(np.float32)
    kinds = np.full(800, "acid")
    wrong = rng.random(800) < 0.1
    y = np.where(wrong, x + 8, x)
    grid = np.linspace(1, 9, 17)[:, None].astype(np.float32)
    gk = np.full(17, "acid")
    params = dict(n_estimators=200, learning_rate=0.1, num_leaves=8, min_child_samples=20)
    squared = SiteRegressor(params=BoosterParams(**params, huber_delta=0.0)).fit(X, y, kinds).predict(grid, gk)
    huber = SiteRegressor(params=BoosterParams(**params, huber_delta=1.0)).fit(X, y, kinds).predict(grid, gk)
    truth = grid[:, 0]
    assert np.mean(squared - truth) > 0.5                      # pulled up by about a tenth of 8
    assert abs(np.mean(huber - truth)) < 0.5 * np.mean(squared - truth)
    clean = SiteRegressor(params=BoosterParams(**params, huber_delta=1.0)).fit(X, x, kinds).predict(grid, gk)
    assert clean == pytest.approx(truth, abs=0.5)
