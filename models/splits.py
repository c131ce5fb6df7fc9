"""Cross-validation splitters that keep related rows together.

Each splitter yields ``(train_idx, test_idx)`` over rows, where rows of one
group (a molecule, a scaffold, a site type) always land on the same side.
"""
from __future__ import annotations

from typing import Iterator, Sequence

import numpy as np
from rdkit import Chem
from rdkit.Chem.Scaffolds import MurckoScaffold

ACYCLIC = "(acyclic)"


def murcko_scaffold(smiles: str) -> str:
    """Bemis-Murcko scaffold SMILES; acyclic molecules share the scaffold ``(acyclic)``."""
    mol = Chem.MolFromSmiles(smiles)
    if mol is None:
        raise ValueError(f"cannot parse SMILES {smiles!r}")
    core = MurckoScaffold.GetScaffoldForMol(mol)
    return Chem.MolToSmiles(core) if core.GetNumAtoms() else ACYCLIC


def group_kfold(groups: Sequence, n_splits: int, seed: int) -> Iterator[tuple[np.ndarray, np.ndarray]]:
    """K folds over groups, balanced by row count; group order shuffled by ``seed``.

    Largest groups are placed first, each into the fold with the fewest rows so far
    (ties broken by the seeded shuffle), so folds stay balanced and reproducible.
    """
    groups = np.asarray(groups, dtype=object)
    uniq, inverse, counts = np.unique(groups.astype(str), return_inverse=True, return_counts=True)
    if len(uniq) < n_splits:
        raise ValueError(f"{len(uniq)} groups cannot make {n_splits} folds")
    rng = np.random.default_rng(seed)
    order = rng.permutation(len(uniq))
    order = order[np.argsort(-counts[order], kind="stable")]
    fold_of_group = np.empty(len(uniq), dtype=int)
    sizes = np.zeros(n_splits, dtype=int)
    for g in order:
        f = int(np.argmin(sizes))
        fold_of_group[g] = f
        sizes[f] += counts[g]
    fold = fold_of_group[inverse]
    for f in range(n_splits):
        yield np.flatnonzero(fold != f), np.flatnonzero(fold == f)


def leave_one_group_out(groups: Sequence, min_size: int = 1) -> Iterator[tuple[str, np.ndarray, np.ndarray]]:
    """One split per group with at least ``min_size`` rows: that group held out, the rest trained on."""
    groups = np.asarray(groups, dtype=object).astype(str)
    uniq, counts = np.unique(groups, return_counts=True)
    for g, c in zip(uniq, counts):
        if c < min_size:
            continue
        test = groups == g
        yield str(g), np.flatnonzero(~test), np.flatnonzero(test)


def unseen_group_folds(groups: Sequence, min_size: int, n_splits: int,
                       seed: int) -> Iterator[tuple[str, np.ndarray, np.ndarray]]:
    """Folds that hold whole groups out: every group with at least ``min_size`` rows is tested once,
    in one of ``n_splits`` folds balanced by row count (as :func:`group_kfold`); smaller groups are
    always trained on.  ``n_splits`` 0 (or more folds than such groups): one fold per group, named after
    it (:func:`leave_one_group_out`).  Yields ``(name, train_idx, test_idx)``."""
    groups = np.asarray(groups, dtype=object).astype(str)
    uniq, counts = np.unique(groups, return_counts=True)
    big = uniq[counts >= min_size]
    if n_splits <= 0 or n_splits >= len(big):
        yield from leave_one_group_out(groups, min_size)
        return
    eligible = np.flatnonzero(np.isin(groups, big))
    for f, (_, test) in enumerate(group_kfold(groups[eligible], n_splits, seed)):
        test_rows = eligible[test]
        held = np.isin(groups, np.unique(groups[test_rows]))
        yield f"fold{f}", np.flatnonzero(~held), np.flatnonzero(held)
