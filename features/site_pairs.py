"""Geometry of pairs of ionizable sites: how far apart (bonds) and whether one aromatic system joins them.

These numbers, with how many shortest paths join the two (:func:`shortest_path_counts`), drive the
site-site interaction of the microstate model
(:class:`pkasite.models.microstates.InteractionModel`).  Pure functions of an RDKit molecule.
"""
from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from rdkit import Chem

__all__ = ["aromatic_systems", "pair_geometry", "shared_charge_pairs", "shortest_path_counts"]


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


def shortest_path_counts(mol: Chem.Mol, atoms: Sequence[int]) -> np.ndarray:
    """For the site atoms ``atoms``: how many distinct shortest bond paths join each pair (1 along a chain;
    2 across a piperazine or pyrazine ring; 3 across a 1,4-diazabicyclo[2.2.2]octane cage; 0 between
    fragments and on the diagonal)."""
    atoms = [int(a) for a in atoms]
    n = mol.GetNumAtoms()
    neighbours = [[nb.GetIdx() for nb in a.GetNeighbors()] for a in mol.GetAtoms()]
    out = np.zeros((len(atoms), len(atoms)))
    for i, start in enumerate(atoms):
        dist = [-1] * n
        count = [0] * n
        dist[start], count[start] = 0, 1
        queue = [start]
        for v in queue:  # breadth first; the list grows while it is read
            for w in neighbours[v]:
                if dist[w] < 0:
                    dist[w], count[w] = dist[v] + 1, count[v]
                    queue.append(w)
                elif dist[w] == dist[v] + 1:
                    count[w] += count[v]
        out[i] = [count[t] if t != start else 0 for t in atoms]
    return out


def _amidine_partners(mol: Chem.Mol, atom: int) -> set[int]:
    """For an N double-bonded (not aromatic) to a carbon: the other N atoms on that carbon, which take up
    part of the positive charge when this N is protonated (amidinium resonance).  Empty otherwise."""
    a = mol.GetAtomWithIdx(int(atom))
    if a.GetAtomicNum() != 7:
        return set()
    out: set[int] = set()
    for b in a.GetBonds():
        c = b.GetOtherAtom(a)
        if b.GetBondType() == Chem.BondType.DOUBLE and c.GetAtomicNum() == 6:
            out |= {n.GetIdx() for n in c.GetNeighbors() if n.GetAtomicNum() == 7 and n.GetIdx() != a.GetIdx()}
    return out


def shared_charge_pairs(mol: Chem.Mol, atoms: Sequence[int]) -> np.ndarray:
    """Pairs of site atoms whose protonated forms put charge on one and the same atom: two imine N whose
    carbons share an amino N (a biguanide's two C=N), or an imine N and an amino N of its own amidine.
    Their pair term is not a matter of distance (see ``InteractionModel.matrix``)."""
    atoms = [int(a) for a in atoms]
    partners = [_amidine_partners(mol, a) for a in atoms]
    n = len(atoms)
    out = np.zeros((n, n), bool)
    for i in range(n):
        for j in range(i + 1, n):
            if (partners[i] & partners[j]) or atoms[j] in partners[i] or atoms[i] in partners[j]:
                out[i, j] = out[j, i] = True
    return out


# a ring O-H / S-H (or its anion) and a ring N ortho or para to its carbon in one six-membered ring;
# the index of that N in the match
_LACTIM_PAIRS = tuple((Chem.MolFromSmarts(smarts), ring_n) for smarts, ring_n in (
    ("[OX2H1,OX1-,SX2H1,SX1-]-c:[nX2,nX3H1+;r6]", 2),
    ("[OX2H1,OX1-,SX2H1,SX1-]-c1:a:a:[nX2,nX3H1+]:a:a:1", 4),
))


def lactim_pairs(mol: Chem.Mol, atoms: Sequence[int], kinds: Sequence[str]) -> np.ndarray:
    """Pairs (acid, base) of a lactim: an O or S acid on a ring carbon and a ring N ortho or para to
    that carbon in one six-membered ring (2- and 4-hydroxypyridine, 2-mercaptopyrimidine).  Their charged
    pair O- / N-H+ is no zwitterion but the neutral lactam (2-pyridone), the major form in water; see
    :class:`~pkasite.models.microstates.Microstates` ``tautomer``."""
    atoms, kinds = np.asarray(atoms, int), np.asarray(kinds)
    out = np.zeros((len(atoms), len(atoms)), bool)
    for query, ring_n in _LACTIM_PAIRS:
        for match in mol.GetSubstructMatches(query):
            acid = (atoms == match[0]) & (kinds == "acid")
            base = (atoms == match[ring_n]) & (kinds == "base")
            out |= acid[:, None] & base[None, :]
    return out | out.T
