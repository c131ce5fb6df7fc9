"""Gradient-boosted site regressor (LightGBM), stored as LightGBM text models, never pickles.

Training fits many small boosters (folds, schemes, baselines).  On a few thousand rows one
LightGBM booster scales poorly over threads, so :func:`fit_many` runs independent boosters
side by side, one thread each, in a thread pool sized to the cores (LightGBM releases the
GIL while it trains).  With ``deterministic`` set, a booster's trees do not depend on its
thread count, so the numbers are the same whatever the pool size.

Censored rows.  A molecule's measured acid constant belongs to its most acidic site, so every
other acid site of that molecule has a site pKa at or above the value (a base constant: every
other base site at or below it).  Such rows carry a one-sided bound instead of a label
(``FitJob.bound``): the squared error counts only when the prediction crosses the bound (a
censored, Tobit-like squared loss).  This teaches the model the sites that carry no label,
which is what decides the molecule's predicted constant when it has several sites.

Loss.  Huber's (``BoosterParams.huber_delta``, default 2 log units): squared within the delta, linear
beyond it.  Compiled constants include values attached to the wrong site of a molecule and plain
misprints; under squared error such a label pulls its leaf by its full, large residual.
"""
from __future__ import annotations

import os
import threading
from concurrent.futures import ThreadPoolExecutor
from dataclasses import asdict, dataclass, field
from typing import TYPE_CHECKING

import numpy as np

from pkasite.features.sites import KINDS

if TYPE_CHECKING:
    import lightgbm as lgb


def lightgbm_module():
    """LightGBM, imported when first used: it pulls in scikit-learn and SciPy (over 2 s and ~90 MB), which
    commands that never fit or load a booster (--help, pull, curate, reading a batch) should not pay."""
    import lightgbm
    return lightgbm


def available_cores() -> int:
    """CPU cores this process may use (respects affinity masks and container CPU sets)."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on Linux
        return os.cpu_count() or 1


@dataclass(frozen=True)
class BoosterParams:
    n_estimators: int = 700
    learning_rate: float = 0.04
    num_leaves: int = 48
    min_child_samples: int = 8
    colsample_bytree: float = 0.4
    subsample: float = 0.8
    reg_lambda: float = 1.0
    huber_delta: float = 2.0  # > 0: residuals beyond this many log units pull with a constant force (Huber);
                              # 0: squared error (measured: features/FEATURES.md)
    n_jobs: int = 0          # cores for fitting; 0: every core this process may use

    def workers(self) -> int:
        return self.n_jobs if self.n_jobs > 0 else available_cores()

    def lgb_params(self, seed: int, threads: int = 1) -> dict:
        p = asdict(self)
        return {"objective": "regression", "learning_rate": p["learning_rate"], "num_leaves": p["num_leaves"],
                "min_data_in_leaf": p["min_child_samples"], "feature_fraction": p["colsample_bytree"],
                "bagging_fraction": p["subsample"], "bagging_freq": 1, "lambda_l2": p["reg_lambda"],
                "num_threads": threads, "seed": seed, "deterministic": True, "force_col_wise": True,
                "verbosity": -1, "num_iterations": p["n_estimators"]}


@dataclass(frozen=True)
class FitJob:
    """One regressor to fit: the rows ``rows`` of ``X`` (all rows when None), their labels and kinds.

    ``y``, ``kinds`` and ``bound`` are indexed like ``X``.  ``per_kind``: one booster per kind (else one
    shared booster); ``only_kinds`` limits per-kind fitting to the kinds that will be predicted.
    ``bound`` (optional, int8): 0 where ``y`` is the label, +1 where ``y`` is a lower bound of the
    target (the prediction should not fall below it), -1 where it is an upper bound.
    """

    X: np.ndarray
    y: np.ndarray
    kinds: np.ndarray
    rows: np.ndarray | None = None
    per_kind: bool = True
    only_kinds: frozenset | None = None
    bound: np.ndarray | None = None


def censored_objective(y: np.ndarray, bound: np.ndarray, huber_delta: float = 0.0):
    """LightGBM objective: squared (or Huber) error on labels, and on bounds only where the prediction crosses them.

    With ``huber_delta`` > 0 the loss is Huber's: a residual beyond the delta pulls with the force of
    the delta (gradient clipped, unit hessian, as LightGBM's own ``huber`` objective), so a value
    attached to the wrong site or misreported moves its leaf less.
    """
    y = np.asarray(y, float)
    bound = np.asarray(bound, float)
    exact = bound == 0

    def objective(pred: np.ndarray, _data) -> tuple[np.ndarray, np.ndarray]:
        r = pred - y
        if huber_delta > 0:
            r = np.clip(r, -huber_delta, huber_delta)
        active = exact | (bound * r < 0)
        # inactive rows get a tiny hessian so that a leaf of only satisfied bounds stays at zero
        return np.where(active, r, 0.0), np.where(active, 1.0, 1e-3)

    return objective


_fits_lock = threading.Lock()
_fits_by_caller: dict[int, int] = {}


def boosters_fitted() -> int:
    """Boosters fitted so far by :func:`fit_many` calls made from this thread (a counter for timing
    reports; work started from another thread, such as a fit in the background, counts there)."""
    return _fits_by_caller.get(threading.get_ident(), 0)


def _train_booster(X: np.ndarray, rows: np.ndarray, y: np.ndarray, bound: np.ndarray | None,
                   params: dict, caller: int, huber_delta: float = 0.0) -> tuple["lgb.Booster", float]:
    """One booster and its offset (the start score, added to every prediction)."""
    yy = np.asarray(y[rows], float)
    if huber_delta <= 0 and (bound is None or not np.any(bound[rows])):
        data = lightgbm_module().Dataset(np.asarray(X[rows], np.float32), yy, free_raw_data=True, params={"verbosity": -1})
        booster, offset = lightgbm_module().train(params, data), 0.0
    else:
        b = np.asarray(bound[rows]) if bound is not None else np.zeros(len(rows), np.int8)
        offset = float(np.mean(yy[b == 0])) if np.any(b == 0) else float(np.mean(yy))
        data = lightgbm_module().Dataset(np.asarray(X[rows], np.float32), yy, init_score=np.full(len(rows), offset),
                           free_raw_data=True, params={"verbosity": -1})
        booster = lightgbm_module().train({**params, "objective": censored_objective(yy, b, huber_delta)},
                                          data)
    with _fits_lock:
        _fits_by_caller[caller] = _fits_by_caller.get(caller, 0) + 1
    return booster, offset


def fit_many(jobs: list[FitJob], params: BoosterParams, seed: int = 42,
             workers: int | None = None) -> list["SiteRegressor"]:
    """Fit one :class:`SiteRegressor` per job; all their boosters run in one pool, largest first."""
    tasks = []  # (job index, key, rows)
    for j, job in enumerate(jobs):
        if len(job.X) != len(job.y) or len(job.y) != len(job.kinds):
            raise ValueError(f"X, y and kinds differ in length ({len(job.X)}, {len(job.y)}, {len(job.kinds)})")
        rows = np.arange(len(job.X)) if job.rows is None else np.asarray(job.rows)
        kinds = np.asarray(job.kinds)[rows]
        keys = [k for k in KINDS if job.only_kinds is None or k in job.only_kinds] if job.per_kind else ["all"]
        for key in keys:
            sel = rows[kinds == key] if job.per_kind else rows
            if len(sel) >= 2:
                tasks.append((j, key, sel))
        if not any(t[0] == j for t in tasks):
            raise ValueError("no kind has enough training rows")
    workers = max(1, min(workers or params.workers(), len(tasks)))
    threads = max(1, (params.workers() if workers == 1 else 1))
    lgb_params = params.lgb_params(seed, threads)
    order = sorted(range(len(tasks)), key=lambda i: -len(tasks[i][2]))
    boosters: list = [None] * len(tasks)
    caller = threading.get_ident()

    def run(i: int) -> None:
        j, _, sel = tasks[i]
        boosters[i] = _train_booster(jobs[j].X, sel, jobs[j].y, jobs[j].bound, lgb_params, caller,
                                     params.huber_delta)

    if workers == 1:
        for i in order:
            run(i)
    else:
        with ThreadPoolExecutor(workers, thread_name_prefix="pkasite-fit") as pool:
            list(pool.map(run, order))
    regs = [SiteRegressor(params=params, per_kind=job.per_kind, seed=seed) for job in jobs]
    for (j, key, _), (booster, offset) in zip(tasks, boosters):
        regs[j].boosters_[key] = booster
        regs[j].offsets_[key] = offset
    return regs


@dataclass
class SiteRegressor:
    """Predicts site pKa from site features; one booster per kind or one shared booster.

    Follows the scikit-learn contract: the constructor stores parameters only,
    :meth:`fit` learns, :meth:`predict` needs a fitted model.
    """

    params: BoosterParams = field(default_factory=BoosterParams)
    per_kind: bool = True
    seed: int = 42
    boosters_: dict = field(default_factory=dict, init=False, repr=False)
    offsets_: dict = field(default_factory=dict, init=False, repr=False)

    def fit(self, X: np.ndarray, y: np.ndarray, kinds: np.ndarray, only_kinds=None,
            bound: np.ndarray | None = None) -> "SiteRegressor":
        """Fit the booster(s); ``only_kinds`` limits per-kind fitting to the kinds that will be predicted,
        ``bound`` marks rows whose ``y`` is a one-sided bound (see :class:`FitJob`)."""
        job = FitJob(X, np.asarray(y, float), np.asarray(kinds), per_kind=self.per_kind,
                     only_kinds=frozenset(only_kinds) if only_kinds is not None else None, bound=bound)
        fitted = fit_many([job], self.params, self.seed)[0]
        self.boosters_, self.offsets_ = fitted.boosters_, fitted.offsets_
        return self

    def _check_fitted(self):
        if not self.boosters_:
            raise RuntimeError("SiteRegressor is not fitted; call fit() or load a bundle first")

    def predict(self, X: np.ndarray, kinds: np.ndarray, contrib: bool = False) -> np.ndarray:
        """Predicted pKa per row (NaN for a kind without a model); with ``contrib`` SHAP-style contributions."""
        self._check_fitted()
        X, kinds = np.asarray(X, np.float32), np.asarray(kinds)
        width = X.shape[1] + 1
        out = np.full((len(X), width) if contrib else len(X), np.nan)
        for key, booster in self.boosters_.items():
            mask = (kinds == key) if self.per_kind else np.ones(len(X), bool)
            if mask.any():
                out[mask] = booster.predict(X[mask], pred_contrib=contrib)
                offset = self.offsets_.get(key, 0.0)
                if contrib:
                    out[mask, -1] += offset  # the bias column carries the start score
                else:
                    out[mask] += offset
        return out

    def to_strings(self) -> dict[str, str]:
        self._check_fitted()
        return {k: b.model_to_string() for k, b in self.boosters_.items()}

    @classmethod
    def from_strings(cls, models: dict[str, str], per_kind: bool, seed: int = 42,
                     params: BoosterParams | None = None, offsets: dict | None = None) -> "SiteRegressor":
        reg = cls(params=params or BoosterParams(), per_kind=per_kind, seed=seed)
        reg.boosters_ = {k: lightgbm_module().Booster(model_str=s) for k, s in models.items()}
        reg.offsets_ = {k: float(v) for k, v in (offsets or {}).items()}
        return reg
