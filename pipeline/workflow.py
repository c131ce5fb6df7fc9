"""The named steps of a run as plain functions: pull -> curate -> ... .

The CLI, tests and notebooks call these; each takes a validated config and
explicit paths and returns what it produced.
"""
from __future__ import annotations

import hashlib
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

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
    result = curate(raw, cfg.curation)
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


def _card(cfg: RunConfig, registry: Registry, measurements: pd.DataFrame, n_molecules: int, cv_summary: list,
          heldout: dict | None, domain: dict, coverage: dict, code: str) -> dict:
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
        "interval_coverage": coverage,
        "domain_note": (f"A site is in domain when the Tanimoto similarity of its neighbourhood fingerprint to the "
                        f"nearest training site of its kind is at least {domain['threshold']:.2f} (calibrated so that "
                        f"in-domain CV RMSE <= {domain['target_rmse']}) and its site type has at least "
                        f"{domain['min_type_support']} training examples. Intervals are split-conformal from "
                        f"molecule-grouped CV residuals by similarity bin; observed coverage: "
                        + ", ".join(f"{k} {v:.2f}" for k, v in coverage.items()) + "."),
        "limitations": ["Sites are treated as independent when macroscopic constants and charge are derived; "
                        "interactions between nearby sites (e.g. the second constant of a diacid) are not modelled.",
                        "Training labels are molecule-level constants attached to one site; the other sites of "
                        "a measured molecule enter training only as one-sided bounds (at least as weak as the "
                        "value) where their site type can hold it.",
                        "A site type the training data never labels is extrapolated from related types and the "
                        "bounds its sites got in other molecules; the leave-one-site-type-out figures show how "
                        "far off that can be.",
                        "Tautomers are predicted as drawn."],
    }


def train_step(cfg: RunConfig, measurements: pd.DataFrame, out_dir: Path, extra_artifacts: list[Path] = (),
               registry: Registry | None = None, curation: dict | None = None, log: Log = _quiet,
               clock: StageClock | None = None) -> TrainOutputs:
    """Site table -> features -> label re-assignment -> CV schemes -> final model bundle -> MLflow.

    ``clock`` (a :class:`StageClock`) times each stage and prints a progress line per stage; give
    one to include earlier stages (pull, curation) in the same table.
    """
    from pkasite.features.sites import load_catalog
    from pkasite.models.calibration import ConformalCalibrator
    from pkasite.models.domain import similarity_bin

    from . import train as T
    from .bundle import ModelBundle, save_bundle
    from .report import write_report
    from .tracking import code_version, log_training_run

    registry = registry or load_registry()
    clock = clock or StageClock(log)
    t0 = time.monotonic()
    out_dir = Path(out_dir)
    fit_meas = T.split_filter(measurements, cfg.train.fit_splits)
    with clock("site table + features") as stage:
        prep = T.prepare(fit_meas, cfg)
        stage.note = prep.summary()
    moved = T.reassign_labels(prep, cfg, clock)
    cv = T.cross_validate(prep, cfg, clock)
    with clock("calibration + domain") as stage:
        threshold = T.domain_threshold(cv.residuals, cfg.domain.target_rmse)
        coverage = T.interval_coverage(cv.residuals, cfg.domain.interval_levels, cfg.seed, cfg.cv.folds)
        res = cv.residuals.dropna(subset=["similarity"])
        calibrator = ConformalCalibrator(levels=tuple(cfg.domain.interval_levels)).fit(
            res["residual"].to_numpy(), similarity_bin(res["similarity"].to_numpy()))
        stage.note = f"domain threshold {threshold:.2f}; " + ", ".join(f"{k} {v:.2f}" for k, v in coverage.items())
    with clock("final fit"):
        final = T.fit_regressor(prep, np.arange(len(prep.table.molecules)), cfg)
    lab = prep.sites["labeled"].to_numpy()
    kinds = prep.sites["kind"].to_numpy()
    support = prep.sites[lab].groupby(["kind", "site_type"]).size()
    domain = {"threshold": threshold, "target_rmse": cfg.domain.target_rmse,
              "min_type_support": cfg.domain.min_type_support,
              "type_support": {k: {t: int(n) for (kk, t), n in support.items() if kk == k} for k in ("acid", "base")},
              "elements": T.elements_seen(prep.table.mols),
              "max_heavy_atoms": int(T.heavy_atom_counts(prep.table.mols).max())}
    heldout = None
    if cfg.train.eval_splits:
        with clock("held-out evaluation") as stage:
            heldout = T.evaluate_holdout(final, T.split_filter(measurements, cfg.train.eval_splits), cfg, prep)
            stage.note = ", ".join(f"RMSE {k} {heldout[f'test_rmse_{k}']:.2f} (Morgan baseline "
                                   f"{heldout[f'test_baseline_mol_morgan_rmse_{k}']:.2f})" for k in ("acid", "base")
                                   if f"test_rmse_{k}" in heldout)
    with clock("bundle + report") as stage:
        main_rows = cv.metrics[cv.metrics["subset"].isin(["overall", "kind:acid", "kind:base"])]
        card = _card(cfg, registry, fit_meas, len(prep.table.molecules),
                     main_rows.to_dict("records"), heldout, domain, coverage, code_version())
        card["assignment"] = {**prep.table.assignment_stats(), "moved_per_round": moved}
        bundle = ModelBundle(final, prep.settings, prep.site_types, load_catalog().version, calibrator, domain,
                             {k: prep.bits[lab & (kinds == k)] for k in ("acid", "base")}, card, cv.residuals,
                             cv.metrics, cv.predictions, curation)
        bundle_path = save_bundle(bundle, out_dir / "model")
        cv_metrics = write_table(cv.metrics, out_dir / "cv_metrics.csv")
        cv_preds = write_table(cv.predictions, out_dir / "cv_predictions.parquet")
        report = write_report(bundle_path, out_dir / "report.html")
    metrics = {}
    for r in cv.metrics.itertuples():
        subset = r.subset.replace("kind:", "").replace(":", "_")  # MLflow metric names allow no colon
        for m in ("rmse", "mae", "r2", "within_1", "within_2"):
            metrics[f"cv_{r.scheme}_{r.model}_{subset}_{m}"] = getattr(r, m)
    metrics.update({f"interval_{k}": v for k, v in coverage.items()})
    metrics["domain_threshold"] = threshold
    metrics.update({f"labels_moved_round{i + 1}": v for i, v in enumerate(moved)})
    if heldout:
        metrics.update({k: v for k, v in heldout.items() if isinstance(v, (int, float))})
    metrics["train_seconds"] = time.monotonic() - t0
    summary = {"assignment": card["assignment"], "stages": clock.table().to_dict("records"),
               "interval_coverage": coverage, "domain_threshold": threshold, "heldout": heldout}
    summary_path = write_json(summary, out_dir / "train_summary.json")
    tracked = None
    if cfg.mlflow.enabled:
        with clock("mlflow logging") as stage:
            example = pd.DataFrame({"id": ["example-1", "example-2"], "smiles": ["OC(=O)c1ccccc1", "CN1CCCCC1"]})
            tracked = log_training_run(cfg, metrics, [cv_metrics, cv_preds, summary_path, report, *extra_artifacts],
                                       bundle_path, {"dataset_sha256": card["dataset_sha256"],
                                                     "code_version": card["code_version"]}, example)
            stage.note = f"run {tracked['run_id']}; registered version {tracked['version']} (alias candidate)"
    log(f"training finished in {time.monotonic() - t0:.0f} s; bundle {bundle_path}")
    return TrainOutputs(bundle_path, cv_metrics, cv_preds, report, metrics, tracked, clock)
