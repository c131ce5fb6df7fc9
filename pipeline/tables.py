"""Table readers and writers; every write goes to a temporary name and is renamed when complete."""
from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

import pandas as pd

TABLE_FORMATS = {".parquet": "parquet", ".csv": "csv", ".tsv": "tsv"}


def _atomic(path: Path, write) -> Path:
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    os.close(fd)
    try:
        write(Path(tmp))
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def table_format(path: Path) -> str:
    suffix = Path(path).suffix.lower()
    if suffix not in TABLE_FORMATS:
        raise ValueError(f"{path}: unknown table format {suffix!r}; use one of {', '.join(TABLE_FORMATS)}")
    return TABLE_FORMATS[suffix]


def write_table(df: pd.DataFrame, path: Path) -> Path:
    """Write ``df`` as parquet, CSV or TSV chosen by the file extension."""
    fmt = table_format(path)
    if fmt == "parquet":
        return _atomic(path, lambda p: df.to_parquet(p, index=False))
    return _atomic(path, lambda p: df.to_csv(p, index=False, sep="\t" if fmt == "tsv" else ","))


def read_table(path: Path) -> pd.DataFrame:
    fmt = table_format(path)
    if fmt == "parquet":
        return pd.read_parquet(path)
    return pd.read_csv(path, sep="\t" if fmt == "tsv" else ",", keep_default_na=True)


def write_json(obj, path: Path) -> Path:
    return _atomic(path, lambda p: p.write_text(json.dumps(obj, indent=2, sort_keys=True, default=str) + "\n"))


def write_text(text: str, path: Path) -> Path:
    return _atomic(path, lambda p: p.write_text(text))
