"""MLflow tracking and registry: one experiment per config name, the bundle as a pyfunc model."""
from __future__ import annotations

import logging
import os
import warnings
from importlib import metadata
from pathlib import Path

import pandas as pd

from .config import RunConfig

REQUIREMENTS = ("rdkit", "scikit-learn", "lightgbm", "pandas", "numpy", "pyarrow", "mlflow", "pyyaml",
                "pydantic", "click", "requests")


def _quiet_mlflow():
    """Keep MLflow's informational logging and progress bars off the user's terminal."""
    os.environ.setdefault("MLFLOW_ENABLE_ARTIFACTS_PROGRESS_BAR", "false")
    os.environ.setdefault("MLFLOW_LOGGING_LEVEL", "ERROR")
    os.environ.setdefault("GIT_PYTHON_REFRESH", "quiet")
    import mlflow  # noqa: F401  (configures its loggers on import; quiet them afterwards)
    for name in ("mlflow", "alembic"):
        logging.getLogger(name).setLevel(logging.ERROR)
    warnings.filterwarnings("ignore", module="mlflow")
    warnings.filterwarnings("ignore", category=UserWarning, message=".*type hints.*")


def flatten(d: dict, prefix: str = "") -> dict:
    out = {}
    for k, v in d.items():
        key = f"{prefix}{k}"
        if isinstance(v, dict):
            out.update(flatten(v, key + "."))
        else:
            out[key] = v
    return out


def _requirements() -> list[str]:
    reqs = []
    for name in REQUIREMENTS:
        try:
            reqs.append(f"{name}=={metadata.version(name)}")
        except metadata.PackageNotFoundError:
            reqs.append(name)
    return reqs


def code_version() -> str:
    try:
        version = metadata.version("pkasite")
    except metadata.PackageNotFoundError:
        version = "unknown"
    head = Path(__file__).resolve().parents[1] / ".git" / "HEAD"
    commit = ""
    try:
        ref = head.read_text().strip()
        if ref.startswith("ref:"):
            commit = (head.parent / ref.split(" ", 1)[1]).read_text().strip()[:12]
        else:
            commit = ref[:12]
    except OSError:
        pass
    return f"{version}+{commit}" if commit else version


def prepare_tracking(tracking_uri: str, experiment: str) -> None:
    """Import MLflow and open (on first use, create) the tracking store and the run's experiment.

    Training calls this in a background thread while cross-validation keeps the cores busy and this
    process waits: the import and a new store's schema migrations take about 3 s of one core that would
    otherwise come after the last fit.  Any failure is left for :func:`log_training_run` to report.
    """
    try:
        _quiet_mlflow()
        import mlflow.pyfunc  # noqa: F401  (what log_training_run and the signature example need)
        from mlflow.models import infer_signature  # noqa: F401
        from mlflow.tracking import MlflowClient
        client = MlflowClient(tracking_uri=tracking_uri)
        if client.get_experiment_by_name(experiment) is None:
            client.create_experiment(experiment)
    except Exception:  # noqa: BLE001  (reported by log_training_run, which does the same steps again)
        pass


def log_training_run(cfg: RunConfig, metrics: dict, artifacts: list[Path], bundle_path: Path,
                     tags: dict, input_example: pd.DataFrame, output_example: pd.DataFrame) -> dict:
    """Log params, metrics, artifacts and the pyfunc model; register it with alias ``candidate``.

    ``output_example`` is the bundle's answer to ``input_example`` (it sets the model signature)."""
    _quiet_mlflow()
    import mlflow
    from mlflow.models import infer_signature
    from mlflow.tracking import MlflowClient

    mlflow.set_tracking_uri(cfg.mlflow.tracking_uri)
    mlflow.set_experiment(cfg.name)
    with mlflow.start_run() as run:
        params = flatten(cfg.model_dump())
        mlflow.log_params({k: str(v)[:500] for k, v in params.items()})
        mlflow.set_tags(tags)
        clean = {k: float(v) for k, v in metrics.items() if isinstance(v, (int, float)) and v == v}
        mlflow.log_metrics(clean)
        for path in artifacts:
            mlflow.log_artifact(str(path))
        signature = infer_signature(input_example, output_example)
        info = mlflow.pyfunc.log_model(
            name="model", python_model=str(Path(__file__).with_name("pyfunc_model.py")),
            artifacts={"bundle": str(bundle_path)},
            signature=signature, input_example=input_example, pip_requirements=_requirements(),
            registered_model_name=cfg.mlflow.registered_model if cfg.mlflow.register_model else None)
        result = {"run_id": run.info.run_id, "model_uri": info.model_uri, "version": None}
    if cfg.mlflow.register_model:
        client = MlflowClient()
        versions = client.search_model_versions(f"name='{cfg.mlflow.registered_model}' and run_id='{result['run_id']}'")
        if versions:
            version = max(int(v.version) for v in versions)
            client.set_registered_model_alias(cfg.mlflow.registered_model, "candidate", str(version))
            result["version"] = version
    return result


def promote(tracking_uri: str, model_name: str, version: str, alias: str = "production") -> None:
    _quiet_mlflow()
    from mlflow.exceptions import MlflowException
    from mlflow.tracking import MlflowClient

    client = MlflowClient(tracking_uri=tracking_uri)
    try:
        client.get_model_version(model_name, str(version))
        client.set_registered_model_alias(model_name, alias, str(version))
    except MlflowException as exc:
        raise ValueError(f"cannot promote {model_name} version {version}: {exc.message}") from None


def download_bundle(model_uri: str, tracking_uri: str) -> Path:
    """The bundle folder of a logged pyfunc model (downloaded to MLflow's local cache)."""
    _quiet_mlflow()
    import mlflow
    from mlflow.exceptions import MlflowException

    mlflow.set_tracking_uri(tracking_uri)
    try:
        local = Path(mlflow.artifacts.download_artifacts(artifact_uri=model_uri))
    except MlflowException as exc:
        raise ValueError(f"cannot load model {model_uri}: {exc.message}") from None
    found = [p.parent for p in local.rglob("manifest.json")]
    if not found:
        raise ValueError(f"{model_uri}: no pkasite bundle inside the MLflow model")
    return found[0]
