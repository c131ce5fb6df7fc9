"""Site perception on molecules with several measured constants.

``tests/data/multiconstant_reference.csv`` lists molecules with two or more measured aqueous pKa
values (handbooks and papers, each row names its source; all values written down from memory, as
the file's header says), and for every constant whether an acid or a base group titrates. A
molecule with n acid (base) constants has at least n distinct groups that lose (gain) a proton, so
``find_sites`` must perceive at least that many acid (base) sites, or some measured constant has no
atom to sit on.
"""

from __future__ import annotations

import csv
import io
from collections import Counter
from pathlib import Path

import pytest
from rdkit import Chem, RDLogger

from pkasite.features.sites import KINDS, find_sites

RDLogger.DisableLog("rdApp.*")

REFERENCE = Path(__file__).resolve().parents[1] / "data" / "multiconstant_reference.csv"
COLUMNS = ["name", "smiles", "constants", "kinds", "source"]

# Kept for a separate calibration set, so they must not appear here (SMILES of the neutral forms);
# every molecule of the interaction model's calibration set (configs/site_interactions.csv) is added
# to these below, so a row added there cannot also score here.
RESERVED = {
    "oxalic acid": "OC(=O)C(=O)O",
    "succinic acid": "OC(=O)CCC(=O)O",
    "glutaric acid": "OC(=O)CCCC(=O)O",
    "adipic acid": "OC(=O)CCCCC(=O)O",
    "1,3-diaminopropane": "NCCCN",
    "1,4-diaminobutane": "NCCCCN",
    "1,6-diaminohexane": "NCCCCCCN",
    "pyrazine": "c1cnccn1",
}


def _read_reference() -> list[dict]:
    text = REFERENCE.read_text(encoding="utf-8")
    body = "".join(line for line in text.splitlines(keepends=True) if not line.lstrip().startswith("#"))
    reader = csv.DictReader(io.StringIO(body))
    assert reader.fieldnames == COLUMNS, f"{REFERENCE.name}: columns {reader.fieldnames}, expected {COLUMNS}"
    rows = []
    for number, row in enumerate(reader, start=1):
        where = f"{REFERENCE.name} data row {number} ({row.get('name')!r})"
        assert None not in row and all(row[c] is not None for c in COLUMNS), f"{where}: wrong number of fields"
        values = [float(v) for v in row["constants"].split(";")]
        kinds = row["kinds"].split(";")
        rows.append({**row, "values": values, "kind_list": kinds, "where": where})
    return rows


ROWS = _read_reference()


def test_reference_file_shape():
    assert len(ROWS) >= 60, f"{REFERENCE.name}: {len(ROWS)} molecules, expected at least 60"
    names = Counter(row["name"] for row in ROWS)
    assert [n for n, c in names.items() if c > 1] == [], "molecule names must be unique"
    for row in ROWS:
        where, values, kinds = row["where"], row["values"], row["kind_list"]
        assert len(values) >= 2, f"{where}: needs two or more constants, has {len(values)}"
        assert len(kinds) == len(values), f"{where}: {len(values)} constants but {len(kinds)} kinds"
        assert set(kinds) <= set(KINDS), f"{where}: kinds {kinds} must be from {KINDS}"
        assert values == sorted(values), f"{where}: constants {values} are not ascending"
        # the file lists only constants in about -1..14, the span aqueous measurements reach (common practice)
        assert all(-1.0 <= v <= 14.0 for v in values), f"{where}: constant outside -1..14 in {values}"
        assert row["source"].strip(), f"{where}: no source"


def test_reference_structures_are_distinct_neutral_and_not_reserved():
    keys = {}
    from importlib import resources

    from pkasite.models.microstates import read_calibration
    calibration = read_calibration(resources.files("pkasite.configs").joinpath("site_interactions.csv").read_text())
    assert len(calibration) >= 6
    reserved = {Chem.MolToInchiKey(Chem.MolFromSmiles(s)): name
                for name, s in [*RESERVED.items(), *((r["name"], r["smiles"]) for r in calibration)]}
    for row in ROWS:
        mol = Chem.MolFromSmiles(row["smiles"])
        assert mol is not None, f"{row['where']}: RDKit cannot read SMILES {row['smiles']!r}"
        assert Chem.GetFormalCharge(mol) == 0, f"{row['where']}: draw the neutral form"
        key = Chem.MolToInchiKey(mol)
        assert key not in reserved, f"{row['where']}: {reserved[key]} is kept for the calibration set"
        assert key not in keys, f"{row['where']}: same structure as {keys[key]!r}"
        keys[key] = row["name"]


@pytest.mark.parametrize("row", ROWS, ids=[row["name"] for row in ROWS])
def test_every_constant_has_a_site_of_its_kind(row):
    mol = Chem.MolFromSmiles(row["smiles"])
    sites = find_sites(mol)
    needed = Counter(row["kind_list"])
    perceived = Counter(site.kind for site in sites)
    missing = {kind: needed[kind] - perceived[kind] for kind in KINDS if perceived[kind] < needed[kind]}
    assert not missing, (
        f"{row['name']} ({row['source']}): constants {row['constants']} ({row['kinds']}) need "
        f"{dict(needed)} sites, perceived {[(s.atom, s.kind, s.type) for s in sites]}; missing {missing}"
    )
