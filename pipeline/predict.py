"""Prediction for a list of molecules: per-site and per-molecule tables.

Every input row gives exactly one molecule row, in input order; a row that
cannot be predicted carries a ``status`` other than ``ok`` and a message in
``warnings``.  Nothing here raises for a bad molecule.

Every input passes cheap size checks before any expensive RDKit call (see
:func:`prepare_input`): RDKit's canonical SMILES writer recurses along chains and
overflows the stack on chains of about 20,000 atoms, so nothing larger than the limits
below ever reaches standardization, features or fingerprints.
"""
from __future__ import annotations

import hashlib
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from rdkit import Chem
from rdkit.Chem import Descriptors

from pkasite.features.fingerprints import site_neighbourhood_bits
from pkasite.features.graph import atoms_of
from pkasite.features.site_features import featurize_sites
from pkasite.features.site_pairs import lactim_pairs
from pkasite.features.sites import KINDS, find_sites, load_catalog
from pkasite.features.standardize import (AZOLE_TAUTOMER_WARNING, LACTIM_WARNING, StructureError, lactim_drawing,
                                          quiet_rdkit, smiles_text_problem, standardize_mol)
from pkasite.models.domain import similarity_bin, tanimoto_max
from pkasite.models.microstates import Microstates, default_interaction_model, site_holds
from pkasite.models.prior_blend import blend

from .bundle import ModelBundle
from .sitetable import pair_terms

MOLECULE_COLUMNS = ["id", "smiles", "status", "acid_pka", "acid_pka_low", "acid_pka_high", "base_pka",
                    "base_pka_low", "base_pka_high", "macro_pkas", "macro_pkas_all", "isoelectric_ph",
                    "charge_at_ph", "major_species", "fraction_neutral", "in_domain", "warnings"]
WINDOW = (0.0, 14.0)
SITE_COLUMNS = ["id", "atom", "site_type", "kind", "pka", "pka_low", "pka_high", "similarity", "in_domain",
                "warnings"]
# Size limits, checked before standardization (see prepare_input).  300 heavy atoms is several times the
# largest training molecule; 10,000 characters is about 16 per heavy atom at that limit (the open data
# use at most about 5), far below the ~20,000-atom chains that overflow RDKit's SMILES writer.
MAX_HEAVY_ATOMS = 300
MAX_RINGS = 100               # ring count (cycle rank: bonds - atoms + fragments) of the whole input
MAX_SMILES_CHARS = 10_000
MAX_RECORD_CHARS = 500_000    # one SDF record's connection table
ECHO_CHARS = 200              # longer rejected inputs are echoed cut to this (spreadsheet cells hold 32,767)
ORGANIC = {"H", "B", "C", "N", "O", "F", "Si", "P", "S", "Cl", "Se", "Br", "I"}
INTERVAL_LEVEL = 0.9
# every value of ``status``; all but ok come with a message in ``warnings``
STATUSES = ("ok", "empty", "unreadable_smiles", "unreadable_record", "unreadable_row", "radical", "unsupported_element",
            "too_large", "invalid_structure", "crashed", "timeout")


def default_model_path():
    """The model bundle shipped inside the package (rebuilt by scripts/build_shipped_model.sh)."""
    from importlib import resources
    from pathlib import Path

    path = Path(str(resources.files("pkasite.models").joinpath("shipped", "default")))
    if not (path / "manifest.json").is_file():
        raise FileNotFoundError(f"no shipped model at {path}; run scripts/build_shipped_model.sh or pass --model")
    return path


@dataclass
class PreparedInput:
    status: str = "ok"
    warnings: list[str] = field(default_factory=list)
    mol: Chem.Mol | None = None
    original_atoms: tuple[int, ...] = ()
    smiles: str | None = None  # what the output's smiles column shows (None: the input as given)


def echo_text(text) -> str:
    """The input as shown in the output: as given, or cut to ECHO_CHARS when longer than any accepted input."""
    text = "" if _missing(text) else str(text)
    if len(text) > MAX_SMILES_CHARS:
        return f"{text[:ECHO_CHARS]}... ({len(text)} characters)"
    return text


def _missing(value) -> bool:
    return value is None or (isinstance(value, float) and np.isnan(value))


def text_problem(text, fmt: str = "smiles") -> tuple[str, str] | None:
    """The status and message of an input that fails before parsing (empty or too long), else None.

    ``fmt`` is ``"smiles"`` or ``"molblock"`` (one SDF record).  Cheap: the batch reader calls it on
    every row as it reads, so an over-long string never travels further."""
    what = "SMILES" if fmt == "smiles" else "SDF record"
    if _missing(text) or not str(text).strip():
        return ("empty", "no SMILES in this row") if fmt == "smiles" else ("unreadable_record", "the SDF record is empty")
    limit = MAX_SMILES_CHARS if fmt == "smiles" else MAX_RECORD_CHARS
    if len(str(text)) > limit:
        return "too_large", f"{what} of {len(str(text))} characters (limit {limit})"
    if fmt == "smiles" and (problem := smiles_text_problem(str(text).strip())):
        return "unreadable_smiles", problem
    return None


def _parse(text: str, fmt: str, sanitize: bool) -> Chem.Mol | None:
    try:
        if fmt == "smiles":
            return Chem.MolFromSmiles(text, sanitize=sanitize)
        return Chem.MolFromMolBlock(text, sanitize=sanitize, removeHs=sanitize)
    except Exception:  # RDKit raises for a few malformed inputs instead of returning None
        return None


def size_problem(mol: Chem.Mol) -> str | None:
    """Why an unsanitized molecule is too large to standardize, else None (graph counts only, no perception)."""
    atomic = [a.GetAtomicNum() for a in atoms_of(mol)]
    frags = Chem.GetMolFrags(mol, sanitizeFrags=False)
    heavy = max((sum(atomic[i] > 1 for i in frag) for frag in frags), default=0)
    if heavy > MAX_HEAVY_ATOMS:
        return f"{heavy} heavy atoms (limit {MAX_HEAVY_ATOMS})"
    rings = mol.GetNumBonds() - mol.GetNumAtoms() + len(frags)
    if rings > MAX_RINGS:
        return f"{rings} rings (limit {MAX_RINGS})"
    return None


def _unreadable(text: str, fmt: str, raw: Chem.Mol | None) -> PreparedInput:
    reason = "broken atom or bond block" if fmt == "molblock" else ""
    if raw is not None:  # it parses as a graph: sanitization says what is wrong
        try:
            Chem.SanitizeMol(raw)
        except Exception as exc:  # noqa: BLE001 - RDKit's sanitization errors have several types
            reason = str(exc).strip().splitlines()[0][:200] if str(exc).strip() else reason
    if fmt == "molblock":
        return PreparedInput("unreadable_record", [f"the SDF record cannot be read: {reason}"], smiles="")
    return PreparedInput("unreadable_smiles",
                         [f"RDKit cannot read SMILES {text[:80]!r}" + (f": {reason}" if reason else "")])


def prepare_input(smiles, fmt: str = "smiles") -> PreparedInput:
    """Read and standardize one input structure; problems become a status or a warning.

    ``fmt``: ``"smiles"``, or ``"molblock"`` for one SDF record, which is read, written as SMILES (shown
    in the output; site atoms index it) and prepared as that SMILES.  Guard order, cheapest first:
    empty or over-long text; the unsanitized graph's largest fragment (heavy atoms) and ring count;
    only then RDKit's full parse, standardization and everything after."""
    quiet_rdkit()
    problem = text_problem(smiles, fmt)
    if problem:
        return PreparedInput(problem[0], [problem[1]], smiles=echo_text(smiles) if fmt == "smiles" else "")
    text = str(smiles).strip() if fmt == "smiles" else str(smiles)
    raw = _parse(text, fmt, sanitize=False)
    if raw is not None and (too_big := size_problem(raw)):
        return PreparedInput("too_large", [too_big], smiles=None if fmt == "smiles" else "")
    mol = _parse(text, fmt, sanitize=True) if raw is not None else None
    if mol is None:
        return _unreadable(text, fmt, raw)
    if fmt == "molblock":
        written = Chem.MolToSmiles(mol)
        out = prepare_input(written)
        out.smiles = written
        return out
    out = PreparedInput()
    atoms = atoms_of(mol)
    if any(a.GetNumRadicalElectrons() for a in atoms):
        return PreparedInput("radical", ["radicals are outside what the model covers"])
    if len(Chem.GetMolFrags(mol)) > 1:
        out.warnings.append("mixture or salt: predicted the largest organic fragment")
    if any(a.GetIsotope() for a in atoms):
        for a in atoms:
            a.SetIsotope(0)
        out.warnings.append("isotope labels ignored")
    if any(a.GetFormalCharge() for a in atoms):
        out.warnings.append("charged input: neutralized where a proton could be added or removed")
    try:
        std = standardize_mol(mol, with_inchikey=False)
    except StructureError as exc:
        return PreparedInput("invalid_structure", [str(exc)])
    elements = {a.GetSymbol() for a in atoms_of(std.mol)} - ORGANIC
    if elements:
        return PreparedInput("unsupported_element", [f"element(s) {', '.join(sorted(elements))} not supported"])
    if lactim_drawing(std.mol):
        out.warnings.append(LACTIM_WARNING)
    if std.azole_tautomers_differ:
        out.warnings.append(AZOLE_TAUTOMER_WARNING)
    out.mol, out.original_atoms = std.mol, std.original_atoms
    return out


class SeenIds:
    """The first row of every id seen so far, to warn about duplicates across a whole run.

    Keys are 8-byte digests of the ids, so memory grows by about 100 bytes per distinct id whatever
    the id's length (about 100 MB per million distinct ids)."""

    def __init__(self):
        self._first: dict[int, int] = {}

    def first_row(self, rid, row: int) -> int | None:
        """The row that first had ``rid`` (1-based), or None when ``row`` is its first."""
        key = int.from_bytes(hashlib.blake2b(str(rid).encode("utf-8", "surrogatepass"), digest_size=8).digest(),
                             "little")
        first = self._first.setdefault(key, row)
        return None if first == row else first

    def first_rows(self, ids, start: int = 1) -> list[int | None]:
        return [self.first_row(rid, start + i) for i, rid in enumerate(ids)]


def fill_id(value, row: int) -> str:
    """The id of input row ``row``: the given one, or ``row<N>`` when it is missing or blank."""
    if _missing(value) or value is pd.NA or not str(value).strip():
        return f"row{row}"
    return str(value)


def status_row(rid, smiles, status: str, warnings: list[str]) -> dict:
    """A per-molecule row without predictions: its id, input, status and the messages."""
    row = {c: None for c in MOLECULE_COLUMNS}
    row.update(id=rid, smiles=smiles, status=status, warnings="; ".join(warnings))
    return row


def duplicate_warning(first_row: int | None) -> list[str]:
    return [] if first_row is None else [f"duplicate id (also row {first_row})"]


def _major_species(mol: Chem.Mol, atoms, kinds, protonated) -> str:
    """SMILES of the most populated microstate: acids without their proton below, bases with one."""
    rw = Chem.RWMol(mol)
    for atom, kind, on in zip(atoms, kinds, protonated):
        a = rw.GetAtomWithIdx(int(atom))
        hs = a.GetTotalNumHs()
        if kind == "acid" and not on and hs > 0:
            a.SetNumExplicitHs(hs - 1)
            a.SetFormalCharge(a.GetFormalCharge() - 1)
        elif kind == "base" and on:
            a.SetNumExplicitHs(hs + 1)
            a.SetFormalCharge(a.GetFormalCharge() + 1)
        else:
            continue
        a.SetNoImplicit(True)
    try:
        Chem.SanitizeMol(rw)
        return Chem.MolToSmiles(rw)
    except Exception:  # an unusual valence after (de)protonation: report the neutral form
        return Chem.MolToSmiles(mol)


def molecule_microstates(mol: Chem.Mol, atoms, kinds, pka, priors, interactions,
                         window: tuple[float, float] = WINDOW, ph: float | None = None) -> Microstates:
    """The molecule's microstates: its sites with their predicted pKa, pair terms from the bundle's
    interaction model, tautomeric pairs exclusive, weak sites held, lactim pairs counted as neutral (see
    :mod:`pkasite.models.microstates`); beyond the exact set, sites enter by mean field at ``ph``."""
    kinds = np.asarray(kinds)
    W = ex = taut = None
    if len(atoms) > 1:
        W, ex = pair_terms(mol, atoms, kinds, interactions)
        taut = lactim_pairs(mol, atoms, kinds)
    weak, strong = site_holds(kinds, priors, pka, window)
    return Microstates(np.asarray(pka, float), kinds, W, window=window, exclusive=ex, hold=weak, hold_charged=strong,
                       tautomer=taut, ph_ref=ph)


def _site_warnings(bundle: ModelBundle, site_type, kind: str, similarity: float, pka: float) -> list[str]:
    """Why a site is outside the applicability domain (empty: in domain).  ``site_type`` is the catalog
    entry of the site."""
    dom = bundle.domain
    warns = []
    support = dom["type_support"].get(kind, {}).get(site_type.name, 0)
    if support < dom["min_type_support"]:
        warns.append(f"site type {site_type.name} has {support} training examples")
    if similarity < dom["threshold"]:
        warns.append(f"nearest training site similarity {similarity:.2f}")
    margin = dom.get("range_margin")
    if margin is not None and site_type.outside(pka) > margin:
        warns.append(f"predicted {pka:.1f}, outside the usual range of {site_type.name} "
                     f"({site_type.low:g} to {site_type.high:g}); check the drawing (tautomer, charge)")
    return warns


def predict_records(bundle: ModelBundle, ids, smiles, ph: float = 7.4, level: float = INTERVAL_LEVEL,
                    explain: bool = False, window: tuple[float, float] = WINDOW, *, fmt: str = "smiles",
                    problems=None, duplicate_of=None) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Per-molecule and per-site predictions for parallel lists of ids and SMILES.

    Site values are microscopic constants of the neutral molecule; every molecule-level value
    (``acid_pka``, ``base_pka``, ``macro_pkas`` inside ``window``, ``macro_pkas_all``, ``isoelectric_ph``,
    ``charge_at_ph``, ``fraction_neutral``, ``major_species``) comes from one microstate model.

    With ``explain`` the per-site table gets an ``explanation`` column: the largest feature
    contributions of each site in chemistry words (see :mod:`pkasite.pipeline.explain`).

    ``fmt="molblock"``: the inputs are SDF records (the output shows their SMILES).  ``problems``: per
    row, None or a ``(status, message)`` already decided by the caller (the row is not parsed).
    ``duplicate_of``: per row, the row number that first had its id, or None (default: duplicates
    within this call, rows numbered from 1).
    """
    ids, smiles = list(ids), list(smiles)
    problems = problems if problems is not None else [None] * len(smiles)
    prepared = [PreparedInput(p[0], [p[1]]) if p else prepare_input(s, fmt) for s, p in zip(smiles, problems)]
    duplicate_of = duplicate_of if duplicate_of is not None else SeenIds().first_rows(ids)
    catalog = load_catalog()
    interactions = bundle.interactions or default_interaction_model()
    items, owners, priors = [], [], []
    for i, p in enumerate(prepared):
        if p.mol is None:
            continue
        for s in find_sites(p.mol, catalog):
            items.append((p.mol, s.atom, s.kind, s.type))
            owners.append(i)
            priors.append(s.prior)
    priors = np.array(priors, float)
    n = len(items)
    if n:
        X = featurize_sites(items, bundle.settings, bundle.site_types)
        kinds = np.array([it[2] for it in items])
        pka = bundle.regressor.predict(X, kinds)
        # with a bundle that blends, a site of a type without training labels leans towards its catalog prior
        weights = bundle.domain.get("unseen_type_weight")
        model_pka = pka
        blended = np.zeros(n, bool)
        if weights:
            support = bundle.domain["type_support"]
            blended = np.array([support.get(k, {}).get(t, 0) == 0 for _, _, k, t in items])
            pka = blend(pka, priors, blended, kinds, weights)
        bits = np.stack([site_neighbourhood_bits(m, a) for m, a, _, _ in items])
        sim = np.zeros(n)
        for kind in KINDS:
            sel = kinds == kind
            if sel.any() and kind in bundle.train_bits:
                sim[sel] = tanimoto_max(bits[sel], bundle.train_bits[kind])
        bins = similarity_bin(sim)
        half = bundle.calibrator.half_width(bins, level)
        # the molecule's constant of a kind gets the molecule-level interval of the site it comes from
        mol_cal = bundle.molecule_calibrator or bundle.calibrator
        mol_half = mol_cal.half_width(bins, level)
        if explain:
            from .explain import explain_sites, format_explanation
            pairs = explain_sites(bundle, items)
            for j in np.flatnonzero(blended & (pka != model_pka)):
                pairs[j] = [(f"no training example of type {items[j][3]}: moved towards its typical pKa "
                             f"{priors[j]:.1f}", float(pka[j] - model_pka[j]))] + pairs[j]
            phrases = [format_explanation(p) for p in pairs]
    else:
        kinds, pka, sim, half, mol_half = (np.array([]),) * 5
    owners = np.array(owners, dtype=int)
    mol_rows, site_rows = [], []
    for i, (rid, smi, p) in enumerate(zip(ids, smiles, prepared)):
        warns = list(p.warnings) + duplicate_warning(duplicate_of[i])
        row = status_row(rid, p.smiles if p.smiles is not None else smi, p.status, warns)
        if p.mol is None:
            mol_rows.append(row)
            continue
        idx = np.flatnonzero(owners == i)
        site_in_domain = []
        for j in idx:
            _, atom, kind, stype = items[j]
            sw = _site_warnings(bundle, catalog.by_name[stype], kind, sim[j], float(pka[j]))
            site_in_domain.append(not sw)
            site_rows.append({"id": rid, "atom": int(p.original_atoms[atom]) if p.original_atoms else int(atom),
                              "site_type": stype, "kind": kind, "pka": round(float(pka[j]), 2),
                              "pka_low": round(float(pka[j] - half[j]), 2), "pka_high": round(float(pka[j] + half[j]), 2),
                              "similarity": round(float(sim[j]), 3), "in_domain": not sw, "warnings": "; ".join(sw),
                              **({"explanation": phrases[j]} if explain else {})})
        k, v = kinds[idx], pka[idx]
        charge0 = float(Chem.GetFormalCharge(p.mol))
        row["macro_pkas"] = row["macro_pkas_all"] = ""
        if len(idx):
            ms = molecule_microstates(p.mol, [items[j][1] for j in idx], k, v, priors[idx], interactions, window, ph)
            for kind, pick in (("acid", np.argmin), ("base", np.argmax)):
                sel = idx[k == kind]
                if len(sel):
                    j = sel[pick(pka[sel])]  # the site the constant is credited to (interval, domain)
                    value = ms.constant_of_kind(kind)
                    value = float(pka[j]) if not np.isfinite(value) else value
                    row[f"{kind}_pka"] = round(value, 2)
                    row[f"{kind}_pka_low"] = round(value - float(mol_half[j]), 2)
                    row[f"{kind}_pka_high"] = round(value + float(mol_half[j]), 2)
            macro, _ = ms.macro_constants()
            inside = macro[(macro >= window[0]) & (macro <= window[1])]
            row["macro_pkas"] = ";".join(f"{x:.2f}" for x in inside)
            row["macro_pkas_all"] = ";".join(f"{x:.2f}" for x in macro)
            pi = ms.isoelectric_point(charge0) if (k == "acid").any() and (k == "base").any() else None
            row["isoelectric_ph"] = round(pi, 2) if pi is not None else None
            row["charge_at_ph"] = round(ms.mean_charge(ph, charge0), 3)
            row["fraction_neutral"] = round(ms.neutral_fraction(ph), 4) if charge0 == 0 else 0.0
            row["major_species"] = _major_species(p.mol, [items[j][1] for j in idx], k, ms.major_protonation(ph))
            if len(ms.mean_field):
                warns.append(f"{len(ms.free) + len(ms.mean_field)} sites: the {len(ms.mean_field)} farthest outside "
                             f"the window enter by mean field (average charges at pH {ph:g}, not enumerated); "
                             f"macro_pkas lists the constants of the {len(ms.free)} enumerated sites in that field")
        else:
            row["charge_at_ph"] = round(charge0, 3)
            row["fraction_neutral"] = 1.0 if charge0 == 0 else 0.0
            row["major_species"] = Chem.MolToSmiles(p.mol)
        if not len(idx):
            warns.append("no ionizable site found")
        if Descriptors.HeavyAtomCount(p.mol) > bundle.domain["max_heavy_atoms"]:
            warns.append(f"larger than any training molecule ({bundle.domain['max_heavy_atoms']} heavy atoms)")
        unseen = {a.GetSymbol() for a in atoms_of(p.mol)} - set(bundle.domain["elements"])
        if unseen:
            warns.append(f"element(s) {', '.join(sorted(unseen))} not seen in training")
        n_out = sum(not x for x in site_in_domain)
        if n_out:
            warns.append(f"{n_out} site(s) outside the applicability domain")
        row["in_domain"] = bool(all(site_in_domain)) and not unseen
        row["warnings"] = "; ".join(warns)
        mol_rows.append(row)
    return (pd.DataFrame(mol_rows, columns=MOLECULE_COLUMNS),
            pd.DataFrame(site_rows, columns=SITE_COLUMNS + (["explanation"] if explain else [])))
