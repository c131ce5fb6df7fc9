"""Batch prediction: stream an input file in chunks through worker processes into output tables.

Every input row gives one output row, in input order.  Rows are predicted in worker processes
(:mod:`pkasite.pipeline.isolation`): a molecule that crashes or hangs its worker becomes a row with
status ``crashed`` or ``timeout`` and the run goes on.  Each finished chunk is written to
``<output>.parts/`` first, so an interrupted run resumes from the last finished chunk; the final
tables are assembled (streaming, under a temporary name inside that folder) only when every chunk is
done.  Memory stays bounded by the chunk size, not the input size (plus about 100 bytes per distinct
id, kept to warn about duplicate ids across the whole run).
"""
from __future__ import annotations

import codecs
import csv
import hashlib
import json
import re
import shutil
import sys
import time
from collections import deque
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterator

import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq

from .bundle import verify_bundle
from .ingest import InputFileError, sniff_delimiter
from .isolation import DEFAULT_MOL_TIMEOUT, IsolatedPredictor
from .predict import MOLECULE_COLUMNS, SITE_COLUMNS, MAX_RECORD_CHARS, SeenIds, echo_text, fill_id, text_problem
from .tables import TABLE_FORMATS

SMILES_NAMES = ("smiles", "smi", "canonical_smiles", "structure", "mol_smiles")
ID_NAMES = ("id", "name", "compound", "compound_id", "mol_id", "identifier")
INPUT_FORMATS = (".csv", ".tsv", ".txt", ".smi", ".sdf", ".parquet")
MAX_FIELD_CHARS = 64 * 1024 * 1024  # a longer CSV field is not read; its row is too_large


# ----------------------------------------------------------------------------- reading

@dataclass
class Chunk:
    """Rows ``rows`` (1-based input row numbers) of one input file, ready to predict."""
    index: int
    rows: list[int]
    ids: list[str]
    inputs: list[str]                 # SMILES, or SDF records when fmt == "molblock"
    problems: list[tuple[str, str] | None]
    duplicate_of: list[int | None] = field(default_factory=list)
    fmt: str = "smiles"


def pick_column(columns, wanted, explicit, what, path) -> str | None:
    """The input column holding ``what``: ``explicit`` if given, else the first of ``wanted`` (any case)."""
    if explicit:
        if explicit not in columns:
            raise InputFileError(f"{path}: no column {explicit!r} (columns: {', '.join(map(str, columns))})")
        return explicit
    lower = {str(c).strip().lower(): c for c in columns}
    for name in wanted:
        if name in lower:
            return lower[name]
    if what == "SMILES":
        raise InputFileError(f"{path}: no SMILES column found in the header {', '.join(map(str, columns))!r} "
                             f"(looked for {', '.join(wanted)}); name it with --smiles-col, or give the "
                             "delimiter with --sep")
    return None


def _decoded_lines(path: Path, encoding: str) -> Iterator[str]:
    """The file's lines decoded with ``encoding``; a line that does not decode stops with its number."""
    name = codecs.lookup(encoding).name
    decoder = codecs.getincrementaldecoder("utf-8-sig" if name == "utf-8" else name)()
    with open(path, "rb") as fh:
        for number, raw in enumerate(fh, 1):
            try:
                yield decoder.decode(raw)
            except UnicodeDecodeError as exc:
                raise InputFileError(
                    f"{path}: line {number} is not valid {encoding} (byte {raw[exc.start]:#04x} at column "
                    f"{exc.start + 1}); give the file's encoding with --encoding, e.g. --encoding latin-1") from None


# A row is (input, id, problem): problem is None or a (status, message) known before parsing.

def _table_rows(path: Path, smiles_col, id_col, encoding: str, sep: str | None) -> Iterator[tuple]:
    lines = _decoded_lines(path, encoding)
    first = next(lines, None)
    if first is None or not first.strip():
        raise InputFileError(f"{path}: the file is empty" if first is None else f"{path}: the first line is blank; "
                             "it must be the header row")
    delimiter = sep or ("\t" if path.suffix.lower() in (".tsv", ".txt") else sniff_delimiter(first))
    csv.field_size_limit(MAX_FIELD_CHARS)
    reader = csv.reader(_chain([first], lines), delimiter=delimiter)
    header = next(reader)
    s_idx = header.index(pick_column(header, SMILES_NAMES, smiles_col, "SMILES", path))
    i_col = pick_column(header, ID_NAMES, id_col, "id", path)
    i_idx = header.index(i_col) if i_col is not None else None
    rows = 0
    while True:
        line = reader.line_num + 1
        try:
            fields = next(reader)
        except StopIteration:
            break
        except csv.Error as exc:
            status = "too_large" if "field larger" in str(exc) else "unreadable_row"
            yield "", None, (status, f"line {line} cannot be read as a {delimiter!r}-separated row ({exc})")
            rows += 1
            continue
        rows += 1
        if not fields or (len(fields) == 1 and not fields[0].strip() and len(header) > 1):
            yield "", None, None  # a blank line: an empty row
        elif len(fields) > len(header) or s_idx >= len(fields):  # shown as read, to find it in the file
            yield delimiter.join(fields), None, ("unreadable_row", f"line {line} has {len(fields)} field(s), the header has "
                                               f"{len(header)}; quote fields that contain {delimiter!r}")
        else:
            yield fields[s_idx], fields[i_idx] if i_idx is not None and i_idx < len(fields) else None, None
    if rows == 0:
        raise InputFileError(f"{path}: the file has a header but no rows")


def _chain(first: list[str], rest: Iterator[str]) -> Iterator[str]:
    yield from first
    yield from rest


def _smi_rows(path: Path, encoding: str) -> Iterator[tuple]:
    for line in _decoded_lines(path, encoding):
        parts = line.strip().split(None, 1)
        yield (parts[0] if parts else ""), (parts[1].strip() if len(parts) > 1 else None), None


_SDF_ITEM = re.compile(r"^>.*?<([^>]*)>")


def _sdf_rows(path: Path, id_col, encoding: str) -> Iterator[tuple]:
    """SDF records as text (parsed in the workers): the connection table up to ``M  END`` and the id
    (data item ``id_col``, else the title line).  A record larger than the limit is not kept in memory."""
    block, size, props, item, in_block = [], 0, {}, None, True

    def record():
        title = block[0].strip() if block else ""
        rid = props.get(id_col) if id_col and props.get(id_col) else (title or None)
        if size > MAX_RECORD_CHARS:
            return "", rid, ("too_large", f"SDF record of more than {MAX_RECORD_CHARS} characters")
        return "".join(block), rid, None

    started = False
    for line in _decoded_lines(path, encoding):
        started = started or bool(line.strip())
        if line.rstrip("\r\n") == "$$$$":
            yield record()
            block, size, props, item, in_block, started = [], 0, {}, None, True, False
            continue
        if in_block:
            size += len(line)
            if size <= MAX_RECORD_CHARS:
                block.append(line)
            if line.startswith("M  END"):
                in_block = False
        elif (match := _SDF_ITEM.match(line)) is not None:
            item = match.group(1)
            props[item] = None
        elif item is not None:
            if line.strip():
                props[item] = line.rstrip("\r\n") if props[item] is None else f"{props[item]}\n{line.rstrip()}"
            else:
                item = None
    if started:  # a last record without its $$$$ line
        yield record()


def _parquet_rows(path: Path, smiles_col, id_col) -> Iterator[tuple]:
    try:
        pf = pq.ParquetFile(path)
    except (pa.ArrowInvalid, OSError) as exc:
        raise InputFileError(f"{path}: not a readable parquet file ({exc})") from None
    names = pf.schema_arrow.names
    s_col = pick_column(names, SMILES_NAMES, smiles_col, "SMILES", path)
    i_col = pick_column(names, ID_NAMES, id_col, "id", path)
    rows = 0
    for batch in pf.iter_batches(batch_size=10_000, columns=[c for c in (s_col, i_col) if c]):
        smiles = batch.column(s_col).to_pylist()
        ids = batch.column(i_col).to_pylist() if i_col else [None] * len(smiles)
        for s, i in zip(smiles, ids):
            rows += 1
            yield ("" if s is None else s if isinstance(s, str) else str(s)), i, None
    if rows == 0:
        raise InputFileError(f"{path}: the file has no rows")


def read_chunks(path: Path, chunk: int, smiles_col: str | None = None, id_col: str | None = None,
                encoding: str = "utf-8", sep: str | None = None, seen: SeenIds | None = None) -> Iterator[Chunk]:
    """Chunks of input rows, numbered from 1 in file order.  Missing ids become ``row<N>``; ids seen
    before in the run (``seen``) are noted; an input too long to predict is cut here, so it never
    travels further (its row says ``too_large``)."""
    path = Path(path)
    if not path.is_file():
        raise InputFileError(f"{path}: no such file")
    suffix = path.suffix.lower()
    if suffix not in INPUT_FORMATS:
        raise InputFileError(f"{path}: unknown input format {suffix!r}; use one of {', '.join(INPUT_FORMATS)}")
    if path.stat().st_size == 0:
        raise InputFileError(f"{path}: the file is empty")
    fmt = "molblock" if suffix == ".sdf" else "smiles"
    if suffix == ".smi":
        source = _smi_rows(path, encoding)
    elif suffix == ".sdf":
        source = _sdf_rows(path, id_col, encoding)
    elif suffix == ".parquet":
        source = _parquet_rows(path, smiles_col, id_col)
    else:
        source = _table_rows(path, smiles_col, id_col, encoding, sep)
    seen = seen if seen is not None else SeenIds()
    current = Chunk(0, [], [], [], [], [], fmt)
    for row, (text, rid, problem) in enumerate(source, 1):
        problem = problem or text_problem(text, fmt)
        if problem and fmt == "smiles":
            text = echo_text(text)
        rid = fill_id(rid, row)
        current.rows.append(row)
        current.ids.append(rid)
        current.inputs.append(text)
        current.problems.append(problem)
        current.duplicate_of.append(seen.first_row(rid, row))
        if len(current.rows) == chunk:
            yield current
            current = Chunk(current.index + 1, [], [], [], [], [], fmt)
    if current.rows:
        yield current


# ----------------------------------------------------------------------------- writing

# Cells starting with these are read as formulas by spreadsheet programs (common practice for CSV meant
# for spreadsheets: neutralize them with a leading apostrophe).  SMILES columns are never touched (their
# "=" and "-" are bonds), nor our own lists of numbers (macro_pkas: "-1.20;4.50" is data).
FORMULA_START = ("=", "+", "-", "@", "\t", "\r")
NOT_NEUTRALIZED = frozenset({"smiles", "major_species", "macro_pkas", "macro_pkas_all"})


def neutralize_formulas(df: pd.DataFrame) -> pd.DataFrame:
    """``df`` with every text cell that a spreadsheet would run as a formula prefixed with ``'``."""
    out = df.copy()
    for col in out.columns:
        if col in NOT_NEUTRALIZED or pd.api.types.is_numeric_dtype(out[col]) or pd.api.types.is_bool_dtype(out[col]):
            continue
        values = out[col]
        risky = values.map(lambda v: isinstance(v, str) and v.startswith(FORMULA_START)).astype(bool)
        if risky.any():
            out[col] = values.astype(object)
            out.loc[risky, col] = "'" + values[risky].astype(str)
    return out


def _write_part(df: pd.DataFrame, path: Path) -> None:
    tmp = path.with_suffix(".part")
    df.to_parquet(tmp, index=False)
    tmp.replace(path)


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


def _typed(df: pd.DataFrame, columns: list[str]) -> pd.DataFrame:
    """Part tables with the output's column types (a chunk of failed rows has only missing values)."""
    df = df.reindex(columns=columns)
    for c in columns:
        if c in _FLOAT:
            df[c] = pd.to_numeric(df[c], errors="coerce").astype("float64")
        elif c == "in_domain":
            df[c] = df[c].astype(object).where(df[c].notna(), None)
    return df


def _assemble(parts: Path, prefix: str, columns: list[str], target: Path) -> None:
    """Concatenate part files in chunk order into ``target`` (format from its extension), streaming.

    The temporary file lives in ``parts`` (removed with it), so an interruption leaves nothing beside
    the output."""
    files = sorted(parts.glob(f"{prefix}_*.parquet"))
    suffix = target.suffix.lower()
    tmp = parts / f"{prefix}.{target.name}.tmp"
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
            with open(tmp, "w", newline="", encoding="utf-8") as fh:
                fh.write(sep.join(columns) + "\n")
                for f in files:
                    neutralize_formulas(pd.read_parquet(f)[columns]).to_csv(fh, sep=sep, header=False, index=False)
        tmp.replace(target)
    finally:
        tmp.unlink(missing_ok=True)


# ----------------------------------------------------------------------------- orchestration

@dataclass
class BatchResult:
    rows: int
    seconds: float
    output: Path
    sites: Path | None
    resumed_chunks: int
    status_counts: dict


def _run_key(input_path: Path, bundle_path: Path, settings: list) -> str:
    st = input_path.stat()
    manifest = (Path(bundle_path) / "manifest.json").read_bytes()
    text = json.dumps([str(input_path.resolve()), st.st_size, st.st_mtime_ns, *settings,
                       hashlib.sha256(manifest).hexdigest()])
    return hashlib.sha256(text.encode()).hexdigest()


class Progress:
    """A progress bar (rate, time left) on a terminal; silent when stderr is not one or when disabled."""

    def __init__(self, enabled: bool, total: int | None):
        from tqdm import tqdm
        self.bar = tqdm(total=total, unit=" rows", unit_scale=True, dynamic_ncols=True, smoothing=0.1,
                        disable=not (enabled and sys.stderr.isatty()), file=sys.stderr)

    def update(self, n: int) -> None:
        self.bar.update(n)

    def close(self) -> None:
        self.bar.close()


def count_rows(path: Path) -> int | None:
    """About how many rows ``path`` holds, for the progress bar's time left: exact for parquet, SDF and
    .smi, the line count less the header for text tables (quoted line breaks make it an upper bound)."""
    suffix = path.suffix.lower()
    if suffix == ".parquet":
        try:
            return pq.ParquetFile(path).metadata.num_rows
        except (pa.ArrowInvalid, OSError):
            return None
    marker = b"$$$$" if suffix == ".sdf" else b"\n"
    count, last = 0, b"\n"
    with open(path, "rb") as fh:
        while block := fh.read(1 << 20):
            count += block.count(marker)
            last = block[-1:]
    if suffix == ".sdf":
        return count
    count += last != b"\n"  # a last line without its line break
    return count if suffix == ".smi" else max(count - 1, 0)


def _finished(parts: Path, want_sites: bool) -> set[int]:
    done = {int(p.stem.split("_")[1]) for p in parts.glob("mol_*.parquet")}
    if want_sites:
        done &= {int(p.stem.split("_")[1]) for p in parts.glob("site_*.parquet")}
    return done


def _open_parts(parts: Path, key: str) -> None:
    """The parts folder of this run: kept from an interrupted run with the same key, else new."""
    key_file = parts / "run.json"
    if parts.exists() and (not key_file.is_file() or json.loads(key_file.read_text()).get("key") != key):
        shutil.rmtree(parts)  # left by a run with other inputs or settings: start over
    parts.mkdir(parents=True, exist_ok=True)
    for stale in [*parts.glob("*.part"), *parts.glob("*.tmp")]:  # half-written by a killed run
        stale.unlink()
    key_file.write_text(json.dumps({"key": key}))


def run_batch(input_path: Path, output: Path, bundle_path: Path, sites_out: Path | None = None, ph: float = 7.4,
              jobs: int = 1, chunk_size: int = 1000, smiles_col: str | None = None, id_col: str | None = None,
              progress: bool = True, explain: bool = False, window: tuple[float, float] = (0.0, 14.0),
              encoding: str = "utf-8", sep: str | None = None,
              mol_timeout: float = DEFAULT_MOL_TIMEOUT) -> BatchResult:
    """Predict every row of ``input_path`` into ``output`` (and per-site rows into ``sites_out``).

    ``window``: the pH range whose macroscopic constants are listed in ``macro_pkas``.  ``jobs``
    worker processes predict; ``mol_timeout`` is the time one molecule may take.  ``encoding`` and
    ``sep`` (default: sniffed from the header) read text inputs."""
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
    want_sites = sites_out is not None
    site_columns = SITE_COLUMNS + (["explanation"] if explain else [])
    key = _run_key(input_path, bundle_path, [ph, chunk_size, [want_sites, explain], list(window), encoding, sep])
    try:
        _open_parts(parts, key)
        done = _finished(parts, want_sites)
        bar = Progress(progress, count_rows(input_path) if progress and sys.stderr.isatty() else None)
        resumed = 0

        def score(chunk: Chunk) -> int:
            scored = predictor.predict(chunk.ids, chunk.inputs, ph=ph, window=window, fmt=chunk.fmt,
                                       problems=chunk.problems, duplicate_of=chunk.duplicate_of)
            mols = _typed(scored.molecules, MOLECULE_COLUMNS)
            if len(mols) != len(chunk.rows):  # the one promise of this module: one row per input row
                raise RuntimeError(f"chunk {chunk.index}: {len(mols)} result rows for {len(chunk.rows)} input rows")
            mols.insert(0, "row", chunk.rows)
            if want_sites:
                _write_part(_typed(scored.sites, site_columns), parts / f"site_{chunk.index:06d}.parquet")
            _write_part(mols, parts / f"mol_{chunk.index:06d}.parquet")
            return len(chunk.rows)

        predictor = IsolatedPredictor(bundle_path, jobs, mol_timeout, explain)
        threads = ThreadPoolExecutor(max_workers=jobs, thread_name_prefix="pkasite-chunk")
        try:
            pending: deque = deque()
            for chunk in read_chunks(input_path, chunk_size, smiles_col, id_col, encoding, sep):
                if chunk.index in done:
                    resumed += 1
                    bar.update(len(chunk.rows))
                    continue
                pending.append(threads.submit(score, chunk))
                while len(pending) >= 2 * jobs:  # bounded queue keeps memory flat
                    bar.update(pending.popleft().result())
            while pending:
                bar.update(pending.popleft().result())
        finally:
            predictor.close()  # first: threads waiting on a worker return at once
            threads.shutdown(wait=True, cancel_futures=True)
            bar.close()
        _assemble(parts, "mol", MOLECULE_COLUMNS, output)
        if sites_out is not None:
            _assemble(parts, "site", site_columns, Path(sites_out))
    except BaseException:
        if parts.is_dir() and not any(parts.glob("mol_*.parquet")):
            shutil.rmtree(parts, ignore_errors=True)  # nothing finished: nothing to resume from
        raise
    counts = {}
    total = 0
    for f in sorted(parts.glob("mol_*.parquet")):
        s = pd.read_parquet(f, columns=["status"])["status"].value_counts()
        total += int(s.sum())
        for k, v in s.items():
            counts[k] = counts.get(k, 0) + int(v)
    shutil.rmtree(parts)
    return BatchResult(total, time.monotonic() - t0, output, Path(sites_out) if sites_out else None, resumed, counts)
