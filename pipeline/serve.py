"""HTTP serving of the pyfunc model, built on MLflow's scoring server.

Adds what a shared service needs: loopback binding by default; a request-size limit answered with
413, counted on the stream (chunked bodies too); 415 for a missing or unsupported Content-Type; a
time limit per request; scoring in worker processes, so a molecule that crashes or hangs a worker is a
row with a status (``crashed``, ``timeout``) while the server keeps answering; per-row statuses in
strict JSON (null for missing numbers); and a temporary model folder removed when the server stops.
"""
from __future__ import annotations

import json
import os
import shutil
import tempfile
import time
from contextlib import contextmanager
from pathlib import Path

from .pyfunc import REQUEST_DEADLINE
from .tracking import _quiet_mlflow

DEFAULT_MAX_BYTES = 5 * 1024 * 1024
DEFAULT_TIMEOUT = 60.0
TEMP_PREFIX = "pkasite-serve-"


def pyfunc_dir_for_bundle(bundle: Path, parent: Path) -> Path:
    """Wrap a bundle folder as a local MLflow pyfunc model directory in ``parent`` (model-from-code, no pickles)."""
    _quiet_mlflow()
    import mlflow.pyfunc

    from .pyfunc import serving_signature
    from .tracking import _requirements

    target = Path(parent) / "model"
    mlflow.pyfunc.save_model(
        path=str(target), python_model=str(Path(__file__).with_name("pyfunc_model.py")),
        artifacts={"bundle": str(bundle)}, pip_requirements=_requirements(), signature=serving_signature())
    return target


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def remove_stale_folders(root: Path | None = None) -> list[Path]:
    """Temporary model folders of servers that were killed before they could remove their own."""
    root = Path(root or tempfile.gettempdir())
    removed = []
    for folder in root.glob(f"{TEMP_PREFIX}*"):
        try:
            pid = int(folder.name[len(TEMP_PREFIX):].split("-")[0])
        except ValueError:
            continue
        if folder.is_dir() and folder.stat().st_uid == os.getuid() and not _alive(pid):
            shutil.rmtree(folder, ignore_errors=True)
            removed.append(folder)
    return removed


@contextmanager
def temporary_folder():
    """A temporary folder named after this process, removed on exit (and by a later server if killed)."""
    remove_stale_folders()
    folder = Path(tempfile.mkdtemp(prefix=f"{TEMP_PREFIX}{os.getpid()}-"))
    try:
        yield folder
    finally:
        shutil.rmtree(folder, ignore_errors=True)


# ----------------------------------------------------------------------------- request guard

async def _drain(receive, deadline: float) -> None:
    """Read and drop the rest of a refused body (so the client reads the answer, not a reset), until the deadline."""
    while time.monotonic() < deadline:
        message = await receive()
        if message["type"] == "http.disconnect" or not message.get("more_body"):
            return


async def _reply(send, status: int, code: str, message: str) -> None:
    body = json.dumps({"error_code": code, "message": message}).encode()
    await send({"type": "http.response.start", "status": status,
                "headers": [(b"content-type", b"application/json"), (b"content-length", str(len(body)).encode()),
                            (b"connection", b"close")]})
    await send({"type": "http.response.body", "body": body})


class RequestGuard:
    """ASGI middleware in front of the scoring server: Content-Type, body size on the stream, deadline."""

    def __init__(self, app, max_bytes: int, timeout: float, content_types: tuple[str, ...]):
        self.app, self.max_bytes, self.timeout, self.content_types = app, max_bytes, timeout, content_types

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http":
            return await self.app(scope, receive, send)
        deadline = time.monotonic() + self.timeout
        token = REQUEST_DEADLINE.set(deadline)
        try:
            if scope["method"] != "POST":
                return await self.app(scope, receive, send)
            headers = {k.decode("latin-1").lower(): v.decode("latin-1") for k, v in scope["headers"]}
            ctype = headers.get("content-type")
            if ctype is None or ctype.split(";")[0].strip().lower() not in self.content_types:
                await _drain(receive, deadline)
                return await _reply(send, 415, "UNSUPPORTED_MEDIA_TYPE",
                                    ("no Content-Type header" if ctype is None else f"Content-Type {ctype!r} is not "
                                     "supported") + f"; send one of {', '.join(self.content_types)}")
            too_large = (f"request body exceeds the limit of {self.max_bytes} bytes; split the batch or use "
                         "pkasite predict")
            declared = headers.get("content-length", "")
            if declared.isdigit() and int(declared) > self.max_bytes:
                return await _reply(send, 413, "REQUEST_TOO_LARGE", f"request body of {declared} bytes: {too_large}")
            body = bytearray()
            while True:
                message = await receive()
                if message["type"] == "http.disconnect":
                    return
                body += message.get("body", b"")
                if len(body) > self.max_bytes:
                    if message.get("more_body"):
                        await _drain(receive, deadline)
                    return await _reply(send, 413, "REQUEST_TOO_LARGE", too_large)
                if not message.get("more_body"):
                    break
            replayed = False

            async def replay():
                nonlocal replayed
                if not replayed:
                    replayed = True
                    return {"type": "http.request", "body": bytes(body), "more_body": False}
                return await receive()
            return await self.app(scope, replay, send)
        finally:
            REQUEST_DEADLINE.reset(token)


# ----------------------------------------------------------------------------- app and server

def build_app(model_uri: str, max_bytes: int = DEFAULT_MAX_BYTES, workers: int = 1, timeout: float = DEFAULT_TIMEOUT,
              dst_path: Path | None = None):
    """The FastAPI app of MLflow's scoring server for ``model_uri``, scoring in ``workers`` worker processes.

    ``app.state.pkasite_model.close()`` stops the workers.  ``dst_path``: where a registry model is
    downloaded."""
    _quiet_mlflow()
    # MLflow's own per-request limit answers 504; ours (rows with status "timeout") must come first
    os.environ["MLFLOW_SCORING_SERVER_REQUEST_TIMEOUT"] = str(int(timeout + 30))
    import mlflow.pyfunc
    from mlflow.pyfunc import scoring_server

    from .pyfunc import SitePkaModel, serving_signature

    model = mlflow.pyfunc.load_model(model_uri, dst_path=str(dst_path) if dst_path else None)
    model.metadata.signature = serving_signature()  # id optional, as in pkasite predict (older models required it)
    inner = model.unwrap_python_model()
    if not isinstance(inner, SitePkaModel):
        raise ValueError(f"{model_uri} is not a pkasite model")
    inner.isolate(workers, request_timeout=timeout)
    app = scoring_server.init(model)
    app.add_middleware(RequestGuard, max_bytes=max_bytes, timeout=timeout,
                       content_types=tuple(scoring_server.CONTENT_TYPES))
    app.state.pkasite_model = inner
    return app


def serve(model: str | Path, host: str = "127.0.0.1", port: int = 5077, max_bytes: int = DEFAULT_MAX_BYTES,
          workers: int = 1, timeout: float = DEFAULT_TIMEOUT, log=None) -> None:
    """Serve ``model`` (an MLflow model URI, or a bundle folder) until interrupted; cleans up after itself."""
    import uvicorn

    with temporary_folder() as folder:
        uri = model if isinstance(model, str) and ":/" in model else str(pyfunc_dir_for_bundle(Path(model), folder))
        app = build_app(uri, max_bytes, workers, timeout, dst_path=folder if uri == model else None)
        try:
            if log:
                log(f"serving on http://{host}:{port} (POST /invocations, GET /ping)")
            uvicorn.run(app, host=host, port=port, log_level="warning")
        finally:
            app.state.pkasite_model.close()
