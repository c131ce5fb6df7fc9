"""Training accuracy and time: the published split and the full default config.

    python bench/train_bench.py [--mirror DIR] [--skip-default]

Prints the molecule-grouped CV table against both baselines, the published-split test RMSE
(targets: <= 1.4 for acids and bases), the gain over the Morgan baseline (target >= 25%)
and the wall time of a full training with all three CV schemes (target < 10 min on 2 cores).
"""
from __future__ import annotations

import argparse
import os
import tempfile
import time
from pathlib import Path

from pkasite.pipeline.config import load_config
from pkasite.pipeline.workflow import curate_step, pull_step, train_step

REPO = Path(__file__).resolve().parents[1]


def run(config: Path, mirror: Path, tmp: Path) -> tuple[dict, float, Path]:
    cfg = load_config(config).with_overrides({"mlflow.enabled": False})
    files = pull_step(cfg, cache=tmp / "cache", mirror=mirror)
    cur = curate_step(cfg, files, tmp / cfg.name / "curated")
    t0 = time.monotonic()
    out = train_step(cfg, cur.result.measurements, tmp / cfg.name)
    return out.metrics, time.monotonic() - t0, out.cv_metrics


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--mirror", default=os.environ.get("PKASITE_MIRROR", REPO.parent / "shared" / "data"))
    ap.add_argument("--skip-default", action="store_true")
    args = ap.parse_args()
    import pandas as pd
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        m, secs, _ = run(REPO / "configs" / "published_split.yaml", Path(args.mirror), tmp)
        print("published split (train files -> test files)")
        for kind in ("acid", "base"):
            print(f"  {kind}: test RMSE {m[f'test_rmse_{kind}']:.2f} at the attached site, "
                  f"{m[f'test_rmse_strongest_{kind}']:.2f} strongest site, Morgan baseline "
                  f"{m[f'test_baseline_mol_morgan_rmse_{kind}']:.2f}")
        print(f"  training wall time {secs:.0f} s")
        if args.skip_default:
            return
        m, secs, cv_path = run(REPO / "configs" / "default.yaml", Path(args.mirror), tmp)
        cv = pd.read_csv(cv_path)
        table = cv[cv["subset"] == "overall"].pivot(index="scheme", columns="model", values="rmse")
        print("\nfull default training, molecule-level CV RMSE (overall)")
        print(table.round(2).to_string())
        gain = 1 - table.loc["molecule", "site_model"] / table.loc["molecule", "mol_morgan"]
        print(f"\ngain over the Morgan baseline (molecule CV): {gain:.1%}")
        print(f"full training with {', '.join(table.index)} CV: {secs:.0f} s")


if __name__ == "__main__":
    main()
