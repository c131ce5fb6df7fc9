"""Sites of a type the model has no training example of: shrink the prediction towards the type's prior.

A site whose type never appeared among the training labels gets its prediction from features the trees
learned on other types; the site catalog's typical pKa of the type (its ``prior``) is a second,
independent guess. Out-of-fold predictions of the unseen-site-type cross-validation (each fold holds
whole types out of training) show how the two should be weighed: the least-squares weight ``w`` of

    blended = w * model + (1 - w) * prior

on the labeled sites of the held-out types, per kind, clipped to [0, 1]. Only sites of a type with no
training example are blended; every other prediction is the model's own.
"""
from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from pkasite.features.sites import KINDS


def prior_weight(model: np.ndarray, prior: np.ndarray, target: np.ndarray) -> float:
    """Least-squares weight of the model against the prior for ``target``, clipped to [0, 1]; 1.0 (the
    model alone) when there is nothing to weigh (no finite rows, or model and prior agree everywhere)."""
    m, p, y = (np.asarray(a, float) for a in (model, prior, target))
    ok = np.isfinite(m) & np.isfinite(p) & np.isfinite(y)
    d = m[ok] - p[ok]
    denom = float(np.dot(d, d))
    if not ok.any() or denom <= 0.0:
        return 1.0
    return float(np.clip(np.dot(d, y[ok] - p[ok]) / denom, 0.0, 1.0))


def prior_weights(model, prior, target, kinds) -> dict[str, float]:
    """:func:`prior_weight` per kind."""
    k = np.asarray(kinds)
    return {kind: prior_weight(np.asarray(model)[k == kind], np.asarray(prior)[k == kind],
                               np.asarray(target)[k == kind]) for kind in KINDS}


def blend(pred, prior, unseen, kinds, weights: Mapping[str, float] | None) -> np.ndarray:
    """``pred`` with the rows marked ``unseen`` blended towards ``prior`` by the kind's weight (rows with
    a non-finite prior, and every row when ``weights`` is None, keep the model's value)."""
    out = np.array(pred, dtype=float, copy=True)
    if not weights:
        return out
    k = np.asarray(kinds)
    p = np.asarray(prior, float)
    w = np.array([weights.get(kind, 1.0) for kind in k], float) if len(k) else np.zeros(0)
    sel = np.asarray(unseen, bool) & np.isfinite(p)
    out[sel] = w[sel] * out[sel] + (1.0 - w[sel]) * p[sel]
    return out
