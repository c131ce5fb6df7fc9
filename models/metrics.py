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
    n = len(y)
    idx = rng.integers(0, n, size=(n_boot, n))
    # resample r draws row i counts[r, i] times: every sum over a resample is one product with the counts
    counts = np.bincount((np.arange(n_boot)[:, None] * n + idx).ravel(), minlength=n_boot * n)
    counts = counts.reshape(n_boot, n).astype(float)
    err = pred - y
    ae = np.abs(err)
    sums = counts @ np.column_stack([err * err, ae, ae <= 1.0, ae <= 2.0, y, y * y])
    sq, y_sum, y_sq = sums[:, 0], sums[:, 4], sums[:, 5]
    samples = {
        "rmse": np.sqrt(sq / n),
        "mae": sums[:, 1] / n,
        "r2": 1 - sq / np.maximum(y_sq - y_sum * y_sum / n, 1e-12),
        "within_1": sums[:, 2] / n,
        "within_2": sums[:, 3] / n,
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
