"""Batch prediction: stream an input file in chunks through worker processes into output tables.

Every input row gives one output row, in input order.  Each finished chunk is
written to ``<output>.parts/`` first, so an interrupted run resumes from the
last finished chunk; the final tables are assembled (streaming, under a
temporary name) only when every chunk is done.  Memory stays bounded by the
chunk size, not the input size.
"""
from __future__ import annotations

import hashlib
import json
import multiprocessing
import os
import shutil
import sys
import time
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import Iterator

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
from rdkit import Chem

from .bundle import ModelBundle, load_bundle, verify_bundle
from .ingest import InputFileError
from .predict import MOLECULE_COLUMNS, SITE_COLUMNS, predict_records
from .tables import TABLE_FORMATS

SMILES_NAMES = ("smiles", "smi", "canonical_smiles", "structure", "mol_smiles")
ID_NAMES = ("id", "name", "compound", "compound_id", "mol_id", "identifier")
INPUT_FORMATS = (".csv", ".tsv", ".txt", ".smi", ".sdf", ".parquet")


# ----------------------------------------------------------------------------- reading

def _pick(columns, wanted, explicit, what, path) -> str | None:
    if explicit:
        if explicit not in columns:
            raise InputFileError(f"{path}: no column {explicit!r} (columns: {', '.join(map(str, columns))})")
        return explicit
    lower = {str(c).strip().lower(): c for c in columns}
    for name in wanted:
        if name in lower:
            return lower[name]
    if what == "SMILES":
        raise InputFileError(f"{path}: no SMILES column found (looked for {', '.join(wanted)}); "
                             "name it with --smiles-col")
    return None


def _table_chunks(path: Path, chunk: int, smiles_col, id_col) -> Iterator[pd.DataFrame]:
    sep = "\t" if path.suffix.lower() in (".tsv", ".txt") else ","
    try:
        reader = pd.read_csv(path, sep=sep, dtype=str, keep_default_na=False, chunksize=chunk)
        s_col = i_col = None
        rows = 0
        for df in reader:
            if s_col is None:
                s_col = _pick(df.columns, SMILES_NAMES, smiles_col, "SMILES", path)
                i_col = _pick(df.columns, ID_NAMES, id_col, "id", path)
            if len(df):
                rows += len(df)
                yield pd.DataFrame({"smiles": df[s_col].to_numpy(), "id": df[i_col].to_numpy() if i_col else None})
        if rows == 0:
            raise InputFileError(f"{path}: the file has a header but no rows")
    except pd.errors.EmptyDataError:
        raise InputFileError(f"{path}: the file is empty") from None
    except (pd.errors.ParserError, UnicodeDecodeError) as exc:
        raise InputFileError(f"{path}: not a readable {sep!r}-separated table ({exc})") from None


def _smi_chunks(path: Path, chunk: int) -> Iterator[pd.DataFrame]:
    rows = []
    with open(path, encoding="utf-8", errors="replace") as fh:
        for line in fh:
            parts = line.strip().split(None, 1)
            rows.append((parts[0] if parts else "", parts[1].strip() if len(parts) > 1 else None))
            if len(rows) == chunk:
                yield pd.DataFrame(rows, columns=["smiles", "id"])
                rows = []
    if rows:
        yield pd.DataFrame(rows, columns=["smiles", "id"])


def _sdf_chunks(path: Path, chunk: int, id_col) -> Iterator[pd.DataFrame]:
    rows = []
    with open(path, "rb") as fh:
        for mol in Chem.ForwardSDMolSupplier(fh, sanitize=True):
            if mol is None:
                rows.append(("", None))  # the record is kept; predict reports it as empty/unreadable
            else:
                rid = mol.GetProp(id_col) if id_col and mol.HasProp(id_col) else (
                    mol.GetProp("_Name") if mol.HasProp("_Name") and mol.GetProp("_Name").strip() else None)
                rows.append((Chem.MolToSmiles(mol), rid))
            if len(rows) == chunk:
                yield pd.DataFrame(rows, columns=["smiles", "id"])
                rows = []
    if rows:
        yield pd.DataFrame(rows, columns=["smiles", "id"])


def _parquet_chunks(path: Path, chunk: int, smiles_col, id_col) -> Iterator[pd.DataFrame]:
    try:
        pf = pq.ParquetFile(path)
    except (pa.ArrowInvalid, OSError) as exc:
        raise InputFileError(f"{path}: not a readable parquet file ({exc})") from None
    names = pf.schema_arrow.names
    s_col = _pick(names, SMILES_NAMES, smiles_col, "SMILES", path)
    i_col = _pick(names, ID_NAMES, id_col, "id", path)
    for batch in pf.iter_batches(batch_size=chunk, columns=[c for c in (s_col, i_col) if c]):
        df = batch.to_pandas()
        yield pd.DataFrame({"smiles": df[s_col].to_numpy(), "id": df[i_col].astype(str).to_numpy() if i_col else None})


def read_chunks(path: Path, chunk: int, smiles_col: str | None = None, id_col: str | None = None) -> Iterator[pd.DataFrame]:
    """Chunks with columns ``smiles`` and ``id`` (missing ids become ``row<N>``)."""
    path = Path(path)
    if not path.is_file():
        raise InputFileError(f"{path}: no such file")
    suffix = path.suffix.lower()
    if suffix not in INPUT_FORMATS:
        raise InputFileError(f"{path}: unknown input format {suffix!r}; use one of {', '.join(INPUT_FORMATS)}")
    if path.stat().st_size == 0:
        raise InputFileError(f"{path}: the file is empty")
    if suffix == ".smi":
        source = _smi_chunks(path, chunk)
    elif suffix == ".sdf":
        source = _sdf_chunks(path, chunk, id_col)
    elif suffix == ".parquet":
        source = _parquet_chunks(path, chunk, smiles_col, id_col)
    else:
        source = _table_chunks(path, chunk, smiles_col, id_col)
    start = 0
    for df in source:
        rows = range(start + 1, start + len(df) + 1)
        ids = df["id"] if df["id"] is not None else pd.Series([None] * len(df))
        df["id"] = [str(i) if i is not None and str(i).strip() else f"row{r}" for i, r in zip(ids, rows)]
        df["row"] = list(rows)
        start += len(df)
        yield df


# ----------------------------------------------------------------------------- workers

_BUNDLE: ModelBundle | None = None


def _init_worker(bundle_path: str) -> None:
    global _BUNDLE
    from rdkit import RDLogger
    RDLogger.DisableLog("rdApp.*")
    _BUNDLE = load_bundle(Path(bundle_path))


def _run_chunk(args) -> tuple[int, int]:
    index, df, ph, parts, want_sites, explain, window = args
    mols, sites = predict_records(_BUNDLE, df["id"].tolist(), df["smiles"].tolist(), ph=ph, explain=explain,
                                  window=window)
    mols.insert(0, "row", df["row"].to_numpy())
    _write_part(mols, parts / f"mol_{index:06d}.parquet")
    if want_sites:
        _write_part(sites, parts / f"site_{index:06d}.parquet")
    return index, len(df)


def _write_part(df: pd.DataFrame, path: Path) -> None:
    tmp = path.with_suffix(".part")
    df.to_parquet(tmp, index=False)
    os.replace(tmp, path)


# ----------------------------------------------------------------------------- orchestration

@dataclass
class BatchResult:
    rows: int
    seconds: float
    output: Path
    sites: Path | None
    resumed_chunks: int
    status_counts: dict


def _run_key(input_path: Path, bundle_path: Path, ph: float, chunk: int, want_sites, window=None) -> str:
    st = input_path.stat()
    manifest = (Path(bundle_path) / "manifest.json").read_bytes()
    text = json.dumps([str(input_path.resolve()), st.st_size, st.st_mtime_ns, ph, chunk, want_sites, window,
                       hashlib.sha256(manifest).hexdigest()])
    return hashlib.sha256(text.encode()).hexdigest()


class Progress:
    def __init__(self, enabled: bool):
        self.enabled, self.t0, self.rows = enabled, time.monotonic(), 0

    def update(self, n: int, chunks_done: int) -> None:
        self.rows += n
        if self.enabled:
            dt = time.monotonic() - self.t0
            rate = self.rows / dt if dt > 0 else 0.0
            print(f"\r{self.rows} rows, {chunks_done} chunks, {rate:.0f} rows/s, {dt:.0f} s", end="", file=sys.stderr)

    def close(self) -> None:
        if self.enabled:
            print(file=sys.stderr)


_FLOAT = ("acid_pka", "acid_pka_low", "acid_pka_high", "base_pka", "base_pka_low", "base_pka_high", "charge_at_ph",
          "isoelectric_ph", "fraction_neutral", "pka", "pka_low", "pka_high", "similarity")


def _arrow_schema(columns: list[str]) -> pa.Schema:
    def kind(c):
        if c in _FLOAT:
            return pa.float64()
        if c == "in_domain":
            return pa.bool_()
        if c in ("atom", "row"):
            return pa.int64()
        return pa.string()
    return pa.schema([(c, kind(c)) for c in columns])


def _assemble(parts: Path, prefix: str, columns: list[str], target: Path) -> None:
    """Concatenate part files in chunk order into ``target`` (format from its extension), streaming."""
    files = sorted(parts.glob(f"{prefix}_*.parquet"))
    suffix = target.suffix.lower()
    tmp = target.with_name(f".{target.name}.part")
    target.parent.mkdir(parents=True, exist_ok=True)
    schema = _arrow_schema(columns)
    try:
        if suffix == ".parquet":
            with pq.ParquetWriter(tmp, schema) as writer:
                for f in files:
                    df = pd.read_parquet(f)[columns]
                    writer.write_table(pa.Table.from_pandas(df, schema=schema, preserve_index=False))
        else:
            sep = "\t" if suffix == ".tsv" else ","
            with open(tmp, "w", newline="") as fh:
                fh.write(sep.join(columns) + "\n")
                for f in files:
                    pd.read_parquet(f)[columns].to_csv(fh, sep=sep, header=False, index=False)
        os.replace(tmp, target)
    finally:
        if tmp.exists():
            tmp.unlink()


def run_batch(input_path: Path, output: Path, bundle_path: Path, sites_out: Path | None = None, ph: float = 7.4,
              jobs: int = 1, chunk_size: int = 1000, smiles_col: str | None = None, id_col: str | None = None,
              progress: bool = True, explain: bool = False, window: tuple[float, float] = (0.0, 14.0)) -> BatchResult:
    """Predict every row of ``input_path`` into ``output`` (and per-site rows into ``sites_out``).

    ``window``: the pH range whose macroscopic constants are listed in ``macro_pkas``."""
    input_path, output = Path(input_path), Path(output)
    for target in (output, sites_out):
        if target is not None and Path(target).suffix.lower() not in TABLE_FORMATS:
            raise InputFileError(f"{target}: unknown output format; use one of {', '.join(TABLE_FORMATS)}")
    if chunk_size < 1 or jobs < 1:
        raise ValueError("--chunk-size and --jobs must be at least 1")
    verify_bundle(bundle_path)  # hashes checked once in the parent: a tampered bundle stops here
    t0 = time.monotonic()
    parts = output.with_name(output.name + ".parts")
    window = (float(window[0]), float(window[1]))
    key = _run_key(input_path, bundle_path, ph, chunk_size, (sites_out is not None, explain), list(window))
    key_file = parts / "run.json"
    if parts.exists() and (not key_file.is_file() or json.loads(key_file.read_text()).get("key") != key):
        shutil.rmtree(parts)  # left by a run with other inputs or settings: start over
    parts.mkdir(parents=True, exist_ok=True)
    key_file.write_text(json.dumps({"key": key}))
    done = {int(p.stem.split("_")[1]) for p in parts.glob("mol_*.parquet")}
    if sites_out is not None:
        done &= {int(p.stem.split("_")[1]) for p in parts.glob("site_*.parquet")}
    bar = Progress(progress)
    resumed = 0
    chunks = read_chunks(input_path, chunk_size, smiles_col, id_col)
    want_sites = sites_out is not None

    def tasks():
        nonlocal resumed
        for index, df in enumerate(chunks):
            if index in done:
                resumed += 1
                bar.update(len(df), index + 1)
                continue
            yield index, df, ph, parts, want_sites, explain, window

    if jobs == 1:
        _init_worker(str(bundle_path))
        for i, n in map(_run_chunk, tasks()):
            bar.update(n, i + 1)
    else:
        # spawn, not fork: LightGBM's OpenMP threads in the parent make forked workers deadlock
        ctx = multiprocessing.get_context("spawn")
        with ProcessPoolExecutor(max_workers=jobs, mp_context=ctx, initializer=_init_worker,
                                 initargs=(str(bundle_path),)) as pool:
            pending = []
            for task in tasks():
                pending.append(pool.submit(_run_chunk, task))
                while len(pending) >= 2 * jobs:  # bounded queue keeps memory flat
                    i, n = pending.pop(0).result()
                    bar.update(n, i + 1)
            for fut in pending:
                i, n = fut.result()
                bar.update(n, i + 1)
    bar.close()
    _assemble(parts, "mol", MOLECULE_COLUMNS, output)
    if sites_out is not None:
        _assemble(parts, "site", SITE_COLUMNS + (["explanation"] if explain else []), Path(sites_out))
    counts = {}
    total = 0
    for f in sorted(parts.glob("mol_*.parquet")):
        s = pd.read_parquet(f, columns=["status"])["status"].value_counts()
        total += int(s.sum())
        for k, v in s.items():
            counts[k] = counts.get(k, 0) + int(v)
    shutil.rmtree(parts)
    return BatchResult(total, time.monotonic() - t0, output, Path(sites_out) if sites_out else None, resumed, counts)
