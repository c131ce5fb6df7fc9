"""How much label assignment flatters molecule-grouped CV: the usual CV against a nested one.

    python bench/nested_assignment.py [--mirror DIR] [--config configs/published_split.yaml] [--seed 42]

`pkasite train` runs the label-assignment rounds once, on every training molecule, before the CV folds
are drawn; a molecule that a fold holds out has then already helped, through its value, to choose the
sites of its neighbours' labels (and their microstate offsets). Predictions of a held-out molecule never
read its own value, so the figures stay value-free, but they are not entirely blind to it.

This script scores the same molecule-grouped folds twice, value-free (the molecule's predicted constant
against its value, as the headline figure):

  usual   as `pkasite train`: one assignment on all training molecules, then a site model per fold
  nested  per fold, site table, features, assignment rounds and site model built from the fold's
          training molecules alone; the held-out molecules are predicted from it

The difference is the optimism the shared assignment adds. Run on an idle machine (`uptime`).
"""
from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parents[1]


def rmse_table(prep, site_pred: np.ndarray) -> dict:
    """Value-free RMSE per kind and overall of one set of site predictions."""
    from pkasite.models.metrics import point_metrics
    from pkasite.pipeline import evaluation as E
    from pkasite.pipeline.train import _labels
    mols = _labels(prep)
    pred = E.constants_by_mol(prep.table, site_pred)[mols["mol_id"].to_numpy()]
    label = mols["label"].to_numpy()
    ok = ~np.isnan(pred)
    kind = mols["kind"].to_numpy()
    out = {"n": int(ok.sum())}
    for name, sel in (("acid", ok & (kind == "acid")), ("base", ok & (kind == "base")), ("overall", ok)):
        out[name] = point_metrics(label[sel], pred[sel])["rmse"]
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--mirror", type=Path, default=REPO.parent / "shared" / "data")
    ap.add_argument("--config", type=Path, default=REPO / "configs" / "published_split.yaml")
    ap.add_argument("--seed", type=int, default=42)
    args = ap.parse_args()

    from pkasite.models.regressor import fit_many
    from pkasite.pipeline import train as T
    from pkasite.pipeline.config import booster_params, load_config
    from pkasite.pipeline.workflow import curate_step, pull_step

    cfg = load_config(args.config).with_overrides({"seed": args.seed, "mlflow.enabled": False})
    t0 = time.monotonic()
    with tempfile.TemporaryDirectory() as tmp:
        files = pull_step(cfg, cache=Path(tmp) / "cache", mirror=args.mirror)
        measurements = curate_step(cfg, files, Path(tmp) / "curated").result.measurements
    fit_meas = T.split_filter(measurements, cfg.train.fit_splits)
    prep = T.prepare(fit_meas, cfg)
    T.reassign_labels(prep, cfg)
    splits = T.make_splits(prep, "molecule", cfg)
    print(f"{len(prep.table.molecules)} molecules, {len(splits)} molecule-grouped folds, seed {args.seed}",
          file=sys.stderr)

    regs = fit_many(T.site_jobs(prep, splits, cfg), booster_params(cfg.model), cfg.seed)
    usual, _, _ = T.site_oof(prep, splits, regs)

    nested = np.full(len(prep.sites), np.nan)
    kinds = prep.sites["kind"].to_numpy()
    record_of = prep.table.molecules["record_id"].to_numpy()
    for name, tr, te in splits:
        inner = T.prepare(fit_meas[fit_meas["record_id"].isin(set(record_of[tr]))].reset_index(drop=True), cfg)
        T.reassign_labels(inner, cfg)
        if inner.X.shape[1] != prep.X.shape[1]:
            raise SystemExit("feature layouts differ between the fold and the whole set")
        reg = T.fit_regressor(inner, np.arange(len(inner.table.molecules)), cfg)
        rows = np.flatnonzero(np.isin(prep.sites["mol_id"].to_numpy(), te))
        nested[rows] = reg.predict(prep.X[rows], kinds[rows])
        print(f"  {name}: {len(inner.table.molecules)} training molecules ({time.monotonic() - t0:.0f} s)",
              file=sys.stderr)

    table = pd.DataFrame({"usual (shared assignment)": rmse_table(prep, usual),
                          "nested (assignment per fold)": rmse_table(prep, nested)}).T
    print(f"value-free molecule-grouped CV RMSE, {args.config.name}, fit splits {cfg.train.fit_splits}, "
          f"seed {args.seed}")
    print(table.to_string(float_format=lambda x: f"{x:.3f}"))
    print(f"({time.monotonic() - t0:.0f} s)")


if __name__ == "__main__":
    main()
