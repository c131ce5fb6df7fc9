"""Training on a small deterministic subset of the curated open data: CV schemes, bundle, MLflow."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from pkasite.pipeline.bundle import BundleError, load_bundle, verify_bundle
from pkasite.pipeline.config import RunConfig, load_config

pytestmark = pytest.mark.slow

SMALL = {"model.n_estimators": 80, "model.learning_rate": 0.1, "model.assignment_rounds": 1,
         "model.assignment_n_estimators": None, "model.assignment_learning_rate": None, "cv.folds": 3,
         "cv.site_type_min_count": 60, "cv.bootstrap": 50}


def small_config(tmp_path, **extra) -> RunConfig:
    return load_config().with_overrides({**SMALL, "name": "test-small",
                                         "mlflow.tracking_uri": f"sqlite:///{tmp_path}/mlflow.db", **extra})


@pytest.fixture(scope="session")
def trained(subset, tmp_path_factory):
    from pkasite.pipeline.workflow import train_step
    tmp = tmp_path_factory.mktemp("train")
    cfg = small_config(tmp)
    return cfg, tmp, train_step(cfg, subset, tmp / "out")


def test_three_cv_schemes_with_baselines(trained):
    cfg, _, out = trained
    cv = pd.read_csv(out.cv_metrics)
    overall = cv[cv["subset"] == "overall"].set_index(["scheme", "model"])["rmse"]
    for scheme in ("molecule", "scaffold", "site_type"):
        for model in ("site_model", "site_attribution_check", "type_median", "mol_morgan"):
            assert (scheme, model) in overall.index
    # the learned model must beat the site-type median prior on held-out molecules
    assert overall[("molecule", "site_model")] < overall[("molecule", "type_median")]
    assert {"rmse_low", "rmse_high", "within_1", "within_2", "r2", "mae"} <= set(cv.columns)
    assert cv["subset"].str.startswith("type:").any() and {"kind:acid", "kind:base"} <= set(cv["subset"])


def test_bundle_round_trip_and_tamper_check(trained, tmp_path):
    _, _, out = trained
    bundle = load_bundle(out.bundle)
    card = json.loads((out.bundle / "model_card.json").read_text())
    assert card["sources"][0]["licence"] == "CC-BY-4.0" and card["non_commercial"] is False
    assert "estimates, not a substitute for measurement" in (out.bundle / "model_card.md").read_text()
    assert 0 <= bundle.domain["threshold"] <= 1 and bundle.train_bits["acid"].shape[1] == 1024
    import shutil
    copy = tmp_path / "bundle"
    shutil.copytree(out.bundle, copy)
    verify_bundle(copy)
    with open(copy / "booster_acid.txt", "a") as fh:
        fh.write("\n")
    with pytest.raises(BundleError, match="booster_acid.txt does not match its sha256"):
        load_bundle(copy)


def test_mlflow_run_registry_and_pyfunc(trained):
    import mlflow
    from mlflow.tracking import MlflowClient

    from pkasite.pipeline.tracking import promote
    cfg, tmp, out = trained
    client = MlflowClient(tracking_uri=cfg.mlflow.tracking_uri)
    run = client.get_run(out.mlflow["run_id"])
    assert run.data.params["model.n_estimators"] == "80"
    assert {"cv_rmse_molecule_overall", "cv_rmse_scaffold_acid", "baseline_mol_morgan_cv_rmse_molecule_overall",
            "site_attribution_check_cv_rmse_molecule_overall"} <= set(run.data.metrics)
    assert "interval_coverage_scaffold_molecule_acid_90" in run.data.metrics
    # per-site-type figures live in the cv_metrics.csv artifact, not as thousands of MLflow metrics
    per_type = {s.replace(":", "_") for s in pd.read_csv(out.cv_metrics)["subset"] if s.startswith("type:")}
    assert per_type and not [k for k in run.data.metrics if any(k.endswith(t) for t in per_type)]
    assert run.data.tags["dataset_sha256"] and run.data.tags["code_version"]
    exp = client.get_experiment(run.info.experiment_id)
    assert exp.name == "test-small"
    artifacts = {a.path for a in client.list_artifacts(run.info.run_id)}
    assert {"cv_metrics.csv", "cv_predictions.parquet", "train_summary.json"} <= artifacts
    version = client.get_model_version_by_alias(cfg.mlflow.registered_model, "candidate")
    assert int(version.version) == out.mlflow["version"]
    promote(cfg.mlflow.tracking_uri, cfg.mlflow.registered_model, version.version)
    assert client.get_model_version_by_alias(cfg.mlflow.registered_model, "production").version == version.version
    with pytest.raises(ValueError, match="cannot promote"):
        promote(cfg.mlflow.tracking_uri, cfg.mlflow.registered_model, "99")
    mlflow.set_tracking_uri(cfg.mlflow.tracking_uri)
    model = mlflow.pyfunc.load_model(f"models:/{cfg.mlflow.registered_model}@production")
    got = model.predict(pd.DataFrame({"id": ["a", "b", "c"], "smiles": ["CC(=O)O", "C1CCNCC1", "not smiles"]}))
    assert list(got["status"]) == ["ok", "ok", "unreadable_smiles"]
    assert got.loc[0, "acid_pka"] < 7 and got.loc[1, "base_pka"] > 7


def test_same_config_and_data_give_same_numbers(subset, tmp_path):
    from pkasite.pipeline.workflow import train_step
    cfg = small_config(tmp_path, **{"mlflow.enabled": False, "cv.schemes": ["molecule"], "cv.baselines": False})
    a = train_step(cfg, subset, tmp_path / "a").metrics
    b = train_step(cfg, subset, tmp_path / "b").metrics
    keys = [k for k in a if k.startswith("cv_")]
    assert keys and all(a[k] == b[k] or (np.isnan(a[k]) and np.isnan(b[k])) for k in keys)


def test_default_yaml_matches_schema_defaults():
    """configs/default.yaml states every default explicitly; it must agree with the schema."""
    assert load_config().model_dump() == RunConfig().model_dump()


def test_assignment_rounds_stop_once_few_labels_move(subset, tmp_path):
    from pkasite.pipeline import train as T
    cfg = small_config(tmp_path, **{"model.assignment_rounds": 4, "model.assignment_stop_fraction": 1.0})
    assert len(T.reassign_labels(T.prepare(subset, cfg), cfg)) == 1  # any round moves at most 100%
    cfg = small_config(tmp_path, **{"model.assignment_rounds": 2, "model.assignment_stop_fraction": 0.0})
    moved = T.reassign_labels(T.prepare(subset, cfg), cfg)
    assert moved[0] > 0 and (len(moved) == 2 or moved[-1] == 0)


def test_quick_training_from_the_cli_reports_each_stage(tmp_path, mirror):
    import re

    from click.testing import CliRunner

    from conftest import DATA, REPO
    from pkasite.pipeline.cli import main
    out = tmp_path / "quick"
    res = CliRunner().invoke(main, ["train", "--quick", "--no-mlflow", "--extra-only", "--extra",
                                    str(REPO / "examples" / "inhouse_series_invented.csv"), "--config",
                                    str(DATA / "small_config.yaml"), "--mirror", str(mirror), "-o", str(out)])
    assert res.exit_code == 0, res.output
    cv = pd.read_csv(out / "cv_metrics.csv")
    assert set(cv["scheme"]) == {"molecule"} and set(cv["model"]) == {"site_model", "site_attribution_check"}
    assert (out / "report.html").stat().st_size > 10_000
    stages = re.findall(r"^\[\s*([0-9.]+) s\] ([a-z +0-9-]+)", res.output, re.M)
    names = [name.strip() for _, name in stages]
    assert names[:3] == ["pull", "curation", "site table + features"]
    assert "cv molecule" in names and "final fit" in names and "bundle + report" in names
    elapsed = [float(t) for t, _ in stages]
    assert elapsed == sorted(elapsed)
    summary = json.loads((out / "train_summary.json").read_text())
    assert {s["stage"] for s in summary["stages"]} >= {"curation", "cv molecule", "final fit"}
    assert sum(s["fits"] for s in summary["stages"]) >= 2 * 3 + 2  # CV folds of the acid and base models, final fit


def test_other_sites_are_bounded_only_where_their_type_can_hold_the_value():
    """Values from memory of the CRC Handbook: 4-hydroxybenzoic acid pKa 4.54 (COOH) and 9.3 (phenol);
    piperazine pKaH 9.73; ethylenediamine pKaH 9.9."""
    from pkasite.pipeline import train as T
    meas = pd.DataFrame({
        "record_id": ["hba-1", "hba-2", "pip", "en-site"],
        "smiles": ["OC(=O)c1ccc(O)cc1", "OC(=O)c1ccc(O)cc1", "C1CNCCN1", "NCCN"],
        "inchikey": ["A", "A", "B", "C"], "kind": ["acid", "acid", "base", "base"],
        "pka": [4.54, 9.3, 9.73, 9.9], "site_atom": [None, None, None, 0], "source": "test", "split": ""})
    prep = T.prepare(meas, load_config())
    s = prep.sites.assign(bound=T.site_bounds(prep))
    el = {a.GetIdx(): a.GetSymbol() for a in prep.table.mols[0].GetAtoms()}
    first = s[s.mol_id == 0].assign(el=lambda d: d.atom.map(el))
    # 4.54 belongs to the carboxylic acid; the phenol O-H must then be at least as weak
    assert first.set_index("site_type").loc["carboxylic_acid", ["labeled", "bound"]].tolist() == [True, 0]
    assert first.set_index("site_type").loc["phenol", ["labeled", "bound"]].tolist() == [False, 1]
    # 9.3 is the phenol's (second) constant: a carboxylic acid cannot be as weak as 9.3, so no bound on it
    second = s[s.mol_id == 1].set_index("site_type")
    assert second.loc["phenol", "labeled"] and second.loc["carboxylic_acid", "bound"] == 0
    # piperazine: the other N is at most as basic as the measured constant
    assert sorted(s[s.mol_id == 2]["bound"]) == [-1, 0]
    # a value measured at an explicit site says nothing about the other site
    assert (s[s.mol_id == 3]["bound"] == 0).all()


def test_site_table_rejects_a_rank_past_the_sites_of_its_kind():
    """INVENTED rows: 4-pyrrolidinopyridine's dication constant ranked 2 has no perceived site (its amino N
    is no base site beside the ring N); pyridine's first constant keeps its one."""
    from pkasite.pipeline.curate import MEASUREMENT_COLUMNS
    from pkasite.pipeline.sitetable import build_site_table

    rows = [{"record_id": "t:1", "smiles": "c1cc(N2CCCC2)ccn1", "kind": "base", "pka": -0.5, "constant_rank": 2},
            {"record_id": "t:2", "smiles": "c1ccncc1", "kind": "base", "pka": 5.2, "constant_rank": 1}]
    m = pd.DataFrame([{c: r.get(c, None) for c in MEASUREMENT_COLUMNS} for r in rows])
    m["site_atom"] = m["site_atom"].astype("Int64")
    table = build_site_table(m)
    assert table.rejects["record_id"].tolist() == ["t:1"]
    assert table.rejects["reason"].tolist() == ["rank_without_site"]
    assert table.molecules["record_id"].tolist() == ["t:2"]
