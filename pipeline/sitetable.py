"""measurements -> site table: one row per (molecule, ionizable atom of the measured kind).

The measured value is attached to one site per measurement (``labeled``); the
other candidate sites of the same kind stay in the table so a model can later
move the label to the site it finds more acidic (acid) or more basic (base).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from rdkit import Chem

from pkasite.features.site_features import FeatureSettings, featurize_sites
from pkasite.features.sites import NoSiteError, SiteAssignmentError, SiteError, assign_site, find_sites, load_catalog
from pkasite.features.standardize import quiet_rdkit

SITE_COLUMNS = ["mol_id", "record_id", "smiles", "inchikey", "kind", "atom", "site_type", "prior",
                "label", "labeled", "confidence", "split"]


@dataclass
class SiteTable:
    sites: pd.DataFrame          # SITE_COLUMNS, one row per candidate site
    molecules: pd.DataFrame      # the measurements that got a site, mol_id = row position
    rejects: pd.DataFrame        # measurements without a usable site, with a reason
    mols: list                   # RDKit molecules, by mol_id

    def assignment_stats(self) -> dict:
        lab = self.sites[self.sites["labeled"]]
        per_mol = self.sites.groupby("mol_id").size()
        return {
            "measurements": int(len(self.molecules) + len(self.rejects)),
            "assigned": int(len(self.molecules)),
            "no_site": int(len(self.rejects)),
            "single_candidate": int((per_mol == 1).sum()),
            "multiple_candidates": int((per_mol > 1).sum()),
            "explicit_site_atom": int(self.molecules["site_atom"].notna().sum()),
            "mean_confidence": float(lab["confidence"].mean()) if len(lab) else float("nan"),
            "labels_by_type": {k: int(v) for k, v in lab["site_type"].value_counts().items()},
        }


def build_site_table(measurements: pd.DataFrame) -> SiteTable:
    """Find sites for each measurement and attach its value to the prior-chosen (or given) site."""
    quiet_rdkit()
    catalog = load_catalog()
    rows, kept, rejects, mols = [], [], [], []
    for rec in measurements.itertuples(index=False):
        mol = Chem.MolFromSmiles(rec.smiles)
        site_atom = None if pd.isna(rec.site_atom) else int(rec.site_atom)
        try:
            if mol is None:
                raise SiteError(f"cannot parse SMILES {rec.smiles!r}")
            sites = [s for s in find_sites(mol, catalog) if s.kind == rec.kind]
            chosen = assign_site(mol, rec.kind, sites=sites, site_atom=site_atom, value=float(rec.pka),
                                 catalog=catalog)
        except SiteError as exc:
            reason = {NoSiteError: "no_site_of_kind", SiteAssignmentError: "site_atom_not_a_site"}.get(
                type(exc), "structure_invalid")
            rejects.append({"source": rec.source, "record_id": rec.record_id, "reason": reason, "detail": str(exc),
                            "smiles": rec.smiles, "kind": rec.kind})
            continue
        mol_id = len(kept)
        kept.append(rec._asdict())
        mols.append(mol)
        for s in sites:
            rows.append({"mol_id": mol_id, "record_id": rec.record_id, "smiles": rec.smiles, "inchikey": rec.inchikey,
                         "kind": rec.kind, "atom": s.atom, "site_type": s.type, "prior": s.prior,
                         "label": float(rec.pka), "labeled": s.atom == chosen.atom,
                         "confidence": chosen.confidence, "split": getattr(rec, "split", "")})
    sites = pd.DataFrame(rows, columns=SITE_COLUMNS)
    molecules = pd.DataFrame(kept).reset_index(drop=True)
    return SiteTable(sites, molecules, pd.DataFrame(rejects), mols)


def site_matrix(table: SiteTable, settings: FeatureSettings, site_types: list[str]) -> np.ndarray:
    """Feature matrix for every row of ``table.sites``, in row order."""
    items = [(table.mols[m], int(a), k, t) for m, a, k, t in
             table.sites[["mol_id", "atom", "kind", "site_type"]].itertuples(index=False)]
    return featurize_sites(items, settings, site_types)
