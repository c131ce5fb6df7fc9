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


class Conjugation:
    """Single-ish and double-ish neighbour lists of one molecule, for the walks."""

    def __init__(self, mol: Chem.Mol, zl: list[int]):
        n = mol.GetNumAtoms()
        work = Chem.Mol(mol)
        pi = [False] * n
        try:
            Chem.Kekulize(work, clearAromaticFlags=False)
            kekule = True
        except Exception:  # noqa: BLE001 - an unkekulizable drawing: read every aromatic atom as a pi partner
            kekule = False
        single: list[list[int]] = [[] for _ in range(n)]
        double: list[list[int]] = [[] for _ in range(n)]
        bonds = [(b.GetBeginAtomIdx(), b.GetEndAtomIdx(), b.GetBondType(), b.GetIsAromatic())
                 for b in (work.GetBondWithIdx(k) for k in range(work.GetNumBonds()))]
        BT = Chem.BondType
        for i, j, bt, arom in bonds:
            if bt in (BT.DOUBLE, BT.TRIPLE) or (arom and not kekule):
                pi[i] = pi[j] = True
        for i, j, bt, arom in bonds:
            if zl[i] == 1 or zl[j] == 1:
                continue
            if arom:
                single[i].append(j), single[j].append(i)
                if pi[i] and pi[j]:
                    double[i].append(j), double[j].append(i)
            elif bt in (BT.DOUBLE, BT.TRIPLE):
                double[i].append(j), double[j].append(i)
            elif bt == BT.SINGLE:
                single[i].append(j), single[j].append(i)
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
        if not self.pi[s] and not self.double[s]:
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
        """Where the neutral site's lone pair spreads; empty when ``s`` is part of a double bond."""
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
    ion = conj.anion(s) if kind == "acid" else conj.cation(s)
    d = md.dist[s]
    return _counts(ion, s, md.zl, d) + _counts(conj.lone_pair(s), s, md.zl, d)
