"""Compare two trained models on the same molecules: "did my data help, and where?"

On a user holdout file (in-house CSV format) each molecule is predicted by both
models at the same site: the given ``site_atom`` when there is one, otherwise the
most acidic (acid) or most basic (base) site each model predicts, which needs no
site attachment.  Without a holdout, the two runs' out-of-fold predictions
(molecule-grouped CV) are compared on the molecules and labels they share.
The RMSE difference gets a paired bootstrap interval, overall and per site type.
"""
from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from pkasite.models.metrics import paired_bootstrap_diff, point_metrics

from .bundle import ModelBundle, load_bundle
from .config import RunConfig
from .curate import curate
from .evaluation import HEADLINE, constants_by_mol
from .ingest import parse_inhouse

_RUN_ID = re.compile(r"^[0-9a-f]{32}$")


def resolve_bundle(ref: str, tracking_uri: str) -> ModelBundle:
    """A bundle from an MLflow run id, an MLflow model URI or a bundle folder."""
    from .tracking import download_bundle
    if _RUN_ID.match(ref):
        return load_bundle(download_bundle(f"runs:/{ref}/model", tracking_uri))
    if ":/" in ref:
        return load_bundle(download_bundle(ref, tracking_uri))
    return load_bundle(Path(ref))


@dataclass
class Comparison:
    overall: dict
    by_type: pd.DataFrame
    rows: pd.DataFrame
    basis: str

    def verdict(self) -> str:
        o = self.overall
        if o["rmse_diff_high"] < 0:
            return f"B is better: RMSE lower by {-o['rmse_diff']:.2f} (95% CI {-o['rmse_diff_high']:.2f} to {-o['rmse_diff_low']:.2f})"
        if o["rmse_diff_low"] > 0:
            return f"A is better: RMSE lower by {o['rmse_diff']:.2f} (95% CI {o['rmse_diff_low']:.2f} to {o['rmse_diff_high']:.2f})"
        return (f"no clear difference: RMSE(B) - RMSE(A) = {o['rmse_diff']:+.2f} "
                f"(95% CI {o['rmse_diff_low']:+.2f} to {o['rmse_diff_high']:+.2f})")


def _site_values(bundle: ModelBundle, table) -> np.ndarray:
    from .sitetable import site_matrix
    X = site_matrix(table, bundle.settings, bundle.site_types)
    return bundle.regressor.predict(X, table.sites["kind"].to_numpy())


def _summarize(df: pd.DataFrame, seed: int, basis: str) -> Comparison:
    overall = {**paired_bootstrap_diff(df["label"], df["pred_a"], df["pred_b"], seed=seed),
               "rmse_a": point_metrics(df["label"], df["pred_a"])["rmse"],
               "rmse_b": point_metrics(df["label"], df["pred_b"])["rmse"]}
    rows = []
    for stype, grp in df.groupby("site_type"):
        entry = {"site_type": stype, "n": len(grp),
                 "rmse_a": point_metrics(grp["label"], grp["pred_a"])["rmse"],
                 "rmse_b": point_metrics(grp["label"], grp["pred_b"])["rmse"]}
        if len(grp) >= 5:
            d = paired_bootstrap_diff(grp["label"], grp["pred_a"], grp["pred_b"], seed=seed)
            entry.update(rmse_diff=d["rmse_diff"], rmse_diff_low=d["rmse_diff_low"], rmse_diff_high=d["rmse_diff_high"])
        else:
            entry.update(rmse_diff=entry["rmse_b"] - entry["rmse_a"], rmse_diff_low=np.nan, rmse_diff_high=np.nan)
        rows.append(entry)
    by_type = pd.DataFrame(rows).sort_values("n", ascending=False).reset_index(drop=True)
    return Comparison(overall, by_type, df, basis)


def compare_on_holdout(a: ModelBundle, b: ModelBundle, holdout: Path, cfg: RunConfig) -> Comparison:
    from .sitetable import build_site_table
    result = curate(parse_inhouse(Path(holdout)), cfg.curation)
    if result.measurements.empty:
        raise ValueError(f"{holdout}: no usable rows ({result.summary['rejected_by_reason']})")
    table = build_site_table(result.measurements)
    mol_a = constants_by_mol(table, _site_values(a, table))
    mol_b = constants_by_mol(table, _site_values(b, table))
    lab = table.sites[table.sites["labeled"]].sort_values("mol_id")
    df = pd.DataFrame({"record_id": lab["record_id"].to_numpy(), "smiles": lab["smiles"].to_numpy(),
                       "kind": lab["kind"].to_numpy(), "site_type": lab["site_type"].to_numpy(),
                       "label": lab["label"].to_numpy(), "pred_a": mol_a[lab["mol_id"]], "pred_b": mol_b[lab["mol_id"]]})
    return _summarize(df, cfg.seed, f"holdout {Path(holdout).name}: {len(df)} molecules "
                                    f"({len(result.rejects) + len(table.rejects)} rows unusable)")


def compare_on_cv(a: ModelBundle, b: ModelBundle, seed: int = 42) -> Comparison:
    if a.cv_predictions is None or b.cv_predictions is None:
        raise ValueError("both models need their cross-validation predictions (bundles from pkasite train)")
    col = f"pred_{HEADLINE}"
    for name, bundle in (("A", a), ("B", b)):
        if col not in bundle.cv_predictions.columns:
            raise ValueError(f"model {name} was trained before value-free validation figures (no {col} column "
                             "in its CV predictions); retrain it or give a --holdout file")
    keep = ["inchikey", "kind", "label", "site_type", "smiles", "record_id", col]
    pa_ = a.cv_predictions[a.cv_predictions["scheme"] == "molecule"][keep]
    pb_ = b.cv_predictions[b.cv_predictions["scheme"] == "molecule"][["inchikey", "kind", "label", col]]
    df = pa_.merge(pb_, on=["inchikey", "kind"], suffixes=("_a", "_b"))
    df = df[np.isclose(df["label_a"], df["label_b"])]
    if df.empty:
        raise ValueError("the two runs share no molecule with the same label; give a --holdout file")
    df = df.rename(columns={"label_a": "label", f"{col}_a": "pred_a", f"{col}_b": "pred_b"}).drop(columns=["label_b"])
    return _summarize(df, seed, f"shared molecule-grouped CV predictions: {len(df)} molecules")


def format_comparison(c: Comparison, top: int = 15) -> str:
    o = c.overall
    lines = [f"basis: {c.basis}",
             "value-free: each model's predicted constant of the molecule (its given site, else its most acidic "
             "acid / most basic base site) against the value",
             f"RMSE A {o['rmse_a']:.3f}, RMSE B {o['rmse_b']:.3f}", c.verdict(), "",
             f"{'site type':<32} {'n':>5} {'RMSE A':>7} {'RMSE B':>7} {'B - A':>7}  95% CI"]
    for r in c.by_type.head(top).itertuples():
        ci = "" if np.isnan(r.rmse_diff_low) else f"{r.rmse_diff_low:+.2f} to {r.rmse_diff_high:+.2f}"
        lines.append(f"{r.site_type:<32} {r.n:>5} {r.rmse_a:>7.2f} {r.rmse_b:>7.2f} {r.rmse_diff:>+7.2f}  {ci}")
    return "\n".join(lines)
