"""Throughput of site perception + site featurization on the DW pKa SMILES.

Usage:
    python bench/features_bench.py [--mirror DIR] [--limit N] [--repeat K]

Reads the ``Canonical_QSARr`` column of every ``*.csv`` in the data directory
(``--mirror DIR``, else ``$PKASITE_MIRROR``, else ``../shared/data/dwpka`` next to
the repository).  Sites come from ``pkasite.features.sites.find_sites`` when that
module is importable; otherwise every N or O atom carrying a hydrogen stands in
as a site (timing only).  Prints one small table; single process, one core.
"""
from __future__ import annotations

import argparse
import csv
import os
import resource
import sys
import time
from pathlib import Path

from rdkit import Chem, RDLogger

from pkasite.features.site_features import FeatureSettings, featurize_sites, site_feature_names

DEFAULT_DIR = Path(__file__).resolve().parents[1].parent / "shared" / "data" / "dwpka"
SMILES_COLUMN = "Canonical_QSARr"


def read_smiles(directory: Path) -> list[str]:
    files = sorted(directory.glob("*.csv"))
    if not files:
        raise SystemExit(f"no *.csv files in {directory}; pass --mirror DIR or set PKASITE_MIRROR")
    out: list[str] = []
    for f in files:
        with f.open(newline="", encoding="utf-8") as fh:
            reader = csv.DictReader(fh)
            if SMILES_COLUMN not in (reader.fieldnames or []):
                raise SystemExit(f"{f}: no column {SMILES_COLUMN!r} (columns: {reader.fieldnames})")
            out.extend(row[SMILES_COLUMN] for row in reader if row[SMILES_COLUMN])
    return out


def _site_finder():
    try:
        from pkasite.features.sites import find_sites  # noqa: PLC0415
    except ImportError:
        find_sites = None

    if find_sites is not None:
        def sites(mol):
            return [(mol, s.atom, s.kind, s.type) for s in find_sites(mol)], "find_sites"
    else:
        def sites(mol):
            return [
                (mol, a.GetIdx(), "acid", "stand_in")
                for a in mol.GetAtoms()
                if a.GetAtomicNum() in (7, 8) and a.GetTotalNumHs() > 0
            ], "stand-in (N/O with H)"
    return sites


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--mirror", type=Path, default=None, help="directory holding the *.csv files")
    ap.add_argument("--limit", type=int, default=0, help="use only the first N molecules")
    ap.add_argument("--repeat", type=int, default=1, help="repeat the timed pass K times, report the best")
    ap.add_argument("--chunk", type=int, default=256, help="molecules per featurize_sites call")
    args = ap.parse_args(argv)
    directory = args.mirror or Path(os.environ.get("PKASITE_MIRROR") or DEFAULT_DIR)

    RDLogger.DisableLog("rdApp.*")
    smiles = read_smiles(directory)
    if args.limit:
        smiles = smiles[: args.limit]
    t0 = time.perf_counter()
    mols = [m for m in (Chem.MolFromSmiles(s) for s in smiles) if m is not None]
    t_parse = time.perf_counter() - t0
    sites = _site_finder()
    settings = FeatureSettings()
    names = site_feature_names(settings, [])

    best = None  # (total, perception, features) of the fastest pass
    source = "-"
    for _ in range(max(1, args.repeat)):
        n_sites = 0
        t_sites = t_feat = 0.0
        for i in range(0, len(mols), args.chunk):
            t0 = time.perf_counter()
            items = []
            for m in mols[i : i + args.chunk]:
                found, source = sites(m)
                items.extend(found)
            t1 = time.perf_counter()
            X = featurize_sites(items, settings, [])
            t_feat += time.perf_counter() - t1
            t_sites += t1 - t0
            n_sites += X.shape[0]
        run = (t_sites + t_feat, t_sites, t_feat)
        best = run if best is None or run[0] < best[0] else best
    total, t_sites, t_feat = best

    peak_kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # kilobytes on Linux
    rows = [
        ("data", str(directory)),
        ("sites from", source),
        ("molecules", f"{len(mols)} parsed of {len(smiles)} ({t_parse:.2f} s parse, not timed)"),
        ("sites", str(n_sites)),
        ("features per site", str(len(names))),
        ("time sites / features", f"{t_sites:.2f} s / {t_feat:.2f} s"),
        ("molecules/s (sites+features)", f"{len(mols) / total:.0f}"),
        ("molecules/s (features only)", f"{len(mols) / t_feat:.0f}"),
        ("sites/s (sites+features)", f"{n_sites / total:.0f}"),
        ("peak RSS", f"{peak_kb / 1024:.0f} MiB"),
    ]
    w = max(len(k) for k, _ in rows)
    for k, v in rows:
        print(f"{k:<{w}}  {v}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
