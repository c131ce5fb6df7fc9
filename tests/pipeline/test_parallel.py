"""Curation and feature work shared between processes gives exactly the numbers of one pass."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from pkasite.pipeline import parallel
from pkasite.pipeline.config import load_config


def test_map_slices_keeps_slice_order():
    slices = [list(range(i, i + 3)) for i in range(0, 120, 3)]
    assert parallel.map_slices(sum, slices, (), processes=2) == [sum(s) for s in slices]


def test_split_even_covers_every_item_once():
    for n_items, processes in [(0, 2), (5, 2), (1000, 1), (1001, 3)]:
        ranges = parallel.split_even(n_items, processes)
        assert [i for r in ranges for i in r] == list(range(n_items))
        assert len(ranges) == (1 if processes == 1 else min(max(n_items, 1), 16 * processes))


def test_process_count_needs_enough_molecules():
    assert parallel.process_count(100, 2) == 1
    assert parallel.process_count(2 * parallel.MIN_ITEMS_PER_PROCESS, 2) == 2
    assert parallel.process_count(10 * parallel.MIN_ITEMS_PER_PROCESS, 2) == 2


@pytest.mark.slow
def test_prepare_in_two_processes_equals_one(subset, monkeypatch):
    from pkasite.pipeline import train as T
    monkeypatch.setattr(parallel, "MIN_ITEMS_PER_PROCESS", 100)
    one = T.prepare(subset, load_config().with_overrides({"model.n_jobs": 1}))
    two = T.prepare(subset, load_config().with_overrides({"model.n_jobs": 2}))
    for a, b in [(one.X, two.X), (one.bits, two.bits), (one.mol_X, two.mol_X)]:
        assert np.array_equal(a, b, equal_nan=True)
    pd.testing.assert_frame_equal(one.sites, two.sites)
    pd.testing.assert_frame_equal(one.table.molecules, two.table.molecules)
    assert len(two.table.mols) == len(two.table.molecules) == subset.shape[0] - len(two.table.rejects)


def test_curation_in_two_processes_equals_one(mirror, tmp_path, monkeypatch):
    from pkasite.pipeline.curate import curate
    from pkasite.pipeline.workflow import pull_step, read_raw
    cfg = load_config()
    raw = read_raw(pull_step(cfg, cache=tmp_path, mirror=mirror), cfg).iloc[:600].copy()
    bad = raw.index[[7, 50, 100, 200, 300]]
    raw.loc[bad, "smiles"], raw.loc[bad, "smiles_fallback"] = "C1CC(N", ""  # unreadable: rejected either way
    monkeypatch.setattr(parallel, "MIN_ITEMS_PER_PROCESS", 100)
    one, two = curate(raw, cfg.curation, processes=1), curate(raw, cfg.curation, processes=2)
    pd.testing.assert_frame_equal(one.measurements, two.measurements)
    pd.testing.assert_frame_equal(one.rejects, two.rejects)
    assert one.summary == two.summary
    assert "structure_invalid" in set(two.rejects["reason"])


def test_work_stays_in_this_process_when_no_worker_can_start(monkeypatch):
    """A program read from standard input cannot be imported again by a spawned worker: no pool then."""
    import sys
    monkeypatch.setattr(sys.modules["__main__"], "__file__", "<stdin>", raising=False)
    assert not parallel.can_spawn()
    slices = [[i, i + 1] for i in range(10)]
    assert parallel.map_slices(sum, slices, (), processes=2) == [2 * i + 1 for i in range(10)]
