"""``pkasite report``: write the self-contained HTML validation report of a model.

Where the model comes from:

- ``RUN_ID``: the bundle inside the model logged by that MLflow run; the finished report is
  also logged as an artifact of the run;
- ``--model``: a bundle folder or an MLflow model URI (``models:/name@alias``, ``runs:/...``);
- neither: the model shipped inside the package.
"""
from __future__ import annotations

from pathlib import Path

import click

from .bundle import BundleError, load_bundle


def _default_tracking_uri() -> str:
    from .config import load_config
    return load_config().mlflow.tracking_uri


def _run_info(run_id: str, tracking_uri: str) -> dict:
    """Facts about an MLflow run for the report; a one-line error when the run is unknown."""
    from mlflow.exceptions import MlflowException
    from mlflow.tracking import MlflowClient

    from .tracking import _quiet_mlflow

    _quiet_mlflow()
    client = MlflowClient(tracking_uri=tracking_uri)
    try:
        run = client.get_run(run_id)
    except MlflowException as exc:
        raise click.ClickException(f"unknown MLflow run {run_id!r} at {tracking_uri}: "
                                   f"{str(exc.message).splitlines()[0]}") from None
    info = {"run id": run_id, "tracking uri": tracking_uri, "status": run.info.status}
    try:
        info["experiment"] = client.get_experiment(run.info.experiment_id).name
    except MlflowException:
        info["experiment"] = run.info.experiment_id
    if run.info.start_time:
        import datetime as dt
        info["started"] = dt.datetime.fromtimestamp(run.info.start_time / 1000, dt.timezone.utc).strftime(
            "%Y-%m-%d %H:%M UTC")
    for key, value in sorted(run.data.tags.items()):
        if not key.startswith("mlflow."):
            info[f"tag {key}"] = value
    return info


def _resolve(run_id: str | None, model: str | None, tracking_uri: str) -> tuple[Path, dict]:
    from .tracking import download_bundle

    if run_id:
        info = _run_info(run_id, tracking_uri)
        return download_bundle(f"runs:/{run_id}/model", tracking_uri), info
    if model:
        path = Path(model)
        if path.is_dir():
            return path, {"model": str(path.resolve())}
        if "://" in model or model.startswith(("models:", "runs:")):
            return download_bundle(model, tracking_uri), {"model": model, "tracking uri": tracking_uri}
        raise click.ClickException(f"--model {model}: no such folder and not an MLflow model URI "
                                   "(give a bundle folder or models:/NAME@ALIAS)")
    from .predict import default_model_path
    path = default_model_path()
    return path, {"model": f"shipped model ({path})"}


@click.command("report")
@click.argument("run_id", required=False)
@click.option("--model", "model", metavar="PATH_OR_URI",
              help="Bundle folder or MLflow model URI (default: the shipped model; not with RUN_ID).")
@click.option("-o", "--output", default="report.html", show_default=True, type=click.Path(dir_okay=False),
              help="HTML file to write.")
@click.option("--tracking-uri", default=None, metavar="URI",
              help="MLflow tracking URI (default: mlflow.tracking_uri of the packaged config).")
@click.option("--title", default=None, help="Page title (default: from the model card).")
def report_command(run_id, model, output, tracking_uri, title):
    """Write the model-validation report (one self-contained HTML file).

    RUN_ID is an MLflow run that logged a model; the report is then also logged to that run.
    """
    if run_id and model:
        raise click.UsageError("give either RUN_ID or --model, not both")
    tracking_uri = tracking_uri or _default_tracking_uri()
    from .report import write_report

    try:
        path, info = _resolve(run_id, model, tracking_uri)
        bundle = load_bundle(path)
    except (BundleError, FileNotFoundError, ValueError) as exc:
        raise click.ClickException(str(exc)) from None
    out = write_report(bundle, Path(output), run_info=info, title=title)
    if run_id:
        from mlflow.tracking import MlflowClient
        MlflowClient(tracking_uri=tracking_uri).log_artifact(run_id, str(out))
        click.echo(f"logged {out.name} to run {run_id}", err=True)
    click.echo(str(out))
