"""Constant ranks: which of a compound's constants of one kind a measurement is (1 = the strongest).

Unit tests run on small INVENTED frames (values chosen to exercise the rule, not measurements); the
others check the rule on the published open data in the mirror.
"""
from __future__ import annotations

import math

import pandas as pd
import pytest
from rdkit import Chem

from pkasite.pipeline.config import CurationConfig
from pkasite.pipeline.curate import RANK_INPUT_COLUMNS, constant_ranks, curate, format_summary
from pkasite.pipeline.ingest import PER_KIND, WHOLE_COMPOUND, parse_inhouse, parse_iupac

from conftest import DATA, raw_rows


def frame(*rows: dict) -> pd.DataFrame:
    """INVENTED rows for the rank rule: one compound "X" of source "s" unless a row says otherwise."""
    base = {"source": "s", "group_key": "X", "kind": "acid", "constant_index": None,
            "constant_numbering": WHOLE_COMPOUND}
    return pd.DataFrame([{**base, **r} for r in rows], columns=RANK_INPUT_COLUMNS + ["inchikey"])


def ranks(df: pd.DataFrame) -> list:
    return constant_ranks(df)["constant_rank"].tolist()


def test_acid_ranks_follow_the_values_not_the_numbers():
    df = frame({"pka": 4.5, "constant_index": 2}, {"pka": 9.0, "constant_index": 4}, {"pka": 2.0, "constant_index": 3})
    out = constant_ranks(df)
    assert out["constant_rank"].tolist() == [2, 3, 1]
    assert out["stronger_pka"].tolist()[:2] == [2.0, 4.5] and math.isnan(out["stronger_pka"].iloc[2])


def test_base_rank_one_is_the_highest_value():
    # numbered from the acidic end over the whole compound: the base's "a2" is its most basic constant
    df = frame({"kind": "base", "pka": 3.1, "constant_index": 1}, {"kind": "base", "pka": 8.0, "constant_index": 2})
    assert ranks(df) == [2, 1]


def test_replicates_of_one_constant_share_its_rank():
    df = frame({"pka": 4.7, "constant_index": 1}, {"pka": 4.9, "constant_index": 1}, {"pka": 4.8, "constant_index": 1},
               {"pka": 9.0, "constant_index": 2})
    out = constant_ranks(df)
    assert out["constant_rank"].tolist() == [1, 1, 1, 2]
    assert out["stronger_pka"].iloc[3] == pytest.approx(4.8)  # the median of constant 1


def test_numbers_break_ties_in_the_direction_of_the_numbering():
    acid = frame({"pka": 5.0, "constant_index": 2}, {"pka": 5.0, "constant_index": 1})
    assert ranks(acid) == [2, 1]
    whole = frame({"kind": "base", "pka": 5.0, "constant_index": 2}, {"kind": "base", "pka": 5.0, "constant_index": 1})
    assert ranks(whole) == [1, 2]  # over the whole compound the higher number is the more basic
    per_kind = whole.assign(constant_numbering=PER_KIND)
    assert ranks(per_kind) == [2, 1]  # per kind, 1 is the most basic


def test_per_kind_numbers_stand_in_for_stronger_constants_not_given():
    lone = frame({"pka": 6.4, "constant_index": 3, "constant_numbering": PER_KIND})
    out = constant_ranks(lone)
    assert out["constant_rank"].tolist() == [3] and math.isnan(out["stronger_pka"].iloc[0])
    gap = frame({"pka": 6.4, "constant_index": 3, "constant_numbering": PER_KIND},
                {"pka": 3.1, "constant_index": 1, "constant_numbering": PER_KIND})
    assert ranks(gap) == [3, 1]
    contradicting = frame({"pka": 6.0, "constant_index": 1, "constant_numbering": PER_KIND},
                          {"pka": 2.0, "constant_index": 2, "constant_numbering": PER_KIND})
    assert ranks(contradicting) == [2, 1]  # the values decide the order
    # the same lone number from a compilation numbered over the whole compound says nothing of its kind
    assert ranks(lone.assign(constant_numbering=WHOLE_COMPOUND)) == [1]


def test_rows_without_numbers_are_one_constant():
    df = frame({"pka": 4.0, "constant_numbering": ""}, {"pka": 7.0, "constant_numbering": ""})
    assert ranks(df) == [1, 1]


def test_compounds_sources_and_kinds_are_ranked_apart():
    df = frame({"pka": 9.0, "constant_index": 2}, {"pka": 3.0, "constant_index": 1, "group_key": "Y"},
               {"pka": 2.0, "constant_index": 1, "source": "other"}, {"pka": 1.0, "kind": "base", "constant_index": 1})
    assert ranks(df) == [1, 1, 1, 1]
    # two records of one source drawn as different species of one structure: linked by the InChIKey
    linked = frame({"pka": 10.8, "constant_index": 2, "group_key": "anion", "inchikey": "K"},
                   {"pka": 8.6, "constant_index": 1, "group_key": "neutral", "inchikey": "K"})
    assert ranks(linked) == [2, 1]


def test_empty_frame():
    assert constant_ranks(frame()).empty


# --- the readers' numbering ------------------------------------------------------------------------


def test_inhouse_rows_are_rank_one_unless_they_name_a_site():
    res = curate(parse_inhouse(DATA / "inhouse_invented.csv"), CurationConfig())  # INVENTED values
    m = res.measurements.set_index("smiles")
    assert m.loc["CC(=O)O", "site_atom"] == 3 and pd.isna(m.loc["CC(=O)O", "constant_rank"])
    assert m.drop(index="CC(=O)O")["constant_rank"].tolist() == [1, 1]


def test_invented_iupac_rows_two_base_constants():
    # INVENTED rows: ethylenediamine "pKaH1" 9.90 and "pKaH2" 6.90 in the IUPAC layout
    raw = parse_iupac(DATA / "iupac_invented.csv", None, None, "CC-BY-NC-4.0")
    res = curate(raw, CurationConfig())
    en = res.measurements[res.measurements["smiles"] == "NCCN"].sort_values("constant_rank")
    assert en["constant_rank"].tolist() == [1, 2] and en["pka"].tolist() == [9.90, 6.90]
    strict = curate(raw, CurationConfig(first_constant_only=True))
    later = strict.rejects[strict.rejects["reason"] == "later_constant"]
    assert later["record_id"].tolist() == ["inv3"] and "9.9" in later["detail"].iloc[0]


def test_iupac_sample_per_kind_number_gives_the_rank(mirror):
    """31 verbatim rows of the IUPAC v2.3 dataset: serjeant2528 is listed only by its "pKa3"."""
    raw = parse_iupac(mirror / "iupac" / "sample_rows.csv", None, None, "CC-BY-NC-4.0")
    row = raw[raw["record_id"] == "serjeant2528"].iloc[0]
    assert row["constant_index"] == 3 and row["kind"] == "acid"
    res = curate(raw, CurationConfig())
    assert res.summary["accounted"]
    m = res.measurements[res.measurements["record_id"] == "iupac:serjeant2528"]
    assert m["constant_rank"].tolist() == [3]
    methylamine = res.measurements[res.measurements["smiles"] == "CN"]  # pKaH1; its 0 C replicate is rejected
    assert methylamine["constant_rank"].tolist() == [1]
    strict = curate(raw, CurationConfig(first_constant_only=True))
    later = strict.rejects[strict.rejects["reason"] == "later_constant"].set_index("record_id")
    assert "serjeant2528" in later.index and "acid constant 3" in later.loc["serjeant2528", "detail"]


# --- the open compilation in the mirror ------------------------------------------------------------


def _dwpka_rows(mirror, prefix: str) -> pd.DataFrame:
    return pd.concat([pd.read_csv(mirror / "dwpka" / f"{prefix}_{split}.csv", dtype=str, keep_default_na=False)
                      for split in ("train", "test")], ignore_index=True).set_index("Molecule name")


@pytest.mark.slow
def test_nicotine_most_basic_constant_kept_with_rank_one(curated, mirror):
    # The compilation lists nicotine's pyrrolidine constant as "a2" (its pyridine, about 3.1, is
    # constant 1) and gives no other base value, so it is the most basic constant it gives.
    row = _dwpka_rows(mirror, "basic").loc["11055"]
    assert row["type"].startswith("a2") and float(row["pKa"]) == pytest.approx(8.06)
    m = curated.result.measurements
    key = Chem.MolToInchiKey(Chem.MolFromSmiles("CN1CCCC1c1cccnc1"))  # nicotine, stereo not drawn
    hit = m[(m["inchikey"] == key) & (m["kind"] == "base")]
    assert hit["members"].tolist() == ["dwpka:11055"] and hit["constant_rank"].tolist() == [1]
    # CRC Handbook of Chemistry and Physics (97th ed.), dissociation constants of organic bases, 25 C:
    # nicotine pKa 8.02 (pyrrolidinium), from memory.
    assert hit["pka"].iloc[0] == pytest.approx(8.02, abs=0.2)
    assert "later_constant" not in set(curated.result.rejects["reason"])


@pytest.mark.slow
def test_two_acid_constants_kept_with_ranks_in_value_order(curated, mirror):
    m = curated.result.measurements
    acids = m[(m["kind"] == "acid") & (m["source"] == "dwpka")]
    several = acids[acids.duplicated(["inchikey", "drawn_charge"], keep=False)]
    assert len(several), "no compound with two acid constants in the curated compilation"
    for _, grp in several.groupby(["inchikey", "drawn_charge"]):
        grp = grp.sort_values("pka")
        ranks = grp["constant_rank"].tolist()
        # ranks grow with the value; a gap stands for an acid constant the numbering implies but the
        # source does not list (see curate.unlisted_stronger_acids)
        assert ranks[0] >= 1 and all(b > a for a, b in zip(ranks, ranks[1:]))
    # 3-hydroxyphenylboronic acid: the compilation files its second acid constant under a record drawn
    # as the boronate anion (11489) apart from the neutral compound's first one (11487)
    file_rows = _dwpka_rows(mirror, "acidic").loc[["11487", "11489"]]
    assert file_rows["type"].str[:2].tolist() == ["a1", "a2"]
    key = Chem.MolToInchiKey(Chem.MolFromSmiles("OB(O)c1cccc(O)c1"))
    boronic = several[several["inchikey"] == key].sort_values("constant_rank")
    assert boronic["members"].tolist() == ["dwpka:11487", "dwpka:11489"]
    assert boronic["pka"].tolist() == sorted(file_rows["pKa"].astype(float))


def test_unlisted_stronger_acid_constants_move_the_rank():
    """INVENTED rows: a compound numbered over the whole compound lists only its "a2". Without any base
    site, the missing "a1" must be an acid, so "a2" is the second acid constant; with a base site the
    missing constant may be that base's pKaH and the rank stays 1."""
    from pkasite.pipeline.curate import unlisted_stronger_acids
    rows = pd.DataFrame({"source": "inv", "group_key": ["k1", "k2"], "kind": "acid", "pka": [11.3, 10.3],
                         "constant_index": [2, 2], "constant_numbering": "whole_compound",
                         "smiles": ["OC(=O)c1ccc(O)cc1", "Nc1ccc(O)cc1"]})
    # 4-hydroxybenzoic acid (two acid sites, no base site) and 4-aminophenol (an aniline base site)
    assert unlisted_stronger_acids(rows).tolist() == [1, 0]


def _drawn_rows(flag: bool):
    """INVENTED values on real structures, in a source that draws the titrating species when ``flag``:
    an acid record drawn as the salicylate anion (its carboxylate already titrated), a base record drawn
    as 4-(pyrrolidin-1-yl)pyridinium, a base record drawn as the glycine zwitterion, and a neutral
    drawing."""
    rows = [("O=C([O-])c1ccccc1O", "acid", "13.0"), ("[NH+]1=CC=C(N2CCCC2)C=C1", "base", "-0.5"),
            ("[NH3+]CC(=O)[O-]", "base", "9.5"), ("OC(=O)c1ccccc1", "acid", "4.2")]
    return raw_rows(*({"smiles": s, "kind": k, "value_text": v, "draws_titrating_species": flag}
                      for s, k, v in rows))


def test_a_site_drawn_titrated_makes_the_record_a_later_constant():
    res = curate(_drawn_rows(True), CurationConfig(charged_drawing_ranks=["acid", "base"]))
    m = res.measurements.set_index("members")
    # the anion's acid value is the phenol's (second) constant, the pyridinium's base value the
    # dication's; the zwitterion and the neutral drawing say nothing about the order
    assert m["constant_rank"].to_dict() == {"t:r1": 2, "t:r2": 2, "t:r3": 1, "t:r4": 1}
    assert res.summary["ranked_by_drawing"] == 2
    assert "2 of them ranked by a drawing" in format_summary(res.summary)


def test_by_default_only_base_records_are_ranked_by_their_drawing():
    res = curate(_drawn_rows(True), CurationConfig())
    m = res.measurements.set_index("members")
    assert m["constant_rank"].to_dict() == {"t:r1": 1, "t:r2": 2, "t:r3": 1, "t:r4": 1}
    assert res.summary["ranked_by_drawing"] == 1


def test_charged_drawings_rank_nothing_for_other_sources_or_when_off():
    other_source = curate(_drawn_rows(False), CurationConfig(charged_drawing_ranks=["acid", "base"]))
    off = curate(_drawn_rows(True), CurationConfig(charged_drawing_ranks=[]))
    for res in (other_source, off):
        assert set(res.measurements["constant_rank"]) == {1} and res.summary["ranked_by_drawing"] == 0


def _against_rows():
    """INVENTED values on 3-hydroxypyridine, in a source that draws the titrating species: an acid
    record drawn as the pyridinium cation, a base record drawn as the phenolate, an acid record drawn
    neutral."""
    rows = [("Oc1ccc[nH+]c1", "acid", "4.9"), ("[O-]c1cccnc1", "base", "8.6"), ("Oc1cccnc1", "acid", "8.7")]
    return raw_rows(*({"smiles": s, "kind": k, "value_text": v, "draws_titrating_species": True}
                      for s, k, v in rows))


def test_a_record_drawn_against_its_kind_keeps_the_charge_of_its_drawing():
    res = curate(_against_rows(), CurationConfig())
    m = res.measurements.set_index("members")
    # the cation's step and the neutral molecule's step are two constants, not conflicting replicates
    assert m["drawn_charge"].to_dict() == {"t:r1": 1, "t:r2": -1, "t:r3": 0}
    assert m["pka"].to_dict() == {"t:r1": 4.9, "t:r2": 8.6, "t:r3": 8.7}
    assert res.summary["drawn_against_kind"] == 2
    assert "2 drawn against their kind" in format_summary(res.summary)


def test_without_the_drawn_charge_the_two_acid_steps_conflict():
    res = curate(_against_rows(), CurationConfig(charge_against_kind=False))
    assert res.measurements["members"].tolist() == ["t:r2"]
    assert set(res.measurements["drawn_charge"]) == {0} and res.summary["drawn_against_kind"] == 0
    assert set(res.rejects["reason"]) == {"conflicting_replicates"}


@pytest.mark.slow
def test_compilation_records_drawn_against_their_kind_keep_their_drawn_charge(curated, mirror):
    """3-hydroxypyridine: the compilation files 5.01 as an acid record drawn as the pyridinium cation
    (17887) and 8.6 as a base record drawn as the phenolate (17886); handbook constants 4.79
    (pyridinium) and 8.75 (OH) (Albert & Phillips, J. Chem. Soc. 1956; from memory).  Each is the step
    out of its drawn charge, not the first constant of its kind."""
    rows = pd.concat([_dwpka_rows(mirror, "acidic").loc[["17887"]], _dwpka_rows(mirror, "basic").loc[["17886"]]])
    assert rows["OriginalSmiles"].str.contains(r"\[NH\+\]").tolist() == [True, False]
    assert rows["OriginalSmiles"].str.contains(r"\[O-\]").tolist() == [False, True]
    m = curated.result.measurements.set_index("members")
    assert m.loc["dwpka:17887", "drawn_charge"] == 1 and m.loc["dwpka:17886", "drawn_charge"] == -1
    assert m.loc["dwpka:17887", "pka"] == pytest.approx(4.79, abs=0.4)
    assert m.loc["dwpka:17886", "pka"] == pytest.approx(8.75, abs=0.4)


@pytest.mark.slow
def test_compilation_records_drawn_titrated_are_later_constants(curated, mirror):
    """The compilation files 4-(pyrrolidin-1-yl)pyridine's -0.53 (record 13836) under the pyridinium
    cation: the constant of the second protonation.  4-(morpholin-4-yl)pyridine's 8.79 (11091, drawn
    neutral) is its first.  Handbook scale for 4-aminopyridines' first constant: 4-(dimethylamino)pyridine
    9.6-9.7 (Albert, Goldacre and Phillips 1948; from memory)."""
    rows = _dwpka_rows(mirror, "basic").loc[["13836", "11091"]]
    assert rows["OriginalSmiles"].str.contains(r"\[NH\+\]").tolist() == [True, False]
    m = curated.result.measurements.set_index("members")
    assert m.loc["dwpka:13836", "constant_rank"] == 2 and m.loc["dwpka:11091", "constant_rank"] == 1
    assert m.loc["dwpka:11091", "pka"] == pytest.approx(8.79)
    assert curated.result.summary["ranked_by_drawing"] > 0
