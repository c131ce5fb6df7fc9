"""The ``pkasite`` command: a thin shell over :mod:`pkasite.pipeline.workflow`.

Exit codes: 0 ok, 1 failed (bad data, failed download, ...), 2 bad usage.
"""
from __future__ import annotations

import functools
import sys
import time
from pathlib import Path

import click

from .config import ConfigError, RunConfig, load_config, parse_overrides
from .ingest import InputFileError
from .sources import PullError

EXPECTED_ERRORS = (ConfigError, PullError, InputFileError, FileNotFoundError, ValueError)


def _log(msg: str) -> None:
    click.echo(msg, err=True)


def _fail_cleanly(func):
    """Turn expected errors into one line on stderr and exit code 1 (no traceback)."""
    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            return func(*args, **kwargs)
        except EXPECTED_ERRORS as exc:
            click.echo(f"pkasite: error: {exc}", err=True)
            sys.exit(1)
    return wrapper


def _parse_set(values: tuple[str, ...]) -> dict:
    try:
        return parse_overrides(values)
    except ValueError as exc:
        raise click.BadParameter(str(exc), param_hint="--set") from None


def _resolve_config(config: str | None, sets: tuple[str, ...], **overrides) -> RunConfig:
    cfg = load_config(config)
    merged = {k: v for k, v in overrides.items() if v is not None}
    merged.update(_parse_set(sets))
    return cfg.with_overrides(merged) if merged else cfg


config_option = click.option("--config", "-c", type=click.Path(dir_okay=False),
                             help="Run config YAML (default: the packaged configs/default.yaml).")
set_option = click.option("--set", "sets", multiple=True, metavar="KEY=VALUE",
                          help="Override a config key, e.g. --set curation.pka_max=14 (repeatable).")
mirror_option = click.option("--mirror", type=click.Path(file_okay=False),
                             help="Offline mirror folder laid out as DIR/<source>/<file> (env PKASITE_MIRROR).")
cache_option = click.option("--cache", type=click.Path(file_okay=False),
                            help="Download cache (env PKASITE_CACHE; default ~/.cache/pkasite).")
extra_option = click.option("--extra", multiple=True, type=click.Path(dir_okay=False),
                            help="In-house measurements CSV (columns smiles, pka, kind; repeatable).")


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="pkasite")
def main():
    """pkasite: site-level pKa models from open and in-house measurements.

    Predictions are estimates, not a substitute for measurement.
    """


@main.command("pull")
@click.option("--source", "sources", multiple=True, help="Source name from configs/sources.yaml (repeatable; default: the config's sources).")
@mirror_option
@cache_option
@click.option("--force", is_flag=True, help="Fetch again even when the cached file has the right hash.")
@config_option
@_fail_cleanly
def pull_cmd(sources, mirror, cache, force, config):
    """Download the open sources and verify their sha256."""
    from .workflow import pull_step
    cfg = _resolve_config(config, (), **({"data.sources": list(sources)} if sources else {}))
    files = pull_step(cfg, cache=cache, mirror=mirror, force=force, log=_log)
    for f in files:
        click.echo(f"{f.path}\t{f.sha256}")


@main.command("curate")
@click.option("-o", "--out", "out_dir", type=click.Path(file_okay=False), help="Output folder (default: <output_dir>/curated).")
@click.option("--format", "fmt", type=click.Choice(["parquet", "csv"]), default="parquet", show_default=True)
@extra_option
@click.option("--extra-only", is_flag=True, default=None, help="Use only the in-house files.")
@mirror_option
@cache_option
@config_option
@set_option
@_fail_cleanly
def curate_cmd(out_dir, fmt, extra, extra_only, mirror, cache, config, sets):
    """Curate pulled + in-house data into the measurements and rejects tables."""
    from .workflow import curate_step, pull_step
    cfg = _resolve_config(config, sets, **{"data.extra": list(extra) or None, "data.extra_only": extra_only})
    files = pull_step(cfg, cache=cache, mirror=mirror, log=_log)
    out = Path(out_dir) if out_dir else Path(cfg.output_dir) / "curated"
    result = curate_step(cfg, files, out, fmt=fmt, log=_log)
    click.echo(f"measurements: {result.measurements}\nrejects:      {result.rejects}\nsummary:      {result.summary}")


def _curated(cfg: RunConfig, cache, mirror, out: Path, clock=None):
    from .workflow import curate_step, pull_step
    from .stages import StageClock
    clock = clock or StageClock(_log)
    with clock("pull") as stage:
        files = pull_step(cfg, cache=cache, mirror=mirror, log=_log)
        stage.note = f"{len(files)} files"
    with clock("curation") as stage:
        cur = curate_step(cfg, files, out / "curated", log=_log)
        stage.note = f"{len(cur.result.measurements)} measurements, {len(cur.result.rejects)} rejects"
    return cur


QUICK = {"cv.schemes": ["molecule"], "cv.baselines": False}
quick_option = click.option("--quick", is_flag=True,
                            help="Iterate fast: molecule-grouped CV only, no baselines (report still written).")


@main.command("train")
@click.option("-o", "--out", "out_dir", type=click.Path(file_okay=False), help="Output folder (default: <output_dir>/<config name>).")
@extra_option
@click.option("--extra-only", is_flag=True, default=None, help="Train on the in-house files alone.")
@click.option("--no-mlflow", is_flag=True, help="Do not log to MLflow.")
@quick_option
@mirror_option
@cache_option
@config_option
@set_option
@_fail_cleanly
def train_cmd(out_dir, extra, extra_only, no_mlflow, quick, mirror, cache, config, sets):
    """Curate, then train site models with three cross-validation schemes; log to MLflow.

    Prints one progress line per stage with the elapsed time.
    """
    from .stages import StageClock
    from .workflow import train_step
    cfg = _resolve_config(config, sets, **{"data.extra": list(extra) or None, "data.extra_only": extra_only,
                                           "mlflow.enabled": False if no_mlflow else None,
                                           **(QUICK if quick else {})})
    out = Path(out_dir) if out_dir else Path(cfg.output_dir) / cfg.name
    clock = StageClock(_log)
    cur = _curated(cfg, cache, mirror, out, clock)
    result = train_step(cfg, cur.result.measurements, out, extra_artifacts=[cur.summary],
                        curation=cur.result.summary, log=_log, clock=clock)
    click.echo(f"model bundle: {result.bundle}\ncv metrics:   {result.cv_metrics}\nreport:       {result.report}")
    if result.mlflow:
        click.echo(f"mlflow run:   {result.mlflow['run_id']} (model version {result.mlflow['version']}, alias candidate)")


@main.command("promote")
@click.argument("version")
@click.option("--alias", default="production", show_default=True)
@config_option
@set_option
@_fail_cleanly
def promote_cmd(version, alias, config, sets):
    """Point the registered model's alias (default: production) at VERSION."""
    from .tracking import promote
    cfg = _resolve_config(config, sets)
    promote(cfg.mlflow.tracking_uri, cfg.mlflow.registered_model, version, alias)
    click.echo(f"{cfg.mlflow.registered_model} version {version} is now @{alias}")


def _resolve_model(model: str | None, tracking_uri: str) -> Path:
    """A bundle folder, an MLflow model URI (models:/NAME@ALIAS, runs:/...), or the shipped default.

    The bundle's hashes are checked where it is loaded (predict, serve), not here.
    """
    from .predict import default_model_path
    if model is None:
        return default_model_path()
    if ":/" in model:
        from .tracking import download_bundle
        return download_bundle(model, tracking_uri)
    return Path(model)


def _separator(value: str | None) -> str | None:
    if value is None:
        return None
    value = {"tab": "\t", "\\t": "\t"}.get(value.lower(), value)
    if len(value) != 1:
        raise click.BadParameter(f"{value!r} is not one character (e.g. ',', ';' or tab)", param_hint="--sep")
    return value


def _encoding(value: str) -> str:
    import codecs
    try:
        codecs.lookup(value)
    except LookupError:
        raise click.BadParameter(f"{value!r} is not a known text encoding (e.g. utf-8, latin-1, cp1252)",
                                 param_hint="--encoding") from None
    return value


def _stop_on_sigterm() -> None:
    """SIGTERM ends the command like Ctrl-C does: workers stopped, nothing half-written left behind."""
    import signal
    signal.signal(signal.SIGTERM, lambda *_: sys.exit(128 + signal.SIGTERM))


@main.command("predict")
@click.argument("input_path", metavar="INPUT", type=click.Path(dir_okay=False))
@click.option("-o", "--output", required=True, type=click.Path(),
              help="Per-molecule table; format from the extension (.csv, .tsv, .parquet); with --engine spark "
                   "a parquet dataset folder.")
@click.option("--sites", "sites_out", type=click.Path(dir_okay=False), help="Also write the per-site table here.")
@click.option("--ph", type=float, default=7.4, show_default=True, help="pH for charge state and major species.")
@click.option("--model", help="Bundle folder or MLflow URI (models:/NAME@ALIAS, runs:/ID/model); default: the shipped model.")
@click.option("--jobs", type=click.IntRange(1, 64), default=1, show_default=True, help="Worker processes.")
@click.option("--chunk-size", type=click.IntRange(1, 1_000_000), default=1000, show_default=True)
@click.option("--smiles-col", help="SMILES column name (default: auto-detected).")
@click.option("--id-col", help="Id column name (default: auto-detected, else row numbers).")
@click.option("--sep", help="Column delimiter of a CSV/TSV input, e.g. ';' or tab (default: read from the header line).")
@click.option("--encoding", default="utf-8", show_default=True,
              help="Text encoding of CSV, TSV, .smi and SDF inputs (e.g. latin-1, cp1252).")
@click.option("--timeout", "mol_timeout", type=click.FloatRange(1, None), default=60, show_default=True,
              help="Seconds one molecule may take; a longer one gets status timeout.")
@click.option("--explain", is_flag=True, help="Add the top feature contributions, in chemistry words, to the per-site table.")
@click.option("--window", default="0,14", show_default=True, metavar="LOW,HIGH",
              help="pH range of the macroscopic constants listed in macro_pkas (macro_pkas_all keeps every one).")
@click.option("--quiet", is_flag=True, help="No progress bar.")
@click.option("--engine", type=click.Choice(["local", "spark"]), default="local", show_default=True,
              help="local: worker processes on this machine; spark: a pandas UDF on a Spark cluster "
                   "(needs pkasite[spark] and Java 17; CSV/TSV or parquet in, parquet datasets out).")
@click.option("--master", help="Spark master with --engine spark: local[N], spark://HOST:PORT, yarn "
                               "(default: spark-submit's, else local[*]).")
@click.option("--partitions", type=click.IntRange(1), help="With --engine spark: repartition the input into N parts.")
@config_option
@_fail_cleanly
def predict_cmd(input_path, output, sites_out, ph, model, jobs, chunk_size, smiles_col, id_col, sep, encoding,
                mol_timeout, explain, window, quiet, engine, master, partitions, config):
    """Predict site pKa, macro pKa, charge at pH, intervals and domain warnings for a file of molecules.

    INPUT is CSV/TSV (SMILES column auto-detected), .smi, .sdf or .parquet. Every input row gives
    one output row, in input order, with a status; predictions are estimates, not measurements.
    """
    from .batch import run_batch
    from .isolation import WorkerStartError
    if explain and not sites_out:
        raise click.UsageError("--explain adds a column to the per-site table: give --sites too")
    try:
        low, high = (float(x) for x in window.split(","))
        if not low < high:
            raise ValueError
    except ValueError:
        raise click.BadParameter(f"{window!r} is not LOW,HIGH with LOW < HIGH (e.g. 2,12)", param_hint="--window")
    sep, encoding = _separator(sep), _encoding(encoding)
    cfg = load_config(config)
    bundle = _resolve_model(model, cfg.mlflow.tracking_uri)
    if engine == "spark":
        if explain or sep or encoding.lower().replace("_", "-") not in ("utf-8", "utf8"):
            raise click.UsageError("--explain, --sep and --encoding are options of the local engine")
        from .spark import predict_spark
        t0 = time.monotonic()
        result = predict_spark(input_path, output, bundle, sites_out,
                               ph=ph, window=(low, high), master=master, smiles_col=smiles_col, id_col=id_col,
                               partitions=partitions)
        statuses = ", ".join(f"{k} {v}" for k, v in sorted(result["status_counts"].items()))
        _log(f"{result['rows']} rows in {time.monotonic() - t0:.1f} s on Spark ({statuses})")
        click.echo(f"molecules: {output}" + (f"\nsites:     {sites_out}" if sites_out else ""))
        return
    if master or partitions:
        raise click.UsageError("--master and --partitions go with --engine spark")
    _stop_on_sigterm()
    try:
        result = run_batch(Path(input_path), Path(output), bundle, Path(sites_out) if sites_out else None, ph=ph,
                           jobs=jobs, chunk_size=chunk_size, smiles_col=smiles_col, id_col=id_col,
                           progress=not quiet, explain=explain, window=(low, high), encoding=encoding, sep=sep,
                           mol_timeout=mol_timeout)
    except WorkerStartError as exc:
        click.echo(f"pkasite: error: {exc}", err=True)
        sys.exit(1)
    statuses = ", ".join(f"{k} {v}" for k, v in sorted(result.status_counts.items()))
    _log(f"{result.rows} rows in {result.seconds:.1f} s ({statuses})"
         + (f"; resumed {result.resumed_chunks} finished chunk(s)" if result.resumed_chunks else ""))
    click.echo(f"molecules: {result.output}" + (f"\nsites:     {result.sites}" if result.sites else ""))


@main.command("serve")
@click.option("--model", help="MLflow model URI (models:/NAME@ALIAS, runs:/ID/model) or a bundle folder; default: the shipped model.")
@click.option("--host", default="127.0.0.1", show_default=True, help="Interface to bind; loopback unless you mean to share it.")
@click.option("--port", type=click.IntRange(1, 65535), default=5077, show_default=True)
@click.option("--max-bytes", type=click.IntRange(1), default=5 * 1024 * 1024, show_default=True,
              help="Largest request body accepted (413 above it, chunked bodies included).")
@click.option("--workers", type=click.IntRange(1, 64), default=1, show_default=True,
              help="Worker processes that score requests.")
@click.option("--timeout", type=click.FloatRange(1, None), default=60, show_default=True,
              help="Seconds a request may take; rows not scored by then get status timeout.")
@config_option
@_fail_cleanly
def serve_cmd(model, host, port, max_bytes, workers, timeout, config):
    """Serve the model over HTTP (MLflow scoring protocol: POST /invocations, GET /ping)."""
    from .serve import serve
    cfg = load_config(config)
    target = model if model is not None and ":/" in model else _resolve_model(model, cfg.mlflow.tracking_uri)
    _log(f"serving {model or 'the shipped model'} on http://{host}:{port} (POST /invocations)")
    _stop_on_sigterm()
    serve(target, host, port, max_bytes, workers, timeout)


@main.command("compare")
@click.argument("run_a")
@click.argument("run_b")
@click.option("--holdout", type=click.Path(dir_okay=False), help="In-house CSV of held-out measurements to compare on.")
@click.option("-o", "--output", type=click.Path(dir_okay=False), help="Write the per-site-type table (.csv) here.")
@config_option
@set_option
@_fail_cleanly
def compare_cmd(run_a, run_b, holdout, output, config, sets):
    """Compare two trained models (MLflow run ids, model URIs or bundle folders) on the same molecules.

    With --holdout: on your held-out measurements; without: on the molecules both runs'
    cross-validation predicted. RMSE(B) - RMSE(A) gets a paired bootstrap 95% interval.
    """
    from .compare import compare_on_cv, compare_on_holdout, format_comparison, resolve_bundle
    cfg = _resolve_config(config, sets)
    a = resolve_bundle(run_a, cfg.mlflow.tracking_uri)
    b = resolve_bundle(run_b, cfg.mlflow.tracking_uri)
    result = compare_on_holdout(a, b, Path(holdout), cfg) if holdout else compare_on_cv(a, b, cfg.seed)
    click.echo(format_comparison(result))
    if output:
        from .tables import write_table
        write_table(result.by_type, Path(output))
        click.echo(f"per-site-type table: {output}")


@main.command("run")
@click.option("-o", "--out", "out_dir", type=click.Path(file_okay=False), help="Output folder (default: the config's output_dir).")
@extra_option
@click.option("--demo", type=click.Path(dir_okay=False),
              help="Batch to predict at the end (default: the packaged invented demo batch).")
@mirror_option
@cache_option
@config_option
@set_option
@_fail_cleanly
def run_cmd(out_dir, extra, demo, mirror, cache, config, sets):
    """The main job end to end: pull, curate, train (3 CV schemes, MLflow), report, predict a demo batch."""
    from importlib import resources

    from .batch import run_batch
    from .stages import StageClock
    from .workflow import train_step
    cfg = _resolve_config(config, sets, **{"data.extra": list(extra) or None, "output_dir": out_dir})
    out = Path(cfg.output_dir)
    clock = StageClock(_log)
    _log("step 1/3 pull + curate")
    cur = _curated(cfg, cache, mirror, out, clock)
    _log("step 2/3 train, cross-validate, report")
    trained = train_step(cfg, cur.result.measurements, out / "train", extra_artifacts=[cur.summary],
                         curation=cur.result.summary, log=_log, clock=clock)
    _log("step 3/3 predict the demo batch")
    demo_path = Path(demo) if demo else Path(str(resources.files("pkasite.configs").joinpath("demo_batch_invented.csv")))
    with clock("demo prediction"):
        pred = run_batch(demo_path, out / "demo" / "molecules.csv", trained.bundle, out / "demo" / "sites.csv",
                         progress=False)
    click.echo("\n".join([
        f"curated measurements: {cur.measurements}",
        f"rejects:              {cur.rejects}",
        f"model bundle:         {trained.bundle}",
        f"model card:           {trained.bundle / 'model_card.md'}",
        f"cv metrics:           {trained.cv_metrics}",
        f"validation report:    {trained.report}",
        f"demo predictions:     {pred.output} and {pred.sites}",
        f"mlflow:               {cfg.mlflow.tracking_uri} (run {trained.mlflow['run_id'] if trained.mlflow else 'not logged'}); "
        "browse with: mlflow ui --backend-store-uri " + cfg.mlflow.tracking_uri,
        "Predicted values are estimates, not a substitute for measurement."]))


def _register_commands() -> None:
    from .cli_report import report_command
    from .cli_sites import sites_command
    main.add_command(sites_command)
    main.add_command(report_command)


_register_commands()

if __name__ == "__main__":
    main()
