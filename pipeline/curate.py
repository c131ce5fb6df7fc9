"""Curation: raw records -> measurements table + rejects table + summary.

Every raw row ends either in a measurement (listed in its ``members``) or in
the rejects table with a reason code and a detail sentence; the summary
checks that accounting and reports the funnel.
"""
from __future__ import annotations

import math
import re
import statistics
from dataclasses import dataclass
from typing import Any, NamedTuple

import numpy as np
import pandas as pd

from pkasite.features.sites import KINDS
from pkasite.features.standardize import StructureError, standardize_smiles

from .config import CurationConfig
from .parallel import map_slices, process_count, split_even
from .ingest import PER_KIND, WHOLE_COMPOUND

MEASUREMENT_COLUMNS = [
    "record_id", "smiles", "inchikey", "kind", "pka", "n", "spread", "temperature_c", "method",
    "source", "licence", "site_atom", "constant_rank", "drawn_charge", "members", "split", "in_house",
    "conflict", "kind_suspect",
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


RANK_INPUT_COLUMNS = ["source", "group_key", "kind", "pka", "constant_index", "constant_numbering"]


def constant_ranks(rows: pd.DataFrame) -> pd.DataFrame:
    """Rank each row among the constants of its kind that its source gives for the compound.

    ``rows`` needs :data:`RANK_INPUT_COLUMNS` (``pka`` already on the pKaH scale for bases) and may
    have ``inchikey``.  Rows of one source and kind belong to one compound when they share the source's
    ``group_key`` or the standardized ``inchikey`` (a compilation may file a second constant under a
    record drawn as the anion).  Within a compound, rows with the same constant number are replicates
    of one constant (rows without a number together make one).  Constants are ordered by their median
    value, strongest first (lowest acid pKa, highest base pKaH); the number only breaks ties.  How
    the number is read depends on the source (``constant_numbering``): numbered over the whole compound
    from the most acidic end, it says nothing about the order within a kind (a base's "a2" may be its
    most basic constant), so the values alone give ranks 1, 2, ...; numbered per kind (1 = strongest of
    the kind), the numbers also stand in for stronger constants whose values are not there: a lone
    "pKa3" ranks 3.

    Returns a frame on the index of ``rows``: ``constant_rank`` (1 = strongest) and ``stronger_pka``
    (median value of the next stronger constant; NaN when none is there).
    """
    ranks: dict = {}
    stronger: dict = {}
    inchikeys = rows["inchikey"] if "inchikey" in rows else pd.Series(None, index=rows.index, dtype=object)
    compound = _compounds(rows.index, rows["source"], rows["kind"], rows["group_key"], inchikeys)
    groups: dict[Any, dict[int | None, list[tuple]]] = {}
    schemes: dict[Any, tuple[str, str]] = {}
    for label, kind, value, index, scheme in zip(rows.index, rows["kind"], rows["pka"], rows["constant_index"],
                                                 rows["constant_numbering"]):
        number = None if index is None or pd.isna(index) else int(index)
        groups.setdefault(compound[label], {}).setdefault(number, []).append((label, float(value)))
        schemes[compound[label]] = (kind, scheme if isinstance(scheme, str) else "")
    for group, constants in groups.items():
        kind, scheme = schemes[group]
        ordered = _strongest_first(constants, kind, scheme)
        for position, (rank, (_, members)) in enumerate(zip(_rank_slots(constants, scheme), ordered)):
            for label, _ in members:
                ranks[label] = rank
                stronger[label] = _median(ordered[position - 1][1]) if position else np.nan
    return pd.DataFrame({"constant_rank": pd.Series(ranks, dtype="int64"),
                         "stronger_pka": pd.Series(stronger, dtype=float)}).reindex(rows.index)


def unlisted_stronger_acids(rows: pd.DataFrame) -> pd.Series:
    """Per row: how many stronger acid constants the source's numbering implies but does not list.

    Numbered over the whole compound from the most acidic end, an acid constant "a3" has two lower
    (more acidic) constants.  Those of them the source does not list could be acids or the pKaH of
    weaker bases; when the structure has no base site at all they must be acids, so the listed value
    is not the compound's strongest acid constant and its rank moves down by their number (a
    carboxylic acid's missing "a1" beside an oxime's "a2").  Other rows get 0.
    """
    from pkasite.features.sites import find_sites
    from pkasite.features.standardize import parse_smiles

    extra = pd.Series(0, index=rows.index, dtype="int64")
    whole = (rows["constant_numbering"] == "whole_compound") & rows["constant_index"].notna()
    numbers: dict = {}
    for source, key, index in zip(rows.loc[whole, "source"], rows.loc[whole, "group_key"],
                                  rows.loc[whole, "constant_index"]):
        numbers.setdefault((source, key), set()).add(int(index))
    for label, r in rows[whole & (rows["kind"] == "acid")].iterrows():
        k = int(r["constant_index"])
        missing = k - 1 - len({n for n in numbers[(r["source"], r["group_key"])] if n < k})
        if missing > 0:
            sites = find_sites(parse_smiles(r["smiles"]))
            if not any(s.kind == "base" for s in sites):
                extra[label] = missing
    return extra


def drawing_charges(rows: pd.DataFrame, rank_kinds=KINDS, against_kind: bool = True) -> pd.DataFrame:
    """Per row, what its drawing says about the measured step, for rows from a source that draws the
    titrating species (``draws_titrating_species``); 0 for the others and for drawings without a charge.
    Both columns read the largest fragment of ``input_smiles``, never the value:

    - ``titrated``, for rows of ``rank_kinds``: how many sites of its kind the drawing shows already
      titrated (:func:`~pkasite.features.sites.drawn_titration`).  Such a record is at least its
      compound's constant n + 1 of the kind: a base record drawn as 4-(pyrrolidin-1-yl)pyridinium is the
      dication's constant, not the pyridine's pKaH.
    - ``against_kind``, with ``against_kind``: the drawn charge of its sites when it runs against the
      kind (the same function's ``against_kind``): an acid record drawn as a cation is
      the step that takes that charge down by one, a base record drawn as an anion the step that takes
      it up by one.
    """
    from pkasite.features.sites import drawn_titration
    from pkasite.features.standardize import StructureError, parent_fragment, parse_smiles

    out = pd.DataFrame({"titrated": 0, "against_kind": 0}, index=rows.index, dtype="int64")
    flagged = rows["draws_titrating_species"].fillna(False).astype(bool)
    if not against_kind:
        flagged &= rows["kind"].isin(list(rank_kinds))
    rank_kinds = set(rank_kinds)
    for label, smiles, kind in zip(rows.index[flagged], rows.loc[flagged, "input_smiles"],
                                   rows.loc[flagged, "kind"]):
        if "+" not in smiles and "-" not in smiles:
            continue
        try:  # a row kept through its source's fallback drawing has no readable drawing of its own
            mol = parent_fragment(parse_smiles(smiles))
        except StructureError:
            continue
        drawn = drawn_titration(mol, kind)
        if kind in rank_kinds:
            out.at[label, "titrated"] = drawn.titrated
        if against_kind:
            out.at[label, "against_kind"] = drawn.against_kind
    return out


def _blank(value: Any) -> bool:
    return value is None or (isinstance(value, float) and math.isnan(value)) or not str(value).strip()


def _compounds(labels, sources, kinds, keys, inchikeys) -> dict:
    """Row label -> compound id: rows of one source and kind linked by a shared group_key or inchikey."""
    parent: dict = {}

    def find(x):
        while parent.setdefault(x, x) != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    for label, source, kind, key, inchikey in zip(labels, sources, kinds, keys, inchikeys):
        names = [("key", source, kind, key) if not _blank(key) else ("row", label)]
        if not _blank(inchikey):
            names.append(("inchikey", source, kind, inchikey))
        root = find(("row", label))
        for name in names:
            parent[find(name)] = root
    return {label: find(("row", label)) for label in labels}


def _median(members: list[tuple]) -> float:
    return float(statistics.median(value for _, value in members))  # np.median costs 30 us per tiny list


def _strongest_first(constants: dict, kind: str, scheme: str) -> list[tuple]:
    """Constants ``(number, rows)`` ordered strongest first by median value; the number breaks ties."""
    sign = 1.0 if kind == "acid" else -1.0
    # Numbered from the acidic end over the whole compound, a base's higher number is the more basic.
    number_sign = -1 if kind == "base" and scheme == WHOLE_COMPOUND else 1

    def key(item):
        number, members = item
        return sign * _median(members), math.inf if number is None else number_sign * number
    return sorted(constants.items(), key=key)


def _rank_slots(constants: dict, scheme: str) -> list[int]:
    """The ranks the constants take, strongest first: 1..n, or with per-kind numbering the numbers given."""
    numbers = sorted(n for n in constants if n is not None)
    if scheme != PER_KIND or any(n < 1 for n in numbers):
        return list(range(1, len(constants) + 1))
    if None in constants:  # an unnumbered constant takes the first number the source leaves free
        numbers = sorted(numbers + [min(set(range(1, len(numbers) + 2)) - set(numbers))])
    return numbers


def _numbering_rule_later(raw: pd.DataFrame) -> set:
    """Rows the former rule rejected as later constants, kept only so the summary can compare.

    That rule read a constant numbered k as the first of its kind only when the k-1 lower constants of
    the compound in the file were all of the other kind; it lost, for example, every base whose more
    acidic constants the source does not list.
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


def curate(raw: pd.DataFrame, cfg: CurationConfig, processes: int = 1) -> CurationResult:
    """Apply the curation rules to a raw-record table (see :mod:`pkasite.pipeline.ingest`).

    ``processes``: structures of a large table are standardized in that many processes."""
    raw = raw.reset_index(drop=True)
    numbering_later = _numbering_rule_later(raw)
    kept, rejects = [], []
    cache: dict[tuple, Any] = _prefilled_cache(raw, processes)
    for label, row in zip(raw.index, raw.to_dict("records")):
        try:
            kept.append(_curate_row(label, row, cfg, numbering_later, cache))
        except Reject as rej:
            rejects.append(_reject_row(row, rej.reason, rej.detail))
    sites_of = _SitesMemo()
    rows, later = _rank_constants(pd.DataFrame(kept), cfg, sites_of)
    rejects.extend(later)
    if cfg.inhouse_overrides_open and len(rows):
        rows, superseded = _apply_inhouse_override(rows)
        rejects.extend(superseded)
    measurements, conflicts, merged = _aggregate(rows, cfg)
    measurements["kind_suspect"] = _kind_suspects(measurements, cfg.numbering_range_margin, sites_of)
    rejects.extend(conflicts)
    rejects_df = pd.DataFrame(rejects, columns=REJECT_COLUMNS)
    summary = summarize(raw, measurements, rejects_df, _constant_counts(merged))
    return CurationResult(measurements, rejects_df, summary)


def _reject_row(row: dict, reason: str, detail: str) -> dict:
    return {"source": row["source"], "record_id": str(row["record_id"]), "file": row["file"],
            "row": int(row["row"]), "reason": reason, "detail": detail, "smiles": row["smiles"],
            "value_text": str(row["value_text"])}


def _curate_row(label, row: dict, cfg: CurationConfig, numbering_later: set, cache: dict) -> dict:
    """One raw row through every row-level check; its constant rank is set afterwards."""
    if row["kind"] not in KINDS:
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
    std = _standardized(row["smiles"], site_atom, cache)
    if isinstance(std, StructureError) and site_atom is None and str(row["smiles_fallback"] or "").strip():
        std = _standardized(row["smiles_fallback"], None, cache)
    if isinstance(std, StructureError):
        raise Reject("structure_invalid", str(std))
    return {"source": row["source"], "record_id": str(row["record_id"]), "file": row["file"],
            "row": int(row["row"]), "smiles": std.smiles, "inchikey": std.inchikey, "kind": row["kind"],
            "pka": float(value), "temperature_c": temperature, "method": str(row["method"] or "").strip(),
            "licence": row["licence"], "site_atom": std.site_atom, "split": row["split"],
            "in_house": bool(row["in_house"]), "input_smiles": row["smiles"], "value_text": row["value_text"],
            "group_key": row["group_key"], "constant_index": row["constant_index"],
            "constant_numbering": row.get("constant_numbering") or "",
            "draws_titrating_species": bool(row.get("draws_titrating_species")),
            "site_group": str(row.get("site_group") or ""),
            "numbering_rule_later": site_atom is None and label in numbering_later}


class _SitesMemo:
    """A curated SMILES's molecule and its :func:`~pkasite.features.sites.find_sites`, computed once per
    structure for the rules that read the catalog (group names, numbering, kind check)."""

    def __init__(self):
        self._memo: dict[str, tuple] = {}

    def __call__(self, smiles: str) -> tuple:
        if smiles not in self._memo:
            from pkasite.features.sites import find_sites
            from pkasite.features.standardize import parse_smiles
            mol = parse_smiles(smiles)
            self._memo[smiles] = (mol, find_sites(mol))
        return self._memo[smiles]


def _rank_constants(rows: pd.DataFrame, cfg: CurationConfig,
                    sites_of: _SitesMemo | None = None) -> tuple[pd.DataFrame, list[dict]]:
    """Set ``constant_rank`` on the kept rows (None where the row names its site); with
    ``first_constant_only`` reject the rows of rank 2 or more that name no site."""
    if rows.empty:
        return rows, []
    sites_of = sites_of or _SitesMemo()
    ranked = constant_ranks(rows)
    ranked["constant_rank"] += unlisted_stronger_acids(rows)
    drawing = drawing_charges(rows, cfg.charged_drawing_ranks, cfg.charge_against_kind)
    if cfg.group_sites:
        rows = _name_sites_from_groups(rows, drawing["against_kind"], cfg.numbering_range_margin, sites_of)
    drawn = drawing["titrated"]
    raised = ranked["constant_rank"] < drawn + 1
    ranked["constant_rank"] = ranked["constant_rank"].where(~raised, drawn + 1)
    named = rows["site_atom"].notna()
    rows = rows.assign(constant_rank=ranked["constant_rank"].astype(object).where(~named, None),
                       ranked_by_drawing=raised & ~named,
                       drawn_charge=drawing["against_kind"].where(~named, 0))
    contradicted = _numbering_conflicts(rows, cfg.numbering_range_margin, sites_of)
    rejects = [_reject_row({**r, "smiles": r["input_smiles"]}, "numbering_conflict", _conflict_detail(r))
               for r in rows[contradicted].to_dict("records")]
    group_conflict = rows.get("group_conflict", pd.Series(False, rows.index)).astype(bool) & ~contradicted
    rejects += [_reject_row({**r, "smiles": r["input_smiles"]}, "group_conflict", _group_conflict_detail(r))
                for r in rows[group_conflict].to_dict("records")]
    contradicted |= group_conflict
    rows, ranked = rows[~contradicted], ranked[~contradicted]
    if not cfg.first_constant_only:
        return rows, rejects
    later = rows["site_atom"].isna() & (ranked["constant_rank"] > 1)
    rejects += [_reject_row({**r, "smiles": r["input_smiles"]}, "later_constant", _later_detail(r, stronger))
                for r, stronger in zip(rows[later].to_dict("records"), ranked.loc[later, "stronger_pka"])]
    return rows[~later], rejects


def _name_sites_from_groups(rows: pd.DataFrame, against_kind: pd.Series, margin: float | None,
                            sites_of: _SitesMemo) -> pd.DataFrame:
    """Rows that name no site atom but whose source names the titrating group, when the name singles out
    one candidate site (:func:`~pkasite.features.sites.group_site`), get that site atom and
    ``site_from_group``; the source's word, not the value, picks the site.  Rows drawn against their kind
    keep their step out of the drawn charge instead (a named site would compare the neutral molecule's
    site value with it).  A row whose value only another candidate's catalog range can hold (widened by
    ``margin``; :func:`~pkasite.features.sites.named_site_contradicted`) is marked ``group_conflict``."""
    from pkasite.features.sites import group_site, named_site_contradicted

    rows = rows.assign(site_from_group=False, group_conflict=False)
    todo = rows["site_atom"].isna() & (against_kind == 0) & (rows["site_group"].str.strip() != "")
    for label in rows.index[todo]:
        r = rows.loc[label]
        mol, sites = sites_of(r["smiles"])
        atom = group_site(mol, r["kind"], r["site_group"], sites=sites)
        if atom is None:
            continue
        if margin is not None and named_site_contradicted(mol, r["kind"], atom, float(r["pka"]), margin,
                                                          sites=sites):
            rows.at[label, "group_conflict"] = True
            continue
        rows.at[label, "site_atom"] = atom
        rows.at[label, "site_from_group"] = True
    return rows


def _numbering_conflicts(rows: pd.DataFrame, margin: float | None, sites_of: _SitesMemo) -> pd.Series:
    """Rows ranked as a later constant whose value only a stronger site's catalog range can hold
    (:func:`~pkasite.features.sites.numbering_contradicted`); all False when ``margin`` is None."""
    from pkasite.features.sites import numbering_contradicted

    out = pd.Series(False, index=rows.index)
    if margin is None:
        return out
    rank = pd.to_numeric(rows["constant_rank"], errors="coerce").fillna(1)
    for label in rows.index[rank > 1]:
        r = rows.loc[label]
        mol, sites = sites_of(r["smiles"])
        out[label] = numbering_contradicted(mol, r["kind"], int(rank[label]), float(r["pka"]), margin,
                                            sites=sites)
    return out


def _conflict_detail(row: dict) -> str:
    return (f"{row['source']} ranks this {row['kind']} value {row['pka']:g} as the compound's {row['kind']} "
            f"constant {int(row['constant_rank'])}, but only a stronger site's typical range can hold it; "
            "the number or the value is wrong")


def _group_conflict_detail(row: dict) -> str:
    return (f"{row['source']} names the group {row['site_group']!r} for this {row['kind']} value {row['pka']:g}, "
            "but only another site's typical range can hold it; the name or the value is wrong")


def _later_detail(row: dict, stronger: float) -> str:
    kind = row["kind"]
    if not math.isnan(stronger):
        why = f"a stronger {kind} constant of the compound, {stronger:g}, is kept"
    else:
        why = f"the source numbers it {kind} constant {int(row['constant_index'])}; no stronger value is kept"
    return (f"{kind} constant of rank {int(row['constant_rank'])} for this compound in {row['source']} "
            f"({why}; curation.first_constant_only=true)")


class _Std(NamedTuple):
    """What curation keeps of a standardized structure."""
    smiles: str
    inchikey: str
    site_atom: int | None


def _standardize_keys(keys: list[tuple[str, int | None]]) -> list:
    """(SMILES, site atom) -> :class:`_Std`, or the :class:`StructureError` it raised."""
    out = []
    for smiles, site_atom in keys:
        try:
            std = standardize_smiles(smiles, site_atom)
            out.append(_Std(std.smiles, std.inchikey, std.site_atom))
        except StructureError as exc:
            out.append(exc)
    return out


def _prefilled_cache(raw: pd.DataFrame, processes: int) -> dict:
    """Standardize every distinct (SMILES, site atom) of ``raw`` in ``processes`` processes up front
    (:func:`parallel.map_slices`); an empty cache when one process is all the work is worth."""
    distinct: dict = {}
    for smiles, value in zip(raw["smiles"], raw["site_atom"]):
        try:
            distinct[(smiles, _site_atom(value))] = None
        except Reject:
            continue  # rejected later, row by row, with its reason
    keys = list(distinct)
    n = process_count(len(keys), processes)
    if n == 1:
        return {}
    slices = [keys[r.start:r.stop] for r in split_even(len(keys), n)]
    return dict(zip(keys, (v for part in map_slices(_standardize_keys, slices, (), n) for v in part)))


def _standardized(smiles: str, site_atom: int | None, cache: dict):
    """Standardize once per (SMILES, site); a failure is cached as the error."""
    key = (smiles, site_atom)
    if key not in cache:
        cache[key] = _standardize_keys([key])[0]
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


def _key(value: Any) -> int:
    return -1 if value is None or pd.isna(value) else int(value)


def _aggregate(rows: pd.DataFrame, cfg: CurationConfig) -> tuple[pd.DataFrame, list[dict], list[dict]]:
    """Merge replicates of one (structure, kind, site, constant rank): median, count, spread; handle conflicts.

    Returns the measurements, the rejects of conflicting groups and the rows that became members.
    """
    if rows.empty:
        return pd.DataFrame(columns=MEASUREMENT_COLUMNS), [], []
    groups: dict[tuple, list[dict]] = {}
    for r in rows.to_dict("records"):
        key = (r["inchikey"], r["kind"], _key(r["site_atom"]), _key(r["constant_rank"]), int(r.get("drawn_charge", 0)))
        groups.setdefault(key, []).append(r)
    out, conflicts, merged = [], [], []
    for (_, kind, site_key, rank_key, drawn_charge), grp in groups.items():
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
        merged.extend(grp)
        first = grp[0]
        t = [r["temperature_c"] for r in grp if not pd.isna(r["temperature_c"])]
        out.append({
            "record_id": f"{first['source']}:{first['record_id']}", "smiles": first["smiles"],
            "inchikey": first["inchikey"], "kind": kind, "pka": float(statistics.median(values)), "n": len(grp),
            "spread": spread, "temperature_c": float(statistics.median(t)) if t else float("nan"),
            "method": _joined(r["method"] for r in grp), "source": _joined(r["source"] for r in grp),
            "licence": _joined(r["licence"] for r in grp),
            "site_atom": None if site_key < 0 else int(site_key),
            "constant_rank": None if rank_key < 0 else int(rank_key), "drawn_charge": drawn_charge,
            "members": ";".join(f"{r['source']}:{r['record_id']}" for r in grp),
            "split": _joined(r["split"] for r in grp), "in_house": any(bool(r["in_house"]) for r in grp),
            "conflict": bool(conflict),
        })
    result = pd.DataFrame(out, columns=MEASUREMENT_COLUMNS)
    for col in ("site_atom", "constant_rank"):
        result[col] = result[col].astype("Int64")
    result["drawn_charge"] = result["drawn_charge"].astype("int64")
    return result, conflicts, merged


def _kind_suspects(measurements: pd.DataFrame, margin: float | None, sites_of: _SitesMemo) -> pd.Series:
    """Per measurement: its value fits no site of its kind by the catalog's ranges (widened by
    ``margin``) but a site of the other kind (:func:`~pkasite.features.sites.kind_contradicted`): a
    kind misfiled in the source, or a site type whose catalog range is too narrow.  Flagged for review,
    kept as they are (as replicate conflicts with ``conflict_action: flag``).  Records that name their
    site or are drawn against their kind are not checked: their site is settled otherwise."""
    from pkasite.features.sites import kind_contradicted

    out = pd.Series(False, index=measurements.index, dtype=bool)
    if margin is None or not len(measurements):
        return out
    check = measurements["site_atom"].isna() & (measurements["drawn_charge"] == 0)
    for label, smiles, kind, value in measurements.loc[check, ["smiles", "kind", "pka"]].itertuples():
        mol, sites = sites_of(smiles)
        out[label] = kind_contradicted(mol, kind, float(value), margin, sites=sites)
    return out


def _constant_counts(merged: list[dict]) -> dict:
    """Rows kept as constants of rank 2 or more, and rows kept that the former numbering rule rejected."""
    recovered = [r for r in merged if r["numbering_rule_later"]]
    return {
        "later_constants_kept": sum(1 for r in merged if _key(r["constant_rank"]) > 1),
        "ranked_by_drawing": sum(1 for r in merged if r.get("ranked_by_drawing")),
        "drawn_against_kind": sum(1 for r in merged if r.get("drawn_charge", 0)),
        "sites_from_groups": sum(1 for r in merged if r.get("site_from_group")),
        "first_constants_recovered": sum(1 for r in recovered if _key(r["constant_rank"]) == 1),
        "rows_recovered": len(recovered),
    }


def _by_rank(measurements: pd.DataFrame) -> dict:
    if not len(measurements):
        return {}
    ranks = measurements["constant_rank"]
    out = {str(int(k)): int(v) for k, v in ranks.dropna().astype(int).value_counts().sort_index().items()}
    if ranks.isna().any():
        out["site_given"] = int(ranks.isna().sum())
    return out


def summarize(raw: pd.DataFrame, measurements: pd.DataFrame, rejects: pd.DataFrame,
              constants: dict | None = None) -> dict:
    """Counts per step and reject reason; checks that every input row is accounted for.

    ``constants`` (from :func:`curate`) adds how many later constants were kept and how many rows were
    kept that the former numbering rule rejected as later constants.
    """
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
        "measurements_by_rank": _by_rank(measurements),
        "replicate_groups": int((measurements["n"] > 1).sum()) if len(measurements) else 0,
        "flagged_conflicts": int(measurements["conflict"].sum()) if len(measurements) else 0,
        "kind_suspects": int(measurements["kind_suspect"].sum()) if "kind_suspect" in measurements else 0,
        "kind_suspect_examples": (measurements.loc[measurements["kind_suspect"].astype(bool), "record_id"].head(5).tolist()
                                  if "kind_suspect" in measurements else []),
        **(constants or {"later_constants_kept": 0, "ranked_by_drawing": 0, "drawn_against_kind": 0,
                         "sites_from_groups": 0, "first_constants_recovered": 0, "rows_recovered": 0}),
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
    lines.append("  by constant rank  " + ", ".join(f"{k}: {v}" for k, v in summary["measurements_by_rank"].items()))
    lines.append(f"replicate groups   {summary['replicate_groups']:>7}")
    lines.append(f"later constants kept {summary['later_constants_kept']:>5}  (rank 2 or more of their kind; "
                 f"{summary.get('ranked_by_drawing', 0)} of them ranked by a drawing with a site already titrated)")
    lines.append(f"drawn against kind {summary.get('drawn_against_kind', 0):>7}  (acid records drawn as cations, base "
                 f"records as anions: {summary.get('drawn_against_kind', 0)} drawn against their kind, each compared "
                 "with the step out of its drawn charge)")
    lines.append(f"sites from groups  {summary.get('sites_from_groups', 0):>7}  (a site the source's name of the "
                 "titrating group singles out among several)")
    lines.append(f"rows recovered     {summary['rows_recovered']:>7}  (kept, rejected by the former numbering rule; "
                 f"{summary['first_constants_recovered']} of them rank 1)")
    if summary.get("kind_suspects"):
        lines.append(f"kind suspects      {summary['kind_suspects']:>7}  (kept; the value fits only a site of the "
                     "other kind by the catalog's ranges: a misfiled acid/base kind or a catalog range to widen, "
                     "listed by kind_suspect in the measurements)")
        lines.append("  first: " + ", ".join(summary.get("kind_suspect_examples", [])))
    if summary["flagged_conflicts"]:
        lines.append(f"flagged conflicts  {summary['flagged_conflicts']:>7}")
    return "\n".join(lines)
