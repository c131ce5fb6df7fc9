"""Regression metrics with bootstrap confidence intervals."""
from __future__ import annotations

import numpy as np

METRICS = ("rmse", "mae", "r2", "within_1", "within_2")


def point_metrics(y: np.ndarray, pred: np.ndarray) -> dict[str, float]:
    y, pred = np.asarray(y, float), np.asarray(pred, float)
    err = pred - y
    ss_tot = float(np.sum((y - y.mean()) ** 2))
    return {
        "n": int(len(y)),
        "rmse": float(np.sqrt(np.mean(err ** 2))),
        "mae": float(np.mean(np.abs(err))),
        "r2": float(1 - np.sum(err ** 2) / ss_tot) if ss_tot > 0 else float("nan"),
        "within_1": float(np.mean(np.abs(err) <= 1.0)),
        "within_2": float(np.mean(np.abs(err) <= 2.0)),
    }


def bootstrap_metrics(y, pred, n_boot: int = 1000, seed: int = 0, level: float = 0.95) -> dict[str, float]:
    """Point metrics plus ``<metric>_low``/``<metric>_high`` percentile intervals."""
    y, pred = np.asarray(y, float), np.asarray(pred, float)
    out = point_metrics(y, pred)
    if len(y) < 2:
        return out
    rng = np.random.default_rng(seed)
    idx = rng.integers(0, len(y), size=(n_boot, len(y)))
    err = (pred - y)[idx]      # the same values as pred[idx] - y[idx], one gather instead of two
    yb = y[idx]
    sq = np.sum(err * err, axis=1)
    dev = yb - yb.mean(axis=1, keepdims=True)
    ae = np.abs(err)
    samples = {
        "rmse": np.sqrt(sq / len(y)),
        "mae": np.mean(ae, axis=1),
        "r2": 1 - sq / np.maximum(np.sum(dev * dev, axis=1), 1e-12),
        "within_1": np.mean(ae <= 1.0, axis=1),
        "within_2": np.mean(ae <= 2.0, axis=1),
    }
    alpha = (1 - level) / 2
    for name, vals in samples.items():
        out[f"{name}_low"], out[f"{name}_high"] = (float(v) for v in np.quantile(vals, [alpha, 1 - alpha]))
    return out


def paired_bootstrap_diff(y, pred_a, pred_b, n_boot: int = 2000, seed: int = 0, level: float = 0.95) -> dict:
    """RMSE(b) - RMSE(a) on the same rows with a paired bootstrap interval (negative: b is better)."""
    y, a, b = (np.asarray(v, float) for v in (y, pred_a, pred_b))
    rng = np.random.default_rng(seed)
    idx = rng.integers(0, len(y), size=(n_boot, len(y)))
    ra = np.sqrt(np.mean((a[idx] - y[idx]) ** 2, axis=1))
    rb = np.sqrt(np.mean((b[idx] - y[idx]) ** 2, axis=1))
    alpha = (1 - level) / 2
    low, high = np.quantile(rb - ra, [alpha, 1 - alpha])
    diff = float(np.sqrt(np.mean((b - y) ** 2)) - np.sqrt(np.mean((a - y) ** 2)))
    return {"n": int(len(y)), "rmse_diff": diff, "rmse_diff_low": float(low), "rmse_diff_high": float(high)}
