"""Prediction for a list of molecules: per-site and per-molecule tables.

Every input row gives exactly one molecule row, in input order; a row that
cannot be predicted carries a ``status`` other than ``ok`` and a message in
``warnings``.  Nothing here raises for a bad molecule.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from rdkit import Chem
from rdkit.Chem import Descriptors

from pkasite.features.fingerprints import site_neighbourhood_bits
from pkasite.features.site_features import featurize_sites
from pkasite.features.sites import find_sites, load_catalog
from pkasite.features.standardize import StructureError, quiet_rdkit, standardize_mol
from pkasite.models.domain import similarity_bin, tanimoto_max
from pkasite.features.site_pairs import pair_geometry
from pkasite.models.microstates import (MAX_EXACT_SITES, Microstates, default_interaction_model, exclusive_pairs,
                                        weak_sites)

from .bundle import ModelBundle

MOLECULE_COLUMNS = ["id", "smiles", "status", "acid_pka", "acid_pka_low", "acid_pka_high", "base_pka",
                    "base_pka_low", "base_pka_high", "macro_pkas", "macro_pkas_all", "isoelectric_ph",
                    "charge_at_ph", "major_species", "fraction_neutral", "in_domain", "warnings"]
WINDOW = (0.0, 14.0)
SITE_COLUMNS = ["id", "atom", "site_type", "kind", "pka", "pka_low", "pka_high", "similarity", "in_domain",
                "warnings"]
MAX_HEAVY_ATOMS = 300
ORGANIC = {"H", "B", "C", "N", "O", "F", "Si", "P", "S", "Cl", "Se", "Br", "I"}
INTERVAL_LEVEL = 0.9


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


def prepare_input(smiles) -> PreparedInput:
    """Read and standardize one input structure; problems become a status or a warning."""
    quiet_rdkit()
    out = PreparedInput()
    text = "" if smiles is None or (isinstance(smiles, float) and np.isnan(smiles)) else str(smiles).strip()
    if not text:
        return PreparedInput("empty", ["no SMILES in this row"])
    mol = Chem.MolFromSmiles(text)
    if mol is None:
        return PreparedInput("unreadable_smiles", [f"RDKit cannot read SMILES {text[:80]!r}"])
    if any(a.GetNumRadicalElectrons() for a in mol.GetAtoms()):
        return PreparedInput("radical", ["radicals are outside what the model covers"])
    if len(Chem.GetMolFrags(mol)) > 1:
        out.warnings.append("mixture or salt: predicted the largest organic fragment")
    if any(a.GetIsotope() for a in mol.GetAtoms()):
        for a in mol.GetAtoms():
            a.SetIsotope(0)
        out.warnings.append("isotope labels ignored")
    if any(a.GetFormalCharge() for a in mol.GetAtoms()):
        out.warnings.append("charged input: neutralized where a proton could be added or removed")
    try:
        std = standardize_mol(mol, with_inchikey=False)
    except StructureError as exc:
        return PreparedInput("invalid_structure", [str(exc)])
    elements = {a.GetSymbol() for a in std.mol.GetAtoms()} - ORGANIC
    if elements:
        return PreparedInput("unsupported_element", [f"element(s) {', '.join(sorted(elements))} not supported"])
    if std.mol.GetNumHeavyAtoms() > MAX_HEAVY_ATOMS:
        return PreparedInput("too_large", [f"{std.mol.GetNumHeavyAtoms()} heavy atoms (limit {MAX_HEAVY_ATOMS})"])
    out.mol, out.original_atoms = std.mol, std.original_atoms
    return out


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
                         window: tuple[float, float] = WINDOW) -> Microstates:
    """The molecule's microstates: its sites with their predicted pKa, pair terms from the bundle's
    interaction model, tautomeric pairs exclusive, weak sites held (see :mod:`pkasite.models.microstates`)."""
    kinds = np.asarray(kinds)
    W = ex = None
    if len(atoms) > 1:
        d, conj = pair_geometry(mol, atoms)
        W, ex = interactions.matrix(d, conj, kinds), exclusive_pairs(kinds, d, conj)
    return Microstates(np.asarray(pka, float), kinds, W, window=window, exclusive=ex,
                       hold=weak_sites(kinds, priors, pka, window))


def _site_warnings(bundle: ModelBundle, site_type: str, kind: str, similarity: float) -> list[str]:
    dom = bundle.domain
    warns = []
    support = dom["type_support"].get(kind, {}).get(site_type, 0)
    if support < dom["min_type_support"]:
        warns.append(f"site type {site_type} has {support} training examples")
    if similarity < dom["threshold"]:
        warns.append(f"nearest training site similarity {similarity:.2f}")
    return warns


def predict_records(bundle: ModelBundle, ids, smiles, ph: float = 7.4, level: float = INTERVAL_LEVEL,
                    explain: bool = False, window: tuple[float, float] = WINDOW) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Per-molecule and per-site predictions for parallel lists of ids and SMILES.

    Site values are microscopic constants of the neutral molecule; every molecule-level value
    (``acid_pka``, ``base_pka``, ``macro_pkas`` inside ``window``, ``macro_pkas_all``, ``isoelectric_ph``,
    ``charge_at_ph``, ``fraction_neutral``, ``major_species``) comes from one microstate model.

    With ``explain`` the per-site table gets an ``explanation`` column: the largest feature
    contributions of each site in chemistry words (see :mod:`pkasite.pipeline.explain`).
    """
    ids, smiles = list(ids), list(smiles)
    prepared = [prepare_input(s) for s in smiles]
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
        bits = np.stack([site_neighbourhood_bits(m, a) for m, a, _, _ in items])
        sim = np.zeros(n)
        for kind in ("acid", "base"):
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
            phrases = [format_explanation(p) for p in explain_sites(bundle, items)]
    else:
        kinds, pka, sim, half, mol_half = (np.array([]),) * 5
    owners = np.array(owners, dtype=int)
    seen_ids: dict = {}
    mol_rows, site_rows = [], []
    for i, (rid, smi, p) in enumerate(zip(ids, smiles, prepared)):
        row = {c: None for c in MOLECULE_COLUMNS}
        warns = list(p.warnings)
        if rid in seen_ids:
            warns.append(f"duplicate id (also row {seen_ids[rid] + 1})")
        else:
            seen_ids[rid] = i
        row.update(id=rid, smiles=smi, status=p.status)
        if p.mol is None:
            row["warnings"] = "; ".join(warns)
            mol_rows.append(row)
            continue
        idx = np.flatnonzero(owners == i)
        site_in_domain = []
        for j in idx:
            _, atom, kind, stype = items[j]
            sw = _site_warnings(bundle, stype, kind, sim[j])
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
            ms = molecule_microstates(p.mol, [items[j][1] for j in idx], k, v, priors[idx], interactions, window)
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
            n_free = len(idx) - int(weak_sites(k, priors[idx], v, window).sum())
            if n_free > MAX_EXACT_SITES:
                warns.append(f"{n_free} sites: the {n_free - MAX_EXACT_SITES} farthest outside the window held "
                             "in their dominant form")
        else:
            row["charge_at_ph"] = round(charge0, 3)
            row["fraction_neutral"] = 1.0 if charge0 == 0 else 0.0
            row["major_species"] = Chem.MolToSmiles(p.mol)
        if not len(idx):
            warns.append("no ionizable site found")
        if Descriptors.HeavyAtomCount(p.mol) > bundle.domain["max_heavy_atoms"]:
            warns.append(f"larger than any training molecule ({bundle.domain['max_heavy_atoms']} heavy atoms)")
        unseen = {a.GetSymbol() for a in p.mol.GetAtoms()} - set(bundle.domain["elements"])
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
