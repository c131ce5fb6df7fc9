"""HTTP serving of the pyfunc model, built on MLflow's scoring server.

Adds what a shared service needs: loopback binding by default, a request-size
limit answered with 413, and per-row statuses in the response (a bad SMILES is
a row with ``status`` set, never a server error).
"""
from __future__ import annotations

import tempfile
from pathlib import Path

from .tracking import _quiet_mlflow

DEFAULT_MAX_BYTES = 5 * 1024 * 1024


def pyfunc_dir_for_bundle(bundle: Path) -> Path:
    """Wrap a bundle folder as a local MLflow pyfunc model directory (model-from-code, no pickles)."""
    _quiet_mlflow()
    import mlflow.pyfunc
    import pandas as pd
    from mlflow.models import infer_signature

    from .pyfunc import predict_frame_from_path
    from .tracking import _requirements

    target = Path(tempfile.mkdtemp(prefix="pkasite-serve-")) / "model"
    example = pd.DataFrame({"id": ["example-1"], "smiles": ["OC(=O)c1ccccc1"]})
    mlflow.pyfunc.save_model(
        path=str(target), python_model=str(Path(__file__).with_name("pyfunc_model.py")),
        artifacts={"bundle": str(bundle)}, input_example=example, pip_requirements=_requirements(),
        signature=infer_signature(example, predict_frame_from_path(bundle, example)))
    return target


def build_app(model_uri: str, max_bytes: int = DEFAULT_MAX_BYTES):
    """The FastAPI app of MLflow's scoring server for ``model_uri``, with a request-size limit."""
    _quiet_mlflow()
    import mlflow.pyfunc
    from fastapi import Request
    from fastapi.responses import JSONResponse
    from mlflow.pyfunc import scoring_server

    app = scoring_server.init(mlflow.pyfunc.load_model(model_uri))

    @app.middleware("http")
    async def limit_size(request: Request, call_next):
        declared = request.headers.get("content-length")
        if declared is not None and declared.isdigit() and int(declared) > max_bytes:
            return JSONResponse({"error_code": "REQUEST_TOO_LARGE",
                                 "message": f"request body of {declared} bytes exceeds the limit of {max_bytes}; "
                                            "split the batch or use pkasite predict"}, status_code=413)
        return await call_next(request)

    return app


def serve(model_uri: str, host: str = "127.0.0.1", port: int = 5077, max_bytes: int = DEFAULT_MAX_BYTES) -> None:
    import uvicorn
    uvicorn.run(build_app(model_uri, max_bytes), host=host, port=port, log_level="warning")
