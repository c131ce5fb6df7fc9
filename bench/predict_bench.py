"""Batch prediction throughput and peak memory, against a plain RDKit loop on the same SMILES.

    python bench/predict_bench.py [--sizes 10000 100000 1000000] [--jobs 1 2] [--profile N]

Inputs are built from the open-data SMILES (dwpka, all four files) repeated with unique ids.  Each
`pkasite predict` run (sites, features, intervals, domain, microstates; per-site table written too)
runs in a fresh process so its peak RSS (parent and workers) is its own.  The reference is a
single-core loop that parses each SMILES with RDKit and computes a Morgan count fingerprint
(radius 2, 2048 bits), measured in the same run; the ratio of the two rates is the figure to quote
(target: prediction with 2 workers at least 40% of the single-core loop).

`--profile N` profiles prediction of N molecules in one process and prints the top functions.
Run on an otherwise idle machine (`uptime`).
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

import pandas as pd

REPO = Path(__file__).resolve().parents[1]


def dwpka_smiles(mirror: Path) -> list[str]:
    frames = [pd.read_csv(f, dtype=str) for f in sorted((mirror / "dwpka").glob("*.csv"))]
    return pd.concat(frames)["OriginalSmiles"].dropna().tolist()


def write_input(pool: list[str], n: int, path: Path) -> None:
    with open(path, "w") as fh:
        fh.write("id,smiles\n")
        for i in range(n):
            fh.write(f"m{i},{pool[i % len(pool)]}\n")


def rdkit_rate(pool: list[str], n: int = 5000) -> float:
    """Molecules/s of a single-core parse + Morgan count fingerprint loop."""
    from rdkit import Chem, RDLogger
    from rdkit.Chem import rdFingerprintGenerator
    RDLogger.DisableLog("rdApp.*")
    gen = rdFingerprintGenerator.GetMorganGenerator(radius=2, fpSize=2048)
    smiles = [pool[i % len(pool)] for i in range(n)]
    t0 = time.monotonic()
    for s in smiles:
        mol = Chem.MolFromSmiles(s)
        if mol is not None:
            gen.GetCountFingerprintAsNumPy(mol)
    return n / (time.monotonic() - t0)


def one_run(path: Path, jobs: int, chunk: int, out_json: Path) -> None:
    from pkasite.pipeline.batch import run_batch
    from pkasite.pipeline.predict import default_model_path
    out = path.with_suffix(".out.parquet")
    t0 = time.monotonic()
    res = run_batch(path, out, default_model_path(), sites_out=path.with_suffix(".sites.parquet"), jobs=jobs,
                    chunk_size=chunk, progress=False)
    dt = time.monotonic() - t0
    out_json.write_text(json.dumps({
        "rows": res.rows, "seconds": dt, "rate": res.rows / dt,
        "parent_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
        "worker_mb": resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024}))


def profile(pool: list[str], n: int, top: int = 25) -> None:
    import cProfile
    import pstats

    from pkasite.pipeline.bundle import load_bundle
    from pkasite.pipeline.predict import default_model_path, predict_records
    bundle = load_bundle(default_model_path())
    smiles = [pool[i % len(pool)] for i in range(n)]
    predict_records(bundle, ["w"], smiles[:1])
    pr = cProfile.Profile()
    pr.enable()
    predict_records(bundle, [str(i) for i in range(n)], smiles)
    pr.disable()
    pstats.Stats(pr).sort_stats("tottime").print_stats(top)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--sizes", type=int, nargs="+", default=[10_000, 100_000, 1_000_000])
    ap.add_argument("--jobs", type=int, nargs="+", default=[1, 2])
    ap.add_argument("--chunk-size", type=int, default=1000)
    ap.add_argument("--profile", type=int, metavar="N", help="profile prediction of N molecules instead")
    ap.add_argument("--mirror", default=os.environ.get("PKASITE_MIRROR", REPO.parent / "shared" / "data"))
    ap.add_argument("--one", nargs=4, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.one:
        one_run(Path(args.one[0]), int(args.one[1]), int(args.one[2]), Path(args.one[3]))
        return
    pool = dwpka_smiles(Path(args.mirror))
    if args.profile:
        profile(pool, args.profile)
        return
    print(f"machine: {os.cpu_count()} cores, load average {os.getloadavg()[0]:.2f} at start")
    reference = rdkit_rate(pool)
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for n in args.sizes:
            path = Path(tmp) / f"in_{n}.csv"
            write_input(pool, n, path)
            for jobs in args.jobs:
                res_path = Path(tmp) / f"res_{n}_{jobs}.json"
                subprocess.run([sys.executable, __file__, "--one", str(path), str(jobs), str(args.chunk_size),
                                str(res_path)], check=True)
                r = json.loads(res_path.read_text())
                rows.append({"molecules": n, "jobs": jobs, "seconds": round(r["seconds"], 1),
                             "mol/s": round(r["rate"]), "ratio to RDKit loop": f"{r['rate'] / reference:.0%}",
                             "parent MB": round(r["parent_mb"]), "largest worker MB": round(r["worker_mb"])})
                print(rows[-1], file=sys.stderr, flush=True)
            path.unlink()
    print(f"RDKit parse + Morgan count fingerprint, one core: {reference:.0f} molecules/s")
    print(pd.DataFrame(rows).to_string(index=False))
    print(f"chunk size {args.chunk_size}; peak RSS per process (max over the run); load average "
          f"{os.getloadavg()[0]:.2f} at the end")


if __name__ == "__main__":
    main()
