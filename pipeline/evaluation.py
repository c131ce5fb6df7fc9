"""Value-free evaluation: what a user would get, compared with what was measured.

A headline figure never uses the measured value before predicting.  The prediction compared with
a measured constant is the molecule's predicted constant of that kind (:func:`molecule_constants`):
the prediction at the site atom the data names, else the most acidic predicted acid site or the
most basic predicted base site.  It reads the site rows' molecule, kind and atom and the site atoms
given in the data, never the value or the site the value was attached to.

The value-attached figure (the prediction at the site a value was attached to, a site chosen with
the value itself) is kept as a diagnostic, the *site attribution check*; it is optimistic by
construction for molecules with several candidate sites.

Residual tables feed the intervals and the applicability domain:

* molecule residuals: every molecule, its predicted constant minus its value, with the similarity
  and type of the site the constant came from;
* site residuals: only where the site is known without the value (one candidate site of the
  measured kind, or a site atom given in the data).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from pkasite.features.sites import KINDS
from pkasite.models.calibration import ConformalCalibrator
from pkasite.models.domain import similarity_bin

HEADLINE = "site_model"
ATTRIBUTION = "site_attribution_check"
RESIDUAL_COLUMNS = ["level", "mol_id", "kind", "site_type", "atom", "similarity", "label", "pred", "residual"]


def molecule_constants(sites: pd.DataFrame, site_pred: np.ndarray, given_atom: np.ndarray,
                       interactions: dict | None = None, drawn_charge: np.ndarray | None = None) -> pd.DataFrame:
    """Per molecule (index ``mol_id``): the predicted constant ``pred`` and the site row ``row`` it is
    credited to.

    A site atom named in the data (``given_atom`` per mol_id, NaN when none) gives that site's own
    prediction.  Otherwise the constant is the measurement's macroscopic constant of its kind and rank
    (first acid step, or first base step counted from the basic end) of the molecule's microstates
    (:class:`~pkasite.models.microstates.Microstates`, all its sites of both kinds, pair terms from
    ``interactions``: mol_id -> (rows, W, exclusive); without an entry the sites are independent),
    credited to the rank-th strongest candidate site.  A measurement drawn with a charge
    against its kind (``drawn_charge`` per mol_id, from the curation: positive for an acid drawn as a
    cation, negative for a base drawn as an anion) is instead the step out of that charge, whichever
    sites it titrates (:meth:`~pkasite.models.microstates.Microstates.constant_at_charge`), still
    credited to the same site row.  Reads ``mol_id``, ``kind``, ``atom`` and, when present, ``role``
    and ``rank``; never the value or the site it was attached to.
    """
    from pkasite.models.microstates import Microstates, site_holds
    interactions = interactions or {}
    prior = sites["prior"].to_numpy() if "prior" in sites.columns else np.full(len(sites), 7.0)
    mol = sites["mol_id"].to_numpy()
    kind = sites["kind"].to_numpy()
    atom = sites["atom"].to_numpy()
    role = sites["role"].to_numpy() if "role" in sites.columns else np.full(len(sites), "candidate")
    rank = sites["rank"].to_numpy() if "rank" in sites.columns else np.ones(len(sites), int)
    pred = np.asarray(site_pred, float)
    given = np.asarray(given_atom, float)
    out_mol, out_pred, out_row = [], [], []
    order = np.argsort(mol, kind="stable")
    bounds = np.flatnonzero(np.r_[True, mol[order][1:] != mol[order][:-1], True])
    for a, b in zip(bounds[:-1], bounds[1:]):
        rows = order[a:b]
        m = int(mol[rows[0]])
        cand = rows[role[rows] == "candidate"]
        cand = cand[~np.isnan(pred[cand])]
        if not len(cand):
            continue
        k = kind[cand[0]]
        r = int(rank[cand[0]])
        if not np.isnan(given[m]) and np.any(atom[cand] == given[m]):
            row = int(cand[atom[cand] == given[m]][0])
            out_mol.append(m), out_pred.append(pred[row]), out_row.append(row)
            continue
        strongest = cand[np.argsort(pred[cand] if k == "acid" else -pred[cand], kind="stable")]
        row = int(strongest[min(r, len(strongest)) - 1])
        value = pred[row]
        ok = rows[~np.isnan(pred[rows])]
        charge = 0 if drawn_charge is None else int(drawn_charge[m])
        coupled = len(cand) > 1 or charge != 0
        if not coupled and m in interactions:
            irows, iW, _ = interactions[m]
            i = int(np.flatnonzero(irows == row)[0])
            coupled = bool(np.any(iW[i] != 0))
        # a lone candidate without pair terms is independent of the other sites: its macro constant is
        # its site value exactly (the binding polynomial factorizes), so the enumeration is skipped
        if len(ok) > 1 and coupled:
            W = ex = None
            if m in interactions:
                irows, iW, iex = interactions[m]
                pos = {int(x): i for i, x in enumerate(irows)}
                sel = [pos[int(x)] for x in ok]
                W, ex = iW[np.ix_(sel, sel)], iex[np.ix_(sel, sel)]
            else:
                ex = (atom[ok][:, None] == atom[ok][None, :]) & (kind[ok][:, None] != kind[ok][None, :])
            hold, hold_charged = site_holds(kind[ok], prior[ok], pred[ok])
            ms = Microstates(pred[ok], kind[ok], W, exclusive=ex, hold=hold, hold_charged=hold_charged)
            c = ms.constant_at_charge(charge if k == "acid" else charge + 1) if charge else float("nan")
            if not np.isfinite(c):
                c = ms.constant_of_kind(k, r)
            if np.isfinite(c):
                value = c
        out_mol.append(m), out_pred.append(value), out_row.append(row)
    return pd.DataFrame({"pred": np.array(out_pred, float), "row": np.array(out_row, int)},
                        index=pd.Index(np.array(out_mol, int), name="mol_id"))


def given_atoms(table) -> np.ndarray:
    """Per mol_id of a :class:`SiteTable`, the site atom named in the data (NaN when none)."""
    return pd.to_numeric(table.molecules["site_atom"], errors="coerce").to_numpy(dtype=float, na_value=np.nan)


def drawn_charges(table) -> np.ndarray:
    """Per mol_id of a :class:`SiteTable`, the measurement's drawn charge against its kind (0 when none)."""
    if "drawn_charge" not in table.molecules.columns:
        return np.zeros(len(table.molecules), int)
    return pd.to_numeric(table.molecules["drawn_charge"], errors="coerce").fillna(0).to_numpy(dtype=int)


def table_constants(table, site_pred: np.ndarray) -> pd.DataFrame:
    """:func:`molecule_constants` of a :class:`SiteTable`'s molecules, remembered for the last
    ``site_pred`` (training asks for the same predictions' constants up to three times, and the
    microstate enumeration is the costly part)."""
    pred = np.ascontiguousarray(site_pred, dtype=float)
    key = (id(table.sites), pred.shape, pred.tobytes())
    memo = table._constants_memo
    if memo is None or memo[0] != key:
        memo = (key, molecule_constants(table.sites, pred, given_atoms(table), table.interactions(),
                                        drawn_charges(table)))
        table._constants_memo = memo
    return memo[1].copy()


def constants_by_mol(table, site_pred: np.ndarray) -> np.ndarray:
    """Per mol_id of a :class:`SiteTable`, the molecule's predicted constant (NaN where none)."""
    c = table_constants(table, site_pred)
    out = np.full(len(table.molecules), np.nan)
    out[c.index.to_numpy()] = c["pred"].to_numpy()
    return out


def attributed_predictions(sites: pd.DataFrame, site_pred: np.ndarray) -> np.ndarray:
    """Diagnostic only: per mol_id, the prediction at the site the measured value was attached to."""
    lab = sites["labeled"].to_numpy()
    out = np.full(int(sites["mol_id"].max()) + 1 if len(sites) else 0, np.nan)
    out[sites["mol_id"].to_numpy()[lab]] = np.asarray(site_pred)[lab]
    return out


def site_known(table) -> np.ndarray:
    """Per mol_id: the site of the value is known without it (one candidate site, or given in the data)."""
    cand = table.sites[table.sites["role"] == "candidate"]
    n_sites = cand.groupby("mol_id").size().reindex(range(len(table.molecules)), fill_value=0)
    return (n_sites.to_numpy() == 1) | ~np.isnan(given_atoms(table))


def residual_table(table, site_pred: np.ndarray, similarity: np.ndarray) -> pd.DataFrame:
    """Molecule-level and known-site residuals (value-free predictions minus values), see module doc."""
    sites = table.sites
    c = table_constants(table, site_pred)
    rows = c["row"].to_numpy()
    labels = sites["label"].to_numpy()
    mol = pd.DataFrame({"level": "molecule", "mol_id": c.index.to_numpy(), "kind": sites["kind"].to_numpy()[rows],
                        "site_type": sites["site_type"].to_numpy()[rows], "atom": sites["atom"].to_numpy()[rows],
                        "similarity": np.asarray(similarity)[rows], "label": labels[rows], "pred": c["pred"].to_numpy()})
    known = mol[site_known(table)[mol["mol_id"].to_numpy()]].assign(level="site")
    out = pd.concat([mol, known], ignore_index=True)
    out["residual"] = out["pred"] - out["label"]
    return out[RESIDUAL_COLUMNS]


def fit_calibrator(residuals: pd.DataFrame, level: str, levels) -> ConformalCalibrator:
    r = residuals[(residuals["level"] == level)].dropna(subset=["similarity", "residual"])
    return ConformalCalibrator(levels=tuple(levels)).fit(r["residual"].to_numpy(),
                                                         similarity_bin(r["similarity"].to_numpy()))


def _coverage_summary(r: pd.DataFrame, half: dict, where: str, level: str, seed: int, n_boot: int) -> list[dict]:
    """Per kind and nominal level: observed share of |residual| <= half width, bootstrap 95% interval."""
    out = []
    for kind in KINDS:
        sel = (r["kind"] == kind).to_numpy()
        if sel.sum() < 10:
            continue
        rng = np.random.default_rng(seed)
        idx = rng.integers(0, sel.sum(), size=(n_boot, sel.sum()))
        for lv, hw in half.items():
            inside = np.abs(r["residual"].to_numpy()[sel]) <= hw[sel]
            boot = inside[idx].mean(axis=1)
            out.append({"where": where, "level": level, "kind": kind, "nominal": float(lv), "n": int(sel.sum()),
                        "observed": float(inside.mean()), "observed_low": float(np.quantile(boot, 0.025)),
                        "observed_high": float(np.quantile(boot, 0.975)), "mean_half_width": float(np.mean(hw[sel]))})
    return out


def coverage_rows(calibration: pd.DataFrame, check: pd.DataFrame, where: str, levels, folds=None,
                  seed: int = 0, n_boot: int = 1000) -> list[dict]:
    """Observed coverage of conformal intervals on residuals the calibration never saw, per level
    (site, molecule) and kind, with bootstrap 95% intervals.

    Without ``folds`` the calibrators are fitted on all of ``calibration`` and checked on ``check``
    (a held-out test set).  With ``folds`` (mol_id -> fold label, covering both tables) they are
    cross-fitted: the rows of ``check`` in each fold are judged by calibrators fitted on the rows of
    ``calibration`` outside it.
    """
    out = []
    for level in ("site", "molecule"):
        r = check[check["level"] == level].dropna(subset=["similarity", "residual"]).reset_index(drop=True)
        if r.empty:
            continue
        half = {lv: np.full(len(r), np.nan) for lv in levels}
        if folds is None:
            parts = [(calibration, np.ones(len(r), bool))]
        else:
            fold_of = pd.Series(folds)
            cal_fold = calibration["mol_id"].map(fold_of).to_numpy()
            chk_fold = r["mol_id"].map(fold_of).to_numpy()
            parts = [(calibration[cal_fold != f], chk_fold == f) for f in pd.unique(chk_fold)]
        for cal_rows, sel in parts:
            if not sel.any() or (cal_rows["level"] == level).sum() < 10:
                continue
            cal = fit_calibrator(cal_rows, level, levels)
            bins = similarity_bin(r["similarity"].to_numpy()[sel])
            for lv in levels:
                half[lv][sel] = cal.half_width(bins, lv)
        keep = ~np.isnan(half[levels[0]])
        out += _coverage_summary(r[keep], {lv: h[keep] for lv, h in half.items()}, where, level, seed, n_boot)
    return out
