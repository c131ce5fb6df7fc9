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
from pkasite.features.sites import (NoSiteError, RankWithoutSiteError, SiteAssignmentError, SiteError, assign_site,
                                    find_sites, load_catalog)
from pkasite.features.standardize import quiet_rdkit

SITE_COLUMNS = ["mol_id", "record_id", "smiles", "inchikey", "kind", "atom", "site_type", "prior",
                "label", "labeled", "confidence", "split", "role", "rank", "offset"]
# role: "candidate" (a site of the measured kind, one of which carries the value) or "context" (a site of
# the other kind: not trained on for this measurement, but part of the molecule's microstates).
# rank: the measurement's rank among the molecule's constants of its kind in its source (1: strongest).
# offset: site pKa minus the molecule's predicted constant, added to the value to make the labeled
# site's training target consistent with the microstate model (0 until training sets it).


@dataclass
class SiteTable:
    sites: pd.DataFrame          # SITE_COLUMNS, one row per site (candidates and context)
    molecules: pd.DataFrame      # the measurements that got a site, mol_id = row position
    rejects: pd.DataFrame        # measurements without a usable site, with a reason
    mols: list                   # RDKit molecules, by mol_id
    _interactions: dict | None = None
    _constants_memo: tuple | None = None  # evaluation.table_constants: (key, constants) of the last predictions

    def interactions(self) -> dict:
        """Per mol_id: (site rows, pair matrix W, exclusive pairs) of the microstate model, for molecules
        with 2+ sites."""
        if self._interactions is None:
            from pkasite.models.microstates import default_interaction_model
            model = default_interaction_model()
            out = {}
            atoms = self.sites["atom"].to_numpy()
            kinds = self.sites["kind"].to_numpy()
            for mol_id, rows in self.sites.groupby("mol_id").indices.items():
                if len(rows) > 1:
                    out[int(mol_id)] = (rows, *pair_terms(self.mols[mol_id], atoms[rows], kinds[rows], model))
            self._interactions = out
        return self._interactions

    @property
    def candidates(self) -> pd.DataFrame:
        return self.sites[self.sites["role"] == "candidate"]

    def assignment_stats(self) -> dict:
        lab = self.sites[self.sites["labeled"]]
        per_mol = self.candidates.groupby("mol_id").size()
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


def pair_terms(mol: Chem.Mol, atoms, kinds, model) -> tuple[np.ndarray, np.ndarray]:
    """The pair matrix ``W`` and the exclusive pairs of the microstate model for the sites ``atoms``
    (of ``kinds``) of ``mol``, under the interaction model ``model``: the one place training and
    prediction get them from."""
    from pkasite.features.site_pairs import pair_geometry, shared_charge_pairs, shortest_path_counts
    from pkasite.models.microstates import exclusive_pairs
    kinds = np.asarray(kinds)
    d, conj = pair_geometry(mol, atoms)
    W = model.matrix(d, conj, kinds, shared_charge_pairs(mol, atoms), shortest_path_counts(mol, atoms))
    return W, exclusive_pairs(kinds, d, conj)


def measurement_rank(rec) -> int:
    """The measurement's rank among its source's constants of its kind for the molecule (1: strongest)."""
    r = getattr(rec, "constant_rank", None)
    return 1 if r is None or pd.isna(r) else max(1, int(r))


def build_site_table(measurements: pd.DataFrame) -> SiteTable:
    """Find sites for each measurement and attach its value to the prior-chosen (or given) site.

    A rank-1 value goes to the most acidic (acid) or most basic (base) candidate consistent with it
    (:func:`assign_site`); a value of rank ``r > 1`` (a later constant of the same kind) to the
    ``r``-th strongest distinct candidate by prior.  Sites of the other kind join as context rows.
    """
    quiet_rdkit()
    catalog = load_catalog()
    rows, kept, rejects, mols = [], [], [], []
    for rec in measurements.itertuples(index=False):
        mol = Chem.MolFromSmiles(rec.smiles)
        site_atom = None if pd.isna(rec.site_atom) else int(rec.site_atom)
        rank = measurement_rank(rec)
        try:
            if mol is None:
                raise SiteError(f"cannot parse SMILES {rec.smiles!r}")
            found = find_sites(mol, catalog)
            sites = [s for s in found if s.kind == rec.kind]
            if rank > 1 and site_atom is None:
                chosen = assign_site(mol, rec.kind, sites=sites, catalog=catalog, rank=rank)
            else:
                chosen = assign_site(mol, rec.kind, sites=sites, site_atom=site_atom, value=float(rec.pka),
                                     catalog=catalog)
        except SiteError as exc:
            reason = {NoSiteError: "no_site_of_kind", SiteAssignmentError: "site_atom_not_a_site",
                      RankWithoutSiteError: "rank_without_site"}.get(
                type(exc), "structure_invalid")
            rejects.append({"source": rec.source, "record_id": rec.record_id, "reason": reason, "detail": str(exc),
                            "smiles": rec.smiles, "kind": rec.kind})
            continue
        mol_id = len(kept)
        kept.append(rec._asdict())
        mols.append(mol)
        for s in found:
            candidate = s.kind == rec.kind
            rows.append({"mol_id": mol_id, "record_id": rec.record_id, "smiles": rec.smiles, "inchikey": rec.inchikey,
                         "kind": s.kind, "atom": s.atom, "site_type": s.type, "prior": s.prior,
                         "label": float(rec.pka), "labeled": candidate and s.atom == chosen.atom,
                         "confidence": chosen.confidence, "split": getattr(rec, "split", ""),
                         "role": "candidate" if candidate else "context", "rank": rank, "offset": 0.0})
    sites = pd.DataFrame(rows, columns=SITE_COLUMNS)
    molecules = pd.DataFrame(kept).reset_index(drop=True)
    return SiteTable(sites, molecules, pd.DataFrame(rejects), mols)


def site_matrix(table: SiteTable, settings: FeatureSettings, site_types: list[str]) -> np.ndarray:
    """Feature matrix for every row of ``table.sites``, in row order."""
    items = [(table.mols[m], int(a), k, t) for m, a, k, t in
             table.sites[["mol_id", "atom", "kind", "site_type"]].itertuples(index=False)]
    return featurize_sites(items, settings, site_types)
