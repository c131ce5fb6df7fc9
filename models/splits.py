"""Cross-validation splitters that keep related rows together.

Each splitter yields ``(train_idx, test_idx)`` over rows, where rows of one
group (a molecule, a scaffold, a site type) always land on the same side.
"""
from __future__ import annotations

import hashlib
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


def _unit_hash(keys: np.ndarray, seed: int) -> np.ndarray:
    """Per key, a number in [0, 1) that depends only on the key and the seed."""
    out = np.empty(len(keys))
    for i, key in enumerate(keys):
        digest = hashlib.blake2b(f"{seed}\x00{key}".encode("utf-8"), digest_size=8).digest()
        out[i] = int.from_bytes(digest, "big") / 2.0 ** 64
    return out


def group_kfold(groups: Sequence, n_splits: int, seed: int) -> Iterator[tuple[np.ndarray, np.ndarray]]:
    """K folds over groups, balanced by row count, each group's fold set by a seeded hash of its name.

    Groups holding at least a quarter of a fold's share of rows are placed first, largest first, each
    into the fold with the fewest rows so far.  The other groups are sorted by a hash of (seed, group
    name) and cut into consecutive runs that fill each fold up to an equal share of rows.  A group's
    fold therefore depends on its name and the seed, not on which other groups exist: adding or
    removing a few molecules moves only the groups next to a cut, so CV figures before and after a
    data change compare like with like (a permutation by row position would reshuffle every fold).
    """
    groups = np.asarray(groups, dtype=object)
    uniq, inverse, counts = np.unique(groups.astype(str), return_inverse=True, return_counts=True)
    if len(uniq) < n_splits:
        raise ValueError(f"{len(uniq)} groups cannot make {n_splits} folds")
    u = _unit_hash(uniq, seed)
    total = counts.sum()
    share = total / n_splits
    big = counts >= max(2.0, share / 4)
    fold_of_group = np.empty(len(uniq), dtype=int)
    sizes = np.zeros(n_splits)
    for g in sorted(np.flatnonzero(big), key=lambda g: (-counts[g], u[g])):
        f = int(np.argmin(sizes))
        fold_of_group[g] = f
        sizes[f] += counts[g]
    small = np.flatnonzero(~big)
    small = small[np.argsort(u[small], kind="stable")]
    room = np.maximum(share - sizes, 0.0)
    if room.sum() <= 0:
        room = np.ones(n_splits)
    cuts = np.cumsum(room) / room.sum() * counts[small].sum()
    middle = np.cumsum(counts[small]) - counts[small] / 2.0
    fold_of_group[small] = np.minimum(np.searchsorted(cuts, middle, side="right"), n_splits - 1)
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
