"""Applicability domain: how close a query site is to the sites the model learned from."""
from __future__ import annotations

import numpy as np

SIMILARITY_BINS = (0.0, 0.3, 0.5, 0.7, 1.01)


def tanimoto_max(query_bits: np.ndarray, train_bits: np.ndarray, chunk: int = 256) -> np.ndarray:
    """Highest Tanimoto similarity of each binary query row to any training row.

    Queries go in blocks of ``chunk`` rows, so the transient similarity matrices stay near
    ``4 * chunk * len(train_bits) * 4`` bytes (about 30 MB for 7,000 training sites) whatever the batch size."""
    q = (np.asarray(query_bits) > 0).astype(np.float32)
    t = (np.asarray(train_bits) > 0).astype(np.float32)
    if len(t) == 0:
        return np.zeros(len(q))
    t_counts = t.sum(axis=1)
    out = np.empty(len(q))
    for start in range(0, len(q), chunk):
        block = q[start:start + chunk]
        inter = block @ t.T
        union = block.sum(axis=1, keepdims=True) + t_counts[None, :] - inter
        sim = np.where(union > 0, inter / np.maximum(union, 1e-9), 1.0)
        out[start:start + chunk] = sim.max(axis=1)
    return out


def similarity_bin(similarity: np.ndarray) -> np.ndarray:
    """Label of the similarity bin each value falls in, e.g. ``"sim_0.5-0.7"``."""
    edges = np.asarray(SIMILARITY_BINS)
    idx = np.clip(np.searchsorted(edges, similarity, side="right") - 1, 0, len(edges) - 2)
    return np.array([f"sim_{edges[i]:.1f}-{min(edges[i + 1], 1.0):.1f}" for i in idx])
