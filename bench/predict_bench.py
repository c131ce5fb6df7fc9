"""Batch prediction throughput and peak memory on inputs built from the dwpka SMILES.

    python bench/predict_bench.py [--sizes 10000 100000] [--jobs 2] [--mirror DIR]

Prints molecules/s (sites, features, intervals and domain included) and peak RSS of the
parent and of the worker processes. Targets: >= 300 molecules/s on 2 cores; < 2 GB at 100k.
"""
from __future__ import annotations

import argparse
import os
import resource
import tempfile
import time
from pathlib import Path

import pandas as pd

from pkasite.pipeline.batch import run_batch
from pkasite.pipeline.predict import default_model_path


def dwpka_smiles(mirror: Path) -> list[str]:
    frames = [pd.read_csv(f, dtype=str) for f in sorted((mirror / "dwpka").glob("*.csv"))]
    return pd.concat(frames)["OriginalSmiles"].dropna().tolist()


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--sizes", type=int, nargs="+", default=[10_000, 100_000])
    ap.add_argument("--jobs", type=int, default=2)
    ap.add_argument("--chunk-size", type=int, default=1000)
    ap.add_argument("--mirror", default=os.environ.get("PKASITE_MIRROR", Path(__file__).resolve().parents[2] / "shared" / "data"))
    args = ap.parse_args()
    pool = dwpka_smiles(Path(args.mirror))
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for n in args.sizes:
            path = Path(tmp) / f"in_{n}.csv"
            pd.DataFrame({"id": [f"m{i}" for i in range(n)],
                          "smiles": [pool[i % len(pool)] for i in range(n)]}).to_csv(path, index=False)
            out = Path(tmp) / f"out_{n}.parquet"
            t0 = time.monotonic()
            res = run_batch(path, out, default_model_path(), sites_out=Path(tmp) / f"sites_{n}.parquet",
                            jobs=args.jobs, chunk_size=args.chunk_size, progress=False)
            dt = time.monotonic() - t0
            parent = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
            child = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
            rows.append((n, res.rows, dt, res.rows / dt, parent, child))
    print(f"{'molecules':>10} {'rows out':>9} {'seconds':>8} {'mol/s':>7} {'parent MB':>10} {'worker MB':>10}")
    for n, out_rows, dt, rate, parent, child in rows:
        print(f"{n:>10} {out_rows:>9} {dt:>8.1f} {rate:>7.0f} {parent:>10.0f} {child:>10.0f}")
    print(f"jobs={args.jobs} chunk_size={args.chunk_size}; peak RSS is per process (max over the run)")


if __name__ == "__main__":
    main()
