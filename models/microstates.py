"""From site (microscopic) pKa values to microstate populations, macroscopic constants and charge.

Sites.  Each site ``i`` has a site pKa ``pka[i]`` (for a base, the pKa of its conjugate acid) defined
with every other site in its uncharged form (acids protonated, bases not), and a kind.  A microstate
says for every site whether it carries its proton; its charges are ``q = -1`` for a deprotonated acid,
``+1`` for a protonated base, ``0`` otherwise.

Free energy.  Relative to the fully deprotonated reference, a microstate's cumulative formation
constant is (base-10 logarithm, in pK units)

    log10 beta(s) = sum_{i bound in s} pka[i]  -  sum_{i<j} q_i(s) q_j(s) W_ij

so two like charges cost ``W_ij`` (repulsion) and two opposite charges gain it (attraction).  This is
the electrostatic site-site picture of polyprotic acids (N. Bjerrum, Z. phys. Chem. 106, 219 (1923);
J. G. Kirkwood and F. H. Westheimer, J. Chem. Phys. 6, 506 (1938)): for two equivalent acid groups
it gives pK2 - pK1 = log10 4 + W.  ``W_ij`` comes from :class:`InteractionModel`.  With ``W = 0`` the
sites are independent and every result reduces to Henderson-Hasselbalch per site.

Macroscopic constants.  Grouping microstates by the number of bound protons gives the binding
polynomial ``sum_n c_n h**n``; the stepwise constants are ``log10(c_n / c_(n-1))``.  Each step is
attributed to acid or base sites by which of them lose the proton on that step, so a molecule's
"acid constant" and "base constant" are read off the same populations as its charge.

Size.  Microstates are enumerated exactly up to :data:`MAX_EXACT_SITES` sites.  Beyond that, the sites
farthest outside the titration window leave the enumeration (:attr:`Microstates.held` names them) and
enter by mean field: each carries its average charge at the pH asked, from its own site pKa shifted by
the average charges of all other sites (``pka_j - sum_k W_jk <q_k>``), solved together with the exact
populations of the enumerated sites until the charges stop moving (the Bragg-Williams / Tanford-Kirkwood
mean-field treatment of many interacting sites).  Macroscopic constants are those of the enumerated
sites in the mean field at ``ph_ref`` (the window centre unless given).
"""
from __future__ import annotations

import csv
import math
from dataclasses import dataclass, field
from functools import lru_cache
from importlib import resources

import numpy as np

MAX_EXACT_SITES = 12
LN10 = math.log(10.0)


# ----------------------------------------------------------------------------- site-site interaction

@dataclass(frozen=True)
class InteractionModel:
    """Pair term between two charged sites ``d`` bonds apart: ``W = amplitude / d**power`` pK units,
    times ``1 + path_factor * (paths - 1)`` when ``paths`` shortest bond paths join them (two across a
    piperazine ring, three across a bicyclo[2.2.2] cage: the charges sit closer in space than along a
    chain of the same length, and an effect carried through several paths adds up, as in the additive
    path rules of substituent effects), and times ``conjugated_factor`` when both sites sit in (or on)
    one aromatic ring system.

    The power law stands in for the Coulomb term of the electrostatic model with a distance that
    grows with the number of bonds; its parameters are fitted (:meth:`fit`) on a calibration set of
    handbook diacids, diamines and diazines (``configs/site_interactions.csv``) that no test set uses.
    """

    amplitude: float = 22.0
    power: float = 2.0
    conjugated_factor: float = 2.0
    cap: float = 7.0           # no pair term above the largest one the calibration set shows
    n_calibration: int = 0
    # Attraction of an acid-base pair relative to the repulsion of like charges.  Chosen by molecule-
    # grouped CV on the publishers' training files among 0, 0.5 and 1 (value-free RMSE 1.385, 1.396,
    # 1.421): the site model learns zwitterion-forming sites from measured macro constants, so a further
    # attraction counts the same effect twice.
    opposite_factor: float = 0.0
    # share of the single-path term that each further shortest path adds (0 in models written before it)
    path_factor: float = 0.0

    def pair(self, distance: np.ndarray, conjugated: np.ndarray, paths=None) -> np.ndarray:
        d = np.maximum(np.asarray(distance, float), 1.0)
        w = self.amplitude / d ** self.power
        if paths is not None:
            w = w * (1.0 + self.path_factor * (np.maximum(np.asarray(paths, float), 1.0) - 1.0))
        return np.minimum(np.where(np.asarray(conjugated, bool), w * self.conjugated_factor, w), self.cap)

    @classmethod
    def fit(cls, distance, conjugated, delta_pk, paths=None) -> "InteractionModel":
        """Least squares in log space: log W = log amplitude - power log d on the non-conjugated rows
        joined by one shortest path; the path factor as the mean excess per further path on the
        non-conjugated rows with several; then the conjugated factor as the geometric mean ratio on the
        conjugated rows."""
        d = np.asarray(distance, float)
        c = np.asarray(conjugated, bool)
        w = np.asarray(delta_pk, float)
        n = np.ones(len(d)) if paths is None else np.maximum(np.asarray(paths, float), 1.0)
        single = ~c & (n == 1)
        if single.sum() < 2 or np.any(w <= 0):
            raise ValueError("need at least two non-conjugated single-path calibration pairs with positive interaction")
        slope, intercept = np.polyfit(np.log(d[single]), np.log(w[single]), 1)
        amplitude, power, cap = float(np.exp(intercept)), float(-slope), float(w.max())
        multi = ~c & (n > 1)
        path_factor = 0.0
        if multi.any():
            plain = amplitude / d[multi] ** power
            path_factor = max(0.0, float(np.mean((w[multi] / plain - 1.0) / (n[multi] - 1.0))))
        ratio = 1.0
        if c.any():
            plain = amplitude / d[c] ** power * (1.0 + path_factor * (n[c] - 1.0))
            ratio = float(np.exp(np.mean(np.log(w[c] / plain))))
        return cls(amplitude, power, ratio, cap, len(w), path_factor=path_factor)

    @classmethod
    def from_dict(cls, d: dict) -> "InteractionModel":
        return cls(**{k: d[k] for k in ("amplitude", "power", "conjugated_factor", "cap", "n_calibration",
                                        "opposite_factor", "path_factor") if k in d})

    def matrix(self, distance: np.ndarray, conjugated: np.ndarray, kinds=None, shared=None,
               paths=None) -> np.ndarray:
        """Pair matrix for sites with the given distance and conjugation matrices (zero diagonal; sites
        on one atom get zero: they are handled as exclusive, not as interacting).  With ``kinds``,
        acid-base pairs (the only ones that can carry opposite charges) are scaled by
        ``opposite_factor``.  ``shared`` marks pairs whose charged forms put charge on one common atom
        (:func:`pkasite.features.site_pairs.shared_charge_pairs`, a biguanide's two imine N): like charges
        there repel at least as strongly as any pair of the calibration set, so they get ``cap`` whatever
        their distance.  ``paths``: the number of shortest bond paths joining each pair
        (:func:`pkasite.features.site_pairs.shortest_path_counts`; None: one)."""
        d = np.asarray(distance, float)
        W = self.pair(d, conjugated, paths)
        if shared is not None:
            like = True if kinds is None else np.asarray(kinds)[:, None] == np.asarray(kinds)[None, :]
            W = np.where(np.asarray(shared, bool) & like, self.cap, W)
        W[d <= 0] = 0.0
        if kinds is not None and self.opposite_factor != 1.0:
            k = np.asarray(kinds)
            W = np.where(k[:, None] != k[None, :], W * self.opposite_factor, W)
        return W

    def to_dict(self) -> dict:
        return {"amplitude": self.amplitude, "power": self.power, "conjugated_factor": self.conjugated_factor,
                "cap": self.cap, "n_calibration": self.n_calibration, "opposite_factor": self.opposite_factor,
                "path_factor": self.path_factor}


def exclusive_pairs(kinds, distance: np.ndarray, conjugated: np.ndarray | None = None) -> np.ndarray:
    """Pairs of an acid and a base site that are never charged at once: two sites on one atom (an
    atom cannot gain and lose a proton at the same time).  Other acid-base pairs may both be charged:
    that state is a zwitterion, or, within one aromatic system, the other tautomer (2-hydroxypyridine's
    charged pair is 2-pyridone), whose weight the two site constants set."""
    k = np.asarray(kinds)
    d = np.asarray(distance, float)
    return (k[:, None] != k[None, :]) & (d <= 0)


def read_calibration(text: str) -> list[dict]:
    """Rows of the calibration CSV (``#`` lines are comments)."""
    lines = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    return list(csv.DictReader(lines))


@lru_cache(maxsize=1)
def default_interaction_model() -> InteractionModel:
    """The model fitted on the packaged calibration set (``configs/site_interactions.csv``).

    Each row gives two macroscopic constants of a molecule with two like sites ``d`` bonds apart; the
    interaction is ``pK_weaker - pK_stronger - log10(statistical factor)``.
    """
    text = resources.files("pkasite.configs").joinpath("site_interactions.csv").read_text(encoding="utf-8")
    rows = read_calibration(text)
    d = [float(r["distance"]) for r in rows]
    conj = [r["conjugated"].strip().lower() in ("1", "true", "yes") for r in rows]
    w = [abs(float(r["pk2"]) - float(r["pk1"])) - math.log10(float(r["statistical_factor"])) for r in rows]
    paths = [float(r.get("paths") or 1) for r in rows]
    return InteractionModel.fit(d, conj, w, paths)


# ----------------------------------------------------------------------------- microstates

def _logsumexp10(x: np.ndarray, axis=None) -> np.ndarray:
    m = np.max(x, axis=axis, keepdims=True)
    m = np.where(np.isfinite(m), m, 0.0)
    out = np.log10(np.sum(10.0 ** (x - m), axis=axis, keepdims=True)) + m
    return np.squeeze(out, axis=axis) if axis is not None else out.item()


@dataclass
class Microstates:
    """All microstates of a molecule's sites, with their formation constants (see module doc).

    ``pka``, ``kinds`` per site; ``W`` the symmetric pair matrix (pK units; zero: independent);
    ``exclusive`` pairs (:func:`exclusive_pairs`) are never charged at once; ``window`` the titration
    window used to pick sites to hold when there are too many; ``hold`` sites stay uncharged and
    ``hold_charged`` sites stay charged (:func:`site_holds`); ``tautomer`` pairs (acid, base) are
    lactims (:func:`~pkasite.features.site_pairs.lactim_pairs`), whose charged pair O- / N-H+ is the
    neutral lactam: it counts as neutral in :meth:`neutral_fraction`.  The kinds of the steps still follow
    the sites (2-hydroxypyridine's 0.75 is an acid step, the O-H's), as the open data mostly file them;
    see features/FEATURES.md for the measured alternative.  ``ph_ref``: the pH whose mean field the
    macroscopic constants use when some sites are solved by mean field (default: the window centre).
    """

    pka: np.ndarray
    kinds: np.ndarray
    W: np.ndarray | None = None
    window: tuple[float, float] = (0.0, 14.0)
    exclusive: np.ndarray | None = None
    hold: np.ndarray | None = None
    hold_charged: np.ndarray | None = None
    tautomer: np.ndarray | None = None
    ph_ref: float | None = None
    held: list[int] = field(default_factory=list, init=False)

    def __post_init__(self):
        self.pka = np.asarray(self.pka, float)
        self.kinds = np.asarray(self.kinds)
        n = len(self.pka)
        self.W = np.zeros((n, n)) if self.W is None else np.asarray(self.W, float)
        acid = self.kinds == "acid"
        self._acid = acid
        # sites left out of the enumeration when there are too many: farthest outside the window first
        centre = 0.5 * (self.window[0] + self.window[1])
        self.ph_ref = centre if self.ph_ref is None else float(self.ph_ref)
        weak = np.zeros(n, bool) if self.hold is None else np.asarray(self.hold, bool)
        strong = np.zeros(n, bool) if self.hold_charged is None else np.asarray(self.hold_charged, bool)
        free = ~weak & ~strong
        if free.sum() > MAX_EXACT_SITES:
            order = [i for i in np.argsort(-np.abs(self.pka - centre), kind="stable") if free[i]]
            for i in order[: int(free.sum()) - MAX_EXACT_SITES]:
                free[i] = False
        self.held = [int(i) for i in np.flatnonzero(~free)]
        # weak sites (``hold``) stay uncharged: acids keep their proton, bases stay without one; strong
        # sites (``hold_charged``) stay charged; the rest of the held sites are solved by mean field
        self.mean_field = np.flatnonzero(~free & ~weak & ~strong)
        self._fixed_q = np.where(strong, np.where(acid, -1.0, 1.0), 0.0)
        idx = np.flatnonzero(free)
        k = len(idx)
        states = ((np.arange(2 ** k)[:, None] >> np.arange(k)[None, :]) & 1).astype(bool)  # bound?
        q = np.where(acid[idx], np.where(states, 0.0, -1.0), np.where(states, 1.0, 0.0))
        Wf = self.W[np.ix_(idx, idx)]
        pair = 0.5 * np.einsum("si,ij,sj->s", q, Wf, q)
        log_beta = states @ self.pka[idx] - pair
        if self.exclusive is not None and k:
            ex = np.asarray(self.exclusive, bool)[np.ix_(idx, idx)]
            for i, j in zip(*np.nonzero(np.triu(ex, 1))):
                log_beta[(q[:, i] != 0) & (q[:, j] != 0)] = -np.inf
        self.free = idx
        self.states = states
        self.q = q
        self._log_beta0 = log_beta
        self._field_cache: dict[float, np.ndarray] = {}
        self.n_bound = states.sum(axis=1)
        self.acid_bound = states[:, acid[idx]].sum(axis=1)
        self.held_q = self.held_charges(self.ph_ref)
        self.log_beta = self._log_beta(self.held_q)
        T = np.zeros((k, k), bool) if self.tautomer is None else np.asarray(self.tautomer, bool)[np.ix_(idx, idx)]
        self.tautomer_free = T

    # ------------------------------------------------------------------ sites outside the enumeration
    def _log_beta(self, held_q: np.ndarray) -> np.ndarray:
        """Formation constants of the enumerated microstates in the field of the held sites' charges."""
        if not self.held:
            return self._log_beta0
        field_ = self.W[np.ix_(self.free, self.held)] @ held_q[self.held]
        return self._log_beta0 - self.q @ field_

    def held_charges(self, ph: float) -> np.ndarray:
        """Per site, the charge of the held sites at ``ph`` (0 for enumerated sites): fixed for weak and
        strong sites, the self-consistent mean-field average for the sites beyond the exact set."""
        ph = float(ph)
        if ph in self._field_cache:
            return self._field_cache[ph]
        hq = self._fixed_q.copy()
        hq[self.free] = 0.0
        mf = self.mean_field
        if len(mf):
            acid = self._acid[mf]
            W_mf = self.W[mf]
            if self._field_cache:  # start from the last solution (a titration curve moves little per step)
                hq[mf] = next(reversed(self._field_cache.values()))[mf]
            else:  # or from independent sites
                pb = 1.0 / (1.0 + 10.0 ** (ph - self.pka[mf]))
                hq[mf] = np.where(acid, pb - 1.0, pb)
            for _ in range(1000):
                lw = self._log_beta(hq) - ph * self.n_bound
                c = hq.copy()
                c[self.free] = 10.0 ** (lw - _logsumexp10(lw)) @ self.q
                # a site's bound-to-unbound log ratio is pka - ph - (its charge change, +1) * field
                pb = 1.0 / (1.0 + 10.0 ** np.clip(ph + W_mf @ c - self.pka[mf], -300.0, 300.0))
                new = np.where(acid, pb - 1.0, pb)
                step = new - hq[mf]
                hq[mf] += 0.5 * step  # damped: a full step oscillates between like charges that repel
                if np.max(np.abs(step)) < 1e-9:
                    break
        if len(self._field_cache) < 512:
            self._field_cache[ph] = hq
        return hq

    # ------------------------------------------------------------------ populations
    def log_weights(self, ph: float) -> np.ndarray:
        log_beta = self._log_beta(self.held_charges(ph)) if len(self.mean_field) else self.log_beta
        return log_beta - ph * self.n_bound

    def populations(self, ph: float) -> np.ndarray:
        lw = self.log_weights(ph)
        return 10.0 ** (lw - _logsumexp10(lw))

    def mean_charge(self, ph: float, base_charge: float = 0.0) -> float:
        held = float(self.held_charges(ph)[self.held].sum()) if self.held else 0.0
        return float(base_charge + held + self.populations(ph) @ self.q.sum(axis=1))

    def neutral_fraction(self, ph: float) -> float:
        """Population of the uncharged microstates: every site uncharged, or charged only as the O- / N-H+
        pair of a lactim, which is the neutral lactam (0 when a site held charged; each mean-field site
        multiplies it by its own uncharged share)."""
        if self.held and np.any(self._fixed_q[self.held] != 0):
            return 0.0
        q, T = self.q, self.tautomer_free
        paired = ((q[:, :, None] * q[:, None, :]) < 0) & T[None, :, :]  # charged with a charged partner
        ok = (q == 0) | paired.any(axis=2)
        free = float(self.populations(ph)[np.all(ok, axis=1) & (q.sum(axis=1) == 0)].sum())
        return free * float(np.prod(1.0 - np.abs(self.held_charges(ph)[self.mean_field])))

    def major_protonation(self, ph: float) -> np.ndarray:
        """Per site: does it carry its proton in the most populated microstate (a mean-field site: when
        it is bound more than half of the time)."""
        hq = self.held_charges(ph)
        out = np.where(self._acid, hq > -0.5, hq > 0.5)
        out[self.free] = self.states[int(np.argmax(self.log_weights(ph)))]
        return out

    # ------------------------------------------------------------------ macroscopic constants
    def macro_constants(self) -> tuple[np.ndarray, np.ndarray]:
        """Stepwise macroscopic constants (ascending) and the kind of sites each step titrates."""
        if getattr(self, "_macro", None) is None:
            self._macro = self._macro_constants()
        return self._macro

    def mean_charge_curve(self, ph: np.ndarray, base_charge: float = 0.0) -> np.ndarray:
        """Mean charge at each pH of an array (one matrix operation)."""
        if len(self.mean_field):
            return np.array([self.mean_charge(float(x), base_charge) for x in np.atleast_1d(ph)])
        lw = self.log_beta[None, :] - np.asarray(ph, float)[:, None] * self.n_bound[None, :]
        lw = lw - lw.max(axis=1, keepdims=True)
        w = 10.0 ** lw
        held = float(self.held_q[self.held].sum()) if self.held else 0.0
        return base_charge + held + (w @ self.q.sum(axis=1)) / w.sum(axis=1)

    def isoelectric_point(self, base_charge: float = 0.0, low: float = 0.0, high: float = 14.0) -> float | None:
        """pH of zero mean charge (the charge falls with pH), or None when it does not cross zero there."""
        grid = np.linspace(low, high, 281)
        q = self.mean_charge_curve(grid, base_charge)
        cross = np.flatnonzero((q[:-1] > 0) & (q[1:] <= 0))
        if not len(cross):
            return None
        i = int(cross[0])
        for _ in range(12):  # bisection inside the bracketing grid step
            mid = 0.5 * (grid[i] + grid[i + 1])
            if self.mean_charge_curve(np.array([mid]), base_charge)[0] > 0:
                grid[i] = mid
            else:
                grid[i + 1] = mid
        return float(0.5 * (grid[i] + grid[i + 1]))

    def _bound_totals(self) -> tuple[np.ndarray, np.ndarray]:
        """Per number ``n`` of bound protons on the free sites: the log10 sum of the formation constants
        of its microstates (-inf when none is allowed) and their mean count of protonated acid sites."""
        if getattr(self, "_totals", None) is None:
            k = len(self.free)
            logc = np.full(k + 1, -np.inf)
            ea = np.zeros(k + 1)
            for n in range(k + 1):
                sel = self.n_bound == n
                if sel.any() and np.isfinite(self.log_beta[sel]).any():
                    logc[n] = _logsumexp10(self.log_beta[sel])
                    w = 10.0 ** (self.log_beta[sel] - logc[n])
                    ea[n] = w @ self.acid_bound[sel]
            self._totals = (logc, ea)
        return self._totals

    def _macro_constants(self) -> tuple[np.ndarray, np.ndarray]:
        k = len(self.free)
        if k == 0:
            return np.zeros(0), np.zeros(0, dtype=object)
        logc, ea = self._bound_totals()
        ok = np.isfinite(logc)
        steps = [n for n in range(1, k + 1) if ok[n] and ok[n - 1]]
        pk = np.array([logc[n] - logc[n - 1] for n in steps])
        kind = np.array(["acid" if (ea[n] - ea[n - 1]) >= 0.5 else "base" for n in steps], dtype=object)
        order = np.argsort(pk, kind="stable")
        return pk[order], kind[order]

    def constant_of_kind(self, kind: str, rank: int = 1) -> float:
        """The ``rank``-th most acidic acid step (``kind='acid'``) or most basic base step (NaN if none)."""
        pk, kinds = self.macro_constants()
        sel = pk[kinds == kind]
        if kind == "base":
            sel = sel[::-1]
        return float(sel[rank - 1]) if len(sel) >= rank else float("nan")

    def constant_at_charge(self, charge: int) -> float:
        """The macroscopic constant of the step between net site charge ``charge`` and ``charge - 1``
        (the species of that charge giving up a proton), NaN when the model has no such step.

        The charge counts the sites only (+1 per protonated base, -1 per acid anion, held sites in their
        held form), not permanent charges such as a quaternary nitrogen.
        """
        n_acid = int((self.kinds[self.free] == "acid").sum())
        held = float(self.held_q[self.held].sum()) if self.held else 0.0
        n = int(round(charge + n_acid - held))  # protons bound on the free sites at that charge
        logc, _ = self._bound_totals()
        if not 1 <= n < len(logc) or not (np.isfinite(logc[n]) and np.isfinite(logc[n - 1])):
            return float("nan")
        return float(logc[n] - logc[n - 1])


def site_holds(kinds, priors, pka, window: tuple[float, float] = (0.0, 14.0),
               margin: float = 3.0) -> tuple[np.ndarray, np.ndarray]:
    """``(weak, strong)``: the sites held in their uncharged form and those held in their charged form.

    A site type whose catalog prior lies beyond the window is held when the molecule has another site
    of the same kind of an ordinary type, or when the site's own prediction is not well inside the
    window on that side (within ``margin`` of its edge):

    - weak: beyond the window on the weak side (acids above it: alcohols, indole and azole N-H; bases
      below it: amide and thioamide O/S, ...), held uncharged.  Such sites have few training examples
      and their predictions are the least certain; left free, an alcohol next to a carboxylic acid, or
      an amide oxygen, would pose as a constant in the titration range.  A lone weak site predicted
      well inside the window stays free.
    - strong: beyond it on the strong side (acids below it: sulfonic acids, sulfate monoesters; bases
      above it), held charged.  A sulfonic acid is an anion throughout the window; its constant is
      almost never measured, so the training data hold little to pin its prediction, and left free
      beside a phenol it would pose as a constant in the titration range.
    """
    k = np.asarray(kinds)
    prior = np.asarray(priors, float)
    p = np.asarray(pka, float)
    lo, hi = window
    above, below = prior > hi, prior < lo
    acid = k == "acid"
    same_kind = k[:, None] == k[None, :]
    np.fill_diagonal(same_kind, False)
    ordinary_sibling = (same_kind & ~(above | below)[None, :]).any(axis=1)
    near_high, near_low = p > hi - margin, p < lo + margin
    weak = np.where(acid, above & (ordinary_sibling | near_high), below & (ordinary_sibling | near_low))
    strong = np.where(acid, below & (ordinary_sibling | near_low), above & (ordinary_sibling | near_high))
    return weak, strong


# ----------------------------------------------------------------------------- independent-site helpers

def fraction_protonated(pka: np.ndarray, ph: float) -> np.ndarray:
    return 1.0 / (1.0 + 10.0 ** (ph - np.asarray(pka, float)))


def macro_pkas(pka: np.ndarray, kinds=None, W: np.ndarray | None = None) -> np.ndarray:
    """Macroscopic constants, ascending (independent sites unless ``W`` is given)."""
    pka = np.asarray(pka, float)
    if len(pka) == 0:
        return pka
    kinds = np.asarray(kinds) if kinds is not None else np.full(len(pka), "acid")
    return Microstates(pka, kinds, W).macro_constants()[0]


def mean_charge(pka: np.ndarray, kinds: np.ndarray, ph: float, base_charge: float = 0.0, W=None) -> float:
    """Population-weighted net charge: acids lose -1 when deprotonated, bases gain +1 when protonated."""
    if len(pka) == 0:
        return float(base_charge)
    return Microstates(pka, kinds, W).mean_charge(ph, base_charge)


def fraction_neutral_form(pka: np.ndarray, kinds: np.ndarray, ph: float, W=None) -> float:
    """Population of the microstate with every site in its uncharged form (acids on, bases off)."""
    if len(pka) == 0:
        return 1.0
    return Microstates(pka, kinds, W).neutral_fraction(ph)


def major_protonation(pka: np.ndarray, ph: float, kinds=None, W=None) -> np.ndarray:
    """Per site, whether it carries the proton in the most populated microstate."""
    pka = np.asarray(pka, float)
    if len(pka) == 0:
        return np.zeros(0, bool)
    kinds = np.asarray(kinds) if kinds is not None else np.full(len(pka), "acid")
    return Microstates(pka, kinds, W).major_protonation(ph)
