"""The ``pkasite`` command: a thin shell over :mod:`pkasite.pipeline.workflow`.

Exit codes: 0 ok, 1 failed (bad data, failed download, ...), 2 bad usage.
"""
from __future__ import annotations

import functools
import sys
from pathlib import Path

import click
import yaml

from .config import ConfigError, RunConfig, load_config
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
    overrides = {}
    for item in values:
        if "=" not in item:
            raise click.BadParameter(f"{item!r} is not KEY=VALUE", param_hint="--set")
        key, value = item.split("=", 1)
        overrides[key.strip()] = yaml.safe_load(value)
    return overrides


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


@main.command("run")
@click.option("-o", "--out", "out_dir", type=click.Path(file_okay=False), help="Output folder (default: the config's output_dir).")
@extra_option
@mirror_option
@cache_option
@config_option
@set_option
@_fail_cleanly
def run_cmd(out_dir, extra, mirror, cache, config, sets):
    """The main job end to end on the config (default: built-in defaults)."""
    from .workflow import curate_step, pull_step
    cfg = _resolve_config(config, sets, **{"data.extra": list(extra) or None, "output_dir": out_dir})
    out = Path(cfg.output_dir)
    _log("step 1/2 pull")
    files = pull_step(cfg, cache=cache, mirror=mirror, log=_log)
    _log("step 2/2 curate")
    cur = curate_step(cfg, files, out / "curated", log=_log)
    click.echo(f"curated measurements: {cur.measurements}")


def _register_commands() -> None:
    from .cli_sites import sites_command
    main.add_command(sites_command)


_register_commands()

if __name__ == "__main__":
    main()
