"""A real HTTP server on 127.0.0.1 answering with the shipped model (MLflow scoring protocol)."""
from __future__ import annotations

import json
import os
import socket
import subprocess
import sys
import time

import pytest
import requests

pytestmark = pytest.mark.slow


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    port = _free_port()
    log = open(tmp_path_factory.mktemp("serve") / "server.log", "w+")
    proc = subprocess.Popen([sys.executable, "-m", "pkasite.pipeline.cli", "serve", "--port", str(port),
                             "--max-bytes", "20000"], stdout=log, stderr=subprocess.STDOUT,
                            env={**os.environ, "PYTHONUNBUFFERED": "1"})
    url = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 120
    while time.monotonic() < deadline:
        try:
            if requests.get(f"{url}/ping", timeout=1).status_code == 200:
                break
        except requests.ConnectionError:
            if proc.poll() is not None:
                break
        time.sleep(0.5)
    else:
        proc.kill()
        log.seek(0)
        pytest.fail(f"server did not start in 120 s: {log.read()[-2000:]}")
    if proc.poll() is not None:
        log.seek(0)
        pytest.fail(f"server exited: {log.read()[-2000:]}")
    yield url
    proc.terminate()
    proc.wait(timeout=20)
    log.close()


def _post(url, rows, **kw):
    body = {"dataframe_split": {"columns": ["id", "smiles"], "data": rows}}
    return requests.post(f"{url}/invocations", json=body, timeout=60, **kw)


def test_predictions_with_per_row_errors(server):
    resp = _post(server, [["acetic", "CC(=O)O"], ["broken", "C1CC("], ["pyridine", "c1ccncc1"]])
    assert resp.status_code == 200, resp.text
    rows = resp.json()["predictions"]
    assert [r["status"] for r in rows] == ["ok", "unreadable_smiles", "ok"]
    assert rows[0]["acid_pka"] < 6 and 3 < rows[2]["base_pka"] < 7
    assert rows[0]["charge_at_ph"] == pytest.approx(-1, abs=0.05)


def test_request_size_limit(server):
    rows = [[f"m{i}", "CC(=O)Oc1ccccc1C(=O)O"] for i in range(1000)]
    resp = _post(server, rows)
    assert resp.status_code == 413
    assert "exceeds the limit" in resp.json()["message"]


def test_binds_loopback_by_default():
    from click.testing import CliRunner
    from pkasite.pipeline.cli import main
    help_text = CliRunner().invoke(main, ["serve", "--help"]).output
    assert "127.0.0.1" in help_text
