"""The shipped model's predictions on a fixed sample of the open data stay what they were.

A regression guard for refactors of standardization, site perception, features and prediction that
must not move any output (bench/shipped_values.py; the reference file holds sample row numbers and
predicted values only, never the open data).  A deliberate change (a documented bug fix, a rebuilt
shipped model) rewrites tests/data/shipped_values.csv in the same commit:
`python bench/shipped_values.py --write` (scripts/build_shipped_model.sh runs it).
"""
from __future__ import annotations

import importlib.util
from pathlib import Path

import pandas as pd

from pkasite.pipeline.predict import default_model_path

BENCH = Path(__file__).resolve().parents[2] / "bench" / "shipped_values.py"


def _module():
    spec = importlib.util.spec_from_file_location("shipped_values", BENCH)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_shipped_model_values_unchanged(mirror):
    sv = _module()
    ref, versions = sv.read_reference()
    assert len(ref) > 300 and ref["id"].nunique() > 250  # hundreds of molecules, most with several sites
    now = sv.predicted_values(mirror)
    # scripts/setup.sh installs the library versions the reference was written with (scripts/constraints.txt);
    # in another environment a difference may come from RDKit, LightGBM or NumPy rather than from our code
    installed = sv.library_versions()
    assert sv.differences(now, ref) == [], (
        "predictions of the shipped model moved; if that is intended, rebuild the reference with "
        f"`python bench/shipped_values.py --write` (model: {default_model_path()}; reference written with "
        f"{versions}, installed {installed})")


def test_value_comparison_reports_a_moved_value():
    sv = _module()
    ref = pd.DataFrame({"id": ["s0", "s1"], "pka": [4.2, 9.1], "site_type": ["phenol", "phenol"]})
    assert sv.differences(ref.copy(), ref) == []
    moved = ref.assign(pka=[4.2, 9.25])
    assert sv.differences(moved, ref) == ["row 1 (s1) pka: 9.25 now, 9.1 before"]
    assert sv.differences(ref.assign(pka=[4.2, 9.1 + 1e-12]), ref) == []  # within 1e-9
    renamed = ref.assign(site_type=["phenol", "carboxylic_acid"])
    assert "site_type" in sv.differences(renamed, ref)[0]
