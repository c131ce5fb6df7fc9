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

from pkasite.models.calibration import ConformalCalibrator
from pkasite.models.domain import similarity_bin

HEADLINE = "site_model"
ATTRIBUTION = "site_attribution_check"
RESIDUAL_COLUMNS = ["level", "mol_id", "kind", "site_type", "atom", "similarity", "label", "pred", "residual"]


def molecule_constants(sites: pd.DataFrame, site_pred: np.ndarray, given_atom: np.ndarray) -> pd.DataFrame:
    """Per molecule (index ``mol_id``): ``pred`` and the site row ``row`` it comes from.

    ``sites`` needs ``mol_id``, ``kind`` and ``atom``; ``given_atom`` holds, per ``mol_id``, the site
    atom named in the data (NaN when none).  Molecules without any prediction are left out.
    """
    mol = sites["mol_id"].to_numpy()
    kind = sites["kind"].to_numpy()
    atom = sites["atom"].to_numpy()
    pred = np.asarray(site_pred, float)
    given = np.asarray(given_atom, float)[mol]
    ok = ~np.isnan(pred) & (np.isnan(given) | (atom == given))
    # sort key: acids ascending, bases descending; the first row per molecule is its constant
    key = np.where(kind == "acid", pred, -pred)
    order = np.lexsort((np.arange(len(mol)), key, mol))
    order = order[ok[order]]
    first = order[np.r_[True, mol[order][1:] != mol[order][:-1]]] if len(order) else order
    return pd.DataFrame({"pred": pred[first], "row": first}, index=pd.Index(mol[first], name="mol_id"))


def given_atoms(table) -> np.ndarray:
    """Per mol_id of a :class:`SiteTable`, the site atom named in the data (NaN when none)."""
    return pd.to_numeric(table.molecules["site_atom"], errors="coerce").to_numpy(dtype=float, na_value=np.nan)


def constants_by_mol(table, site_pred: np.ndarray) -> np.ndarray:
    """Per mol_id of a :class:`SiteTable`, the molecule's predicted constant (NaN where none)."""
    c = molecule_constants(table.sites, site_pred, given_atoms(table))
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
    n_sites = table.sites.groupby("mol_id").size().reindex(range(len(table.molecules)), fill_value=0)
    return (n_sites.to_numpy() == 1) | ~np.isnan(given_atoms(table))


def residual_table(table, site_pred: np.ndarray, similarity: np.ndarray) -> pd.DataFrame:
    """Molecule-level and known-site residuals (value-free predictions minus values), see module doc."""
    sites = table.sites
    c = molecule_constants(sites, site_pred, given_atoms(table))
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
    for kind in ("acid", "base"):
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
