"""The named steps of a run as plain functions: pull -> curate -> ... .

The CLI, tests and notebooks call these; each takes a validated config and
explicit paths and returns what it produced.
"""
from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Callable

import pandas as pd

from .config import Registry, RunConfig, load_registry
from .curate import CurationResult, curate, format_summary
from .ingest import PARSERS, parse_inhouse
from .sources import PulledFile, default_mirror, pull
from .tables import write_json, write_table

Log = Callable[[str], None]


def _quiet(msg: str) -> None:
    pass


def pull_step(cfg: RunConfig, registry: Registry | None = None, cache: Path | None = None,
              mirror: Path | None = None, force: bool = False, log: Log = _quiet) -> list[PulledFile]:
    """Pull the sources the config names (not needed when ``data.extra_only`` is set).

    ``mirror`` defaults to ``$PKASITE_MIRROR``; without either, files are downloaded.
    """
    registry = registry or load_registry()
    if cfg.data.extra_only:
        return []
    mirror = mirror or default_mirror()
    return pull(registry, cfg.data.sources, cache=cache, mirror=mirror, force=force, log=log)


def read_raw(files: list[PulledFile], cfg: RunConfig, registry: Registry | None = None) -> pd.DataFrame:
    """Parse pulled files and in-house files into one raw-record table."""
    registry = registry or load_registry()
    frames = []
    for f in files:
        if f.split is not None and f.split not in cfg.data.splits:
            continue
        source = registry.get(f.source)
        frames.append(PARSERS[source.parser](f.path, f.kind, f.split, source.licence, f.source))
    frames.extend(parse_inhouse(Path(p)) for p in cfg.data.extra)
    if not frames:
        raise ValueError("nothing to curate: no sources pulled and no in-house files given")
    return pd.concat(frames, ignore_index=True)


@dataclass
class CurateOutputs:
    result: CurationResult
    measurements: Path
    rejects: Path
    summary: Path


def curate_step(cfg: RunConfig, files: list[PulledFile], out_dir: Path, fmt: str = "parquet",
                registry: Registry | None = None, log: Log = _quiet) -> CurateOutputs:
    """Curate pulled + in-house data and write measurements, rejects and summary to ``out_dir``."""
    raw = read_raw(files, cfg, registry)
    result = curate(raw, cfg.curation)
    out_dir = Path(out_dir)
    m = write_table(result.measurements, out_dir / f"measurements.{fmt}")
    r = write_table(result.rejects, out_dir / f"rejects.{fmt}")
    s = write_json(result.summary, out_dir / "curation_summary.json")
    log(format_summary(result.summary))
    return CurateOutputs(result, m, r, s)
