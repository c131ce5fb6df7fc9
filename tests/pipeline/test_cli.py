"""The CLI as a user meets it: exit codes, one-line errors, outputs."""
from __future__ import annotations

import subprocess
import sys

import pandas as pd
import pytest
from click.testing import CliRunner

from pkasite.pipeline.cli import main

from conftest import DATA


def test_every_subcommand_has_help():
    runner = CliRunner()
    top = runner.invoke(main, ["--help"])
    assert top.exit_code == 0
    for name in main.list_commands(None):
        res = runner.invoke(main, [name, "--help"])
        assert res.exit_code == 0 and "Usage:" in res.output, name


def test_bad_usage_exits_2():
    assert CliRunner().invoke(main, ["curate", "--format", "xls"]).exit_code == 2
    assert CliRunner().invoke(main, ["no-such-command"]).exit_code == 2


def test_engine_options_belong_to_their_engine(tmp_path):
    src = tmp_path / "in.csv"
    src.write_text("smiles\nCCO\n")
    out = str(tmp_path / "o.csv")
    res = CliRunner().invoke(main, ["predict", str(src), "-o", out, "--master", "local[2]"])
    assert res.exit_code == 2 and "--engine spark" in res.output
    res = CliRunner().invoke(main, ["predict", str(src), "-o", out, "--engine", "spark", "--sep", ";"])
    assert res.exit_code == 2 and "local engine" in res.output
    res = CliRunner().invoke(main, ["predict", str(src), "-o", out, "--sep", ";;"])
    assert res.exit_code == 2 and "not one character" in res.output


def test_missing_mirror_file_is_one_line_exit_1(tmp_path):
    res = subprocess.run([sys.executable, "-m", "pkasite.pipeline.cli", "pull", "--mirror", str(tmp_path),
                          "--cache", str(tmp_path / "c")], capture_output=True, text=True)
    assert res.returncode == 1
    assert res.stderr.strip().splitlines() == [
        f"pkasite: error: dwpka/acidic_train.csv: not in the mirror folder (looked for {tmp_path}/dwpka/acidic_train.csv)"]


def test_bad_inhouse_file_is_one_clear_error(tmp_path, mirror):
    bad = tmp_path / "bad.csv"
    bad.write_text("smiles;value\nCCO;3\n")
    res = subprocess.run([sys.executable, "-m", "pkasite.pipeline.cli", "curate", "--mirror", str(mirror),
                          "--cache", str(tmp_path / "c"), "--extra", str(bad), "--extra-only", "-o", str(tmp_path / "o")],
                         capture_output=True, text=True)
    assert res.returncode == 1
    assert "Traceback" not in res.stderr
    assert "bad.csv: missing required column(s) pka, kind" in res.stderr


@pytest.mark.slow
def test_curate_with_inhouse_csv_output(tmp_path, mirror):
    out = tmp_path / "o"
    res = CliRunner().invoke(main, ["curate", "--mirror", str(mirror), "--cache", str(tmp_path / "c"),
                                    "--extra", str(DATA / "inhouse_invented.csv"), "--format", "csv", "-o", str(out)])
    assert res.exit_code == 0, res.output
    m = pd.read_csv(out / "measurements.csv")
    r = pd.read_csv(out / "rejects.csv")
    inhouse = m[m["source"].str.startswith("inhouse:")]
    assert len(inhouse) == 3  # 7 invented rows, 4 of them bad
    assert (r["source"] == "inhouse:inhouse_invented.csv").sum() == 4
    # the in-house acetic acid replaces the open value of the same structure
    assert (m["smiles"] == "CC(=O)O").sum() == 1 and m.loc[m["smiles"] == "CC(=O)O", "pka"].item() == pytest.approx(4.75)
    assert "rows in" in res.output
