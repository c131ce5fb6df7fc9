"""Predicted values of the shipped model on a fixed sample, for refactors that must not move them.

    python bench/shipped_values.py --write     # after rebuilding the shipped model (build_shipped_model.sh does it)
    python bench/shipped_values.py             # compare today's predictions with tests/data/shipped_values.csv

Sample: every 20th distinct SMILES (sorted) of the open data mirror's dwpka files, read at run time (the
open data is never copied into the project: the reference file keeps only row numbers and predicted
values).  Compared: each molecule's status and constants and each site's type and value, numbers to
1e-9.  tests/pipeline/test_shipped_values.py runs the comparison; a deliberate change of values
(a bug fix, a retrained model) rewrites the file with --write in the same commit.
"""
from __future__ import annotations

import argparse
import os
import sys
from pathlib import Path

import pandas as pd

REPO = Path(__file__).resolve().parents[1]
REFERENCE = REPO / "tests" / "data" / "shipped_values.csv"
STEP = 20
MOLECULE_COLUMNS = ["status", "acid_pka", "base_pka", "charge_at_ph", "fraction_neutral", "isoelectric_ph",
                    "macro_pkas_all"]
SITE_COLUMNS = ["atom", "site_type", "kind", "pka", "pka_low", "pka_high", "similarity"]


def sample_smiles(mirror: Path) -> list[str]:
    frames = [pd.read_csv(f, dtype=str) for f in sorted((Path(mirror) / "dwpka").glob("*.csv"))]
    col = "OriginalSmiles"
    smiles = sorted({s for f in frames if col in f for s in f[col].dropna()})
    return smiles[::STEP]


def predicted_values(mirror: Path) -> pd.DataFrame:
    """One row per site (a molecule without sites keeps one row with an empty site), keyed by sample row."""
    from pkasite.pipeline.bundle import load_bundle
    from pkasite.pipeline.predict import default_model_path, predict_records

    smiles = sample_smiles(mirror)
    ids = [f"s{i}" for i in range(len(smiles))]
    mols, sites = predict_records(load_bundle(default_model_path(), with_tables=False), ids, smiles)
    mols = mols[["id", *MOLECULE_COLUMNS]]
    sites = sites[["id", *SITE_COLUMNS]]
    out = mols.merge(sites, on="id", how="left")
    return out.sort_values(["id", "atom", "kind"], key=lambda c: c.map(_key) if c.name == "id" else c,
                           na_position="first").reset_index(drop=True)


def _key(value: str) -> int:
    return int(value[1:])


def library_versions() -> str:
    """The versions that decide the values besides our code (RDKit perception, LightGBM, NumPy)."""
    from importlib import metadata
    return " ".join(f"{name}={metadata.version(name)}" for name in ("rdkit", "lightgbm", "numpy"))


def read_reference(path: Path = REFERENCE) -> tuple[pd.DataFrame, str]:
    """The reference table and the library versions it was written with (its first line)."""
    with open(path, encoding="utf-8") as fh:
        first = fh.readline()
    versions = first[1:].strip() if first.startswith("#") else ""
    return pd.read_csv(path, comment="#"), versions


def differences(now: pd.DataFrame, ref: pd.DataFrame, tol: float = 1e-9) -> list[str]:
    """Human-readable differences between two value tables (empty: the same to ``tol``)."""
    if list(now.columns) != list(ref.columns):
        return [f"columns differ: {list(now.columns)} vs {list(ref.columns)}"]
    if len(now) != len(ref):
        return [f"{len(now)} rows now, {len(ref)} in the reference"]
    problems = []
    for col in now.columns:
        a, b = now[col], ref[col]
        if pd.api.types.is_numeric_dtype(a) and pd.api.types.is_numeric_dtype(b):
            bad = ~(((a - b).abs() <= tol) | (a.isna() & b.isna()))
        else:
            bad = a.fillna("").astype(str) != b.fillna("").astype(str)
        for r in bad[bad].index[:5]:
            problems.append(f"row {r} ({now['id'].iat[r]}) {col}: {a.iat[r]} now, {b.iat[r]} before")
    return problems


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--mirror", default=os.environ.get("PKASITE_MIRROR", REPO.parent / "shared" / "data"))
    ap.add_argument("--write", action="store_true", help="rewrite the reference file")
    args = ap.parse_args()
    now = predicted_values(Path(args.mirror))
    if args.write:
        with open(REFERENCE, "w", encoding="utf-8", newline="") as fh:
            fh.write(f"# {library_versions()}\n")
            now.to_csv(fh, index=False, float_format="%.12g")
        print(f"wrote {len(now)} rows to {REFERENCE}")
        return
    ref, versions = read_reference()
    if versions != library_versions():
        print(f"note: reference written with {versions}, installed {library_versions()}")
    problems = differences(now, ref)
    print("\n".join(problems) if problems else f"{len(now)} rows: the same values")
    sys.exit(1 if problems else 0)


if __name__ == "__main__":
    main()
