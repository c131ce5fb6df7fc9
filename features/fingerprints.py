"""Circular (Morgan) fingerprints used by the site features and the baseline model.

Two kinds:

* molecule-level count fingerprints (:func:`mol_fingerprint_counts`), the usual
  hashed Morgan count vector of the whole molecule;
* site-rooted environments (:func:`site_environment_ids`): for one root atom, the
  Morgan environment of radius exactly ``r`` for each requested ``r``.  RDKit's
  generator is run with ``fromAtoms`` set to the root atoms and
  ``includeRedundantEnvironments=True`` so that every root gets exactly one
  environment per radius, independent of which other atoms are roots in the same
  call (the default de-duplication would otherwise drop an environment that
  another root already produced).

Pure functions of an RDKit molecule; generators are cached per parameter set.
"""
from __future__ import annotations

from collections.abc import Iterable, Sequence
from functools import lru_cache

import numpy as np
from rdkit import Chem
from rdkit.Chem import rdFingerprintGenerator

__all__ = [
    "mol_fingerprint_counts",
    "site_environment_ids",
    "site_environment_counts",
    "site_neighbourhood_bits",
]

MAX_RADIUS = 6


@lru_cache(maxsize=32)
def _morgan(radius: int, fp_size: int, redundant: bool):
    return rdFingerprintGenerator.GetMorganGenerator(
        radius=radius, fpSize=fp_size, includeRedundantEnvironments=redundant
    )


def _check_radius(radius: int) -> int:
    r = int(radius)
    if r != radius or not 0 <= r <= MAX_RADIUS:
        raise ValueError(f"radius must be an integer in 0..{MAX_RADIUS}, got {radius!r}")
    return r


def _check_bits(n_bits: int) -> int:
    n = int(n_bits)
    if n != n_bits or n < 1:
        raise ValueError(f"n_bits must be a positive integer, got {n_bits!r}")
    return n


def mol_fingerprint_counts(
    mol: Chem.Mol, radius: int = 2, n_bits: int = 2048, use_counts: bool = True
) -> np.ndarray:
    """Hashed Morgan count fingerprint of the whole molecule as a float32 vector.

    ``use_counts=False`` gives the 0/1 presence vector instead of counts.
    """
    if mol is None:
        raise ValueError("mol is None (did the SMILES fail to parse?)")
    gen = _morgan(_check_radius(radius), _check_bits(n_bits), False)
    fp = gen.GetCountFingerprintAsNumPy(mol).astype(np.float32)
    if not use_counts:
        np.minimum(fp, 1.0, out=fp)
    return fp


def site_environment_ids(
    mol: Chem.Mol, atoms: Iterable[int], max_radius: int
) -> dict[int, dict[int, int]]:
    """Unfolded Morgan environment identifiers rooted at each atom in ``atoms``.

    Returns ``{atom: {radius: identifier}}`` for radius ``0..max_radius``.  One
    generator call serves all roots of a molecule.
    """
    roots = sorted({int(a) for a in atoms})
    if not roots:
        return {}
    gen = _morgan(_check_radius(max_radius), 2048, True)  # fpSize unused for sparse output
    ao = rdFingerprintGenerator.AdditionalOutput()
    ao.AllocateBitInfoMap()
    gen.GetSparseCountFingerprint(mol, fromAtoms=roots, additionalOutput=ao)
    out: dict[int, dict[int, int]] = {a: {} for a in roots}
    for ident, hits in ao.GetBitInfoMap().items():
        for atom, radius in hits:
            env = out.get(atom)
            if env is not None:
                env[radius] = ident
    return out


def site_environment_counts(
    mol: Chem.Mol, atom: int, radii: Sequence[int] = (1, 2, 3), n_bits: int = 256
) -> np.ndarray:
    """Site-rooted environment vector for one atom: ``len(radii)`` blocks of ``n_bits``.

    Block ``i`` holds a 1 at ``identifier % n_bits`` of the radius ``radii[i]``
    environment rooted at ``atom`` (the same layout as the ``env_r*`` features).
    """
    radii = [_check_radius(r) for r in radii]
    n_bits = _check_bits(n_bits)
    if not 0 <= atom < mol.GetNumAtoms():
        raise IndexError(f"atom index {atom} out of range for a molecule with {mol.GetNumAtoms()} atoms")
    env = site_environment_ids(mol, [atom], max(radii) if radii else 0)[atom]
    vec = np.zeros(len(radii) * n_bits, dtype=np.float32)
    for i, r in enumerate(radii):
        ident = env.get(r)
        if ident is not None:
            vec[i * n_bits + ident % n_bits] += 1.0
    return vec


def site_neighbourhood_bits(mol: Chem.Mol, atom: int, radius: int = 3, n_bits: int = 1024) -> np.ndarray:
    """Binary fingerprint of the site's neighbourhood, for nearest-neighbour similarity.

    The Morgan environments (radius 0..2) rooted at every atom within ``radius`` bonds of
    the site, hashed into ``n_bits``; two sites whose surroundings look alike share most bits.
    """
    if not 0 <= atom < mol.GetNumAtoms():
        raise IndexError(f"atom index {atom} out of range for a molecule with {mol.GetNumAtoms()} atoms")
    dist = Chem.GetDistanceMatrix(mol)[atom]
    roots = [int(i) for i in np.flatnonzero(dist <= radius)]
    gen = _morgan(2, _check_bits(n_bits), False)
    return gen.GetFingerprintAsNumPy(mol, fromAtoms=roots).astype(np.uint8)
