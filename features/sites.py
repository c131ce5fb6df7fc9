"""Ionizable-site catalog and site perception.

The catalog (``site_catalog.yaml``, shipped with the package) lists site types as SMARTS patterns
with the ionizable atom marked by atom map number 1: the atom that loses a proton for an acid, the
atom that gains one for a base. :func:`find_sites` returns those atoms for a molecule, and
:func:`assign_site` attaches a molecule-level measured constant to one of them.

Pure functions of an RDKit molecule; the only file read is the catalog.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass, field
from functools import lru_cache
from importlib import resources
from pathlib import Path
from types import MappingProxyType
from typing import Mapping, NamedTuple, Sequence

import yaml
from rdkit import Chem

from .graph import atoms_of

__all__ = [
    "KINDS",
    "SiteType",
    "Site",
    "Exclusion",
    "Catalog",
    "Assignment",
    "CatalogError",
    "SiteError",
    "NoSiteError",
    "SiteAssignmentError",
    "load_catalog",
    "find_sites",
    "assign_site",
    "assignment_confidence",
]

KINDS = ("acid", "base")
CATALOG_FILE = "site_catalog.yaml"
_TYPE_KEYS = {"name", "kind", "smarts", "prior", "range", "source", "priority"}
_EXCLUSION_KEYS = {"name", "kind", "smarts", "reason"}


class CatalogError(ValueError):
    """The site catalog file is malformed; the message names the file and the entry."""


class SiteError(ValueError):
    """Base class for site perception and assignment errors."""


class NoSiteError(SiteError):
    """The molecule has no ionizable site of the requested kind."""


class SiteAssignmentError(SiteError):
    """An explicitly given site atom is not a site of the requested kind."""


class RankWithoutSiteError(SiteError):
    """A later constant's rank exceeds the molecule's number of sites of its kind: its site is not perceived."""


@dataclass(frozen=True)
class SiteType:
    """One catalog entry: a SMARTS pattern for an ionizable group and its typical pKa."""

    name: str
    kind: str
    smarts: str
    prior: float
    low: float
    high: float
    source: str
    priority: int = 0

    def outside(self, value: float) -> float:
        """How far ``value`` lies outside this type's typical range ``[low, high]`` (0 inside it)."""
        return max(self.low - value, value - self.high, 0.0)


@dataclass(frozen=True)
class Exclusion:
    """A pattern whose mapped atom is never a site of ``kind`` (e.g. the NH2 of 2-aminopyridine)."""

    name: str
    kind: str
    smarts: str
    reason: str


@dataclass(frozen=True)
class Site:
    """An ionizable atom of a molecule (index in the molecule's own atom order)."""

    atom: int
    type: str
    kind: str
    prior: float


@dataclass(frozen=True)
class Assignment:
    """The site a molecule-level constant is attached to, with a confidence in [0, 1]."""

    atom: int
    type: str
    confidence: float
    reason: str


@dataclass(frozen=True, eq=False)
class _Pattern:
    """A compiled SMARTS query, the query-atom index carrying map number 1, and an element screen.

    ``elements`` holds, for each query atom restricted to a known set of elements, that set as atom
    codes (atomic number, plus 1000 when aromatic); a molecule can only match if it has at least
    one atom code of every set (checked before the comparatively slow substructure search).
    """

    query: Chem.Mol
    mapped: int
    elements: tuple[frozenset[int], ...] = ()


@dataclass(frozen=True, eq=False)
class Catalog:
    """Validated site types (sorted by descending priority, then file order) and exclusions."""

    version: str
    types: tuple[SiteType, ...]
    exclusions: tuple[Exclusion, ...] = ()
    by_name: Mapping[str, SiteType] = field(default_factory=dict)
    _type_patterns: tuple[_Pattern, ...] = ()
    _exclusion_patterns: tuple[_Pattern, ...] = ()
    _screens: dict = field(default_factory=dict, repr=False)  # element set -> patterns worth a search

    def screened(self, elements: frozenset[int]) -> tuple[tuple[int, ...], tuple[int, ...]]:
        """Indices of the exclusions and of the types whose element screen a molecule with atom codes
        ``elements`` passes (see :class:`_Pattern`).  A library holds few distinct element sets, so the
        answer is kept per set (up to 4096 sets) instead of screening ~130 patterns per molecule."""
        hit = self._screens.get(elements)
        if hit is None:
            def passing(patterns):
                return tuple(i for i, p in enumerate(patterns)
                             if not any(elements.isdisjoint(need) for need in p.elements))
            hit = (passing(self._exclusion_patterns), passing(self._type_patterns))
            if len(self._screens) >= 4096:
                self._screens.clear()
            self._screens[elements] = hit
        return hit


# ----------------------------------------------------------------------------- catalog loading


_AROMATIC = 1000  # offset RDKit's AtomType query adds to the atomic number of aromatic atoms


def _atom_code(atom: Chem.Atom) -> int:
    return atom.GetAtomicNum() + _AROMATIC * atom.GetIsAromatic()


def _query_tree(description: str) -> list:
    """Parse RDKit's ``DescribeQuery`` text (two-space indentation) into nested ``[label, children]``."""
    root: list = ["root", []]
    stack = [(-1, root)]
    for line in description.splitlines():
        if not line.strip():
            continue
        depth = (len(line) - len(line.lstrip(" "))) // 2
        node = [line.strip(), []]
        while stack[-1][0] >= depth:
            stack.pop()
        stack[-1][1][1].append(node)
        stack.append((depth, node))
    return root[1]


def _possible_elements(node: list) -> frozenset[int] | None:
    """Atom codes (atomic number, +1000 if aromatic) a query node can match; None if unrestricted."""
    label, children = node
    if label == "AtomAnd":
        sets = [e for e in (_possible_elements(c) for c in children) if e is not None]
        return frozenset.intersection(*sets) if sets else None
    if label == "AtomOr":
        sets = [_possible_elements(c) for c in children]
        return None if any(e is None for e in sets) else frozenset().union(*sets)
    match = re.fullmatch(r"(AtomType|AtomAtomicNum) (\d+) = val", label)
    if match:
        value = int(match.group(2))
        # AtomType already encodes aromaticity (aromatic = atomic number + 1000); #n allows both
        return frozenset({value} if match.group(1) == "AtomType" else {value, value + _AROMATIC})
    return None  # other primitives, negations, recursive SMARTS, wildcards


def _element_screen(query: Chem.Mol) -> tuple[frozenset[int], ...]:
    screen = set()
    for atom in query.GetAtoms():
        tree = _query_tree(atom.DescribeQuery()) if atom.HasQuery() else []
        elements = _possible_elements(tree[0]) if len(tree) == 1 else None
        if elements:
            screen.add(elements)
    return tuple(screen)


def _compile(smarts: object, where: str) -> _Pattern:
    """Parse a SMARTS string and locate its single atom with map number 1."""
    if not isinstance(smarts, str) or not smarts.strip():
        raise CatalogError(f"{where}: 'smarts' must be a non-empty string")
    query = Chem.MolFromSmarts(smarts)
    if query is None:
        raise CatalogError(f"{where}: SMARTS {smarts!r} does not parse; check brackets and primitives")
    mapped = [a.GetIdx() for a in query.GetAtoms() if a.GetAtomMapNum()]
    if len(mapped) != 1 or query.GetAtomWithIdx(mapped[0]).GetAtomMapNum() != 1:
        raise CatalogError(
            f"{where}: SMARTS {smarts!r} has {len(mapped)} mapped atoms; "
            "mark exactly one atom (the ionizable one) with ':1'"
        )
    return _Pattern(query, mapped[0], _element_screen(query))


def _check_keys(entry: object, allowed: set[str], required: set[str], where: str) -> dict:
    if not isinstance(entry, dict):
        raise CatalogError(f"{where}: expected a mapping, got {type(entry).__name__}")
    unknown = set(entry) - allowed
    if unknown:
        raise CatalogError(f"{where}: unknown key(s) {sorted(unknown)}; allowed: {sorted(allowed)}")
    missing = required - set(entry)
    if missing:
        raise CatalogError(f"{where}: missing key(s) {sorted(missing)}")
    if entry["kind"] not in KINDS:
        raise CatalogError(f"{where}: kind {entry['kind']!r} must be one of {KINDS}")
    return entry


def _parse_type(entry: object, where: str) -> SiteType:
    entry = _check_keys(entry, _TYPE_KEYS, _TYPE_KEYS - {"priority"}, where)
    try:
        prior = float(entry["prior"])
        low, high = (float(v) for v in entry["range"])
        priority = int(entry.get("priority", 0))
    except (TypeError, ValueError) as exc:
        raise CatalogError(
            f"{where}: 'prior' must be a number, 'range' a pair [low, high], 'priority' an integer ({exc})"
        ) from None
    if not low <= prior <= high:
        raise CatalogError(f"{where}: prior {prior} lies outside range [{low}, {high}]")
    return SiteType(
        name=str(entry["name"]),
        kind=entry["kind"],
        smarts=entry["smarts"],
        prior=prior,
        low=low,
        high=high,
        source=str(entry["source"]),
        priority=priority,
    )


def _load_yaml(text: str):
    """Safe YAML loading, with libyaml's C loader when PyYAML has it (several times faster)."""
    return yaml.load(text, Loader=getattr(yaml, "CSafeLoader", yaml.SafeLoader))


def _read_catalog(path: Path | None) -> tuple[str, object]:
    if path is None:
        resource = resources.files("pkasite.features").joinpath(CATALOG_FILE)
        if not resource.is_file():
            # Another distribution can shadow the ``pkasite.features`` package path (namespace
            # packages); the catalog always sits next to this module.
            resource = Path(__file__).with_name(CATALOG_FILE)
        return f"pkasite.features/{CATALOG_FILE}", _load_yaml(resource.read_text(encoding="utf-8"))
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise CatalogError(f"cannot read site catalog {path}: {exc}") from None
    return str(path), _load_yaml(text)


def _build_catalog(path: Path | None) -> Catalog:
    label, data = _read_catalog(path)
    if not isinstance(data, dict) or "version" not in data or not isinstance(data.get("site_types"), list):
        raise CatalogError(f"{label}: expected top-level keys 'version' and 'site_types' (a list)")
    unknown = set(data) - {"version", "site_types", "exclusions"}
    if unknown:
        raise CatalogError(f"{label}: unknown top-level key(s) {sorted(unknown)}")

    parsed: list[tuple[SiteType, _Pattern]] = []
    seen: set[str] = set()
    for i, entry in enumerate(data["site_types"]):
        name = entry.get("name", "?") if isinstance(entry, dict) else "?"
        where = f"{label}: site_types[{i}] ({name!r})"
        site_type = _parse_type(entry, where)
        if site_type.name in seen:
            raise CatalogError(f"{where}: duplicate name; site type names must be unique")
        seen.add(site_type.name)
        parsed.append((site_type, _compile(site_type.smarts, where)))
    # Stable sort: higher priority first, file order among equals.
    parsed.sort(key=lambda pair: -pair[0].priority)

    exclusions: list[tuple[Exclusion, _Pattern]] = []
    for i, entry in enumerate(data.get("exclusions") or []):
        name = entry.get("name", "?") if isinstance(entry, dict) else "?"
        where = f"{label}: exclusions[{i}] ({name!r})"
        entry = _check_keys(entry, _EXCLUSION_KEYS, _EXCLUSION_KEYS, where)
        exclusion = Exclusion(str(entry["name"]), entry["kind"], entry["smarts"], str(entry["reason"]))
        exclusions.append((exclusion, _compile(exclusion.smarts, where)))

    types = tuple(t for t, _ in parsed)
    return Catalog(
        version=str(data["version"]),
        types=types,
        exclusions=tuple(e for e, _ in exclusions),
        by_name=MappingProxyType({t.name: t for t in types}),
        _type_patterns=tuple(p for _, p in parsed),
        _exclusion_patterns=tuple(p for _, p in exclusions),
    )


@lru_cache(maxsize=8)
def _cached_catalog(path: str | None) -> Catalog:
    return _build_catalog(Path(path) if path is not None else None)


def load_catalog(path: str | Path | None = None) -> Catalog:
    """Load and validate a site catalog (the packaged one by default); results are cached per path.

    Raises :class:`CatalogError` naming the entry when a SMARTS does not parse, does not mark
    exactly one atom with ``:1``, has an unknown ``kind``, or repeats a name.
    """
    return _cached_catalog(str(Path(path).resolve()) if path is not None else None)


# ----------------------------------------------------------------------------- perception


def _mapped_atoms(mol: Chem.Mol, pattern: _Pattern) -> set[int]:
    """Indices of molecule atoms matched by the pattern's mapped atom (all matches, not uniquified).
    Callers screen patterns by element first (:meth:`Catalog.screened`)."""
    matches = mol.GetSubstructMatches(pattern.query, uniquify=False, maxMatches=100000)
    return {match[pattern.mapped] for match in matches}


def _paired_charge(mol: Chem.Mol, atom: int) -> bool:
    """The atom's formal charge is one half of a charge-separated neutral pair: it is bonded to an atom
    of the opposite charge whose own charge is balanced by its neighbours (the O- of an N-oxide or a
    nitro group, the N- and N+ of an azide, the ring n- and n+ of a sydnone).  Such a charge was never
    a proton's: the O- of an N-oxide is no deprotonated acid, the N+ of an azide no protonated base.  A
    real ion beside a charged atom keeps its site (a nitronate's O-: its N+ carries two O-)."""
    a = mol.GetAtomWithIdx(int(atom))
    q = a.GetFormalCharge()
    if q == 0:
        return False
    for nb in a.GetNeighbors():
        qn = nb.GetFormalCharge()
        if qn * q < 0 and qn + sum(x.GetFormalCharge() for x in nb.GetNeighbors() if x.GetFormalCharge() * qn < 0) == 0:
            return True
    return False


def find_sites(mol: Chem.Mol, catalog: Catalog | None = None) -> list[Site]:
    """Ionizable sites of ``mol``, sorted by atom index then kind.

    Indices refer to ``mol``'s own atom order (explicit hydrogens, if present, keep their indices
    and are never sites). Each (atom, kind) gets one site: the matching type with the highest
    priority. Atoms matched by an exclusion of that kind are not sites. Works on neutral forms,
    ions and zwitterions alike (acid patterns match the conjugate base, base patterns the
    conjugate acid).  A charge that is half of a charge-separated neutral pair (:func:`_paired_charge`:
    N-oxides, azides, mesoionic rings) is not a proton's, so an acid site never sits on such an anion
    and a base site never on such a cation.
    """
    if mol is None:
        raise SiteError("find_sites needs an RDKit molecule, got None (unreadable SMILES?)")
    catalog = catalog or load_catalog()
    exclusion_ids, type_ids = catalog.screened(frozenset(map(_atom_code, atoms_of(mol))))
    excluded = {kind: set() for kind in KINDS}
    for i in exclusion_ids:
        excluded[catalog.exclusions[i].kind] |= _mapped_atoms(mol, catalog._exclusion_patterns[i])
    found: dict[tuple[int, str], Site] = {}
    for i in type_ids:
        site_type = catalog.types[i]
        for atom in _mapped_atoms(mol, catalog._type_patterns[i]):
            key = (atom, site_type.kind)
            if key not in found and atom not in excluded[site_type.kind]:
                found[key] = Site(atom, site_type.name, site_type.kind, site_type.prior)
    for atom, kind in list(found):
        charge = mol.GetAtomWithIdx(atom).GetFormalCharge()
        if (charge < 0 if kind == "acid" else charge > 0) and _paired_charge(mol, atom):
            del found[(atom, kind)]
    return [found[key] for key in sorted(found)]


def _charged_form(mol: Chem.Mol, site: Site) -> bool:
    """The site is drawn in its charged form: an acid as its anion, a base protonated."""
    charge = mol.GetAtomWithIdx(site.atom).GetFormalCharge()
    return charge < 0 if site.kind == "acid" else charge > 0


class DrawnTitration(NamedTuple):
    """What a drawing of the titrating species says about the measured step (:func:`drawn_titration`)."""
    titrated: int      # sites of the record's kind drawn already titrated (0 for a zwitterion drawing)
    against_kind: int  # net drawn charge when it runs against the kind (acid drawn as a cation: > 0)


def drawn_titration(mol: Chem.Mol, kind: str, catalog: Catalog | None = None) -> DrawnTitration:
    """The sites ``mol`` is drawn with charged (an acid site as its anion, a base site protonated;
    charge-separated pairs such as N-oxides and permanent charges are no sites, see :func:`find_sites`),
    read for a record of ``kind`` from a source that draws each record as the species that gives up
    (acid) or takes up (base) the measured proton:

    - ``titrated``: how many sites of ``kind`` are drawn already titrated, so the record is a later
      constant of its kind (a carboxylate drawn beside a phenol OH with an acid value is the phenol's
      constant); 0 when a site of the other kind is drawn charged as well: a zwitterion drawing does not
      say which of its charges came first.
    - ``against_kind``: the net charge of the charged sites when it runs against ``kind`` (positive for
      an acid drawn as a cation, negative for a base drawn as an anion; else 0): the record is the step
      out of that charge, whichever site it titrates (3-hydroxypyridine drawn as its pyridinium cation
      with an acid value is the cation's first deprotonation; drawn as its phenolate with a base value,
      the anion's first protonation).
    """
    if kind not in KINDS:
        raise ValueError(f"kind must be one of {KINDS}, got {kind!r}")
    charged = [s for s in find_sites(mol, catalog) if _charged_form(mol, s)]
    atoms = {s.atom for s in charged}
    titrated = 0 if any(s.kind != kind for s in charged) else len(atoms)
    charge = sum(mol.GetAtomWithIdx(a).GetFormalCharge() for a in atoms)
    return DrawnTitration(titrated, charge if (charge > 0 if kind == "acid" else charge < 0) else 0)


# ----------------------------------------------------------------------------- label assignment


def assignment_confidence(gap: float) -> float:
    """Confidence from the pKa gap between the chosen site and the runner-up: ``1 - exp(-gap)``.

    A gap of 0 (indistinguishable sites) gives 0, one pKa unit about 0.63, three units about 0.95.
    """
    return 1.0 - math.exp(-max(gap, 0.0))


def _distinct_candidates(mol: Chem.Mol, candidates: Sequence[Site]) -> list[Site]:
    """Keep one site per class of symmetry-equivalent atoms (the lowest index)."""
    ranks = list(Chem.CanonicalRankAtoms(mol, breakTies=False))
    seen: set[int] = set()
    kept = []
    for site in sorted(candidates, key=lambda s: s.atom):
        if ranks[site.atom] not in seen:
            seen.add(ranks[site.atom])
            kept.append(site)
    return kept


def _consistent_with(sites: list[Site], value: float, tolerance: float, by_prediction: bool,
                     site_value, catalog: Catalog) -> list[Site]:
    """The sites a measured value can belong to (see :func:`assign_site`); never empty.

    A site qualifies when its type's catalog range, widened by ``tolerance``, holds the value and,
    with predictions, when its prediction is within ``tolerance`` of the value. The range test
    keeps a model from pulling a value onto a site type that cannot carry it (a pKa of 8 onto a
    sulfonic acid) on the strength of its own earlier mistakes.
    """
    def range_gap(site: Site) -> float:
        return catalog.by_name[site.type].outside(value)

    def gap(site: Site) -> float:
        return max(range_gap(site), abs(site_value(site) - value)) if by_prediction else range_gap(site)

    consistent = [s for s in sites if gap(s) <= tolerance]
    return consistent or [min(sites, key=lambda s: (gap(s), s.atom))]


def assign_site(
    mol: Chem.Mol,
    kind: str,
    sites: Sequence[Site] | None = None,
    site_atom: int | None = None,
    predicted: Mapping[int, float] | None = None,
    value: float | None = None,
    tolerance: float = 2.0,
    catalog: Catalog | None = None,
    rank: int = 1,
) -> Assignment:
    """Choose the site a molecule-level constant of ``kind`` belongs to.

    Order of rules: an explicit ``site_atom`` wins (it must be a site of that kind); otherwise,
    when ``predicted`` (atom -> predicted pKa) is given, the most acidic (lowest) acid site or the
    most basic (highest) base site by prediction, sites without a prediction falling back to their
    catalog prior; otherwise the same choice by catalog prior. Symmetry-equivalent atoms count as
    one candidate (lowest index is reported).

    With the measured ``value`` given, only sites consistent with it compete: those whose catalog
    range widened by ``tolerance`` holds it and, with predictions, that are also predicted within
    ``tolerance`` of it. Compilations sometimes list a molecule's second constant of a kind (a
    phenol's 10 beside a carboxylic acid); such a value then goes to the site it can belong to.
    When no site is consistent, the one closest to the value is chosen. ``confidence`` is
    :func:`assignment_confidence` of the gap to the runner-up, 1.0 with a single candidate or an
    explicit atom.

    ``rank > 1`` says the value is the molecule's ``rank``-th strongest constant of the kind (a later
    constant): it goes to the ``rank``-th distinct candidate in the same order (the weakest one when
    symmetry leaves fewer), and the value plays no part in the choice. A rank above the number of
    candidate sites raises :class:`RankWithoutSiteError`: 4-pyrrolidinopyridine's dication constant
    (-0.53) is its amino N's, which conjugation with the ring N takes out of the sites, and attached to the
    ring N it would teach the model a 4-aminopyridine at -0.5.
    """
    if kind not in KINDS:
        raise ValueError(f"kind must be one of {KINDS}, got {kind!r}")
    if sites is None:
        sites = find_sites(mol)
    candidates = [s for s in sites if s.kind == kind]
    if not candidates:
        raise NoSiteError(
            f"no {kind} site found in {Chem.MolToSmiles(mol)}; no {kind} group of the catalog "
            f"matches this molecule, so a measured {kind} constant cannot be attached to an atom"
        )
    if site_atom is not None:
        for site in candidates:
            if site.atom == site_atom:
                return Assignment(site.atom, site.type, 1.0, "explicit site_atom")
        available = ", ".join(f"{s.atom} ({s.type})" for s in candidates)
        raise SiteAssignmentError(
            f"atom {site_atom} is not a {kind} site of {Chem.MolToSmiles(mol)}; "
            f"{kind} sites are: {available}"
        )

    if rank > len(candidates):
        raise RankWithoutSiteError(
            f"{Chem.MolToSmiles(mol)} has {len(candidates)} {kind} site(s) but the value is ranked its constant "
            f"{rank} of that kind: the site of this constant is not one the catalog perceives"
        )
    distinct = _distinct_candidates(mol, candidates)
    source = "predicted pKa" if predicted is not None else "catalog prior"
    by_prediction = predicted is not None
    predicted = predicted or {}
    sign = 1.0 if kind == "acid" else -1.0  # acids: lowest value wins; bases: highest wins

    def site_value(site: Site) -> float:
        return float(predicted.get(site.atom, site.prior))

    if value is not None and len(distinct) > 1 and rank == 1:
        distinct = _consistent_with(distinct, float(value), tolerance, by_prediction, site_value,
                                    catalog or load_catalog())

    ranked = sorted(distinct, key=lambda s: (sign * site_value(s), s.atom))
    pos = min(max(rank, 1), len(ranked)) - 1
    chosen = ranked[pos]
    if len(ranked) == 1:
        confidence = 1.0
    else:
        gaps = [abs(site_value(ranked[j]) - site_value(chosen)) for j in (pos - 1, pos + 1) if 0 <= j < len(ranked)]
        confidence = assignment_confidence(min(gaps))
    extreme = "lowest" if kind == "acid" else "highest"
    nth = "" if pos == 0 else f"number {pos + 1} by "
    reason = f"{nth}{extreme} {source} ({site_value(chosen):.2f}) among {len(ranked)} distinct {kind} site(s)"
    return Assignment(chosen.atom, chosen.type, confidence, reason)


def _holds(catalog: Catalog, site: Site, value: float, margin: float) -> bool:
    """The site's type's catalog range, widened by ``margin``, holds ``value``."""
    return catalog.by_name[site.type].outside(value) <= margin


def numbering_contradicted(mol: Chem.Mol, kind: str, rank: int, value: float, margin: float = 2.0,
                           catalog: Catalog | None = None, sites: Sequence[Site] | None = None) -> bool:
    """Whether a value a source numbers as the molecule's ``rank``-th constant of ``kind`` (``rank > 1``)
    cannot be that constant by the catalog's ranges while it can be a stronger one.

    The sites are ordered as :func:`assign_site` orders them without predictions (catalog prior, one
    per class of symmetry-equivalent atoms). The numbering is contradicted when the value lies more than
    ``margin`` outside the range of the rank-th site and of every weaker one, and within ``margin`` of
    the range of a stronger one: glycolic acid's 3.67 numbered as its second acid constant can only be
    the carboxylic acid's (the alcohol's range is 9-17). Either the number or the value is wrong.
    ``sites``: the molecule's :func:`find_sites`, when the caller has them.
    """
    catalog = catalog or load_catalog()
    candidates = [s for s in (find_sites(mol, catalog) if sites is None else sites) if s.kind == kind]
    if rank <= 1 or len(candidates) < 2:
        return False
    sign = 1.0 if kind == "acid" else -1.0
    ranked = sorted(_distinct_candidates(mol, candidates), key=lambda s: (sign * s.prior, s.atom))
    pos = min(rank, len(ranked)) - 1
    return (pos > 0 and not any(_holds(catalog, s, value, margin) for s in ranked[pos:])
            and any(_holds(catalog, s, value, margin) for s in ranked[:pos]))


def named_site_contradicted(mol: Chem.Mol, kind: str, atom: int, value: float, margin: float = 2.0,
                            catalog: Catalog | None = None, sites: Sequence[Site] | None = None) -> bool:
    """Whether a value a source attaches to the site at ``atom`` cannot be that site's by the catalog's
    ranges (more than ``margin`` outside its type's range) while another candidate of ``kind`` can:
    indole-5-carboxylic acid's 4.1 named as its N-H's (an indole N-H is about 17) is the carboxylic
    acid's. Either the name or the value is wrong. ``sites``: the molecule's :func:`find_sites`, when
    the caller has them."""
    catalog = catalog or load_catalog()
    candidates = [s for s in (find_sites(mol, catalog) if sites is None else sites) if s.kind == kind]
    named = [s for s in candidates if s.atom == atom]
    return (bool(named) and not _holds(catalog, named[0], value, margin)
            and any(_holds(catalog, s, value, margin) for s in candidates if s.atom != atom))


def kind_contradicted(mol: Chem.Mol, kind: str, value: float, margin: float = 2.0,
                      catalog: Catalog | None = None, sites: Sequence[Site] | None = None) -> bool:
    """Whether a value filed as a constant of ``kind`` fits no candidate site of that kind by the
    catalog's ranges (each widened by ``margin``) while a site of the other kind's range holds it:
    glycinamide's amine constant 8.0 filed as an acid (its only acid candidate, the amide N-H, is about
    15), pyridine's 5.2 filed as an acid.  Either the kind is misfiled or the catalog misses the site's
    range; the record is worth a look, and nothing here says which.  ``sites``: the molecule's
    :func:`find_sites`, when the caller has them."""
    catalog = catalog or load_catalog()
    sites = find_sites(mol, catalog) if sites is None else sites
    own = [s for s in sites if s.kind == kind]
    return (not any(_holds(catalog, s, value, margin) for s in own)
            and any(_holds(catalog, s, value, margin) for s in sites if s.kind != kind))


# ----------------------------------------------------------------------------- a source's group names

#: Acid sites that are oxo-acid O-H groups: a source calls them by their group (COOH, SO3H, PO3H2), so its
#: plain "OH" means one of the other hydroxyls (alcohol, phenol, enol, oxime, ...).
_OXOACID_TYPES = frozenset({
    "carboxylic_acid", "thiocarboxylic_acid", "peroxy_acid", "sulfonic_acid", "sulfate_monoester_oh",
    "sulfamic_acid", "sulfinic_acid", "phosphonic_acid_oh", "phosphate_oh", "phosphorus_oxoacid_oh",
    "arsonic_acid_oh", "selenium_oxoacid_oh", "boronic_acid_oh",
})

#: How a compilation names the titrating group of an acid record (upper case, letters and digits only)
#: and which candidate sites (site type, element of the site atom) each name can mean.
_ACID_GROUPS = {
    "COOH": lambda t, el: t == "carboxylic_acid",
    "CO2H": lambda t, el: t == "carboxylic_acid",
    "SO2NH": lambda t, el: el == "N" and "sulfon" in t,
    "SO2NHH": lambda t, el: el == "N" and "sulfon" in t,
    "PO3H2": lambda t, el: t in ("phosphonic_acid_oh", "phosphate_oh"),
    "SH": lambda t, el: el == "S",
    "OH": lambda t, el: el == "O" and t not in _OXOACID_TYPES,
    "HOFOH": lambda t, el: el == "O" and t not in _OXOACID_TYPES,
    "NH": lambda t, el: el == "N",
    "CH": lambda t, el: el == "C",
}


def group_site(mol: Chem.Mol, kind: str, group: str, catalog: Catalog | None = None,
               sites: Sequence[Site] | None = None) -> int | None:
    """The site a source's name of the titrating group points to: the atom of the one distinct candidate
    site of ``kind`` that the name can mean, when the molecule has several; None otherwise.

    Only acid names are read (COOH, CO2H, SO2NH, PO3H2, SH, OH, NH, CH, with or without hyphens); a
    plain OH means a hydroxyl other than an oxo-acid's. Base names in the compilations (NH+, NH2, R2NH,
    N) rarely single out one of several nitrogens and are not read. Lists ("NH, NH"), question marks and
    names that fit no candidate or several give None: the record keeps its rank and value-free site.
    ``sites``: the molecule's :func:`find_sites`, when the caller has them.
    """
    if kind != "acid" or not isinstance(group, str):
        return None
    accepts = _ACID_GROUPS.get(re.sub(r"[^A-Z0-9]", "", group.upper()))
    if accepts is None or "," in group:
        return None
    candidates = [s for s in (find_sites(mol, catalog) if sites is None else sites) if s.kind == kind]
    distinct = _distinct_candidates(mol, candidates) if len(candidates) > 1 else candidates
    if len(distinct) < 2:
        return None
    chosen = [s for s in distinct if accepts(s.type, mol.GetAtomWithIdx(s.atom).GetSymbol())]
    return chosen[0].atom if len(chosen) == 1 else None
