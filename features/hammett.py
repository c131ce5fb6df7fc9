"""Hammett substituent constants of the aromatic ring a site sits in or on (the ``ham_`` feature group).

The Hammett relation ``pKa(X) = pKa(H) - rho * sigma(X)`` orders substituted benzoic acids, phenols,
anilinium and pyridinium ions by one number per substituent and position: ``sigma_m`` (meta) and
``sigma_p`` (para).  The site features already count substituent classes by bond distance; the sums of
``sigma`` give the trees the same information as one ordered, additive number per ring position.

Values: C. Hansch, A. Leo, R. W. Taft, "A survey of Hammett substituent constants and resonance and
field parameters", Chem. Rev. 91, 165-195 (1991), table 1; written down from memory, so the last digit
may differ from the printed table.  Substituents not in the table count in ``ham_unknown``.
"""
from __future__ import annotations

import math
from typing import TYPE_CHECKING

from rdkit import Chem

if TYPE_CHECKING:  # pragma: no cover
    from .site_features import _MolData

HAM_NAMES = ("ham_link", "ham_sigma_o", "ham_sigma_m", "ham_sigma_p", "ham_sigma_mp", "ham_unknown")

#: (sigma_m, sigma_p) per substituent class; Hansch, Leo & Taft 1991, from memory.
SIGMA: dict[str, tuple[float, float]] = {
    "no2": (0.71, 0.78),
    "cn": (0.56, 0.66),
    "cf3": (0.43, 0.54),
    "so2r": (0.60, 0.72),       # SO2CH3
    "so2n": (0.53, 0.60),       # SO2NH2
    "so3": (0.30, 0.35),        # SO3-
    "sor": (0.52, 0.49),        # SOCH3
    "cooh": (0.37, 0.45),
    "coor": (0.37, 0.45),       # COOCH3
    "coo-": (-0.10, 0.00),
    "conr": (0.28, 0.36),       # CONH2
    "cor": (0.38, 0.50),        # COCH3
    "cho": (0.35, 0.42),
    "f": (0.34, 0.06),
    "cl": (0.37, 0.23),
    "br": (0.39, 0.23),
    "i": (0.35, 0.18),
    "oh": (0.12, -0.37),
    "or": (0.12, -0.27),        # OCH3
    "oar": (0.25, -0.03),       # OC6H5
    "ocor": (0.39, 0.31),       # OCOCH3
    "o-": (-0.47, -0.81),
    "nh2": (-0.16, -0.66),
    "nhr": (-0.21, -0.70),      # NHCH3
    "nr2": (-0.16, -0.83),      # N(CH3)2
    "nhcor": (0.21, 0.00),      # NHCOCH3 (also used for N-sulfonyl amino)
    "nr3+": (0.88, 0.82),       # N(CH3)3+
    "alkyl": (-0.07, -0.17),    # CH3
    "aryl": (0.06, -0.01),      # C6H5
    "vinyl": (0.06, -0.04),
    "ethynyl": (0.21, 0.23),
    "sh": (0.25, 0.15),
    "sr": (0.15, 0.00),         # SCH3
}

_HALOGEN = {9: "f", 17: "cl", 35: "br", 53: "i"}


def substituent_class(md: _MolData, ring_atom: int, q: int) -> str | None:
    """The :data:`SIGMA` class of the substituent whose first atom is ``q`` (bonded to ``ring_atom``),
    or None when the table has no entry for it."""
    z = md.zl[q]
    if z in _HALOGEN:
        return _HALOGEN[z]
    others = [x for x in md.nbrs[q] if x != ring_atom]
    if md.aromatic[q]:
        return "aryl" if z == 6 else None
    if z == 6:
        if md.is_nitrile_c[q]:
            return "cn"
        if md.dbl_o[q]:
            rest = [x for x in others if x not in md.dbl_o[q]]
            if not rest:
                return "cho"
            x = rest[0]
            if md.zl[x] == 8:
                if md.fcl[x] < 0:
                    return "coo-"
                return "cooh" if md.nhs[x] else "coor"
            if md.zl[x] == 7:
                return "conr"
            return "cor" if md.zl[x] == 6 else None
        if sum(1 for x in others if md.zl[x] == 9) >= 3:
            return "cf3"
        if md.dbl_c[q] or md.dbl_n[q]:
            return "vinyl" if md.dbl_c[q] else None
        if md.hyb[q] == Chem.HybridizationType.SP:
            return "ethynyl"
        if md.hyb[q] == Chem.HybridizationType.SP3 and all(md.zl[x] == 6 for x in others):
            return "alkyl"
        return None
    if z == 7:
        if md.nitro_o[q]:
            return "no2"
        if md.fcl[q] > 0:
            return "nr3+"
        if md.amide_n[q]:
            return "nhcor"
        if md.dbl_c[q] or md.dbl_n[q] or md.dbl_o[q]:
            return None
        return {2: "nh2", 1: "nhr"}.get(md.nhs[q], "nr2")
    if z == 8:
        if md.fcl[q] < 0:
            return "o-"
        if md.nhs[q]:
            return "oh"
        if not others:
            return None
        x = others[0]
        if md.dbl_o[x]:
            return "ocor"
        return "oar" if md.aromatic[x] else "or"
    if z == 16:
        n_o = len(md.dbl_o[q])
        if n_o >= 2:
            rest = [x for x in others if x not in md.dbl_o[q]]
            if any(md.zl[x] == 7 for x in rest):
                return "so2n"
            if any(md.zl[x] == 8 for x in rest):
                return "so3"
            return "so2r"
        if n_o == 1:
            return "sor"
        if md.nhs[q]:
            return "sh"
        return "sr" if len(others) == 1 else None
    return None


def _rings_of_site(md: _MolData, s: int) -> tuple[float, list[tuple[int, tuple[int, ...]]]]:
    """(link, [(ipso, ring)]): the six-membered aromatic rings nearest the site, at most 3 bonds away
    along atoms outside such rings; link 0 when the site is a ring atom itself, NaN when none is near."""
    if md.rings6[s]:
        return 0.0, [(s, ring) for ring in md.rings6[s]]
    seen, frontier = {s}, [s]
    for depth in (1, 2, 3):
        found, nxt = [], []
        for a in frontier:
            for x in md.nbrs[a]:
                if x in seen:
                    continue
                seen.add(x)
                if md.rings6[x]:
                    found += [(x, ring) for ring in md.rings6[x]]
                else:
                    nxt.append(x)
        if found:
            return float(depth), found
        frontier = nxt
    return math.nan, []


def hammett_row(md: _MolData, s: int) -> list[float]:
    """The ``ham_`` columns of site ``s`` (see :data:`HAM_NAMES` and features/FEATURES.md)."""
    link, rings = _rings_of_site(md, s)
    o = m = p = 0.0
    unknown = 0
    for ipso, ring in rings:
        k0 = ring.index(ipso)
        for k, a in enumerate(ring):
            pos = min((k - k0) % 6, (k0 - k) % 6)
            if pos == 0:
                continue
            for q in md.nbrs[a]:
                if q in ring or q == s or md.mol.GetBondBetweenAtoms(a, q).IsInRing():
                    continue  # ring members and fused rings are not substituents
                cls = substituent_class(md, a, q)
                if cls is None:
                    unknown += 1
                    continue
                sm, sp = SIGMA[cls]
                if pos == 1:
                    o += sp
                elif pos == 2:
                    m += sm
                else:
                    p += sp
    return [link, o, m, p, m + p, float(unknown)]
