"""The Spark engine gives the local batch results, value for value (local[2], 2,000 molecules).

Input: the first 1,990 SMILES of the open DataWarrior compilation (dwpka, CC BY 4.0) and ten bad rows;
two rows repeat an earlier id in another partition and one has no id.
"""
from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

pytestmark = pytest.mark.slow
BAD = ["", "C1CC(", "not a smiles", "[Na+].[Cl-]", "C" * 500, "c1ccccc", "[Xe]", "CC(=O)O.CC(=O)O", "[CH3]",
       "OC(=O)C" * 3]


@pytest.fixture(scope="module")
def inputs(mirror, tmp_path_factory):
    if shutil.which("java") is None:
        pytest.fail("Spark needs Java 17 (java not on PATH); .ci/run installs Debian's openjdk-17-jre-headless")
    frames = [pd.read_csv(f, dtype=str) for f in sorted((mirror / "dwpka").glob("*.csv"))]
    smiles = pd.concat(frames)["OriginalSmiles"].dropna().tolist()[:1990] + BAD
    tmp = tmp_path_factory.mktemp("spark")
    src = tmp / "library.csv"
    ids = [f"c{i}" for i in range(len(smiles))]
    ids[1500], ids[1900], ids[700] = "c3", "c3", ""  # duplicates across partitions; a missing id
    pd.DataFrame({"id": ids, "smiles": smiles}).to_csv(src, index=False)
    return tmp, src


def test_spark_matches_the_local_batch(inputs):
    from pkasite.pipeline.batch import run_batch
    from pkasite.pipeline.predict import default_model_path
    from pkasite.pipeline.spark import predict_spark
    tmp, src = inputs
    local = run_batch(src, tmp / "local.parquet", default_model_path(), sites_out=tmp / "local_sites.parquet",
                      progress=False)
    res = predict_spark(src, tmp / "spark_mols", default_model_path(), tmp / "spark_sites", master="local[2]",
                        partitions=4)
    assert res["rows"] == local.rows == 2000 and res["status_counts"] == local.status_counts
    a = pd.read_parquet(tmp / "local.parquet")
    b = pd.read_parquet(tmp / "spark_mols").sort_values("row").reset_index(drop=True)
    assert b["row"].tolist() == list(range(1, 2001))
    assert list(b.columns) == ["row", *a.columns]
    _same(a, b.drop(columns="row"))
    assert b.loc[b["row"] == 701, "id"].item() == "row701"
    assert "duplicate id (also row 4)" in b.loc[b["row"] == 1901, "warnings"].item()
    order = ["id", "atom", "kind", "pka"]
    sa = pd.read_parquet(tmp / "local_sites.parquet").sort_values(order).reset_index(drop=True)
    sb = pd.read_parquet(tmp / "spark_sites").sort_values(order).reset_index(drop=True)
    assert list(sb.columns) == ["row", *sa.columns]
    _same(sa, sb[sa.columns])
    assert (sb["id"] == sb["row"].map(dict(zip(b["row"], b["id"])))).all()  # each site row names its molecule's row
    assert set(b.loc[b["status"] != "ok", "smiles"]) <= set(BAD)


def _same(a: pd.DataFrame, b: pd.DataFrame) -> None:
    assert len(a) == len(b)
    for col in a.columns:
        x, y = a[col], b[col]
        if pd.api.types.is_numeric_dtype(x) and not pd.api.types.is_bool_dtype(x):
            assert np.allclose(x.astype(float), y.astype(float), equal_nan=True, atol=0), col
        else:
            assert [None if pd.isna(v) else v for v in x] == [None if pd.isna(v) else v for v in y], col


def test_spark_submit_runs_the_documented_entry_point(tmp_path):
    """The README's cluster command, on a local master: spark-submit scripts/spark_predict.py ..."""
    import os
    import subprocess
    import sys

    from pkasite.pipeline.batch import run_batch
    from pkasite.pipeline.predict import default_model_path
    submit = Path(sys.executable).with_name("spark-submit")
    src = tmp_path / "mini.csv"
    pd.DataFrame({"name": ["acid", "base", "bad"], "smiles": ["OC(=O)c1ccccc1", "c1ccncc1", "C1CC("]}).to_csv(
        src, index=False)
    script = Path(__file__).resolve().parents[2] / "scripts" / "spark_predict.py"
    res = subprocess.run([str(submit), "--master", "local[2]", str(script), str(src), "-o", str(tmp_path / "mols"),
                          "--sites", str(tmp_path / "sites"), "--ph", "7.0"], capture_output=True, text=True,
                         env={**os.environ, "PYSPARK_PYTHON": sys.executable}, timeout=600)
    assert res.returncode == 0, res.stderr[-3000:]
    said = res.stdout + res.stderr  # spark-submit passes the driver's stderr on to its stdout
    assert "3 rows in" in said and "Traceback" not in said
    run_batch(src, tmp_path / "local.parquet", default_model_path(), ph=7.0, progress=False)
    spark = pd.read_parquet(tmp_path / "mols").sort_values("row").reset_index(drop=True)
    _same(pd.read_parquet(tmp_path / "local.parquet"), spark.drop(columns="row"))
    assert spark["id"].tolist() == ["acid", "base", "bad"]
