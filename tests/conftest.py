"""Shared fixtures: the offline data mirror and one curated run of the real open data; a builder of
hand-made raw-record tables."""
from __future__ import annotations

import os
from pathlib import Path

import pandas as pd
import pytest

REPO = Path(__file__).resolve().parents[1]
DATA = Path(__file__).resolve().parent / "data"


def mirror_dir() -> Path:
    """The data mirror: $PKASITE_MIRROR, else ../shared/data beside the checkout."""
    path = Path(os.environ.get("PKASITE_MIRROR") or REPO.parent / "shared" / "data")
    if not (path / "dwpka").is_dir():
        pytest.fail(f"data mirror not found at {path}; set PKASITE_MIRROR to the folder holding dwpka/")
    return path


@pytest.fixture(scope="session")
def mirror() -> Path:
    return mirror_dir()


@pytest.fixture(scope="session")
def curated(mirror, tmp_path_factory):
    """pull (from the mirror) -> curate on the packaged default config, once per session."""
    from pkasite.pipeline.config import load_config
    from pkasite.pipeline.workflow import curate_step, pull_step

    cfg = load_config()
    cache = tmp_path_factory.mktemp("cache")
    files = pull_step(cfg, cache=cache, mirror=mirror)
    return curate_step(cfg, files, tmp_path_factory.mktemp("curated"))


@pytest.fixture(scope="session")
def subset(curated):
    """250 acid and 250 base measurements of the curated open data (a fixed random sample)."""
    import pandas as pd
    m = curated.result.measurements
    return pd.concat([m[m["kind"] == k].sample(250, random_state=0) for k in ("acid", "base")], ignore_index=True)


@pytest.fixture(scope="session")
def heldout(curated, subset):
    """300 other measurements of the curated open data, none of them in ``subset``."""
    import pandas as pd
    m = curated.result.measurements
    rest = m[~m["record_id"].isin(subset["record_id"]) & ~m["inchikey"].isin(subset["inchikey"])]
    return pd.concat([rest[rest["kind"] == k].sample(150, random_state=1) for k in ("acid", "base")],
                     ignore_index=True)


def raw_rows(*rows: dict) -> pd.DataFrame:
    """A raw-record table (:data:`~pkasite.pipeline.ingest.RAW_COLUMNS`) of hand-made rows: source "t",
    record ids r1, r2, ... and ordinary defaults; each dict overrides columns of its row."""
    from pkasite.pipeline.ingest import RAW_COLUMNS

    base = {"source": "t", "file": "t.csv", "smiles_fallback": "", "is_pkb": False, "constant_index": None,
            "constant_numbering": "", "group_key": None, "temperature_text": "25", "method": "", "site_atom": None, "site_group": "", "licence": "L",
            "non_aqueous": "", "pressure": "", "assessment": "", "split": None, "in_house": False,
            "draws_titrating_species": False}
    out = []
    for i, r in enumerate(rows, start=1):
        rec = {**base, "row": i, "record_id": f"r{i}", **r}
        rec.setdefault("group_key", rec["record_id"])
        out.append(rec)
    return pd.DataFrame(out)[RAW_COLUMNS]
