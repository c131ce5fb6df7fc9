"""Model bundle: a folder holding everything prediction needs, each file sha256-checked on load.

No pickles: boosters are LightGBM text models, arrays are ``.npz`` read with
``allow_pickle=False``, tables are parquet, the rest is JSON.
"""
from __future__ import annotations

import hashlib
import json
import os
import shutil
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from pkasite.features.site_features import FeatureSettings
from pkasite.features.sites import KINDS
from pkasite.models.calibration import ConformalCalibrator
from pkasite.models.microstates import InteractionModel

if TYPE_CHECKING:  # imported where a bundle is loaded: LightGBM (and the scikit-learn it pulls in) cost
    from pkasite.models.regressor import SiteRegressor  # ~90 MB, which processes that only read files never pay

BUNDLE_FORMAT = 1
MANIFEST = "manifest.json"


class BundleError(ValueError):
    """A bundle that is missing, incomplete or altered; the message names the file."""


@dataclass
class ModelBundle:
    regressor: SiteRegressor
    settings: FeatureSettings
    site_types: list[str]
    catalog_version: str
    calibrator: ConformalCalibrator
    domain: dict          # threshold, type_support, elements, max_heavy_atoms, min_type_support
    train_bits: dict      # kind -> uint8 matrix of training-site neighbourhood bits
    card: dict
    residuals: pd.DataFrame | None                  # None when loaded for prediction (with_tables=False)
    cv_metrics: pd.DataFrame | None = None      # for the validation report
    cv_predictions: pd.DataFrame | None = None
    curation: dict | None = None
    molecule_calibrator: ConformalCalibrator | None = None   # intervals of the molecule's constants
    coverage: pd.DataFrame | None = None                      # interval coverage checks (where, level, kind, ...)
    interactions: InteractionModel | None = None              # site-site pair terms of the microstate model
    path: Path | None = None


def _sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def save_bundle(bundle: ModelBundle, target: Path) -> Path:
    """Write the bundle folder atomically (a temporary folder renamed into place)."""
    target = Path(target)
    target.parent.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix=f".{target.name}.", dir=target.parent))
    try:
        for key, text in bundle.regressor.to_strings().items():
            (tmp / f"booster_{key}.txt").write_text(text)
        config = {"format": BUNDLE_FORMAT, "per_kind": bundle.regressor.per_kind, "seed": bundle.regressor.seed,
                  "offsets": bundle.regressor.offsets_,
                  "features": bundle.settings.to_dict(), "site_types": bundle.site_types,
                  "catalog_version": bundle.catalog_version, "calibrator": bundle.calibrator.to_dict(),
                  "molecule_calibrator": (bundle.molecule_calibrator.to_dict()
                                          if bundle.molecule_calibrator is not None else None),
                  "interactions": bundle.interactions.to_dict() if bundle.interactions is not None else None,
                  "domain": bundle.domain}
        (tmp / "config.json").write_text(json.dumps(config, indent=2, sort_keys=True))
        np.savez_compressed(tmp / "train_bits.npz",
                            **{k: np.packbits(v.astype(bool), axis=1) for k, v in bundle.train_bits.items()},
                            **{f"{k}__width": np.array([v.shape[1]]) for k, v in bundle.train_bits.items()})
        bundle.residuals.to_parquet(tmp / "cv_residuals.parquet", index=False)
        if bundle.cv_metrics is not None:
            bundle.cv_metrics.to_parquet(tmp / "cv_metrics.parquet", index=False)
        if bundle.cv_predictions is not None:
            bundle.cv_predictions.to_parquet(tmp / "cv_predictions.parquet", index=False)
        if bundle.coverage is not None:
            bundle.coverage.to_parquet(tmp / "interval_coverage.parquet", index=False)
        if bundle.curation is not None:
            (tmp / "curation_summary.json").write_text(json.dumps(bundle.curation, indent=2, sort_keys=True))
        card = {**bundle.card, "files": {p.name: _sha256(p) for p in sorted(tmp.iterdir())}}
        (tmp / "model_card.json").write_text(json.dumps(card, indent=2, sort_keys=True, default=str))
        (tmp / "model_card.md").write_text(render_model_card(card))
        files = {p.name: _sha256(p) for p in sorted(tmp.iterdir())}
        (tmp / MANIFEST).write_text(json.dumps({"format": BUNDLE_FORMAT, "files": files}, indent=2, sort_keys=True))
        if target.exists():
            shutil.rmtree(target)
        os.replace(tmp, target)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return target


def verify_bundle(path: Path) -> dict:
    """Check every file against the manifest; return the manifest."""
    path = Path(path)
    manifest_path = path / MANIFEST
    if not manifest_path.is_file():
        raise BundleError(f"{path}: not a model bundle (no {MANIFEST})")
    manifest = json.loads(manifest_path.read_text())
    if manifest.get("format") != BUNDLE_FORMAT:
        raise BundleError(f"{path}: bundle format {manifest.get('format')} is not {BUNDLE_FORMAT}")
    for name, digest in manifest["files"].items():
        f = path / name
        if not f.is_file():
            raise BundleError(f"{path}: file {name} listed in the manifest is missing")
        if _sha256(f) != digest:
            raise BundleError(f"{path}: file {name} does not match its sha256 in the manifest "
                              "(the bundle was altered; retrain or restore it)")
    return manifest


def load_bundle(path: Path, with_tables: bool = True) -> ModelBundle:
    """The bundle at ``path``, its sha256 manifest checked.  ``with_tables=False`` leaves out the tables
    only reports and comparisons read (CV residuals, metrics, predictions, coverage; about 60 MB in
    memory), as prediction processes do."""
    path = Path(path)
    tables = _optional if with_tables else (lambda p, read: None)
    verify_bundle(path)
    from pkasite.models.regressor import SiteRegressor
    config = json.loads((path / "config.json").read_text())
    boosters = {p.stem.removeprefix("booster_"): p.read_text() for p in sorted(path.glob("booster_*.txt"))}
    reg = SiteRegressor.from_strings(boosters, per_kind=config["per_kind"], seed=config["seed"],
                                     offsets=config.get("offsets"))
    with np.load(path / "train_bits.npz", allow_pickle=False) as npz:
        kinds = [k for k in npz.files if not k.endswith("__width")]
        bits = {k: np.unpackbits(npz[k], axis=1)[:, : int(npz[f"{k}__width"][0])] for k in kinds}
    return ModelBundle(
        regressor=reg, settings=FeatureSettings.from_dict(config["features"]), site_types=config["site_types"],
        catalog_version=str(config["catalog_version"]), calibrator=ConformalCalibrator.from_dict(config["calibrator"]),
        domain=config["domain"], train_bits=bits, card=json.loads((path / "model_card.json").read_text()),
        residuals=tables(path / "cv_residuals.parquet", pd.read_parquet),
        cv_metrics=tables(path / "cv_metrics.parquet", pd.read_parquet),
        cv_predictions=tables(path / "cv_predictions.parquet", pd.read_parquet),
        curation=_optional(path / "curation_summary.json", lambda p: json.loads(p.read_text())),
        molecule_calibrator=(ConformalCalibrator.from_dict(config["molecule_calibrator"])
                             if config.get("molecule_calibrator") else None),
        coverage=tables(path / "interval_coverage.parquet", pd.read_parquet),
        interactions=InteractionModel.from_dict(config["interactions"]) if config.get("interactions") else None,
        path=path)


def _optional(path: Path, read):
    return read(path) if path.is_file() else None


def render_model_card(card: dict) -> str:
    """The model card as Markdown."""
    lines = [f"# Model card: {card.get('name', 'pkasite site model')}", ""]
    if card.get("non_commercial"):
        lines += ["> **NON-COMMERCIAL USE ONLY.** This model was trained on data licensed for non-commercial",
                  "> use (" + ", ".join(card.get("non_commercial_sources", [])) + ").", ""]
    lines += ["Predicted pKa values are estimates, not a substitute for measurement.", "",
              "## Intended use", "", card.get("intended_use", ""), "", "## Training data", ""]
    for src in card.get("sources", []):
        lines.append(f"- **{src['name']}** ({src['licence']}): {src['citation']}")
    lines += ["", f"Measurements: {card.get('n_measurements')}; molecules with a site: {card.get('n_molecules')}; "
              f"dataset sha256: `{card.get('dataset_sha256')}`", ""]
    if card.get("how_measured"):
        lines += ["## How these figures were measured", "", card["how_measured"], ""]
    lines += ["## Cross-validation (value-free: the molecule's predicted constant against its value)", "",
              "| scheme | model | subset | n | RMSE | 95% CI | MAE | R2 |", "|---|---|---|---|---|---|---|---|"]

    def row_md(row):
        return (f"| {row['scheme']} | {row['model']} | {row['subset']} | {row['n']} | {row['rmse']:.2f} | "
                f"{row.get('rmse_low', float('nan')):.2f}-{row.get('rmse_high', float('nan')):.2f} | "
                f"{row['mae']:.2f} | {row['r2']:.2f} |")
    rows = card.get("cv_summary", [])
    lines += [row_md(r) for r in rows if r["model"] != "site_attribution_check"]
    diag = [r for r in rows if r["model"] == "site_attribution_check"]
    if diag:
        lines += ["", "Diagnostic, not a headline: the site attribution check compares the value with the prediction "
                  "at the site it was attached to, a site chosen with the value itself, so it is optimistic.", "",
                  "| scheme | model | subset | n | RMSE | 95% CI | MAE | R2 |", "|---|---|---|---|---|---|---|---|"]
        lines += [row_md(r) for r in diag]
    held = card.get("heldout") or {}
    if held:
        lines += ["", "## Held-out evaluation (value-free)", ""]
        for kind in KINDS:
            if f"test_rmse_{kind}" in held:
                lines.append(f"- {kind}: n {held.get(f'test_n_{kind}')}, RMSE {held[f'test_rmse_{kind}']:.3f} "
                             f"(95% CI {held.get(f'test_rmse_low_{kind}', float('nan')):.3f}-"
                             f"{held.get(f'test_rmse_high_{kind}', float('nan')):.3f}), MAE "
                             f"{held[f'test_mae_{kind}']:.3f}; Morgan baseline RMSE "
                             f"{held.get(f'baseline_mol_morgan_test_rmse_{kind}', float('nan')):.3f}; site "
                             f"attribution check (diagnostic) RMSE "
                             f"{held.get(f'site_attribution_check_test_rmse_{kind}', float('nan')):.3f}")
    cov = card.get("interval_coverage") or []
    if isinstance(cov, list) and cov:
        lines += ["", "## Interval coverage on data the calibration never saw", "",
                  "| where | interval | kind | nominal | observed | 95% CI | n |", "|---|---|---|---|---|---|---|"]
        lines += [f"| {r['where']} | {r['level']} | {r['kind']} | {r['nominal']:.2f} | {r['observed']:.3f} | "
                  f"{r['observed_low']:.3f}-{r['observed_high']:.3f} | {r['n']} |" for r in cov]
    lines += ["", "## Applicability domain and intervals", "", card.get("domain_note", ""), "",
              "## Limitations", ""] + [f"- {x}" for x in card.get("limitations", [])]
    lines += ["", "## Environment", "", f"code version {card.get('code_version')}, created {card.get('created')}", ""]
    if card.get("files"):
        lines += ["## Files (sha256)", ""] + [f"- `{name}` `{digest}`" for name, digest in card["files"].items()] + [""]
    return "\n".join(lines)
