"""Curation: raw records -> measurements table + rejects table + summary.

Every raw row ends either in a measurement (listed in its ``members``) or in
the rejects table with a reason code and a detail sentence; the summary
checks that accounting and reports the funnel.
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from pkasite.features.standardize import StructureError, standardize_smiles

from .config import CurationConfig

MEASUREMENT_COLUMNS = [
    "record_id", "smiles", "inchikey", "kind", "pka", "n", "spread", "temperature_c", "method",
    "source", "licence", "site_atom", "members", "split", "in_house", "conflict",
]
REJECT_COLUMNS = ["source", "record_id", "file", "row", "reason", "detail", "smiles", "value_text"]

_NUM = r"[-+]?\d+(?:\.\d+)?"
_APPROX = re.compile(rf"^(?:~|≈|ca\.?|approx\.?|about)\s*({_NUM})$", re.I)
_BOUND = re.compile(rf"^(<=|>=|<|>|≤|≥)\s*({_NUM})$")
_RANGE = re.compile(rf"^({_NUM})\s*(?:-|–|to)\s*({_NUM})$")
_UNKNOWN_T = {"", "not_stated", "not stated", "nan", "?", "room_temp.", "room temp", "rt", "none"}


class Reject(Exception):
    """One row's reason for not becoming a measurement."""

    def __init__(self, reason: str, detail: str):
        super().__init__(f"{reason}: {detail}")
        self.reason, self.detail = reason, detail


def parse_value(text: Any, cfg: CurationConfig) -> float:
    """A pKa value from text, following the configured rules for "~3", "<2" and "3.1-3.4"."""
    s = str(text).strip()
    try:
        value = float(s)
    except ValueError:
        pass
    else:
        if not math.isfinite(value):
            raise Reject("value_not_numeric", f"value {s!r} is not a finite number")
        return value
    if m := _APPROX.match(s):
        if cfg.approximate_values == "reject":
            raise Reject("value_approximate", f"approximate value {s!r} (curation.approximate_values=reject)")
        return float(m.group(1))
    if m := _BOUND.match(s):
        if cfg.bound_values == "reject":
            raise Reject("value_bound", f"bound {s!r} is not a value (curation.bound_values=reject)")
        return float(m.group(2))
    if m := _RANGE.match(s):
        low, high = sorted((float(m.group(1)), float(m.group(2))))
        if cfg.range_values == "reject":
            raise Reject("value_range", f"range {s!r} (curation.range_values=reject)")
        if high - low > cfg.max_range_width:
            raise Reject("value_range", f"range {s!r} is wider than {cfg.max_range_width} log units")
        return (low + high) / 2
    if not s:
        raise Reject("value_missing", "no pKa value")
    raise Reject("value_not_numeric", f"value {s!r} is not a number")


def parse_temperature(text: Any, cfg: CurationConfig) -> float:
    """Temperature in Celsius (NaN when not stated); kelvin above ``cfg.kelvin_above`` is converted."""
    s = str(text if text is not None else "").strip()
    if s.lower() in _UNKNOWN_T:
        return float("nan")
    s = re.sub(r"\s*\((?:assumed|approx\.?)\)\s*$", "", s)
    try:
        value = float(s)
    except ValueError:
        raise Reject("temperature_unclear", f"temperature {s!r} is not a single value") from None
    if value > cfg.kelvin_above:
        value -= 273.15
    return value


def _check_temperature(t: float, cfg: CurationConfig) -> None:
    if math.isnan(t):
        if not cfg.keep_unknown_temperature:
            raise Reject("temperature_unknown", "no temperature stated (curation.keep_unknown_temperature=false)")
        return
    if not cfg.temperature_min_c <= t <= cfg.temperature_max_c:
        raise Reject("temperature_out_of_window",
                     f"{t:g} C is outside {cfg.temperature_min_c:g}-{cfg.temperature_max_c:g} C")


def _site_atom(value: Any) -> int | None:
    s = str(value if value is not None else "").strip()
    if s in ("", "nan", "None"):
        return None
    try:
        f = float(s)
    except ValueError:
        raise Reject("site_atom_invalid", f"site_atom {s!r} is not an atom index") from None
    if f != int(f) or f < 0:
        raise Reject("site_atom_invalid", f"site_atom {s!r} is not a non-negative whole number")
    return int(f)


def _later_constant_keys(raw: pd.DataFrame) -> set:
    """Row labels of constants that are not the first of their kind for their compound.

    Compilations number constants over the whole compound (1, 2, ... from the most
    acidic), whatever their kind.  A constant of index k is the first of its kind
    when the k-1 lower constants of the compound are all of the other kind.
    """
    groups: dict[tuple, list[tuple]] = {}
    indexed = raw[raw["constant_index"].notna()]
    for label, source, key, index, kind in zip(indexed.index, indexed["source"], indexed["group_key"],
                                               indexed["constant_index"], indexed["kind"]):
        groups.setdefault((source, key), []).append((label, int(index), kind))
    later = set()
    for members in groups.values():
        for label, k, kind in members:
            if k <= 1:
                continue
            lower_other = {i for _, i, other in members if i < k and other != kind}
            if len(lower_other) < k - 1:
                later.add(label)
    return later


@dataclass
class CurationResult:
    measurements: pd.DataFrame
    rejects: pd.DataFrame
    summary: dict


def curate(raw: pd.DataFrame, cfg: CurationConfig) -> CurationResult:
    """Apply the curation rules to a raw-record table (see :mod:`pkasite.pipeline.ingest`)."""
    raw = raw.reset_index(drop=True)
    later = _later_constant_keys(raw) if cfg.first_constant_only else set()
    kept, rejects = [], []
    cache: dict[tuple, Any] = {}
    for label, row in zip(raw.index, raw.to_dict("records")):
        try:
            kept.append(_curate_row(label, row, cfg, later, cache))
        except Reject as rej:
            rejects.append(_reject_row(row, rej.reason, rej.detail))
    rows = pd.DataFrame(kept)
    if cfg.inhouse_overrides_open and len(rows):
        rows, superseded = _apply_inhouse_override(rows)
        rejects.extend(superseded)
    measurements, conflicts = _aggregate(rows, cfg)
    rejects.extend(conflicts)
    rejects_df = pd.DataFrame(rejects, columns=REJECT_COLUMNS)
    summary = summarize(raw, measurements, rejects_df)
    return CurationResult(measurements, rejects_df, summary)


def _reject_row(row: dict, reason: str, detail: str) -> dict:
    return {"source": row["source"], "record_id": str(row["record_id"]), "file": row["file"],
            "row": int(row["row"]), "reason": reason, "detail": detail, "smiles": row["smiles"],
            "value_text": str(row["value_text"])}


def _curate_row(label, row: dict, cfg: CurationConfig, later: set, cache: dict) -> dict:
    if row["kind"] not in ("acid", "base"):
        raise Reject("kind_invalid", f"kind {row['kind']!r} is not acid or base")
    value = parse_value(row["value_text"], cfg)
    if row["is_pkb"]:
        value = cfg.pkw - value
    if row["non_aqueous"]:
        raise Reject("non_aqueous", f"measured with co-solvent {row['non_aqueous']!r}")
    if row["pressure"]:
        raise Reject("not_ambient_pressure", f"measured at pressure {row['pressure']!r}")
    if row["assessment"] and row["assessment"] not in cfg.iupac_assessments:
        raise Reject("low_reliability", f"assessment {row['assessment']!r} is not in curation.iupac_assessments")
    temperature = parse_temperature(row["temperature_text"], cfg)
    _check_temperature(temperature, cfg)
    if not cfg.pka_min <= value <= cfg.pka_max:
        raise Reject("pka_outside_window",
                     f"pKa {value:g} is outside the aqueous window {cfg.pka_min:g} to {cfg.pka_max:g}")
    site_atom = _site_atom(row["site_atom"])
    if label in later and site_atom is None:
        raise Reject("later_constant",
                     f"constant {int(row['constant_index'])} is not the first of its kind and names no site")
    std = _standardized(row["smiles"], site_atom, cache)
    if isinstance(std, StructureError) and site_atom is None and str(row["smiles_fallback"] or "").strip():
        std = _standardized(row["smiles_fallback"], None, cache)
    if isinstance(std, StructureError):
        raise Reject("structure_invalid", str(std))
    return {"source": row["source"], "record_id": str(row["record_id"]), "file": row["file"],
            "row": int(row["row"]), "smiles": std.smiles, "inchikey": std.inchikey, "kind": row["kind"],
            "pka": float(value), "temperature_c": temperature, "method": str(row["method"] or "").strip(),
            "licence": row["licence"], "site_atom": std.site_atom, "split": row["split"],
            "in_house": bool(row["in_house"]), "input_smiles": row["smiles"], "value_text": row["value_text"]}


def _standardized(smiles: str, site_atom: int | None, cache: dict):
    """Standardize once per (SMILES, site); a failure is cached as the error."""
    key = (smiles, site_atom)
    if key not in cache:
        try:
            cache[key] = standardize_smiles(smiles, site_atom)
        except StructureError as exc:
            cache[key] = exc
    return cache[key]


def _apply_inhouse_override(rows: pd.DataFrame) -> tuple[pd.DataFrame, list[dict]]:
    inhouse_keys = set(zip(rows.loc[rows["in_house"], "inchikey"], rows.loc[rows["in_house"], "kind"]))
    if not inhouse_keys:
        return rows, []
    mask = [(not ih) and (k, kd) in inhouse_keys for ih, k, kd in zip(rows["in_house"], rows["inchikey"], rows["kind"])]
    mask = np.array(mask, dtype=bool)
    superseded = [
        {"source": r["source"], "record_id": r["record_id"], "file": r["file"], "row": r["row"],
         "reason": "superseded_by_inhouse", "detail": "an in-house value exists for this structure and kind",
         "smiles": r["input_smiles"], "value_text": str(r["value_text"])}
        for _, r in rows[mask].iterrows()
    ]
    return rows[~mask], superseded


def _joined(values) -> str:
    return ";".join(sorted({str(v) for v in values if v is not None and str(v) not in ("", "nan", "None")}))


def _aggregate(rows: pd.DataFrame, cfg: CurationConfig) -> tuple[pd.DataFrame, list[dict]]:
    """Merge replicates of one (structure, kind, site): median, count, spread; handle conflicts."""
    if rows.empty:
        return pd.DataFrame(columns=MEASUREMENT_COLUMNS), []
    groups: dict[tuple, list[dict]] = {}
    for r in rows.to_dict("records"):
        a = r["site_atom"]
        site_key = -1 if a is None or pd.isna(a) else int(a)
        groups.setdefault((r["inchikey"], r["kind"], site_key), []).append(r)
    out, conflicts = [], []
    for (_, kind, site_key), grp in groups.items():
        values = np.array([r["pka"] for r in grp], float)
        spread = float(values.max() - values.min())
        conflict = spread > cfg.conflict_spread
        if conflict and cfg.conflict_action == "drop":
            detail = (f"{len(grp)} replicates span {spread:.2f} log units "
                      f"(> curation.conflict_spread={cfg.conflict_spread:g})")
            conflicts.extend(
                {"source": r["source"], "record_id": r["record_id"], "file": r["file"], "row": r["row"],
                 "reason": "conflicting_replicates", "detail": detail, "smiles": r["input_smiles"],
                 "value_text": str(r["value_text"])}
                for r in grp)
            continue
        first = grp[0]
        t = [r["temperature_c"] for r in grp if not pd.isna(r["temperature_c"])]
        out.append({
            "record_id": f"{first['source']}:{first['record_id']}", "smiles": first["smiles"],
            "inchikey": first["inchikey"], "kind": kind, "pka": float(np.median(values)), "n": len(grp),
            "spread": spread, "temperature_c": float(np.median(t)) if t else float("nan"),
            "method": _joined(r["method"] for r in grp), "source": _joined(r["source"] for r in grp),
            "licence": _joined(r["licence"] for r in grp),
            "site_atom": None if site_key < 0 else int(site_key),
            "members": ";".join(f"{r['source']}:{r['record_id']}" for r in grp),
            "split": _joined(r["split"] for r in grp), "in_house": any(bool(r["in_house"]) for r in grp),
            "conflict": bool(conflict),
        })
    result = pd.DataFrame(out, columns=MEASUREMENT_COLUMNS)
    result["site_atom"] = result["site_atom"].astype("Int64")
    return result, conflicts


def summarize(raw: pd.DataFrame, measurements: pd.DataFrame, rejects: pd.DataFrame) -> dict:
    """Counts per step and reject reason; checks that every input row is accounted for."""
    merged = int(measurements["n"].sum()) if len(measurements) else 0
    summary = {
        "rows_in": int(len(raw)),
        "rows_in_by_source": {k: int(v) for k, v in raw["source"].value_counts().sort_index().items()},
        "rows_in_by_kind": {str(k): int(v) for k, v in raw["kind"].value_counts().sort_index().items()},
        "rows_rejected": int(len(rejects)),
        "rejected_by_reason": {k: int(v) for k, v in rejects["reason"].value_counts().items()},
        "rows_kept": merged,
        "measurements": int(len(measurements)),
        "measurements_by_kind": {k: int(v) for k, v in measurements["kind"].value_counts().sort_index().items()},
        "replicate_groups": int((measurements["n"] > 1).sum()) if len(measurements) else 0,
        "flagged_conflicts": int(measurements["conflict"].sum()) if len(measurements) else 0,
    }
    summary["accounted"] = summary["rows_kept"] + summary["rows_rejected"] == summary["rows_in"]
    if not summary["accounted"]:
        raise AssertionError(f"curation lost rows: {summary}")
    return summary


def format_summary(summary: dict) -> str:
    lines = [f"rows in            {summary['rows_in']:>7}"]
    lines += [f"  from {src:<12} {n:>7}" for src, n in summary["rows_in_by_source"].items()]
    lines.append(f"rows rejected      {summary['rows_rejected']:>7}")
    lines += [f"  {reason:<24} {n:>5}" for reason, n in summary["rejected_by_reason"].items()]
    lines.append(f"rows kept          {summary['rows_kept']:>7}")
    lines.append(f"measurements       {summary['measurements']:>7}  "
                 + ", ".join(f"{k} {v}" for k, v in summary["measurements_by_kind"].items()))
    lines.append(f"replicate groups   {summary['replicate_groups']:>7}")
    if summary["flagged_conflicts"]:
        lines.append(f"flagged conflicts  {summary['flagged_conflicts']:>7}")
    return "\n".join(lines)
