from __future__ import annotations

import pytest

from pkasite.pipeline.config import CurationConfig
from pkasite.pipeline.curate import curate
from pkasite.pipeline.ingest import InputFileError, constant_index_from_type, parse_inhouse, parse_iupac

from conftest import DATA


def test_constant_index_from_type():
    assert constant_index_from_type("a2/apparent") == 2
    assert constant_index_from_type("b1") == 1
    assert constant_index_from_type("1/thermodynamic") == 1
    assert constant_index_from_type("a/apparent") is None
    assert constant_index_from_type("thermodynamic") is None


def test_iupac_parser_on_invented_rows():
    raw = parse_iupac(DATA / "iupac_invented.csv", None, None, "CC-BY-NC-4.0")
    res = curate(raw, CurationConfig())
    reasons = dict(zip(res.rejects["record_id"] + "#" + res.rejects["row"].astype(str), res.rejects["reason"]))
    # inv3's second base constant is kept with constant_rank 2 (tests/pipeline/test_curate_constants.py)
    assert reasons == {"inv4#6": "temperature_unclear", "inv5#7": "low_reliability",
                       "inv6#8": "non_aqueous", "inv7#9": "value_bound", "inv9#11": "structure_invalid",
                       "inv10#12": "not_ambient_pressure"}
    m = res.measurements.set_index("smiles")
    assert m.loc["CC(=O)O", "n"] == 2 and m.loc["CC(=O)O", "pka"] == pytest.approx(4.75)
    assert m.loc["CN", "kind"] == "base" and m.loc["CN", "pka"] == pytest.approx(10.6)  # 14.0 - pKb 3.40
    assert m.loc["CCCN", "pka"] == pytest.approx(10.6) and m.loc["CCCN", "temperature_c"] == 25.0
    assert res.summary["accounted"]


def test_iupac_parser_on_real_sample(mirror):
    """The 31 verbatim rows of the IUPAC v2.3 sample in the data mirror."""
    raw = parse_iupac(mirror / "iupac" / "sample_rows.csv", None, None, "CC-BY-NC-4.0")
    assert len(raw) == 31
    assert set(raw["kind"]) == {"acid", "base"}
    assert raw["is_pkb"].sum() == 2
    res = curate(raw, CurationConfig())
    assert res.summary["accounted"]
    rej = set(res.rejects["reason"])
    assert {"non_aqueous", "not_ambient_pressure", "temperature_out_of_window"} <= rej
    # methylamine pKaH (perrin2): 10.657 at 25 C kept, 11.496 at 0 C rejected, pKb 2.92 at 1000 atm rejected
    m = res.measurements[res.measurements["smiles"] == "CN"].iloc[0]
    assert m["pka"] == pytest.approx(10.657)


def test_inhouse_reader_and_bad_rows():
    raw = parse_inhouse(DATA / "inhouse_invented.csv")
    assert len(raw) == 7 and raw["in_house"].all()
    res = curate(raw, CurationConfig())
    reasons = dict(zip(res.rejects["record_id"], res.rejects["reason"]))
    assert reasons == {"IH-004": "structure_invalid", "IH-005": "value_not_numeric", "IH-006": "kind_invalid",
                       "IH-007": "structure_invalid"}
    assert "site_atom 17" in res.rejects.set_index("record_id").loc["IH-007", "detail"]
    acetic = res.measurements[res.measurements["smiles"] == "CC(=O)O"].iloc[0]
    assert acetic["site_atom"] == 3  # the OH oxygen of CC(=O)O


@pytest.mark.parametrize("content,match", [
    ("smiles,value\nCCO,3\n", "missing required column\\(s\\) pka, kind"),
    ("", "the file is empty"),
    ("smiles,pka,kind\n", "header but no rows"),
])
def test_inhouse_bad_files(tmp_path, content, match):
    path = tmp_path / "bad.csv"
    path.write_text(content)
    with pytest.raises(InputFileError, match=match):
        parse_inhouse(path)


def test_inhouse_binary_file(tmp_path):
    path = tmp_path / "bad.csv"
    path.write_bytes(b"\x89PNG\r\n\x1a\n\xff\xfe\x00\x00")
    with pytest.raises(InputFileError, match="not a text CSV"):
        parse_inhouse(path)


def test_dwpka_parser_keeps_the_group_name(mirror):
    """The compilation's free-text name of the titrating group travels as ``site_group``."""
    from pkasite.pipeline.ingest import parse_dwpka

    raw = parse_dwpka(mirror / "dwpka" / "acidic_train.csv", "acid", "train", "CC-BY-4.0").set_index("record_id")
    # record 14681, N-tosylglycine: the compilation names its sulfonamide N-H, drawn beside a carboxylate
    assert raw.loc["14681", "site_group"] == "SO2-NH-"
    assert raw["site_group"].eq("?").sum() > 1000  # most rows name no group
