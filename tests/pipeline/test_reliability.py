"""Hostile input: one molecule or one file must never take down a batch run.

The fuzz input is built from real structures of the open DataWarrior compilation (dwpka, CC BY 4.0),
mutated with a fixed seed; everything else here is invented for the test.
"""
from __future__ import annotations

import csv
import os
import random
import signal
import threading
import time

import pandas as pd
import pytest
from rdkit import Chem

from pkasite.pipeline.batch import neutralize_formulas, read_chunks, run_batch
from pkasite.pipeline.ingest import InputFileError
from pkasite.pipeline.isolation import IsolatedPredictor, WorkerFailure, WorkerPool, call_isolated
from pkasite.pipeline.predict import MOLECULE_COLUMNS, STATUSES, default_model_path, prepare_input


# ----------------------------------------------------------------------------- fuzzed library

def _mutate(rng: random.Random, smiles: str) -> str:
    pick = rng.randrange(12)
    if pick == 0:
        return smiles[: rng.randrange(len(smiles) + 1)]                      # truncated
    if pick == 1:
        i = rng.randrange(len(smiles) + 1)
        return smiles[:i] + rng.choice("[]()=#%+-@/\\.") + smiles[i:]          # stray bracket or bond
    if pick == 2:
        return smiles.replace("N", "[N+]", 1).replace("O", "[O-2]", 1)         # odd charges
    if pick == 3:
        return "C" * rng.choice([400, 5_000, 25_000]) + smiles                 # long chains
    if pick == 4:
        return smiles + rng.choice(["é", "\u00a0", "µ", "\u200b", "🧪"])         # unicode
    if pick == 5:
        return smiles + "," + smiles                                           # a quoted comma
    if pick == 6:
        return smiles + "\n" + smiles                                          # a quoted line break
    if pick == 7:
        return "c1" * rng.randrange(1, 60)                                     # ring-bond soup
    if pick == 8:
        return ""
    return smiles                                                              # unchanged


@pytest.fixture(scope="module")
def fuzz_file(mirror, tmp_path_factory):
    frames = [pd.read_csv(f, dtype=str) for f in sorted((mirror / "dwpka").glob("*.csv"))]
    pool = pd.concat(frames)["OriginalSmiles"].dropna().tolist()
    rng = random.Random(20261202)
    n = 3000
    smiles = [_mutate(rng, rng.choice(pool)) for _ in range(n)]
    ids = [f"f{i}" for i in range(n)]
    for i in rng.sample(range(n), 40):
        ids[i] = rng.choice(ids[:100])                 # duplicates, some in later chunks
    for i in rng.sample(range(n), 20):
        ids[i] = ""                                    # missing ids
    path = tmp_path_factory.mktemp("fuzz") / "fuzz.csv"
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["id", "smiles"])
        w.writerows(zip(ids, smiles))
    return path, ids, smiles


@pytest.mark.slow
def test_fuzzed_library_every_row_back_in_order_with_a_status(fuzz_file, tmp_path):
    path, ids, smiles = fuzz_file
    out = tmp_path / "out.parquet"
    res = run_batch(path, out, default_model_path(), jobs=2, chunk_size=400, progress=False)
    df = pd.read_parquet(out)
    assert res.rows == len(df) == len(ids)
    assert df["id"].tolist() == [i if i else f"row{n}" for n, i in enumerate(ids, 1)]
    assert set(df["status"]) <= set(STATUSES) and "crashed" not in set(df["status"])
    assert (df["status"] == "ok").sum() > 750  # the unchanged structures (a quarter) and some mutated ones score
    # a non-ASCII character or a line break inside would make RDKit read only the text before it, another
    # molecule: such rows are refused, never scored as the truncated structure (surrounding whitespace,
    # a trailing no-break space among it, is only stripped)
    cut = [("\n" in s.strip() or not s.strip().isascii()) and len(s) <= 20_000 for s in smiles]
    assert (df.loc[cut, "status"] == "unreadable_smiles").all() and sum(cut) > 300
    bad = df[df["status"] != "ok"]
    assert bad["warnings"].str.len().gt(0).all()  # every refused row says why
    assert not df["warnings"].fillna("").str.contains("Traceback|Error:").any()
    first: dict = {}
    for n, i in enumerate(df["id"], 1):  # duplicates are named across chunks, not only within one
        if i in first:
            assert f"duplicate id (also row {first[i]})" in df["warnings"].iloc[n - 1]
        first.setdefault(i, n)
    assert not list(tmp_path.glob("*.parts"))


# ----------------------------------------------------------------------------- size guards

@pytest.mark.parametrize("smiles,message", [
    ("C" * 30_000, "SMILES of 30000 characters"),     # the chain that overflowed RDKit's SMILES writer
    ("C" * 1_000_000, "SMILES of 1000000 characters"),
    ("C" * 9_000, "9000 heavy atoms"),                # short enough to read, too many atoms
    ("C1CC1" * 700, "2100 heavy atoms"),
    ("C1" + "C2CC2" * 150 + "C1", "heavy atoms"),
])
def test_oversized_inputs_are_refused_before_standardization(smiles, message):
    p = prepare_input(smiles)
    assert p.status == "too_large" and message in p.warnings[0] and p.mol is None


def test_long_inputs_are_echoed_short():
    p = prepare_input("C" * 1_000_000)
    shown = p.smiles
    assert len(shown) < 300 and shown.endswith("(1000000 characters)")


def test_a_broken_sdf_record_is_unreadable_not_empty(tmp_path):
    good = Chem.MolToMolBlock(Chem.MolFromSmiles("CC(=O)O"))
    broken = "broken\n  junk\n\n  3  2  0  0  0  0  0  0  0  0999 V2000\nnot an atom line\nM  END\n"
    (tmp_path / "in.sdf").write_text(f"{good}$$$$\n{broken}$$$$\n{good}$$$$\n")
    run_batch(tmp_path / "in.sdf", tmp_path / "o.parquet", default_model_path(), progress=False)
    df = pd.read_parquet(tmp_path / "o.parquet")
    assert df["status"].tolist() == ["ok", "unreadable_record", "ok"]
    assert df["id"].tolist() == ["row1", "broken", "row3"]  # title line, else row<N>
    assert "cannot be read" in df["warnings"].iloc[1]


def test_missing_ids_are_row_numbers_in_every_format(tmp_path):
    (tmp_path / "in.smi").write_text("CC(=O)O first\nc1ccncc1\n")
    pd.DataFrame({"smiles": ["CC(=O)O", "CCN"], "id": ["p1", None]}).to_parquet(tmp_path / "in.parquet")
    for name, want in (("in.smi", ["first", "row2"]), ("in.parquet", ["p1", "row2"])):
        run_batch(tmp_path / name, tmp_path / f"{name}.csv", default_model_path(), progress=False)
        assert pd.read_csv(tmp_path / f"{name}.csv")["id"].tolist() == want


# ----------------------------------------------------------------------------- text files

def test_encoding_errors_name_the_line_and_latin1_reads_when_asked(tmp_path):
    f = tmp_path / "in.csv"
    f.write_bytes("id,smiles\na,CC(=O)O\nacide-\xe9,OC(=O)c1ccccc1\n".encode("latin-1"))
    with pytest.raises(InputFileError, match="line 3 is not valid utf-8.*--encoding"):
        list(read_chunks(f, 10))
    assert not list(tmp_path.glob("*.parts"))
    run_batch(f, tmp_path / "o.csv", default_model_path(), progress=False, encoding="latin-1")
    assert pd.read_csv(tmp_path / "o.csv")["id"].tolist() == ["a", "acide-é"]


def test_a_failed_run_leaves_nothing_behind(tmp_path):
    f = tmp_path / "in.csv"
    f.write_bytes(b"id,smiles\n" + b"".join(b"m%d,CCO\n" % i for i in range(50)) + b"bad,\xff\n")
    with pytest.raises(InputFileError):
        run_batch(f, tmp_path / "o.csv", default_model_path(), progress=False, chunk_size=1000)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["in.csv"]


def test_semicolon_tables_are_sniffed_or_named(tmp_path):
    f = tmp_path / "in.csv"
    f.write_text("name;smiles\nacetic;CC(=O)O\npyridine;c1ccncc1\n")
    run_batch(f, tmp_path / "a.csv", default_model_path(), progress=False)
    run_batch(f, tmp_path / "b.csv", default_model_path(), progress=False, sep=";")
    for name in ("a.csv", "b.csv"):
        df = pd.read_csv(tmp_path / name)
        assert df["id"].tolist() == ["acetic", "pyridine"] and (df["status"] == "ok").all()


def test_formula_like_cells_are_neutralized_but_smiles_are_not(tmp_path):
    ids = ['=HYPERLINK("http://example.invalid")', "+1+1", "@SUM(A1)", "-2", "plain"]
    smiles = ["C=CC(=O)O", "c1ccncc1", "CC#N", "[O-]C(=O)C", "CCO"]
    f = tmp_path / "in.csv"
    pd.DataFrame({"id": ids, "smiles": smiles}).to_csv(f, index=False)
    run_batch(f, tmp_path / "o.csv", default_model_path(), progress=False)
    df = pd.read_csv(tmp_path / "o.csv", keep_default_na=False)
    assert df["id"].tolist() == ["'" + i for i in ids[:4]] + ["plain"]
    assert df["smiles"].tolist() == smiles
    assert not df["major_species"].str.startswith("'").any()
    run_batch(f, tmp_path / "o.parquet", default_model_path(), progress=False)
    assert pd.read_parquet(tmp_path / "o.parquet")["id"].tolist() == ids  # parquet keeps values as given
    table = pd.DataFrame({"id": ["=1"], "macro_pkas": ["-1.20;4.50"], "pka": [-1.2]})
    assert neutralize_formulas(table).to_dict("list") == {"id": ["'=1"], "macro_pkas": ["-1.20;4.50"], "pka": [-1.2]}


# ----------------------------------------------------------------------------- worker isolation

def _fragile(payload):
    """A task that dies the way native code does: a segfault, a hang, or a plain answer."""
    if isinstance(payload, list):
        return [_fragile(p) for p in payload]
    if payload == "segfault":
        os.kill(os.getpid(), signal.SIGSEGV)
    if payload == "hang":
        time.sleep(60)
    return payload


def test_a_crashing_or_hanging_item_is_isolated_and_the_pool_goes_on():
    items = ["a", "segfault", "b", "hang", "c"]
    with WorkerPool(_fragile, size=1, start_timeout=60) as pool:
        pieces = call_isolated(pool, len(items), lambda pos: [items[i] for i in pos], lambda n: 3.0)
        assert [pos for pos, _ in pieces] == [[0], [1], [2], [3], [4]]  # the whole task failed: item by item
        outcome = {items[pos[0]]: value[0] if isinstance(value, list) else value for pos, value in pieces}
        assert [outcome[k] for k in "abc"] == ["a", "b", "c"]
        assert isinstance(outcome["segfault"], WorkerFailure) and outcome["segfault"].kind == "crashed"
        assert "SIGSEGV" in outcome["segfault"].message
        assert isinstance(outcome["hang"], WorkerFailure) and outcome["hang"].kind == "timeout"
        assert pool.call("still here", timeout=30) == "still here"


@pytest.mark.slow
def test_a_worker_killed_mid_chunk_costs_no_row():
    smiles = ["CC(=O)O", "c1ccncc1", "Oc1ccccc1", "NCCN", "OC(=O)CC(O)(CC(=O)O)C(=O)O"] * 120
    ids = [f"k{i}" for i in range(len(smiles))]
    with IsolatedPredictor(default_model_path(), workers=1) as predictor:
        predictor.pool.start_all()
        first = predictor.pool.pids()

        def kill_soon():
            time.sleep(0.5)
            os.kill(first[0], signal.SIGKILL)
        killer = threading.Thread(target=kill_soon)
        killer.start()
        scored = predictor.predict(ids, smiles)
        killer.join()
        assert predictor.pool.pids() != first  # the killed worker was replaced
    mols = scored.molecules
    assert mols["id"].tolist() == ids and (mols["status"] == "ok").all()
    assert list(mols.columns) == MOLECULE_COLUMNS
