"""A real HTTP server on 127.0.0.1 answering with the shipped model (MLflow scoring protocol)."""
from __future__ import annotations

import glob
import json
import os
import socket
import tempfile
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
                             "--max-bytes", "2000000"], stdout=log, stderr=subprocess.STDOUT,
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
    # the temporary model folder goes with the server
    assert not glob.glob(os.path.join(tempfile.gettempdir(), f"pkasite-serve-{proc.pid}-*"))


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


def _strict(text: str):
    """JSON as a strict parser reads it: NaN or Infinity are errors."""
    def refuse(name):
        raise ValueError(f"not JSON: {name}")
    return json.loads(text, parse_constant=refuse)


def test_request_size_limit(server):
    rows = [[f"m{i}", "CC(=O)Oc1ccccc1C(=O)O"] for i in range(70_000)]  # about 3 MB
    resp = _post(server, rows)
    assert resp.status_code == 413
    assert "exceeds the limit" in resp.json()["message"]


def test_chunked_bodies_are_held_to_the_limit(server):
    rows = json.dumps({"dataframe_split": {"columns": ["id", "smiles"],
                                           "data": [[f"m{i}", "CCO"] for i in range(150_000)]}}).encode()

    def pieces():  # no Content-Length: requests sends Transfer-Encoding: chunked
        for i in range(0, len(rows), 65536):
            yield rows[i:i + 65536]
    resp = requests.post(f"{server}/invocations", data=pieces(), headers={"Content-Type": "application/json"},
                         timeout=60)
    assert resp.status_code == 413
    assert requests.get(f"{server}/ping", timeout=10).status_code == 200


def test_content_type_missing_or_wrong_is_415(server):
    body = json.dumps({"dataframe_split": {"columns": ["smiles"], "data": [["CCO"]]}})
    for headers in ({}, {"Content-Type": "text/plain"}):
        resp = requests.post(f"{server}/invocations", data=body, headers=headers, timeout=60)
        assert resp.status_code == 415, resp.text
        assert "Content-Type" in resp.json()["message"]


def test_answers_are_strict_json_and_ids_are_optional(server):
    body = {"dataframe_split": {"columns": ["smiles"], "data": [["CC(=O)O"], ["C1CC("], [""]]}}
    resp = requests.post(f"{server}/invocations", json=body, timeout=60)
    assert resp.status_code == 200, resp.text
    rows = _strict(resp.text)["predictions"]
    assert [r["id"] for r in rows] == ["row1", "row2", "row3"]
    assert [r["status"] for r in rows] == ["ok", "unreadable_smiles", "empty"]
    assert rows[1]["acid_pka"] is None


def test_oversized_molecules_are_rows_and_the_server_stays_up(server):
    # a 30,000-character chain once overflowed RDKit's SMILES writer and took the whole server down
    resp = _post(server, [["chain", "C" * 30_000], ["megabyte", "C" * 1_000_000], ["ok", "CC(=O)O"]])
    assert resp.status_code == 200, resp.text[:500]
    rows = _strict(resp.text)["predictions"]
    assert [r["status"] for r in rows] == ["too_large", "too_large", "ok"]
    assert requests.get(f"{server}/ping", timeout=10).status_code == 200


def test_binds_loopback_by_default():
    from click.testing import CliRunner
    from pkasite.pipeline.cli import main
    help_text = CliRunner().invoke(main, ["serve", "--help"]).output
    assert "127.0.0.1" in help_text
