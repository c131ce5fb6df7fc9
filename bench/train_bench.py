"""Training time, memory and accuracy, stage by stage.

    python bench/train_bench.py [--runs default,quick,published] [--mirror DIR]
    python bench/train_bench.py --ablation [--mirror DIR]

Each run is a fresh process (so its peak RSS is its own) doing what `pkasite train` does, MLflow
logging included (into a temporary store): pull (from the mirror), curation, site table and
features, label assignment rounds, each CV scheme with its baselines, bootstrap metrics,
calibration and domain, final fit, held-out evaluation, bundle and report.

Runs:
  default    configs/default.yaml: all three CV schemes with baselines (target <= 180 s on 2 idle cores)
  quick      the same with --quick: molecule-grouped CV only, no baselines (target <= 60 s)
  default_loto  as default, with one unseen-site-type fold per type (cv.site_type_folds 0)
  published  configs/published_split.yaml: fit on the publishers' training files, test once on
             their test files (target: test RMSE <= 1.2 per kind, molecule's predicted constant)

`--ablation` runs bench/ablation.py: on the published split, each feature group off in turn and
other training choices, value-free figures; features/FEATURES.md holds the table it printed.

A run name may carry overrides for a side-by-side record in one invocation:
`--runs published+features.type_prior=false,published`.

`--seeds 42,43,44` repeats every run with each seed (the seed also draws the CV folds) and ends with
one comparison table: per run and seed the value-free overall CV RMSE of the three schemes (molecule /
scaffold / unseen site types) and their mean, the held-out test figures (reported, never for choosing),
and for each run after the first the CV columns that are worse than the first run's on every seed. The
unseen-site-type column moves by about 0.07 between seeds with the same settings (five folds of
types), so a choice that rests on it wants three seeds.

Run on an otherwise idle machine (`uptime`): LightGBM slows down badly when cores are shared.
"""
from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
RUNS = {"default": ("default.yaml", {}),
        "quick": ("default.yaml", {"cv.schemes": ["molecule"], "cv.baselines": False}),
        "published": ("published_split.yaml", {}),
        # the unseen-site-type scheme with one fold per type (the default groups the types into 5 folds)
        "default_loto": ("default.yaml", {"cv.site_type_folds": 0}),
        # for choosing settings: molecule-grouped CV on the publishers' training files only (read the CV
        # rows; the test figures it also prints must not decide anything)
        "train_cv": ("published_split.yaml", {"cv.schemes": ["molecule"], "cv.baselines": False})}


def run_settings(name: str) -> tuple[str, dict]:
    """Config file and overrides of a run name: a name of RUNS, optionally followed by
    ``+KEY=VALUE`` overrides (``published+features.type_prior=false``)."""
    from pkasite.pipeline.config import parse_overrides
    base, *extra = name.split("+")
    if base not in RUNS:
        raise SystemExit(f"unknown run {base!r}; runs: {', '.join(RUNS)}")
    config, preset = RUNS[base]
    try:
        return config, {**preset, **parse_overrides(extra)}
    except ValueError as exc:
        raise SystemExit(f"run {name!r}: {exc}") from None


def one_run(name: str, mirror: Path, overrides: dict, out_json: Path) -> None:
    """Body of one measured run (called in a child process)."""
    from pkasite.pipeline.config import load_config
    from pkasite.pipeline.stages import StageClock
    from pkasite.pipeline.workflow import curate_step, pull_step, train_step

    config, preset = run_settings(name)
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        cfg = load_config(REPO / "configs" / config).with_overrides(
            {**preset, **overrides, "mlflow.tracking_uri": f"sqlite:///{tmp}/mlflow.db"})
        clock = StageClock(lambda m: print(f"  {name}: {m}", file=sys.stderr, flush=True))
        t0 = time.monotonic()
        with clock("pull"):
            files = pull_step(cfg, cache=tmp / "cache", mirror=mirror)
        with clock("curation"):
            cur = curate_step(cfg, files, tmp / "curated")
        out = train_step(cfg, cur.result.measurements, tmp / "out", extra_artifacts=[cur.summary],
                         curation=cur.result.summary, clock=clock)
        total = time.monotonic() - t0
        import pandas as pd
        cv = pd.read_csv(out.cv_metrics)
        main = cv[cv["subset"].isin(["overall", "kind:acid", "kind:base"])]
        result = {"name": name, "total_seconds": total, "stages": clock.table().to_dict("records"),
                  "peak_rss_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
                  "cv": main[["scheme", "model", "subset", "n", "rmse", "rmse_low", "rmse_high"]].to_dict("records"),
                  "test": {k: v for k, v in out.metrics.items() if "test_" in k},
                  "coverage": pd.read_parquet(out.bundle / "interval_coverage.parquet").to_dict("records")}
    out_json.write_text(json.dumps(result, default=float))


def measure(name: str, mirror: Path, overrides: dict | None = None) -> dict:
    with tempfile.NamedTemporaryFile(suffix=".json", delete=False) as fh:
        path = Path(fh.name)
    cmd = [sys.executable, __file__, "--one", name, "--mirror", str(mirror), "--out", str(path),
           "--overrides", json.dumps(overrides or {})]
    subprocess.run(cmd, check=True)
    result = json.loads(path.read_text())
    path.unlink()
    return result


def print_run(r: dict) -> None:
    import pandas as pd
    print(f"\n## {r['name']}: {r['total_seconds']:.0f} s wall, peak RSS {r['peak_rss_mb']:.0f} MB")
    print(pd.DataFrame(r["stages"]).to_string(index=False))
    cv = pd.DataFrame(r["cv"])
    if len(cv):
        cv["rmse (95% CI)"] = cv.apply(lambda x: f"{x.rmse:.2f} ({x.rmse_low:.2f}-{x.rmse_high:.2f})", axis=1)
        print(cv.pivot_table(index=["scheme", "model"], columns="subset", values="rmse (95% CI)",
                             aggfunc="first").to_string())
    if r["test"]:
        t = r["test"]
        print("held-out test (published test files), value-free unless marked:")
        for kind in ("acid", "base"):
            if f"test_n_{kind}" in t:
                print(f"  {kind} n={t[f'test_n_{kind}']}: RMSE {t[f'test_rmse_{kind}']:.3f} "
                      f"({t[f'test_rmse_low_{kind}']:.3f}-{t[f'test_rmse_high_{kind}']:.3f}), Morgan baseline "
                      f"{t[f'baseline_mol_morgan_test_rmse_{kind}']:.3f}, site attribution check (diagnostic) "
                      f"{t[f'site_attribution_check_test_rmse_{kind}']:.3f}")
                if f"unflagged_test_rmse_{kind}" in t:
                    print(f"    without the {t[f'test_n_{kind}'] - t[f'unflagged_test_n_{kind}']} measurements flagged "
                          f"kind_suspect (diagnostic: the flag reads the value): RMSE "
                          f"{t[f'unflagged_test_rmse_{kind}']:.3f}")
    if r.get("coverage"):
        cov = pd.DataFrame(r["coverage"])
        cov["observed (95% CI)"] = cov.apply(
            lambda x: f"{x.observed:.3f} ({x.observed_low:.3f}-{x.observed_high:.3f})", axis=1)
        print("interval coverage on data the calibration never saw")
        print(cov.pivot_table(index=["where", "level", "kind"], columns="nominal", values="observed (95% CI)",
                              aggfunc="first").to_string())


SCHEMES = ("molecule", "scaffold", "site_type")


def cv_overall(r: dict) -> dict[str, float]:
    """Scheme -> the headline (value-free) overall CV RMSE of one run."""
    return {c["scheme"]: c["rmse"] for c in r["cv"] if c["model"] == "site_model" and c["subset"] == "overall"}


def seed_table(results: list[dict]):
    """One row per (run, seed): the three CV columns, their mean and the test figures; plus, per run after
    the first, the CV columns worse than the first run's on every seed."""
    import pandas as pd
    rows = []
    for r in results:
        cv = cv_overall(r)
        row = {"run": r["name"], "seed": r["seed"], **{s: cv.get(s, float("nan")) for s in SCHEMES}}
        row["mean"] = float(pd.Series([cv[s] for s in SCHEMES if s in cv]).mean())
        row.update({f"test {k}": r["test"].get(f"test_rmse_{k}", float("nan")) for k in ("acid", "base")})
        rows.append(row)
    table = pd.DataFrame(rows)
    first = results[0]["name"]
    ref = table[table["run"] == first].set_index("seed")
    worse = {}
    for run, g in table.groupby("run", sort=False):
        if run != first:
            g = g.set_index("seed")
            worse[run] = [s for s in SCHEMES if s in g and (g[s] > ref[s].reindex(g.index)).all()]
    return table, worse


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--mirror", default=os.environ.get("PKASITE_MIRROR", REPO.parent / "shared" / "data"))
    ap.add_argument("--runs", default="default,quick,published")
    ap.add_argument("--ablation", action="store_true")
    ap.add_argument("--json", help="also write every run's figures to this JSON file")
    ap.add_argument("--set", dest="sets", action="append", default=[], metavar="KEY=VALUE",
                    help="override a config key in every run (as `pkasite train --set`)")
    ap.add_argument("--seeds", help="comma-separated seeds: every run once per seed, then a comparison table")
    ap.add_argument("--one", help=argparse.SUPPRESS)
    ap.add_argument("--out", help=argparse.SUPPRESS)
    ap.add_argument("--overrides", default="{}", help=argparse.SUPPRESS)
    args = ap.parse_args()
    mirror = Path(args.mirror)
    if args.one:
        one_run(args.one, mirror, json.loads(args.overrides), Path(args.out))
        return
    print(f"machine: {os.cpu_count()} cores, load average {os.getloadavg()[0]:.2f} at start")
    from pkasite.pipeline.config import parse_overrides
    sets = parse_overrides(args.sets)
    results = []
    if args.ablation:
        sys.path.insert(0, str(Path(__file__).parent))
        import ablation  # bench/ablation.py
        ablation.run(mirror)
    else:
        seeds = [int(x) for x in args.seeds.split(",")] if args.seeds else [None]
        for seed in seeds:
            for name in args.runs.split(","):
                results.append(measure(name, mirror, {**sets, **({"seed": seed} if seed is not None else {})}))
                results[-1]["seed"] = seed
                print_run(results[-1])
        if args.seeds:
            table, worse = seed_table(results)
            print("\n## value-free overall CV RMSE per seed (test columns reported only)")
            print(table.to_string(index=False, float_format=lambda x: f"{x:.3f}"))
            for run, cols in worse.items():
                print(f"{run}: worse than {results[0]['name']} on every seed in {', '.join(cols) or 'no CV column'}")
    print(f"\nload average {os.getloadavg()[0]:.2f} at the end")
    if args.json:
        Path(args.json).write_text(json.dumps(results, indent=1, default=float))


if __name__ == "__main__":
    main()
