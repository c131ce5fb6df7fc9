"""The named steps of a run as plain functions: pull -> curate -> ... .

The CLI, tests and notebooks call these; each takes a validated config and
explicit paths and returns what it produced.
"""
from __future__ import annotations

import hashlib
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from pkasite.features.sites import KINDS

from .config import Registry, RunConfig, load_registry
from .curate import CurationResult, curate, format_summary
from .ingest import PARSERS, parse_inhouse
from .sources import PulledFile, default_mirror, pull
from .stages import StageClock
from .tables import write_json, write_table

Log = Callable[[str], None]


def _quiet(msg: str) -> None:
    pass


def pull_step(cfg: RunConfig, registry: Registry | None = None, cache: Path | None = None,
              mirror: Path | None = None, force: bool = False, log: Log = _quiet) -> list[PulledFile]:
    """Pull the sources the config names (not needed when ``data.extra_only`` is set).

    ``mirror`` defaults to ``$PKASITE_MIRROR``; without either, files are downloaded.
    """
    registry = registry or load_registry()
    if cfg.data.extra_only:
        return []
    mirror = mirror or default_mirror()
    return pull(registry, cfg.data.sources, cache=cache, mirror=mirror, force=force, log=log)


def read_raw(files: list[PulledFile], cfg: RunConfig, registry: Registry | None = None) -> pd.DataFrame:
    """Parse pulled files and in-house files into one raw-record table."""
    registry = registry or load_registry()
    frames = []
    for f in files:
        if f.split is not None and f.split not in cfg.data.splits:
            continue
        source = registry.get(f.source)
        frames.append(PARSERS[source.parser](f.path, f.kind, f.split, source.licence, f.source))
    frames.extend(parse_inhouse(Path(p)) for p in cfg.data.extra)
    if not frames:
        raise ValueError("nothing to curate: no sources pulled and no in-house files given")
    return pd.concat(frames, ignore_index=True)


@dataclass
class CurateOutputs:
    result: CurationResult
    measurements: Path
    rejects: Path
    summary: Path


def curate_step(cfg: RunConfig, files: list[PulledFile], out_dir: Path, fmt: str = "parquet",
                registry: Registry | None = None, log: Log = _quiet) -> CurateOutputs:
    """Curate pulled + in-house data and write measurements, rejects and summary to ``out_dir``."""
    raw = read_raw(files, cfg, registry)
    result = curate(raw, cfg.curation, processes=cfg.cores())
    out_dir = Path(out_dir)
    m = write_table(result.measurements, out_dir / f"measurements.{fmt}")
    r = write_table(result.rejects, out_dir / f"rejects.{fmt}")
    s = write_json(result.summary, out_dir / "curation_summary.json")
    log(format_summary(result.summary))
    return CurateOutputs(result, m, r, s)


# ----------------------------------------------------------------------------- train

@dataclass
class TrainOutputs:
    bundle: Path
    cv_metrics: Path
    cv_predictions: Path
    report: Path
    metrics: dict
    mlflow: dict | None
    clock: StageClock | None = None


def dataset_sha256(measurements: pd.DataFrame) -> str:
    cols = ["smiles", "kind", "pka", "site_atom", "split"]
    body = measurements[cols].sort_values(cols[:3]).to_csv(index=False).encode()
    return hashlib.sha256(body).hexdigest()


HOW_MEASURED = (
    "Headline figures are value-free: for each measured molecule the model predicts its constant of the measured "
    "kind (the prediction at the site atom named in the data, else its most acidic acid site or most basic base "
    "site) without using the measured value, and that prediction is compared with the measurement. CV figures are "
    "out of fold: 5 folds grouped by molecule (InChIKey connectivity layer), grouped by Bemis-Murcko scaffold, and "
    "unseen site types: each well-represented site type is held out once, in one of 5 folds that leave their "
    "types out of training entirely (labels and bounds). The 'site attribution check' is a "
    "diagnostic: the prediction at the site the value was attached to, a site chosen with the measured value "
    "itself, so it is optimistic for molecules with several candidate sites; no headline uses it. Intervals and "
    "the domain threshold are calibrated on value-free molecule-grouped CV residuals (site intervals only on "
    "molecules whose site is known without the value: one candidate site or a site atom given in the data) and "
    "their coverage is checked on residuals the calibration never saw. On new chemistry expect the scaffold and "
    "unseen-site-type figures, not the molecule-grouped ones.")


def coverage_summary(coverage: list[dict]) -> str:
    """One line per check: observed coverage of the site and molecule intervals at each level."""
    by_where: dict[str, list[str]] = {}
    for r in coverage:
        by_where.setdefault(r["where"], []).append(
            f"{r['level']} {r['kind']} {int(100 * r['nominal'])}%: {100 * r['observed']:.0f}%")
    return "; ".join(f"{where}: " + ", ".join(v) for where, v in by_where.items())


def _card(cfg: RunConfig, registry: Registry, measurements: pd.DataFrame, n_molecules: int, cv_summary: list,
          heldout: dict | None, domain: dict, coverage: list[dict], code: str) -> dict:
    used = sorted({s for v in measurements["source"] for s in str(v).split(";") if s})
    sources, non_commercial = [], []
    for name in used:
        if name in registry.sources:
            src = registry.sources[name]
            sources.append({"name": name, "licence": src.licence, "citation": " ".join(src.citation.split())})
            if not src.commercial_use:
                non_commercial.append(name)
        else:
            sources.append({"name": name, "licence": "in-house (owner's terms)", "citation": "user-supplied file"})
    return {
        "name": f"pkasite site model ({cfg.name})", "created": time.strftime("%Y-%m-%d %H:%M:%S"), "code_version": code,
        "intended_use": "Estimating aqueous pKa of ionizable sites of drug-like organic molecules at 20-30 C, "
                        "to rank and triage compounds; not a substitute for measurement.",
        "sources": sources, "non_commercial": bool(non_commercial), "non_commercial_sources": non_commercial,
        "n_measurements": int(len(measurements)), "n_molecules": n_molecules,
        "dataset_sha256": dataset_sha256(measurements), "cv_summary": cv_summary, "heldout": heldout or {},
        "how_measured": HOW_MEASURED, "interval_coverage": coverage,
        "domain_note": (f"A site is in domain when the Tanimoto similarity of its neighbourhood fingerprint to the "
                        f"nearest training site of its kind is at least {domain['threshold']:.2f} (calibrated on "
                        f"value-free known-site CV residuals so that in-domain RMSE <= {domain['target_rmse']}) and "
                        f"its site type has at least {domain['min_type_support']} training examples"
                        + _range_note(domain) + ". Site intervals "
                        f"(pka_low, pka_high) and molecule intervals (acid_pka_low ... base_pka_high) are "
                        f"split-conformal by similarity bin from value-free molecule-grouped CV residuals. Observed "
                        f"coverage on data the calibration never saw: " + coverage_summary(coverage) + "."
                        + _blend_note(domain.get("unseen_type_weight"))),
        "limitations": ["Macroscopic constants and charge come from microstates whose like charged sites repel "
                        "by a pair term that knows only the bond count between them, how many shortest paths "
                        "join them and shared aromatic systems (no geometry): a cis and a trans pair get the "
                        "same term, coupling through cross-conjugated systems is under-counted, and opposite "
                        "charges get no extra attraction (see the README).",
                        "Training labels are molecule-level constants attached to one site; the other sites of "
                        "a measured molecule enter training only as one-sided bounds (at least as weak as the "
                        "value) where their site type can hold it.",
                        "A site type the training data never labels is extrapolated from related types and the "
                        "bounds its sites got in other molecules; the unseen-site-type figures show how far off "
                        "that can be.",
                        "Tautomers are predicted as drawn, except the N-H of an azole ring whose two tautomers "
                        "differ, which training and prediction alike redraw as one fixed tautomer (the same for "
                        "every drawing, not necessarily the major one in water); the model does not combine "
                        "tautomers."],
    }


def _range_note(domain: dict) -> str:
    margin, rc = domain.get("range_margin"), domain.get("range_check") or {}
    if margin is None:
        return ""
    unit = "log unit" if margin == 1 else "log units"
    note = f", and its prediction lies within {margin:g} {unit} of the usual range the site catalog gives its type"
    if rc.get("n_outside"):
        note += (f" (known-site CV residuals beyond it: {rc['n_outside']} sites, RMSE {rc['rmse_outside']:.2f}, "
                 f"against {rc['rmse_inside']:.2f} for the other {rc['n_inside']})")
    return note


def _blend_note(weights: dict | None) -> str:
    if not weights:
        return ""
    return (" Sites of a type without training labels are predicted as w * model + (1 - w) * the type's "
            "catalog prior, w = " + ", ".join(f"{weights[k]:.2f} ({k})" for k in sorted(weights))
            + " (least squares on the unseen-site-type CV folds' out-of-fold predictions).")


def _metric_key(*parts: str) -> str:
    return "_".join(p for p in parts if p).replace("kind:", "").replace(":", "_")  # MLflow allows no colon


def mlflow_metrics(cv_metrics: pd.DataFrame, coverage: pd.DataFrame, heldout: dict | None) -> dict:
    """Flat metric names for MLflow (see the README's migration note).

    Headline, value-free: ``cv_<metric>_<scheme>_<subset>`` and ``test_<metric>_<kind>``. Others carry
    their model as a prefix: ``baseline_<name>_cv_...``, ``site_attribution_check_cv_...`` (diagnostic).
    Per-site-type rows stay in the ``cv_metrics.csv`` artifact only: as MLflow metrics they were about
    5,000 values whose logging took longer than a quarter of the CV.
    """
    from .evaluation import HEADLINE
    metrics = {}
    for r in cv_metrics.itertuples():
        if str(r.subset).startswith("type:"):
            continue
        prefix = "" if r.model == HEADLINE else (r.model if r.model.startswith("site_") else f"baseline_{r.model}")
        for m in ("rmse", "mae", "r2", "within_1", "within_2"):
            metrics[_metric_key(prefix, "cv", m, r.scheme, r.subset)] = getattr(r, m)
    for r in coverage.itertuples():
        where = {"molecule CV (cross-fitted)": "molecule_cv", "scaffold folds": "scaffold", "held-out test": "test"}
        metrics[_metric_key("interval_coverage", where.get(r.where, r.where), r.level, r.kind,
                            str(int(round(100 * r.nominal))))] = r.observed
    if heldout:
        metrics.update({k: v for k, v in heldout.items() if isinstance(v, (int, float))})
    return metrics


def _fit_counted(fit, *args):
    """``fit(*args)`` and the number of boosters it fitted (counted in the thread that runs it)."""
    from pkasite.models.regressor import boosters_fitted
    before = boosters_fitted()
    out = fit(*args)
    return out, boosters_fitted() - before


def train_step(cfg: RunConfig, measurements: pd.DataFrame, out_dir: Path, extra_artifacts: list[Path] = (),
               registry: Registry | None = None, curation: dict | None = None, log: Log = _quiet,
               clock: StageClock | None = None) -> TrainOutputs:
    """Site table -> features -> label re-assignment -> CV schemes -> final model bundle -> MLflow.

    ``clock`` (a :class:`StageClock`) times each stage and prints a progress line per stage; give
    one to include earlier stages (pull, curation) in the same table.
    """
    from pkasite.features.sites import load_catalog
    from pkasite.models.microstates import default_interaction_model
    from pkasite.models.regressor import lightgbm_module

    from . import evaluation as E
    from . import train as T
    from .bundle import ModelBundle, save_bundle
    from .report import write_report
    from .tracking import code_version, log_training_run

    registry = registry or load_registry()
    clock = clock or StageClock(log)
    t0 = time.monotonic()
    out_dir = Path(out_dir)
    fit_meas, withheld = T.fit_measurements(measurements, cfg.train)
    if withheld:
        log(f"{withheld} kind-suspect measurements withheld from fitting and cross-validation "
            "(train.fit_kind_suspects: false; listed by kind_suspect in the measurements)")
    # LightGBM (with scikit-learn and SciPy, about a second) loads while this process waits on the
    # feature workers, instead of at the first fit
    threading.Thread(target=lightgbm_module, name="pkasite-import", daemon=True).start()
    with clock("site table + features") as stage:
        prep = T.prepare(fit_meas, cfg)
        stage.note = prep.summary()
    moved = T.reassign_labels(prep, cfg, clock)
    # The final model needs only the assigned labels: it fits in the background while cross-validation
    # runs, on the core that its single-threaded stretches (predictions, microstates, metrics) leave idle.
    background = ThreadPoolExecutor(1, thread_name_prefix="pkasite-final")
    final_fit = background.submit(_fit_counted, T.fit_regressor, prep, np.arange(len(prep.table.molecules)), cfg)
    background.shutdown(wait=False)  # the fit goes on; its result is collected below
    if cfg.mlflow.enabled:  # MLflow loads and opens its store while the folds fit (see prepare_tracking)
        from .tracking import prepare_tracking
        threading.Thread(target=prepare_tracking, args=(cfg.mlflow.tracking_uri, cfg.name),
                         name="pkasite-mlflow", daemon=True).start()
    cv = T.cross_validate(prep, cfg, clock)
    with clock("calibration + domain") as stage:
        levels = cfg.domain.interval_levels
        threshold = T.domain_threshold(cv.residuals, cfg.domain.target_rmse)
        calibrator = E.fit_calibrator(cv.residuals, "site", levels)
        mol_calibrator = E.fit_calibrator(cv.residuals, "molecule", levels)
        stage.note = f"domain threshold {threshold:.2f} (value-free known-site residuals)"
    with clock("final fit") as stage:
        final, stage.fits = final_fit.result()
        stage.note = "started after label assignment, alongside cross-validation; this is the wait"
    lab = prep.sites["labeled"].to_numpy()
    kinds = prep.sites["kind"].to_numpy()
    train_bits = {k: prep.bits[lab & (kinds == k)] for k in KINDS}
    support = prep.sites[lab].groupby(["kind", "site_type"]).size()
    domain = {"threshold": threshold, "target_rmse": cfg.domain.target_rmse,
              "min_type_support": cfg.domain.min_type_support,
              "range_margin": cfg.domain.range_margin,
              "range_check": T.range_check(cv.residuals, cfg.domain.range_margin),
              "type_support": {k: {t: int(n) for (kk, t), n in support.items() if kk == k} for k in KINDS},
              "unseen_type_weight": cv.unseen_type_weight,
              "elements": T.elements_seen(prep.table.mols),
              "max_heavy_atoms": int(T.heavy_atom_counts(prep.table.mols).max())}
    heldout, test_residuals = None, None
    if cfg.train.eval_splits:
        with clock("held-out evaluation") as stage:
            heldout, test_residuals = T.evaluate_holdout(final, T.split_filter(measurements, cfg.train.eval_splits),
                                                         cfg, prep, train_bits, cv.unseen_type_weight)
            stage.note = ", ".join(f"value-free RMSE {k} {heldout[f'test_rmse_{k}']:.2f} (Morgan baseline "
                                   f"{heldout[f'baseline_mol_morgan_test_rmse_{k}']:.2f})" for k in KINDS
                                   if f"test_rmse_{k}" in heldout)
    with clock("coverage checks") as stage:
        coverage = T.coverage_checks(cv, cfg, test_residuals)
        stage.note = coverage_summary([r for r in coverage.to_dict("records") if r["nominal"] == max(levels)])
    with clock("bundle + report") as stage:
        main_rows = cv.metrics[cv.metrics["subset"].isin(["overall", "kind:acid", "kind:base"])]
        card = _card(cfg, registry, fit_meas, len(prep.table.molecules),
                     main_rows.to_dict("records"), heldout, domain, coverage.to_dict("records"), code_version())
        card["assignment"] = {**prep.table.assignment_stats(), "moved_per_round": moved}
        card["kind_suspects_withheld"] = withheld
        bundle = ModelBundle(final, prep.settings, prep.site_types, load_catalog().version, calibrator, domain,
                             train_bits, card, cv.residuals, cv.metrics, cv.predictions, curation,
                             molecule_calibrator=mol_calibrator, coverage=coverage,
                             interactions=default_interaction_model())
        bundle_path = save_bundle(bundle, out_dir / "model")
        cv_metrics = write_table(cv.metrics, out_dir / "cv_metrics.csv")
        cv_preds = write_table(cv.predictions, out_dir / "cv_predictions.parquet")
        report = write_report(bundle_path, out_dir / "report.html")
    metrics = mlflow_metrics(cv.metrics, coverage, heldout)
    metrics["domain_threshold"] = threshold
    metrics.update({f"labels_moved_round{i + 1}": v for i, v in enumerate(moved)})
    metrics["train_seconds"] = time.monotonic() - t0
    summary = {"assignment": card["assignment"], "stages": clock.table().to_dict("records"),
               "interval_coverage": coverage.to_dict("records"), "domain_threshold": threshold, "heldout": heldout}
    summary_path = write_json(summary, out_dir / "train_summary.json")
    tracked = None
    if cfg.mlflow.enabled:
        with clock("mlflow logging") as stage:
            from .pyfunc import predict_frame  # imports MLflow
            example = pd.DataFrame({"id": ["example-1", "example-2"], "smiles": ["OC(=O)c1ccccc1", "CN1CCCCC1"]})
            tracked = log_training_run(cfg, metrics, [cv_metrics, cv_preds, summary_path, report, *extra_artifacts],
                                       bundle_path, {"dataset_sha256": card["dataset_sha256"],
                                                     "code_version": card["code_version"]},
                                       example, predict_frame(bundle, example))
            stage.note = f"run {tracked['run_id']}; registered version {tracked['version']} (alias candidate)"
    log(f"training finished in {time.monotonic() - t0:.0f} s; bundle {bundle_path}")
    return TrainOutputs(bundle_path, cv_metrics, cv_preds, report, metrics, tracked, clock)
