"""train (open data) -> train --extra (open + invented in-house series) -> compare -> report, via the CLI."""
from __future__ import annotations

import re

import pandas as pd
import pytest
from click.testing import CliRunner

from pkasite.pipeline.cli import main

from conftest import DATA, REPO

pytestmark = pytest.mark.slow
SERIES = REPO / "examples" / "inhouse_series_invented.csv"
HOLDOUT = REPO / "examples" / "inhouse_holdout_invented.csv"


@pytest.fixture(scope="module")
def runs(tmp_path_factory, mirror):
    tmp = tmp_path_factory.mktemp("inhouse")
    common = ["--config", str(DATA / "small_config.yaml"), "--mirror", str(mirror), "--cache", str(tmp / "cache"),
              "--set", f"mlflow.tracking_uri=sqlite:///{tmp}/mlflow.db"]
    ids = {}
    for name, extra in (("A", []), ("B", ["--extra", str(SERIES)])):
        res = CliRunner().invoke(main, ["train", "-o", str(tmp / name), *common, *extra])
        assert res.exit_code == 0, res.output
        ids[name] = re.search(r"mlflow run:\s+([0-9a-f]{32})", res.output).group(1)
    return tmp, common, ids


def test_inhouse_rows_reach_training(runs):
    tmp, _, _ = runs
    m = pd.read_parquet(tmp / "B" / "curated" / "measurements.parquet")
    inhouse = m[m["source"] == "inhouse:inhouse_series_invented.csv"]
    assert len(inhouse) == 43
    # explicit site atoms given for the sulfonamide N-H rows are kept
    assert inhouse["site_atom"].notna().sum() == 14


def test_compare_on_holdout_shows_the_inhouse_data_helped(runs):
    tmp, common, ids = runs
    out = tmp / "by_type.csv"
    res = CliRunner().invoke(main, ["compare", ids["A"], ids["B"], "--holdout", str(HOLDOUT), "-o", str(out),
                                    "--set", common[-1]])
    assert res.exit_code == 0, res.output
    rmse_a = float(re.search(r"RMSE A ([0-9.]+)", res.output).group(1))
    rmse_b = float(re.search(r"RMSE B ([0-9.]+)", res.output).group(1))
    assert rmse_b < rmse_a
    table = pd.read_csv(out)
    assert {"site_type", "n", "rmse_a", "rmse_b", "rmse_diff"} <= set(table.columns)
    assert table["n"].sum() == 14


def test_compare_on_shared_cv_molecules(runs):
    tmp, common, _ = runs
    res = CliRunner().invoke(main, ["compare", str(tmp / "A" / "model"), str(tmp / "B" / "model"),
                                    "--set", common[-1]])
    assert res.exit_code == 0, res.output
    assert "shared molecule-grouped CV predictions" in res.output


def test_report_for_the_retrained_run(runs):
    from mlflow.tracking import MlflowClient
    tmp, common, ids = runs
    out = tmp / "report_B.html"
    res = CliRunner().invoke(main, ["report", ids["B"], "-o", str(out), "--tracking-uri", common[-1].split("=", 1)[1]])
    assert res.exit_code == 0, res.output
    html = out.read_text()
    assert "inhouse:inhouse_series_invented.csv" in html  # the in-house source appears in the provenance
    artifacts = {a.path for a in MlflowClient(common[-1].split("=", 1)[1]).list_artifacts(ids["B"])}
    assert "report_B.html" in artifacts
