"""The ``sites`` command: JSON lines in input order, errors per molecule, usage errors exit 2."""

from __future__ import annotations

import json

from click.testing import CliRunner

from pkasite.pipeline.cli_sites import sites_command


def _run(args):
    result = CliRunner().invoke(sites_command, args)
    return result, [json.loads(line) for line in result.output.splitlines() if line.strip()]


def test_smiles_arguments_in_order():
    # acetic acid O3 is the acid site; methylamine N1 the base site (CRC Handbook, from memory)
    result, records = _run(["CC(=O)O", "CN"])
    assert result.exit_code == 0
    assert [r["smiles"] for r in records] == ["CC(=O)O", "CN"]
    assert records[0]["sites"] == [{"atom": 3, "type": "carboxylic_acid", "kind": "acid"}]
    assert records[1]["sites"] == [{"atom": 1, "type": "aliphatic_amine_primary", "kind": "base"}]


def test_bad_molecule_does_not_stop_the_batch():
    result, records = _run(["C1CC", "c1ccccc1"])
    assert result.exit_code == 0
    assert "error" in records[0] and "sites" not in records[0]
    assert records[1]["sites"] == []  # benzene has no ionizable site (CRC)


def test_smiles_file_with_names(tmp_path):
    path = tmp_path / "in.smi"
    path.write_text("Oc1ccccc1 phenol\n\nnot_a_smiles\nc1ccncc1\tpyridine\n")
    result, records = _run(["--input", str(path)])
    assert result.exit_code == 0
    assert [r.get("name") for r in records] == ["phenol", None, "pyridine"]
    assert records[0]["sites"][0]["type"] == "phenol"
    assert "error" in records[1]
    assert records[2]["sites"] == [{"atom": 3, "type": "pyridine_like_n", "kind": "base"}]


def test_csv_file(tmp_path):
    path = tmp_path / "in.csv"
    path.write_text('id,smiles\nm1,"NCC(=O)O"\nm2,"[NH3+]CC(=O)[O-]"\n')
    result, records = _run(["--input", str(path)])
    assert result.exit_code == 0
    # glycine, neutral and zwitterion: same sites (CRC Handbook, from memory)
    assert [r["name"] for r in records] == ["m1", "m2"]
    assert records[0]["sites"] == records[1]["sites"]
    assert {s["kind"] for s in records[0]["sites"]} == {"acid", "base"}


def test_csv_smiles_rdkit_would_truncate_is_an_error(tmp_path):
    path = tmp_path / "in.csv"
    path.write_text('id,smiles\nm1,"CC O"\nm2,"CCO"\n', encoding="utf-8")
    result, records = _run(["--input", str(path)])
    assert result.exit_code == 0
    assert "whitespace" in records[0]["error"] and "sites" not in records[0]  # not ethane's (no) sites
    assert records[1]["sites"][0]["type"] == "alcohol"


def test_no_input_is_a_usage_error():
    result = CliRunner().invoke(sites_command, [])
    assert result.exit_code == 2
    assert "SMILES" in result.output
