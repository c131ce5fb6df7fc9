"""Prediction on Spark: the same prediction core as `pkasite predict`, run as a pandas UDF.

``predict_spark`` reads a CSV or parquet input with Spark, numbers its rows (1-based, in file order),
ships the model bundle to the executors (``SparkContext.addFile``; each executor loads it with its
sha256 manifest checked, as every local load does), scores every partition with
:func:`pkasite.pipeline.predict.predict_records` and writes two parquet datasets: the per-molecule
table (the local columns plus ``row``) and the per-site table (plus ``row``).  A bad structure is a
row with a status, as locally; nothing is dropped.

Inputs and outputs may be local paths or URIs Spark reads (hdfs://, s3a://).  On a cluster, with
pkasite installed on the driver and every executor (README, "Prediction on Spark")::

    spark-submit --master yarn scripts/spark_predict.py INPUT -o OUT [--sites SITES]

or ``pkasite predict INPUT -o OUT --engine spark --master spark://host:7077``.  pyspark comes with the
optional extra ``pkasite[spark]`` and needs Java 17.
"""
from __future__ import annotations

import os
from pathlib import Path

import pandas as pd

from .batch import ID_NAMES, SMILES_NAMES, pick_column
from .ingest import InputFileError
from .predict import MOLECULE_COLUMNS, SITE_COLUMNS, WINDOW, fill_id

FLOAT_COLUMNS = {"acid_pka", "acid_pka_low", "acid_pka_high", "base_pka", "base_pka_low", "base_pka_high",
                 "isoelectric_ph", "charge_at_ph", "fraction_neutral", "pka", "pka_low", "pka_high", "similarity"}
_TABLE = "_table"


def _spark_schema():
    from pyspark.sql import types as T

    def field(name):
        if name in FLOAT_COLUMNS:
            return T.StructField(name, T.DoubleType())
        if name == "in_domain":
            return T.StructField(name, T.BooleanType())
        if name in ("atom", "row"):
            return T.StructField(name, T.LongType())
        return T.StructField(name, T.StringType())

    names = [_TABLE, "row"] + MOLECULE_COLUMNS + [c for c in SITE_COLUMNS if c not in MOLECULE_COLUMNS]
    return T.StructType([field(n) for n in names]), names


_LOADED: dict = {}


def _executor_bundle(path: Path):
    """The bundle at ``path``, loaded (sha256 manifest checked) once per Python worker, which Spark reuses."""
    if path not in _LOADED:
        from .bundle import load_bundle
        _LOADED.clear()
        _LOADED[path] = load_bundle(path, with_tables=False)
    return _LOADED[path]


def _score_partitions(bundle_name: str, ph: float, window: tuple[float, float], names: list[str]):
    """The function run on the executors: batches of (row, id, smiles) -> rows of both tables."""
    def score(batches):
        from pyspark import SparkFiles

        from .predict import predict_records
        bundle = _executor_bundle(Path(SparkFiles.get(bundle_name)))
        for df in batches:
            rows = df["row"].astype("int64").tolist()
            ids = [fill_id(i, r) for i, r in zip(df["id"], rows)]
            first = df["first_row"].astype("int64").tolist()
            smiles = ["" if s is None or (isinstance(s, float) and s != s) else s for s in df["smiles"]]
            # scored under their row numbers (unique even where ids repeat), then given their ids back
            keys = [str(r) for r in rows]
            mols, sites = predict_records(bundle, keys, smiles, ph=ph, window=window,
                                          duplicate_of=[f if f != r else None for f, r in zip(first, rows)])
            mols.insert(0, "row", rows)
            mols["id"] = ids
            sites.insert(0, "row", sites["id"].astype("int64"))
            sites["id"] = sites["row"].map(dict(zip(rows, ids)))
            out = pd.concat([mols.assign(**{_TABLE: "molecules"}), sites.assign(**{_TABLE: "sites"})],
                            ignore_index=True)
            for c in names:
                if c not in out.columns:
                    out[c] = None
            out = out[names]
            # plain numpy/object columns: Arrow-backed pandas strings do not cross to Spark as arrays
            yield pd.DataFrame({c: (out[c].astype("float64") if c in FLOAT_COLUMNS else
                                    out[c].astype("Int64") if c in ("row", "atom") else
                                    out[c].astype(object).where(out[c].notna(), None)) for c in names})
    return score


def _location(path) -> str:
    """A path as Spark reads it: URIs (hdfs://, s3a://, file:/...) as given, local paths absolute."""
    text = str(path)
    return text if ":/" in text else str(Path(text).resolve())


def predict_spark(input_path: str | Path, output: str | Path, bundle_path: Path, sites_out: str | Path | None = None,
                  ph: float = 7.4, window: tuple[float, float] = WINDOW, master: str | None = None,
                  smiles_col: str | None = None, id_col: str | None = None, partitions: int | None = None,
                  spark=None) -> dict:
    """Score ``input_path`` (CSV or parquet) on Spark; write parquet datasets ``output`` and ``sites_out``.

    Returns counts of rows and statuses.  ``spark``: an existing SparkSession (else one is started
    with ``master``, default ``local[*]``).
    """
    import warnings
    warnings.filterwarnings("ignore", message=".*does not yet fully support pandas.*")
    from pyspark.sql import SparkSession, functions as F
    from pyspark.sql import types as T
    from pyspark.sql.window import Window

    from .bundle import verify_bundle
    source, output = _location(input_path), _location(output)
    verify_bundle(bundle_path)
    own = spark is None
    if own:
        os.environ.setdefault("PYSPARK_PYTHON", os.environ.get("PYSPARK_PYTHON", __import__("sys").executable))
        from pyspark import SparkConf
        builder = SparkSession.builder.appName("pkasite-predict").config(
            "spark.sql.execution.arrow.pyspark.enabled", "true")
        if master or not SparkConf().contains("spark.master"):  # spark-submit sets it; else local
            builder = builder.master(master or "local[*]").config("spark.ui.enabled", "false")
        spark = builder.getOrCreate()
        spark.sparkContext.setLogLevel("WARN")
    try:
        suffix = os.path.splitext(source.rstrip("/"))[1].lower()
        if suffix in (".csv", ".tsv", ".txt"):
            df = (spark.read.option("header", True).option("sep", "\t" if suffix != ".csv" else ",")
                  .option("multiLine", True).option("escape", '"').csv(source))
        elif suffix == ".parquet":
            df = spark.read.parquet(source)
        else:
            raise InputFileError(f"{input_path}: the Spark engine reads CSV, TSV or parquet")
        s_col = pick_column(df.columns, SMILES_NAMES, smiles_col, "SMILES", input_path)
        i_col = pick_column(df.columns, ID_NAMES, id_col, "id", input_path)
        # 1-based input row numbers in file order (zipWithIndex keeps the order of the read)
        numbered = df.rdd.zipWithIndex().map(
            lambda t: (t[1] + 1, None if i_col is None else t[0][i_col], t[0][s_col]))
        rows = spark.createDataFrame(numbered, T.StructType([
            T.StructField("row", T.LongType()), T.StructField("id", T.StringType()),
            T.StructField("smiles", T.StringType())]))
        # the first row of every id, for the run-wide duplicate warning the local engine gives
        filled = F.coalesce(F.when(F.trim(F.col("id")) != "", F.col("id")), F.concat(F.lit("row"), F.col("row")))
        rows = rows.withColumn("first_row", F.min("row").over(Window.partitionBy(filled)))
        # the window's shuffle leaves spark.sql.shuffle.partitions parts (200 by default): back to the input's
        rows = rows.repartition(partitions) if partitions else rows.coalesce(max(1, df.rdd.getNumPartitions()))
        spark.sparkContext.addFile(str(Path(bundle_path).resolve()), recursive=True)
        schema, names = _spark_schema()
        scored = rows.mapInPandas(_score_partitions(Path(bundle_path).resolve().name, ph, tuple(window), names),
                                  schema).cache()
        mols = scored.filter(F.col(_TABLE) == "molecules").select("row", *MOLECULE_COLUMNS)
        mols.write.mode("overwrite").parquet(output)
        if sites_out is not None:
            scored.filter(F.col(_TABLE) == "sites").select("row", *SITE_COLUMNS).write.mode("overwrite").parquet(
                _location(sites_out))
        counts = {r["status"]: r["count"] for r in mols.groupBy("status").count().collect()}
        scored.unpersist()
        return {"rows": int(sum(counts.values())), "status_counts": counts}
    finally:
        if own:
            spark.stop()
