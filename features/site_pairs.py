"""Geometry of pairs of ionizable sites: how far apart (bonds) and whether one aromatic system joins them.

These two numbers drive the site-site interaction of the microstate model
(:class:`pkasite.models.microstates.InteractionModel`).  Pure functions of an RDKit molecule.
"""
from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from rdkit import Chem

__all__ = ["aromatic_systems", "pair_geometry"]


def aromatic_systems(mol: Chem.Mol) -> np.ndarray:
    """Per atom, the id of the fused aromatic ring system it belongs to, or of the one it is directly
    bonded to (-1: neither).  Rings sharing an atom form one system."""
    n = mol.GetNumAtoms()
    parent = list(range(n))

    def find(a: int) -> int:
        while parent[a] != a:
            parent[a] = parent[parent[a]]
            a = parent[a]
        return a

    in_ring = np.zeros(n, bool)
    for ring in mol.GetRingInfo().AtomRings():
        if all(mol.GetAtomWithIdx(a).GetIsAromatic() for a in ring):
            in_ring[list(ring)] = True
            root = find(ring[0])
            for a in ring[1:]:
                parent[find(a)] = root
    system = np.array([find(a) if in_ring[a] else -1 for a in range(n)])
    attached = system.copy()
    for a in range(n):
        if system[a] < 0:
            ids = {system[nb.GetIdx()] for nb in mol.GetAtomWithIdx(a).GetNeighbors() if system[nb.GetIdx()] >= 0}
            if len(ids) == 1:
                attached[a] = ids.pop()
    return attached


def pair_geometry(mol: Chem.Mol, atoms: Sequence[int], dist: np.ndarray | None = None
                  ) -> tuple[np.ndarray, np.ndarray]:
    """For the site atoms ``atoms``: the through-bond distance matrix (bonds; atoms in different
    fragments get a large distance) and whether both atoms sit in or on one aromatic ring system."""
    atoms = np.asarray(atoms, int)
    if dist is None:
        dist = Chem.GetDistanceMatrix(mol)
    d = np.asarray(dist, float)[np.ix_(atoms, atoms)]
    d = np.where(d > 1e6, 1e3, d)
    system = aromatic_systems(mol)[atoms]
    conj = (system[:, None] == system[None, :]) & (system[:, None] >= 0)
    return d, conj
