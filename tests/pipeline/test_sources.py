"""pull: mirror copies, checksums, atomic writes, and the real HTTP path against a loopback server."""
from __future__ import annotations

import functools
import hashlib
import http.server
import threading
import time
from pathlib import Path

import pytest

from pkasite.pipeline.config import Registry
from pkasite.pipeline.sources import PullError, pull, sha256_of


def _registry(base_url: str, files: dict[str, bytes], wrong_hash_for: str | None = None) -> Registry:
    entries = []
    for name, content in files.items():
        digest = hashlib.sha256(content).hexdigest()
        if name == wrong_hash_for:
            digest = "0" * 64
        entries.append({"name": name, "url": f"{base_url}/{name}", "sha256": digest})
    return Registry.model_validate({"version": 1, "sources": {"demo": {
        "title": "t", "parser": "dwpka", "licence": "CC-BY-4.0", "commercial_use": True,
        "citation": "c", "files": entries}}})


@pytest.fixture
def served(tmp_path):
    """A real HTTP server on 127.0.0.1 serving tmp_path/www; handler behaviour switchable per path."""
    root = tmp_path / "www"
    root.mkdir()
    stall = {"paths": set()}

    class Handler(http.server.SimpleHTTPRequestHandler):
        def do_GET(self):
            if self.path.lstrip("/") in stall["paths"]:
                time.sleep(3)  # longer than the client timeout used below
                return
            super().do_GET()

        def log_message(self, *args):
            pass

    server = http.server.ThreadingHTTPServer(("127.0.0.1", 0), functools.partial(Handler, directory=str(root)))
    server.daemon_threads = True
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield root, f"http://127.0.0.1:{server.server_address[1]}", stall
    server.shutdown()
    server.server_close()


def test_http_download_verifies_and_caches(served, tmp_path, mirror):
    root, url, _ = served
    content = (mirror / "dwpka" / "acidic_test.csv").read_bytes()
    (root / "a.csv").write_bytes(content)
    reg = _registry(url, {"a.csv": content})
    cache = tmp_path / "cache"
    [got] = pull(reg, ["demo"], cache=cache, mirror=None, retries=0)
    assert got.origin.startswith("http://127.0.0.1") and got.path.read_bytes() == content
    (root / "a.csv").unlink()  # second pull must come from the cache, not the server
    [again] = pull(reg, ["demo"], cache=cache, mirror=None, retries=0)
    assert again.origin == "cache" and again.sha256 == got.sha256


def test_corrupted_download_leaves_nothing(served, tmp_path):
    root, url, _ = served
    good = b"a,b\n1,2\n"
    (root / "a.csv").write_bytes(good[:-2] + b"X\n")  # served content differs from the registered one
    reg = _registry(url, {"a.csv": good})
    cache = tmp_path / "cache"
    with pytest.raises(PullError, match=r"demo/a.csv: checksum mismatch"):
        pull(reg, ["demo"], cache=cache, mirror=None, retries=0)
    assert list((cache / "demo").iterdir()) == []


def test_http_error_names_source_and_file(served, tmp_path):
    _, url, _ = served
    reg = _registry(url, {"missing.csv": b"x"})
    with pytest.raises(PullError, match=r"demo/missing.csv: download from .* failed: 404"):
        pull(reg, ["demo"], cache=tmp_path / "c", mirror=None, retries=0)
    assert list((tmp_path / "c" / "demo").iterdir()) == []


def test_stalling_server_times_out(served, tmp_path):
    root, url, stall = served
    (root / "slow.csv").write_bytes(b"x")
    stall["paths"].add("slow.csv")
    reg = _registry(url, {"slow.csv": b"x"})
    start = time.monotonic()
    with pytest.raises(PullError, match=r"demo/slow.csv: download .* failed"):
        pull(reg, ["demo"], cache=tmp_path / "c", mirror=None, timeout=0.5, retries=0)
    assert time.monotonic() - start < 3
    assert list((tmp_path / "c" / "demo").iterdir()) == []


def test_mirror_copy_and_missing_mirror_file(tmp_path):
    mirror = tmp_path / "mirror"
    (mirror / "demo").mkdir(parents=True)
    (mirror / "demo" / "a.csv").write_bytes(b"hello\n")
    reg = _registry("http://127.0.0.1:9", {"a.csv": b"hello\n"})
    [got] = pull(reg, ["demo"], cache=tmp_path / "c", mirror=mirror)
    assert got.origin == "mirror" and sha256_of(got.path) == hashlib.sha256(b"hello\n").hexdigest()
    reg2 = _registry("http://127.0.0.1:9", {"b.csv": b"x"})
    with pytest.raises(PullError, match=r"demo/b.csv: not in the mirror folder"):
        pull(reg2, ["demo"], cache=tmp_path / "c", mirror=mirror)


def test_cached_file_with_wrong_hash_is_replaced(tmp_path):
    mirror = tmp_path / "mirror"
    (mirror / "demo").mkdir(parents=True)
    (mirror / "demo" / "a.csv").write_bytes(b"right\n")
    cache = tmp_path / "c"
    (cache / "demo").mkdir(parents=True)
    (cache / "demo" / "a.csv").write_bytes(b"tampered\n")
    reg = _registry("http://127.0.0.1:9", {"a.csv": b"right\n"})
    [got] = pull(reg, ["demo"], cache=cache, mirror=mirror)
    assert got.origin == "mirror" and got.path.read_bytes() == b"right\n"


def test_real_mirror_matches_registry_hashes(mirror, tmp_path):
    from pkasite.pipeline.config import load_registry
    files = pull(load_registry(), ["dwpka"], cache=tmp_path / "c", mirror=mirror)
    assert sorted(f.name for f in files) == ["acidic_test.csv", "acidic_train.csv", "basic_test.csv", "basic_train.csv"]
