"""Readers that turn source files into one raw-record table.

Every parser returns a DataFrame with the columns in :data:`RAW_COLUMNS`, one
row per input row, so curation can account for every row it was given.
Parsers only read and relabel; judging values is curation's job.
"""
from __future__ import annotations

import csv
import re
from pathlib import Path

import pandas as pd

RAW_COLUMNS = [
    "source", "file", "row", "record_id", "smiles", "smiles_fallback", "kind", "value_text", "is_pkb",
    "constant_index", "constant_numbering", "group_key", "temperature_text", "method", "site_atom", "site_group",
    "licence",
    "non_aqueous", "pressure", "assessment", "split", "in_house", "draws_titrating_species",
]
# site_group: the source's free-text name of the titrating group ("COOH", "SO2-NH-", "?"; empty when it
# gives none), read by curation.group_sites.
# draws_titrating_species: the source draws each record as the species that gives up (acid) or takes
# up (base) the measured proton, so a site of the record's kind drawn charged is already titrated and
# the record is a later constant of its kind (curation.charged_drawing_ranks).

# How a source numbers a compound's constants (``constant_numbering``; empty when it does not):
WHOLE_COMPOUND = "whole_compound"  # 1, 2, ... from the most acidic over all constants of the compound, any kind
PER_KIND = "per_kind"              # each kind counted on its own, 1 = the strongest of that kind

INHOUSE_REQUIRED = ("smiles", "pka", "kind")
INHOUSE_OPTIONAL = ("id", "temperature_c", "site_atom", "method", "notes")


class InputFileError(ValueError):
    """A whole input file that cannot be read; the message names the file and the fix."""


def sniff_delimiter(header: str, default: str = ",") -> str:
    """The delimiter of a table from its header line: comma, semicolon or tab (``default`` if none fits)."""
    try:
        return csv.Sniffer().sniff(header, delimiters=",;\t").delimiter
    except csv.Error:
        return default


def _read_csv(path: Path) -> pd.DataFrame:
    path = Path(path)
    if not path.is_file():
        raise InputFileError(f"{path}: no such file")
    try:
        sample = path.read_text(encoding="utf-8-sig")[:4096]
    except UnicodeDecodeError:
        raise InputFileError(f"{path}: not a text CSV file (cannot decode as UTF-8)") from None
    if not sample.strip():
        raise InputFileError(f"{path}: the file is empty")
    lines = sample.splitlines()
    comments = 0  # leading "# ..." lines are a header note (e.g. "values are invented")
    while comments < len(lines) and lines[comments].startswith("#"):
        comments += 1
    if comments == len(lines):
        raise InputFileError(f"{path}: the file has no header row")
    delimiter = sniff_delimiter(lines[comments])
    try:
        return pd.read_csv(path, dtype=str, keep_default_na=False, sep=delimiter, encoding="utf-8-sig",
                           skiprows=comments)
    except (pd.errors.ParserError, ValueError) as exc:
        raise InputFileError(f"{path}: not a readable CSV file ({exc})") from None


def _frame(rows: dict, n: int) -> pd.DataFrame:
    rows.setdefault("smiles_fallback", [""] * n)
    rows.setdefault("draws_titrating_species", [False] * n)
    rows.setdefault("site_group", [""] * n)
    out = pd.DataFrame({col: rows.get(col, [None] * n) for col in RAW_COLUMNS})
    out["row"] = out["row"].astype(int)
    return out


_TYPE_INDEX = re.compile(r"^[ab]?(\d+)")


def constant_index_from_type(text: str) -> int | None:
    """``"a2/apparent"`` -> 2, ``"b1"`` -> 1, ``"a/thermodynamic"`` or ``"apparent"`` -> None."""
    match = _TYPE_INDEX.match(str(text).strip().lower())
    return int(match.group(1)) if match else None


def parse_dwpka(path: Path, kind: str, split: str | None, licence: str, source: str = "dwpka") -> pd.DataFrame:
    """The curated DataWarrior compilation: one file per kind and split."""
    df = _read_csv(path)
    needed = ["Molecule name", "Canonical_QSARr", "OriginalSmiles", "InChI Key_QSARr", "temp", "method", "type", "pKa"]
    missing = [c for c in needed if c not in df.columns]
    if missing:
        raise InputFileError(f"{path}: missing column(s) {', '.join(missing)} expected in a {source} file")
    n = len(df)
    return _frame({
        "source": [source] * n, "file": [Path(path).name] * n, "row": range(1, n + 1),
        # OriginalSmiles keeps the measured tautomer; the QSAR-ready column redraws many acids
        # (carboxylic acids as enediols, imides as hydroxy-imines), so it is only the fallback.
        "record_id": df["Molecule name"].tolist(), "smiles": df["OriginalSmiles"].tolist(),
        "smiles_fallback": df["Canonical_QSARr"].tolist(), "kind": [kind] * n,
        "value_text": df["pKa"].tolist(), "is_pkb": [False] * n,
        "constant_index": [constant_index_from_type(t) for t in df["type"]],
        "constant_numbering": [WHOLE_COMPOUND] * n, "group_key": df["InChI Key_QSARr"].tolist(),
        "temperature_text": df["temp"].tolist(),
        "method": df["method"].tolist(), "licence": [licence] * n, "non_aqueous": [""] * n,
        "site_group": df["group"].tolist() if "group" in df.columns else [""] * n,
        "pressure": [""] * n, "assessment": [""] * n, "split": [split] * n, "in_house": [False] * n,
        # the compilation draws the acid form of an acid's step and the base form of a base's step (a
        # boronic acid's second constant is filed under the boronate anion, record 11489)
        "draws_titrating_species": [True] * n,
    }, n)


_IUPAC_TYPE = re.compile(r"^pK(aH|a|b)(\d*)$")


def parse_iupac(path: Path, kind: str | None, split: str | None, licence: str, source: str = "iupac") -> pd.DataFrame:
    """The IUPAC digitized dataset: pKa (acid), pKaH (conjugate acid of a base), pKb (base)."""
    df = _read_csv(path)
    needed = ["unique_ID", "SMILES", "pka_type", "pka_value", "T", "method", "assessment", "pressure",
              "original_T", "cosolvent"]
    missing = [c for c in needed if c not in df.columns]
    if missing:
        raise InputFileError(f"{path}: missing column(s) {', '.join(missing)} expected in an {source} file")
    kinds, pkb, index = [], [], []
    for text in df["pka_type"]:
        match = _IUPAC_TYPE.match(text.strip())
        if match is None:
            kinds.append(None), pkb.append(False), index.append(None)
            continue
        label, digits = match.groups()
        kinds.append("acid" if label == "a" else "base")
        pkb.append(label == "b")
        index.append(int(digits) if digits else None)
    temperature = df["T"].where(df["T"].str.strip() != "", df["original_T"])
    n = len(df)
    return _frame({
        "source": [source] * n, "file": [Path(path).name] * n, "row": range(1, n + 1),
        "record_id": df["unique_ID"].tolist(), "smiles": df["SMILES"].tolist(), "kind": kinds,
        "value_text": df["pka_value"].tolist(), "is_pkb": pkb, "constant_index": index,
        "constant_numbering": [PER_KIND] * n,
        "group_key": df["unique_ID"].tolist(), "temperature_text": temperature.tolist(),
        "method": df["method"].tolist(), "licence": [licence] * n,
        "non_aqueous": df["cosolvent"].str.strip().tolist(), "pressure": df["pressure"].str.strip().tolist(),
        "assessment": df["assessment"].str.strip().tolist(), "split": [split] * n, "in_house": [False] * n,
    }, n)


def parse_inhouse(path: Path, licence: str = "in-house") -> pd.DataFrame:
    """A user's CSV: columns smiles, pka, kind (acid|base); optional id, temperature_c, site_atom, method, notes."""
    path = Path(path)
    df = _read_csv(path)
    df.columns = [c.strip().lower() for c in df.columns]
    missing = [c for c in INHOUSE_REQUIRED if c not in df.columns]
    if missing:
        raise InputFileError(
            f"{path}: missing required column(s) {', '.join(missing)}; an in-house file needs "
            f"{', '.join(INHOUSE_REQUIRED)} (optional: {', '.join(INHOUSE_OPTIONAL)})")
    n = len(df)
    if n == 0:
        raise InputFileError(f"{path}: the file has a header but no rows")
    col = lambda name: df[name].tolist() if name in df.columns else [""] * n  # noqa: E731
    ids = [i if str(i).strip() else f"row{r}" for r, i in zip(range(1, n + 1), col("id"))]
    return _frame({
        "source": [f"inhouse:{path.name}"] * n, "file": [path.name] * n, "row": range(1, n + 1),
        "record_id": ids, "smiles": df["smiles"].tolist(),
        "kind": [str(k).strip().lower() for k in df["kind"]], "value_text": df["pka"].tolist(),
        "is_pkb": [False] * n, "constant_index": [None] * n, "constant_numbering": [""] * n, "group_key": ids,
        "temperature_text": col("temperature_c"), "method": col("method"), "site_atom": col("site_atom"),
        "licence": [licence] * n, "non_aqueous": [""] * n, "pressure": [""] * n, "assessment": [""] * n,
        "split": [None] * n, "in_house": [True] * n,
    }, n)


PARSERS = {"dwpka": parse_dwpka, "iupac": parse_iupac}
