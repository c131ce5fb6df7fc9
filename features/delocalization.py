"""Where a site's charge and lone pair can go by resonance (the ``dl_`` feature group).

An acid is stronger the more atoms its conjugate base's negative charge can spread over (a carboxylate's
two O, a phenoxide's ring carbons, a p-nitrophenoxide's nitro O), and a base is stronger the more its
conjugate acid's positive charge can spread (an amidinium's two N, a 4-aminopyridinium's amino N) and
weaker the more its own lone pair is already shared with the rest of the molecule (an aniline's ring, an
amide's carbonyl O).  The ``res_`` group counts the partners next to the site and on the ortho and para
positions of one six-membered ring; this group follows the charge as far as it goes.

Two walks on the bond graph, both from the site atom S:

* **ion**: the atoms that carry S's charge in the site's ionized form.  For an acid the negative charge
  moves across X-A=B to B (allyl-type shift; a triple bond counts as double).  For a base, the proton's
  positive charge on S moves first to the partner of a double bond at S (S+=A to S-A+), then across
  X-A=B to B, and from a cationic carrier to a neighbouring heteroatom whose lone pair is not part of a
  double bond (X+-Y: to X=Y+, the last step of that branch).
* **lone pair**: where the neutral site's lone pair spreads when it is not part of a double bond (an
  amine, aniline, amide or hydroxy O, S): the anion walk again.  A site with a double bond (a pyridine or
  imine N) keeps its lone pair to itself and has none.

Aromatic bonds are read as single or double as needed, but only between atoms that carry a double bond in
the molecule's Kekule structure (a pyrrole N-H, a furan O or a thiophene S never do), so the walks do
not depend on which Kekule structure RDKit picks.  In alternant rings the two-bond steps keep their
parity, so a phenoxide reaches its ortho and para carbons and never its meta ones.  This is the usual
curved-arrow bookkeeping of resonance structures (common practice), not a quantum-chemical calculation:
it counts where a charge can be drawn, not how much of it goes there.

Columns, per walk (``ion`` and ``lp``): carriers other than S by element (``c``, ``n``, ``o``, ``x`` for
S, P, halogens and the rest) and ``far``, the largest bond distance of a carrier from S (0 when none).
"""
from __future__ import annotations

from typing import TYPE_CHECKING

from rdkit import Chem

if TYPE_CHECKING:  # pragma: no cover
    from .site_features import _MolData

_ELEMENTS = ("c", "n", "o", "x")
DL_NAMES = tuple(f"dl_{walk}_{col}" for walk in ("ion", "lp") for col in (*_ELEMENTS, "far"))

_LONE_PAIR_ELEMENTS = frozenset({7, 8, 16})


_BT = Chem.BondType


def add_bond(single: list[list[int]], double: list[list[int]], arom: list[tuple[int, int]],
             i: int, j: int, bt, zl: list[int]) -> None:
    """Files one bond for :class:`Conjugation` (bonds to hydrogen are left out)."""
    if zl[i] == 1 or zl[j] == 1:
        return
    if bt == _BT.AROMATIC:
        arom.append((i, j))
    elif bt == _BT.DOUBLE or bt == _BT.TRIPLE:
        double[i].append(j), double[j].append(i)
    elif bt == _BT.SINGLE:
        single[i].append(j), single[j].append(i)


class Conjugation:
    """Single-ish and double-ish neighbour lists of one molecule, for the walks.

    An atom is a pi partner when it has a double or triple bond, or when it is aromatic and contributes
    one p electron or an empty p orbital to its ring rather than a lone pair: not a pyrrole-type N (N-H or
    three connections, uncharged), an uncharged aromatic O, S or Se, an aromatic anion or a carbocation
    (tropylium).  These are the atoms with a double bond in a Kekule structure (identical on all 6,012
    structures of the open data), read without kekulizing a copy.
    """

    def __init__(self, zl: list[int], aromatic: list[bool], fcl: list[float], nhs: list[int],
                 single: list[list[int]], double: list[list[int]], arom_bonds: list[tuple[int, int]]):
        """From the molecule's heavy-atom bonds: neighbours by single and by double or triple bonds, and
        the aromatic bonds (both lists are extended here; pass fresh ones)."""
        n = len(zl)
        pi = [bool(double[i]) for i in range(n)]
        for i, j in arom_bonds:
            single[i].append(j), single[j].append(i)
        for i in range(n):
            if pi[i] or not aromatic[i]:
                continue
            z, q = zl[i], fcl[i]
            lone_pair = (q < 0 or (z == 6 and q > 0) or (z in (8, 16, 34) and q == 0)
                         or (z == 7 and q == 0 and (nhs[i] >= 1 or len(single[i]) >= 3)))
            pi[i] = not lone_pair
        for i, j in arom_bonds:
            if pi[i] and pi[j]:
                double[i].append(j), double[j].append(i)
        self.pi, self.single, self.double, self.zl = pi, single, double, zl

    def _shift(self, start: set[int], seen: set[int], carbon_only: bool = False) -> list[int]:
        """Allyl-type shifts X-A=B -> B from the carriers in ``start``; the new carriers.

        ``carbon_only``: B must be a carbon (a positive charge is not moved onto an N or O that would be
        left with six electrons)."""
        single, double, zl = self.single, self.double, self.zl
        queue, found = list(start), []
        while queue:
            x = queue.pop()
            for a in single[x]:
                for b in double[a]:
                    if b != x and b not in seen and (not carbon_only or zl[b] == 6):
                        seen.add(b)
                        found.append(b)
                        queue.append(b)
        return found

    def anion(self, s: int) -> set[int]:
        """Atoms that carry a negative charge (or lone pair) placed on ``s``, ``s`` included.

        A site that is part of a double bond (an azinium N-H+) keeps the pair in an orbital of its own."""
        seen = {s}
        if not self.pi[s]:
            self._shift({s}, seen)
        return seen

    def cation(self, s: int) -> set[int]:
        """Atoms that carry a positive charge placed on ``s`` by protonating it, ``s`` included."""
        seen = {s}
        first = [a for a in self.double[s] if self.zl[a] == 6]
        seen.update(first)
        carbo = set(first) | set(self._shift(set(first), seen, carbon_only=True))
        for x in list(carbo):
            for y in self.single[x]:
                if y not in seen and self.zl[y] in _LONE_PAIR_ELEMENTS and not self.pi[y]:
                    seen.add(y)
        return seen

    def lone_pair(self, s: int) -> set[int]:
        """Where the neutral site's lone pair spreads, ``s`` included; only ``s`` when it is part of a double
        bond, nothing when it is no N, O or S."""
        if self.zl[s] not in _LONE_PAIR_ELEMENTS:
            return set()
        return self.anion(s)


def _counts(carriers: set[int], s: int, zl: list[int], dist) -> list[float]:
    out = [0.0] * (len(_ELEMENTS) + 1)
    for a in carriers:
        if a == s:
            continue
        z = zl[a]
        out[0 if z == 6 else 1 if z == 7 else 2 if z == 8 else 3] += 1.0
        out[-1] = max(out[-1], float(dist[a]))
    return out


def delocalization_row(md: _MolData, s: int, kind: str) -> list[float]:
    """The ``dl_`` columns of site ``s`` of kind ``kind`` (order of :data:`DL_NAMES`)."""
    conj = md.conjugation
    if kind == "acid":
        ion = conj.anion(s)
        lp = ion if md.zl[s] in _LONE_PAIR_ELEMENTS else set()  # the lone-pair walk is the anion walk
    else:
        ion, lp = conj.cation(s), conj.lone_pair(s)
    d = md.dist[s]
    return _counts(ion, s, md.zl, d) + _counts(lp, s, md.zl, d)
