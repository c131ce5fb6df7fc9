"""Training: site table -> features -> label re-assignment -> cross-validation -> final bundle.

Evaluation is at molecule level, where the measurement lives: the prediction for
an acid constant is the lowest predicted pKa among the molecule's acid sites,
for a base constant the highest among its base sites.  That makes the figures
independent of which site a label was attached to and directly comparable with
a molecule-level baseline evaluated on the same folds.
"""
from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from pkasite.features.fingerprints import mol_fingerprint_counts, site_neighbourhood_bits
from pkasite.features.site_features import FeatureSettings
from pkasite.features.sites import KINDS, load_catalog
from pkasite.models.domain import tanimoto_max
from pkasite.models.metrics import bootstrap_metrics, point_metrics
from pkasite.models.prior_blend import blend, prior_weights
from pkasite.models.regressor import FitJob, SiteRegressor, fit_many
from pkasite.models.splits import group_kfold, murcko_scaffold, unseen_group_folds

from .config import RunConfig, TrainConfig, booster_params
from .parallel import map_slices, process_count, split_even
from . import evaluation as E
from .sitetable import SiteTable, build_site_table, site_matrix
from .stages import StageClock

BASELINES = ("type_median", "mol_morgan")


def feature_settings(cfg: RunConfig) -> FeatureSettings:
    f = cfg.features
    return FeatureSettings(radii=tuple(f.radii), n_bits=f.n_bits, mol_fp_bits=f.mol_fp_bits,
                           mol_fp_radius=f.mol_fp_radius, use_counts=f.use_counts, type_prior=f.type_prior,
                           hammett_kinds=tuple(f.hammett_kinds), delocalization=f.delocalization)


@dataclass
class Prepared:
    """Everything computed once per training set and reused by every fit."""

    table: SiteTable
    X: np.ndarray                 # site features, one row per candidate site
    bits: np.ndarray              # site neighbourhood bits (applicability domain)
    mol_X: np.ndarray             # molecule Morgan counts (baseline)
    site_types: list[str]
    settings: FeatureSettings

    @property
    def sites(self) -> pd.DataFrame:
        return self.table.sites

    def summary(self) -> str:
        rejects = self.table.rejects
        n_rank = int((rejects["reason"] == "rank_without_site").sum()) if len(rejects) else 0
        return (f"{len(self.table.molecules)} molecules, {len(self.sites)} candidate sites, "
                f"{len(rejects) - n_rank} without a site of their kind, {n_rank} ranked past their sites, "
                f"{self.X.shape[1]} features")


def _prepare_slice(measurements: pd.DataFrame, settings: FeatureSettings, site_types: list[str]):
    """Site table, site features, neighbourhood bits and molecule fingerprints of some measurements
    (the table's parts as a tuple: RDKit molecules pickle on their own when a worker sends them back)."""
    table = build_site_table(measurements)
    X = site_matrix(table, settings, site_types)
    bits = np.stack([site_neighbourhood_bits(table.mols[m], int(a)) for m, a in
                     table.sites[["mol_id", "atom"]].itertuples(index=False)]) if len(table.sites) else np.zeros((0, 1024), np.uint8)
    mol_X = np.stack([mol_fingerprint_counts(m, 2, 2048) for m in table.mols]) if table.mols else np.zeros((0, 2048))
    return (table.sites, table.molecules, table.rejects, table.mols), X, bits, mol_X


def _joined(parts: list) -> tuple[SiteTable, np.ndarray, np.ndarray, np.ndarray]:
    """One site table and its arrays from consecutive slices (``mol_id`` renumbered in order)."""
    sites, molecules, rejects, mols, offset = [], [], [], [], 0
    for (s, m, r, part_mols), *_ in parts:
        sites.append(s.assign(mol_id=s["mol_id"].to_numpy() + offset))
        offset += len(m)
        molecules += [m] if len(m) else []
        rejects += [r] if len(r) else []
        mols += part_mols
    first = parts[0][0]
    table = SiteTable(pd.concat(sites, ignore_index=True),
                      pd.concat(molecules, ignore_index=True) if molecules else first[1],
                      pd.concat(rejects, ignore_index=True) if rejects else first[2], mols)
    return (table,) + tuple(np.concatenate([p[i] for p in parts]) for i in (1, 2, 3))


def prepare(measurements: pd.DataFrame, cfg: RunConfig) -> Prepared:
    """Site table and every array the fits reuse.  A large set is worked in slices shared between
    this process and workers, one per core of ``model.n_jobs`` (:func:`parallel.map_slices`): the
    same numbers as one pass, in about half the time on two cores."""
    settings = feature_settings(cfg)
    site_types = [t.name for t in load_catalog().types]
    n = process_count(len(measurements), cfg.cores())
    slices = [measurements.iloc[r.start:r.stop] for r in split_even(len(measurements), n)]
    parts = map_slices(_prepare_slice, slices, (settings, site_types), n)
    table, X, bits, mol_X = _joined(parts)
    return Prepared(table, X, bits, mol_X, site_types, settings)


# ----------------------------------------------------------------------------- molecule labels

def _labels(prep: Prepared) -> pd.DataFrame:
    """One row per molecule: its label, kind and labeled site type."""
    lab = prep.sites[prep.sites["labeled"]].sort_values("mol_id")
    cols = ["mol_id", "label", "kind", "site_type", "atom", "inchikey", "smiles", "record_id"]
    return lab[cols].reset_index(drop=True)


# ----------------------------------------------------------------------------- folds

def make_splits(prep: Prepared, scheme: str, cfg: RunConfig,
                folds: int | None = None) -> list[tuple[str, np.ndarray, np.ndarray]]:
    """Splits over mol_id: (name, train mol_ids, test mol_ids); ``folds`` (default ``cv.folds``) for the
    molecule and scaffold schemes."""
    folds = folds or cfg.cv.folds
    mols = _labels(prep)
    ids = mols["mol_id"].to_numpy()
    if scheme == "molecule":
        groups = mols["inchikey"].str[:14].to_numpy()  # connectivity layer: tautomers/charges stay together
        return [(f"fold{i}", ids[tr], ids[te]) for i, (tr, te) in enumerate(group_kfold(groups, folds, cfg.seed))]
    if scheme == "scaffold":
        groups = np.array([murcko_scaffold(s) for s in mols["smiles"]])
        return [(f"fold{i}", ids[tr], ids[te]) for i, (tr, te) in enumerate(group_kfold(groups, folds, cfg.seed))]
    if scheme == "site_type":
        return [(name, ids[tr], ids[te]) for name, tr, te in
                unseen_group_folds(mols["site_type"].to_numpy(), cfg.cv.site_type_min_count,
                                   cfg.cv.site_type_folds, cfg.seed)]
    raise ValueError(f"unknown CV scheme {scheme!r}")


# ----------------------------------------------------------------------------- fitting

def site_bounds(prep: Prepared) -> np.ndarray:
    """Per site row: +1 (acid) / -1 (base) where the molecule's value bounds the site, else 0.

    A molecule's value is normally its strongest constant of the kind, so its other candidate
    sites are at least as weak: the value is a lower bound of an acid site's pKa and an upper
    bound of a base site's pKaH.  Compilations also list later constants (a phenol's 10 beside a
    carboxylic acid), so a bound is set only where the site's catalog range can hold it (an acid
    site whose range reaches up to the value, a base site whose range reaches down to it), and
    never for molecules measured at an explicit site atom or for later constants (rank > 1).
    Labeled sites and context sites (the other kind) are 0.
    """
    sites = prep.sites
    by_name = load_catalog().by_name
    explicit = prep.table.molecules["site_atom"].notna().to_numpy()[sites["mol_id"].to_numpy()]
    acid = sites["kind"].to_numpy() == "acid"
    label = sites["label"].to_numpy()
    types = sites["site_type"].to_numpy()
    low = np.array([by_name[t].low for t in types])
    high = np.array([by_name[t].high for t in types])
    possible = np.where(acid, label <= high, label >= low)
    first = (sites["role"].to_numpy() == "candidate") & (sites["rank"].to_numpy() == 1)
    censored = ~sites["labeled"].to_numpy() & ~explicit & possible & first
    return np.where(censored, np.where(acid, 1, -1), 0).astype(np.int8)


def site_job(prep: Prepared, train_mols: np.ndarray, cfg: RunConfig, only_kinds=None) -> FitJob:
    """The site regressor of one training set: the labeled sites of ``train_mols`` and, with
    ``model.censored_sites``, their other candidate sites as one-sided bounds (:func:`site_bounds`)."""
    sites = prep.sites
    in_train = np.isin(sites["mol_id"].to_numpy(), train_mols)
    bound = site_bounds(prep) if cfg.model.censored_sites else np.zeros(len(sites), np.int8)
    rows = np.flatnonzero(in_train & (sites["labeled"].to_numpy() | (bound != 0)))
    return FitJob(prep.X, site_targets(prep), sites["kind"].to_numpy(), rows, cfg.model.per_kind,
                  frozenset(only_kinds) if only_kinds is not None else None, bound)


def site_targets(prep: Prepared) -> np.ndarray:
    """Per site row: the labeled site's target, its value plus its microstate offset (site pKa - molecule
    constant); the molecule's value on the other rows (a bound where :func:`site_bounds` sets one)."""
    sites = prep.sites
    return sites["label"].to_numpy() + np.where(sites["labeled"].to_numpy(), sites["offset"].to_numpy(), 0.0)


def fit_regressor(prep: Prepared, train_mols: np.ndarray, cfg: RunConfig, only_kinds=None) -> SiteRegressor:
    return fit_many([site_job(prep, train_mols, cfg, only_kinds)], booster_params(cfg.model), cfg.seed)[0]


def _test_rows(prep: Prepared, test_mols: np.ndarray) -> np.ndarray:
    return np.flatnonzero(np.isin(prep.sites["mol_id"].to_numpy(), test_mols))


def site_jobs(prep: Prepared, splits, cfg: RunConfig, unseen_type: bool = False) -> list[FitJob]:
    """One site-regressor job per fold, fitting only the kinds its test molecules need.

    ``unseen_type`` (unseen-site-type folds, whose test molecules are those labeled with the held-out
    types): the held-out types stay out of training altogether, their one-sided bounds in other
    molecules included.
    """
    kinds = prep.sites["kind"].to_numpy()
    types = prep.sites["site_type"].to_numpy()
    candidate = prep.sites["role"].to_numpy() == "candidate"
    labels = _labels(prep).set_index("mol_id")["site_type"]
    jobs = []
    for name, tr, te in splits:
        test = _test_rows(prep, te)
        if unseen_type:
            # only the held-out types' kinds: their molecules' other-kind sites stay unpredicted (they carry
            # no pair term with the measured kind's sites; see InteractionModel.opposite_factor)
            held = np.unique(labels.reindex(te).dropna().to_numpy().astype(str))
            job = site_job(prep, tr, cfg, only_kinds=set(kinds[test[candidate[test]]]))
            job = replace(job, rows=job.rows[~np.isin(types[job.rows], held)])
        else:
            job = site_job(prep, tr, cfg, only_kinds=set(kinds[test]))
        jobs.append(job)
    return jobs


def site_oof(prep: Prepared, splits, regs: list[SiteRegressor], with_similarity: bool = False):
    """Out-of-fold predictions for every candidate site of each test molecule, from fitted fold models."""
    sites = prep.sites
    kinds = sites["kind"].to_numpy()
    pred = np.full(len(sites), np.nan)
    fold = np.full(len(sites), "", dtype=object)
    sim = np.full(len(sites), np.nan)
    for (name, tr, te), reg in zip(splits, regs):
        rows = _test_rows(prep, te)
        pred[rows] = reg.predict(prep.X[rows], kinds[rows])
        fold[rows] = name
        if with_similarity:
            train_rows = np.flatnonzero(sites["labeled"].to_numpy() & np.isin(sites["mol_id"].to_numpy(), tr))
            for kind in KINDS:
                q = rows[kinds[rows] == kind]
                t = train_rows[kinds[train_rows] == kind]
                if len(q):
                    sim[q] = tanimoto_max(prep.bits[q], prep.bits[t])
    return pred, fold, sim


def _type_keys(sites: pd.DataFrame) -> np.ndarray:
    """Per site row, ``kind:site_type``: what "a type with training labels" is counted by."""
    return (sites["kind"] + ":" + sites["site_type"]).to_numpy()


def unseen_type_rows(prep: Prepared, splits, jobs: list[FitJob]) -> np.ndarray:
    """Per site row: True for a test site of a fold whose training labels hold no site of its kind and
    type (every site of the held-out types in the unseen-site-type folds; a rare type's sites elsewhere)."""
    sites = prep.sites
    key = _type_keys(sites)
    labeled = sites["labeled"].to_numpy()
    out = np.zeros(len(sites), bool)
    for (_, _, te), job in zip(splits, jobs):
        rows = _test_rows(prep, te)
        out[rows] = ~np.isin(key[rows], np.unique(key[job.rows[labeled[job.rows]]]))
    return out


def unseen_type_weights(prep: Prepared, site_pred: np.ndarray, unseen: np.ndarray, kinds=KINDS,
                        exclude_mols=()) -> dict[str, float]:
    """For each of ``kinds``, the weight of the model against the type's catalog prior on sites of unseen
    types (:mod:`pkasite.models.prior_blend`), from the labeled ``unseen`` rows of out-of-fold
    predictions ``site_pred`` outside the molecules ``exclude_mols``."""
    sites = prep.sites
    rows = np.flatnonzero(sites["labeled"].to_numpy() & unseen & np.isfinite(site_pred)
                          & ~np.isin(sites["mol_id"].to_numpy(), np.asarray(exclude_mols)))
    w = prior_weights(site_pred[rows], sites["prior"].to_numpy()[rows], site_targets(prep)[rows],
                      sites["kind"].to_numpy()[rows])
    return {k: w[k] for k in kinds}


def blend_unseen_types(prep: Prepared, splits, site_pred: np.ndarray, unseen: np.ndarray,
                       reference: tuple) -> np.ndarray:
    """Out-of-fold ``site_pred`` with each fold's ``unseen`` rows blended towards their type's prior, the
    weights taken from the unseen-site-type folds' predictions ``reference`` (site_pred, unseen, kinds to
    blend) on the other molecules only (cross-fitted: no test molecule's value weighs its own blend)."""
    sites = prep.sites
    out = site_pred.copy()
    for _, _, te in splits:
        rows = _test_rows(prep, te)
        rows = rows[unseen[rows]]
        if len(rows):
            w = unseen_type_weights(prep, *reference, exclude_mols=te)
            out[rows] = blend(site_pred[rows], sites["prior"].to_numpy()[rows], np.ones(len(rows), bool),
                              sites["kind"].to_numpy()[rows], w)
    return out


def oof_site_predictions(prep: Prepared, splits, cfg: RunConfig, with_similarity: bool = False,
                         assignment: bool = False):
    """Out-of-fold predictions for every candidate site of each test molecule (all folds fitted in parallel).

    ``assignment``: with the (possibly cheaper) booster settings of the label-assignment rounds.
    """
    regs = fit_many(site_jobs(prep, splits, cfg), booster_params(cfg.model, assignment), cfg.seed)
    return site_oof(prep, splits, regs, with_similarity)


def predicted_assignments(prep: Prepared, site_pred: np.ndarray, cfg: RunConfig):
    """For each molecule with several candidate sites and no given site atom: the site its value
    belongs to by the predictions (:func:`assign_site` with the value and the tolerance).

    Yields ``(rows, predicted {atom: pKa}, label, Assignment)``; ``rows`` index ``prep.sites``.
    """
    from pkasite.features.sites import Site, assign_site, load_catalog

    catalog = load_catalog()
    sites = prep.sites
    explicit = prep.table.molecules["site_atom"].notna().to_numpy()
    candidate = (sites["role"] == "candidate").to_numpy()
    atom, stype, kind = (sites[c].to_numpy().tolist() for c in ("atom", "site_type", "kind"))
    prior, label, rank = (sites[c].to_numpy().tolist() for c in ("prior", "label", "rank"))
    pred = np.asarray(site_pred, float).tolist()
    for mol_id, rows in sites[candidate].groupby("mol_id").indices.items():
        rows = np.flatnonzero(candidate)[rows]
        if len(rows) == 1 or explicit[mol_id]:
            continue
        cand = [Site(int(atom[r]), stype[r], kind[r], float(prior[r])) for r in rows]
        predicted = {c.atom: pred[r] for c, r in zip(cand, rows)}
        value = float(label[rows[0]])
        yield rows, predicted, value, assign_site(prep.table.mols[mol_id], cand[0].kind, sites=cand,
                                                  predicted=predicted, value=value,
                                                  tolerance=cfg.model.assignment_tolerance, catalog=catalog,
                                                  rank=int(rank[rows[0]]))


def reassign_labels(prep: Prepared, cfg: RunConfig, clock: StageClock | None = None) -> list[int]:
    """Re-attach labels using out-of-fold predictions, for at most ``model.assignment_rounds`` rounds.

    Each molecule's value goes to the most acidic (acid) or most basic (base) site among
    those predicted within ``model.assignment_tolerance`` of it (:func:`assign_site`).  A
    label moves only when its current site is no longer consistent with the value or the
    new site is stronger by more than ``model.assignment_margin``, so near-ties do not flip
    back and forth.  Explicit site atoms never move.  Rounds stop early once fewer than
    ``model.assignment_stop_fraction`` of the molecules move.
    """
    clock = clock or StageClock()
    sites = prep.table.sites
    splits = make_splits(prep, "molecule", cfg, folds=cfg.model.assignment_folds)
    n_mols = len(prep.table.molecules)
    moved_per_round = []
    for rnd in range(cfg.model.assignment_rounds):
        with clock(f"label assignment round {rnd + 1}") as stage:
            pred, _, _ = oof_site_predictions(prep, splits, cfg, assignment=True)
            labeled = sites["labeled"].to_numpy().copy()
            confidence = sites["confidence"].to_numpy().copy()
            moved = 0
            atoms, is_acid = sites["atom"].to_numpy(), (sites["kind"] == "acid").to_numpy()
            for rows, p, label, new in predicted_assignments(prep, pred, cfg):
                cur_atom = int(atoms[rows[labeled[rows]][0]])
                sign = 1.0 if is_acid[rows[0]] else -1.0
                stronger = sign * (p[cur_atom] - p[new.atom]) > cfg.model.assignment_margin
                consistent = abs(p[cur_atom] - label) <= cfg.model.assignment_tolerance
                if new.atom != cur_atom and (stronger or not consistent):
                    labeled[rows] = atoms[rows] == new.atom
                    moved += 1
                confidence[rows] = new.confidence
            sites["labeled"] = labeled
            sites["confidence"] = confidence
            shift = ""
            if cfg.model.microstate_targets:
                sites["offset"] = microstate_offsets(prep, pred)
                shift = f"; microstate offsets on {int((sites['offset'] != 0).sum())} labels"
            moved_per_round.append(moved)
            stage.note = f"{moved} labels moved ({moved / max(n_mols, 1):.1%} of {n_mols} molecules){shift}"
        if moved <= cfg.model.assignment_stop_fraction * n_mols:
            break
    return moved_per_round


def microstate_offsets(prep: Prepared, site_pred: np.ndarray, limit: float = 3.0) -> np.ndarray:
    """Per site row: for the labeled site, its predicted site pKa minus the molecule's predicted
    constant (the microstate model's macro constant of the measured kind and rank); 0 elsewhere.

    A molecule-level value is a macroscopic constant: two equivalent amines give a constant log10(2)
    above either site, a zwitterion's constants are pulled apart by the charges.  Training the labeled
    site on ``value + offset`` makes the site model's predictions reproduce the measured constant
    through the microstate model instead of absorbing those effects into the site value.
    """
    sites = prep.sites
    out = np.zeros(len(sites))
    const = E.table_constants(prep.table, site_pred)
    lab = np.flatnonzero(sites["labeled"].to_numpy())
    mol_of = sites["mol_id"].to_numpy()[lab]
    macro = const["pred"].reindex(mol_of).to_numpy()
    delta = site_pred[lab] - macro
    explicit = prep.table.molecules["site_atom"].notna().to_numpy()[mol_of]
    out[lab] = np.where(np.isfinite(delta) & ~explicit, np.clip(delta, -limit, limit), 0.0)
    return out


# ----------------------------------------------------------------------------- baselines

def type_median_predictions(prep: Prepared, splits) -> np.ndarray:
    """Baseline: each site gets the training-fold median label of its site type (catalog prior if unseen)."""
    sites = prep.sites
    pred = np.full(len(sites), np.nan)
    mol_of_row = sites["mol_id"].to_numpy()
    for _, tr, te in splits:
        lab = sites[sites["labeled"] & np.isin(mol_of_row, tr)]
        med = lab.groupby(["kind", "site_type"])["label"].median()
        rows = np.flatnonzero(np.isin(mol_of_row, te))
        keys = list(zip(sites["kind"].to_numpy()[rows], sites["site_type"].to_numpy()[rows]))
        pred[rows] = [med.get(k, p) for k, p in zip(keys, sites["prior"].to_numpy()[rows])]
    return pred


def _molecule_labels(prep: Prepared) -> tuple[np.ndarray, np.ndarray]:
    """Label and kind per mol_id."""
    mols = _labels(prep)
    n = len(prep.mol_X)
    y = np.full(n, np.nan)
    kinds = np.empty(n, dtype=object)
    y[mols["mol_id"]] = mols["label"]
    kinds[mols["mol_id"]] = mols["kind"]
    return y, kinds


def morgan_jobs(prep: Prepared, splits) -> list[FitJob]:
    """Baseline: a molecule-level LightGBM on Morgan counts per kind, one job per fold (rows are mol_ids)."""
    y, kinds = _molecule_labels(prep)
    return [FitJob(prep.mol_X, y, kinds, np.asarray(tr), True, frozenset(kinds[te])) for _, tr, te in splits]


def morgan_oof(prep: Prepared, splits, regs: list[SiteRegressor]) -> np.ndarray:
    _, kinds = _molecule_labels(prep)
    out = np.full(len(prep.mol_X), np.nan)
    for (_, _, te), reg in zip(splits, regs):
        out[te] = reg.predict(prep.mol_X[te], kinds[te])
    return out


# ----------------------------------------------------------------------------- metrics

def metric_table(mols: pd.DataFrame, pred_by_mol: dict[str, np.ndarray], cfg: RunConfig, scheme: str) -> pd.DataFrame:
    """Rows: (scheme, model, subset) with bootstrap intervals; subsets overall, per kind, per site type."""
    rows = []
    y = mols["label"].to_numpy()
    ids = mols["mol_id"].to_numpy()
    subsets = [("overall", np.ones(len(mols), bool))]
    subsets += [(f"kind:{k}", (mols["kind"] == k).to_numpy()) for k in KINDS]
    subsets += [(f"type:{t}", (mols["site_type"] == t).to_numpy()) for t in sorted(mols["site_type"].unique())]
    for model, pred in pred_by_mol.items():
        p = pred[ids]
        for name, mask in subsets:
            mask = mask & ~np.isnan(p)
            if mask.sum() < 2:
                continue
            boot = cfg.cv.bootstrap if not name.startswith("type:") else min(cfg.cv.bootstrap, 200)
            m = bootstrap_metrics(y[mask], p[mask], n_boot=boot, seed=cfg.seed)
            rows.append({"scheme": scheme, "model": model, "subset": name, **m})
    return pd.DataFrame(rows)


@dataclass
class CVResult:
    metrics: pd.DataFrame
    predictions: pd.DataFrame        # one row per (scheme, molecule) with every model's prediction
    residuals: pd.DataFrame          # molecule-grouped CV, value-free (evaluation.residual_table)
    scaffold_residuals: pd.DataFrame | None = None   # scaffold-grouped CV, value-free
    scaffold_folds: dict | None = None               # mol_id -> scaffold fold
    unseen_type_weight: dict | None = None           # kind -> model weight on sites of unseen types (None: off)


def cross_validate(prep: Prepared, cfg: RunConfig, clock: StageClock | None = None) -> CVResult:
    """Every scheme of ``cv.schemes`` (with the baselines when ``cv.baselines``), then bootstrap metrics.

    Within a scheme, all fold models (site model and baselines) are fitted in one parallel pool.  The
    headline model ``site_model`` is the molecule's predicted constant (value-free, see
    :mod:`pkasite.pipeline.evaluation`); ``site_attribution_check`` is the diagnostic at the site the
    value was attached to.
    """
    clock = clock or StageClock()
    mols = _labels(prep)
    preds, scored, residuals = {}, {}, {}
    folds_by_scheme = {}
    reference = None  # the unseen-site-type folds' (site_pred, unseen, kinds to blend): weighs the prior blend
    # with the prior blend the unseen-site-type folds run first, so that every scheme's unseen types can be
    # blended; otherwise the schemes run in the configured order
    order = sorted(cfg.cv.schemes, key=lambda s: s != "site_type") if cfg.model.unseen_type_blend else cfg.cv.schemes
    for scheme in order:
        with clock(f"cv {scheme}" + (" + baselines" if cfg.cv.baselines else "")) as stage:
            splits = make_splits(prep, scheme, cfg)
            sjobs = site_jobs(prep, splits, cfg, unseen_type=(scheme == "site_type"))
            jobs = sjobs + (morgan_jobs(prep, splits) if cfg.cv.baselines else [])
            regs = fit_many(jobs, booster_params(cfg.model), cfg.seed)
            with_sim = scheme in ("molecule", "scaffold")
            site_pred, fold, sim = site_oof(prep, splits, regs[:len(splits)], with_similarity=with_sim)
            if cfg.model.unseen_type_blend:
                unseen = unseen_type_rows(prep, splits, sjobs)
                if scheme == "site_type":
                    reference = (site_pred.copy(), unseen, tuple(cfg.model.unseen_type_blend))
                if reference is not None:  # without the unseen-site-type folds (--quick) nothing weighs it
                    site_pred = blend_unseen_types(prep, splits, site_pred, unseen, reference)
            const = E.table_constants(prep.table, site_pred)
            by_model = {E.HEADLINE: E.constants_by_mol(prep.table, site_pred),
                        E.ATTRIBUTION: E.attributed_predictions(prep.sites, site_pred)}
            if cfg.cv.baselines:
                by_model["type_median"] = E.constants_by_mol(prep.table, type_median_predictions(prep, splits))
                by_model["mol_morgan"] = morgan_oof(prep, splits, regs[len(splits):])
            tested = np.unique(np.concatenate([te for _, _, te in splits]))
            sub = mols[mols["mol_id"].isin(tested)]
            fold_of_mol = pd.Series(fold, index=prep.sites["mol_id"]).groupby(level=0).first()
            rows = const["row"].reindex(sub["mol_id"]).to_numpy()
            has = ~np.isnan(rows)
            r = np.where(has, rows, 0).astype(int)
            p = sub.assign(scheme=scheme, fold=fold_of_mol.reindex(sub["mol_id"]).to_numpy(),
                           pred_atom=np.where(has, prep.sites["atom"].to_numpy()[r], -1),
                           pred_site_type=np.where(has, prep.sites["site_type"].to_numpy()[r], ""),
                           similarity=np.where(has, sim[r], np.nan),
                           **{f"pred_{k}": v[sub["mol_id"].to_numpy()] for k, v in by_model.items()})
            preds[scheme] = p
            scored[scheme] = (sub, by_model, p)
            if with_sim:
                residuals[scheme] = E.residual_table(prep.table, site_pred, sim)
                folds_by_scheme[scheme] = fold_of_mol.to_dict()
            stage.note = ", ".join(f"{k} RMSE {np.sqrt(np.nanmean((p[f'pred_{k}'] - p['label']) ** 2)):.2f}"
                                   for k in by_model)
    with clock("bootstrap metrics") as stage:
        tables = []
        for scheme in cfg.cv.schemes:
            sub, by_model, p = scored[scheme]
            tables.append(metric_table(sub, by_model, cfg, scheme))
            if scheme != "site_type":  # per-fold figures (for site_type the folds are the type subsets)
                tables.append(pd.DataFrame([
                    {"scheme": scheme, "model": E.HEADLINE, "subset": f"fold:{f}",
                     **point_metrics(g["label"], g[f"pred_{E.HEADLINE}"])} for f, g in p.groupby("fold")]))
        stage.note = f"{cfg.cv.bootstrap} resamples"
    weights = unseen_type_weights(prep, *reference) if reference is not None else None
    return CVResult(pd.concat(tables, ignore_index=True), pd.concat([preds[s] for s in cfg.cv.schemes],
                                                                    ignore_index=True),
                    residuals.get("molecule"), residuals.get("scaffold"), folds_by_scheme.get("scaffold"), weights)


# ----------------------------------------------------------------------------- domain and intervals

def domain_threshold(residuals: pd.DataFrame, target_rmse: float) -> float:
    """Lowest similarity threshold at which the CV RMSE of the known-site residuals at or above it
    meets the target (value-free residuals, :func:`evaluation.residual_table`)."""
    r = residuals[residuals["level"] == "site"].dropna(subset=["similarity"])
    r = r.sort_values("similarity", ascending=False)
    if r.empty:
        return 1.0
    sq = np.cumsum(r["residual"].to_numpy() ** 2)
    rmse = np.sqrt(sq / np.arange(1, len(r) + 1))
    ok = np.flatnonzero((rmse <= target_rmse) & (np.arange(1, len(r) + 1) >= 30))
    if not len(ok):
        return 1.0
    return float(r["similarity"].to_numpy()[ok.max()])


def range_check(residuals: pd.DataFrame, margin: float | None) -> dict:
    """Known-site CV residuals (value-free) split by whether the prediction lies more than ``margin``
    outside the site type's catalog range: count and RMSE of each part (empty without a margin)."""
    r = residuals[residuals["level"] == "site"]
    if margin is None or r.empty:
        return {}
    by_name = load_catalog().by_name
    out = np.array([by_name[t].outside(p) > margin for t, p in zip(r["site_type"], r["pred"])])
    res = r["residual"].to_numpy()
    return {"n_outside": int(out.sum()), "n_inside": int((~out).sum()),
            "rmse_outside": float(np.sqrt(np.mean(res[out] ** 2))) if out.any() else float("nan"),
            "rmse_inside": float(np.sqrt(np.mean(res[~out] ** 2))) if (~out).any() else float("nan")}


def coverage_checks(cv: CVResult, cfg: RunConfig, test_residuals: pd.DataFrame | None = None) -> pd.DataFrame:
    """Nominal against observed interval coverage, per level (site, molecule) and kind, on residuals
    the calibration never saw: cross-fitted molecule folds, the scaffold folds (calibrated on the
    molecule-CV residuals of the other scaffold folds) and, when given, the held-out test set."""
    levels = cfg.domain.interval_levels
    mol_folds = {m: f"f{k}" for k, (_, te) in enumerate(group_kfold(cv.residuals["mol_id"].unique(), cfg.cv.folds,
                                                                        cfg.seed)) for m in cv.residuals["mol_id"].unique()[te]}
    rows = E.coverage_rows(cv.residuals, cv.residuals, "molecule CV (cross-fitted)", levels, folds=mol_folds,
                           seed=cfg.seed)
    if cv.scaffold_residuals is not None:
        rows += E.coverage_rows(cv.residuals, cv.scaffold_residuals, "scaffold folds", levels,
                                folds=cv.scaffold_folds, seed=cfg.seed)
    if test_residuals is not None:
        rows += E.coverage_rows(cv.residuals, test_residuals, "held-out test", levels, seed=cfg.seed)
    return pd.DataFrame(rows)


# ----------------------------------------------------------------------------- evaluation on a held-out set

def heldout_site_predictions(reg: SiteRegressor, prep: Prepared, train_bits: dict, train_prep: Prepared | None = None,
                             unseen_type_weight: dict | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Site predictions and domain similarities for a held-out site table: features and kinds only,
    no value and no attached site.  With ``unseen_type_weight``, sites of a type without labels in
    ``train_prep`` are blended towards their type's prior, as in prediction."""
    kinds = prep.sites["kind"].to_numpy()
    site_pred = reg.predict(prep.X, kinds)
    if unseen_type_weight and train_prep is not None:
        seen = _type_keys(train_prep.sites)[train_prep.sites["labeled"].to_numpy()]
        unseen = ~np.isin(_type_keys(prep.sites), seen)
        site_pred = blend(site_pred, prep.sites["prior"].to_numpy(), unseen, kinds, unseen_type_weight)
    sim = np.full(len(kinds), np.nan)
    for kind in KINDS:
        sel = kinds == kind
        if sel.any() and kind in train_bits:
            sim[sel] = tanimoto_max(prep.bits[sel], train_bits[kind])
    return site_pred, sim


def evaluate_holdout(reg: SiteRegressor, measurements: pd.DataFrame, cfg: RunConfig, train_prep: Prepared,
                     train_bits: dict, unseen_type_weight: dict | None = None) -> tuple[dict, pd.DataFrame]:
    """Value-free metrics of a fitted model and the Morgan baseline on held-out measurements, and the
    held-out residual table (for coverage checks).

    ``test_<metric>_<kind>``: the molecule's predicted constant against the value (headline);
    ``attribution_check_test_<metric>_<kind>``: the diagnostic at the site the value is attached to
    (by the model's predictions and the value, as in training); ``unflagged_test_<metric>_<kind>``: the
    headline's comparison on the measurements curation does not flag ``kind_suspect``, a diagnostic too
    (the flag reads the value).
    """
    prep = prepare(measurements, cfg)
    site_pred, sim = heldout_site_predictions(reg, prep, train_bits, train_prep, unseen_type_weight)
    constant = E.constants_by_mol(prep.table, site_pred)
    residuals = E.residual_table(prep.table, site_pred, sim)
    labeled = prep.sites["labeled"].to_numpy().copy()
    for rows, _, _, new in predicted_assignments(prep, site_pred, cfg):
        labeled[rows] = prep.sites["atom"].to_numpy()[rows] == new.atom
    prep.sites["labeled"] = labeled
    attributed = E.attributed_predictions(prep.sites, site_pred)
    mols = _labels(prep)
    tmols = _labels(train_prep)
    y, kinds = _molecule_labels(train_prep)
    base = fit_many([FitJob(train_prep.mol_X, y, kinds, tmols["mol_id"].to_numpy())], booster_params(cfg.model),
                    cfg.seed)[0]
    base_pred = np.full(len(prep.mol_X), np.nan)
    base_pred[mols["mol_id"]] = base.predict(prep.mol_X[mols["mol_id"]], mols["kind"].to_numpy())
    out = {"n_heldout": int(len(measurements)), "n_heldout_no_site": int(len(prep.table.rejects))}
    for kind in KINDS:
        sel = mols[mols["kind"] == kind]
        if len(sel) < 2:
            continue
        y, ids = sel["label"].to_numpy(), sel["mol_id"].to_numpy()
        boot = bootstrap_metrics(y, constant[ids], n_boot=cfg.cv.bootstrap, seed=cfg.seed)
        out.update({f"test_{k}_{kind}": v for k, v in boot.items()})
        out.update({f"{E.ATTRIBUTION}_test_{k}_{kind}": v for k, v in point_metrics(y, attributed[ids]).items()
                    if k != "n"})
        out.update({f"baseline_mol_morgan_test_{k}_{kind}": v for k, v in point_metrics(y, base_pred[ids]).items()
                    if k != "n"})
        if "kind_suspect" in measurements:
            flagged = set(measurements.loc[measurements["kind_suspect"].fillna(False).astype(bool), "record_id"])
            keep = ~sel["record_id"].isin(flagged).to_numpy()
            out.update({f"unflagged_test_{k}_{kind}": v
                        for k, v in point_metrics(y[keep], constant[ids][keep]).items()})
    return out, residuals


def split_filter(measurements: pd.DataFrame, splits: list[str] | None) -> pd.DataFrame:
    if splits is None:
        return measurements
    return measurements[measurements["split"].isin(splits)].reset_index(drop=True)


def fit_measurements(measurements: pd.DataFrame, cfg: TrainConfig) -> tuple[pd.DataFrame, int]:
    """The measurements the models fit and cross-validate: those of ``cfg.fit_splits``, less the ones
    curation flags ``kind_suspect`` unless ``cfg.fit_kind_suspects``; and how many were withheld.

    A kind suspect's value fits no site of its kind by the catalog's ranges but a site of the other kind:
    as a label it either trains a site on the other kind's value (cytosine's N-H acid constant 12.2 filed as
    a base lands on its ring N) or trains a class the catalog's range misses; the curated table keeps the
    flag, so the user sees each one."""
    fit = split_filter(measurements, cfg.fit_splits)
    if cfg.fit_kind_suspects or "kind_suspect" not in fit:
        return fit, 0
    suspect = fit["kind_suspect"].fillna(False).astype(bool).to_numpy()
    return fit[~suspect].reset_index(drop=True), int(suspect.sum())


def heavy_atom_counts(mols: list) -> np.ndarray:
    return np.array([m.GetNumHeavyAtoms() for m in mols])


def elements_seen(mols: list) -> list[str]:
    return sorted({a.GetSymbol() for m in mols for a in m.GetAtoms()})
