"""Pull open pKa sources into a checksummed local cache.

Files come from their public addresses over HTTP(S), or from a mirror folder
laid out as ``MIRROR/<source>/<file>`` for machines without internet.  Every
file is written under a temporary name and renamed only after its sha256 has
been verified, so the cache never holds a half-written or wrong file.
"""
from __future__ import annotations

import hashlib
import os
import shutil
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import requests
from requests.adapters import HTTPAdapter
from urllib3.util.retry import Retry

from .config import Registry, Source, SourceFile

CHUNK = 1 << 16


class PullError(RuntimeError):
    """A file that could not be pulled; the message names the source and the file."""


@dataclass(frozen=True)
class PulledFile:
    source: str
    name: str
    path: Path
    sha256: str
    origin: str  # "cache", "mirror" or the URL
    kind: str | None = None
    split: str | None = None


def default_cache_dir() -> Path:
    """``$PKASITE_CACHE``, else ``$XDG_CACHE_HOME/pkasite``, else ``~/.cache/pkasite``."""
    if os.environ.get("PKASITE_CACHE"):
        return Path(os.environ["PKASITE_CACHE"])
    base = os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache"
    return Path(base) / "pkasite"


def default_mirror() -> Path | None:
    value = os.environ.get("PKASITE_MIRROR")
    return Path(value) if value else None


def sha256_of(path: Path) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(CHUNK), b""):
            digest.update(block)
    return digest.hexdigest()


def _session(retries: int) -> requests.Session:
    retry = Retry(total=retries, backoff_factor=0.5, status_forcelist=(429, 500, 502, 503, 504),
                  allowed_methods=("GET",))
    session = requests.Session()
    session.mount("http://", HTTPAdapter(max_retries=retry))
    session.mount("https://", HTTPAdapter(max_retries=retry))
    return session


def _write_temporary(target: Path, fill: Callable[[object], None]) -> tuple[str, Path]:
    """Write via ``fill(filehandle)`` to a temporary file beside ``target``.

    Returns the sha256 and path of the temporary file; on any failure it is removed.
    """
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    try:
        with os.fdopen(fd, "wb") as fh:
            fill(fh)
        return sha256_of(Path(tmp)), Path(tmp)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def _fetch_one(source: str, entry: SourceFile, target: Path, mirror: Path | None,
               session: requests.Session, timeout: float) -> str:
    label = f"{source}/{entry.name}"
    if mirror is not None:
        src = mirror / source / entry.name
        if not src.is_file():
            raise PullError(f"{label}: not in the mirror folder (looked for {src})")

        def fill(fh):
            with open(src, "rb") as fin:
                shutil.copyfileobj(fin, fh, CHUNK)
        origin = "mirror"
    else:
        def fill(fh):
            try:
                with session.get(entry.url, stream=True, timeout=timeout) as resp:
                    resp.raise_for_status()
                    for block in resp.iter_content(CHUNK):
                        fh.write(block)
            except requests.RequestException as exc:
                raise PullError(f"{label}: download from {entry.url} failed: {exc}") from None
        origin = entry.url
    digest, tmp = _write_temporary(target, fill)
    if entry.sha256 and digest != entry.sha256:
        tmp.unlink(missing_ok=True)
        raise PullError(f"{label}: checksum mismatch (expected sha256 {entry.sha256}, got {digest}); "
                        f"the file from {origin} is not the registered one")
    os.replace(tmp, target)
    return origin


def pull_source(name: str, source: Source, cache: Path, mirror: Path | None = None,
                force: bool = False, timeout: float = 30.0, retries: int = 3,
                log: Callable[[str], None] = lambda msg: None) -> list[PulledFile]:
    """Make every file of ``source`` present and verified in ``cache/<name>/``."""
    session = _session(retries)
    pulled = []
    for entry in source.files:
        target = cache / name / entry.name
        origin = "cache"
        if force or not target.is_file() or (entry.sha256 and sha256_of(target) != entry.sha256):
            origin = _fetch_one(name, entry, target, mirror, session, timeout)
        digest = sha256_of(target)
        if not entry.sha256:
            log(f"{name}/{entry.name}: no sha256 in the registry; pin it with sha256: {digest}")
        log(f"{name}/{entry.name}: ok ({origin})")
        pulled.append(PulledFile(name, entry.name, target, digest, origin, entry.kind, entry.split))
    return pulled


def pull(registry: Registry, names: list[str], cache: Path | None = None, mirror: Path | None = None,
         force: bool = False, timeout: float = 30.0, retries: int = 3,
         log: Callable[[str], None] = lambda msg: None) -> list[PulledFile]:
    """Pull the named sources (see :func:`pull_source`); ``mirror=None`` downloads over HTTP(S)."""
    cache = Path(cache) if cache else default_cache_dir()
    mirror = Path(mirror) if mirror else None
    files = []
    for name in names:
        files.extend(pull_source(name, registry.get(name), cache, mirror, force, timeout, retries, log))
    return files
