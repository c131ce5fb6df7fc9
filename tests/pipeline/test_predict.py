"""Prediction with the shipped model: chemistry checks, bad input, formats, resume, workers."""
from __future__ import annotations

import subprocess
import sys

import pandas as pd
import pytest
from rdkit import Chem

from pkasite.pipeline import batch
from pkasite.pipeline.batch import run_batch
from pkasite.pipeline.bundle import load_bundle
from pkasite.pipeline.predict import MOLECULE_COLUMNS, SITE_COLUMNS, default_model_path, predict_records

from conftest import DATA


@pytest.fixture(scope="module")
def bundle():
    return load_bundle(default_model_path())


def predict(bundle, smiles, ph=7.4):
    mols, sites = predict_records(bundle, [f"m{i}" for i in range(len(smiles))], smiles, ph=ph)
    return mols.set_index("id"), sites


# Handbook values (CRC Handbook of Chemistry and Physics, 97th ed., 25 C; from memory). The shipped
# model saw most of these molecules in training, so the check is loose: within 1 log unit.
HANDBOOK = [("CC(=O)O", "acid_pka", 4.76), ("Oc1ccccc1", "acid_pka", 9.99), ("c1ccncc1", "base_pka", 5.23),
            ("CN", "base_pka", 10.66), ("Nc1ccccc1", "base_pka", 4.60), ("OC(=O)c1ccccc1", "acid_pka", 4.20)]


@pytest.mark.parametrize("smiles,column,value", HANDBOOK)
def test_shipped_model_close_to_handbook(bundle, smiles, column, value):
    mols, _ = predict(bundle, [smiles])
    assert mols.iloc[0][column] == pytest.approx(value, abs=1.0)


def test_orderings_from_structure(bundle):
    """Orderings every organic chemist expects (common practice; inductive and resonance effects)."""
    mols, _ = predict(bundle, ["OC(=O)C(F)(F)F", "OC(=O)CCl", "CC(=O)O",            # F3C- < ClCH2- < CH3- (inductive)
                               "Oc1ccc(cc1)[N+](=O)[O-]", "Oc1ccccc1", "CCO",       # nitro resonance; phenoxide vs alkoxide
                               "CS(=O)(=O)O", "CCN(CC)CC", "c1ccncc1", "Nc1ccccc1"])
    a = mols["acid_pka"].tolist()
    b = mols["base_pka"].tolist()
    assert a[0] < a[1] < a[2]
    assert a[3] < a[4] < a[5]
    assert b[7] > b[8] and b[7] > b[9]  # aliphatic amine more basic than pyridine and aniline


def test_site_types_the_data_does_not_cover_are_flagged(bundle):
    """Sulfonic acids are fully ionized in water, so aqueous compilations carry almost no sulfonic
    acid constants (the dwpka values of sulfonated molecules belong to their phenols and oximes).
    The model cannot know a sulfonic acid's pKa from such data; it must say so instead."""
    support = bundle.domain["type_support"]["acid"].get("sulfonic_acid", 0)
    assert support < bundle.domain["min_type_support"]
    mols, sites = predict(bundle, ["CS(=O)(=O)O"])
    assert not sites.iloc[0]["in_domain"] and not mols.iloc[0]["in_domain"]
    assert f"site type sulfonic_acid has {support} training examples" in sites.iloc[0]["warnings"]


def test_sites_of_unseen_types_lean_towards_the_type_prior(bundle):
    """Oxazepam's ring N-H (a 1,4-benzodiazepin-2-one anilide) is a site type without labels in the open
    data: its prediction is blended with the catalog's typical pKa of the type by the bundle's weight;
    sites of types with labels keep the model's value."""
    from dataclasses import replace

    from pkasite.features.sites import load_catalog
    smiles = ["OC1N=C(c2ccccc2)c2cc(Cl)ccc2NC1=O"]
    plain = replace(bundle, domain={**bundle.domain, "unseen_type_weight": None})
    mixed = replace(bundle, domain={**bundle.domain, "unseen_type_weight": {"acid": 0.25, "base": 0.5}})
    _, before = predict(plain, smiles)
    ids, after = predict_records(mixed, ["m0"], smiles, explain=True)
    support, prior = bundle.domain["type_support"], load_catalog().by_name
    unseen = [support[k].get(t, 0) == 0 for k, t in zip(before["kind"], before["site_type"])]
    assert "acyl_aminoaryl_imine_nh" in set(before["site_type"][unseen])
    for new, old, is_unseen in zip(after.itertuples(), before.itertuples(), unseen):
        w = {"acid": 0.25, "base": 0.5}[old.kind] if is_unseen else 1.0
        assert new.pka == pytest.approx(w * old.pka + (1 - w) * prior[old.site_type].prior, abs=0.011)
        assert ("no training example of type" in new.explanation) == (is_unseen and w < 1)
    # the molecule-level constants come from the blended site values
    assert ids.iloc[0]["macro_pkas_all"] != predict(plain, smiles)[0].iloc[0]["macro_pkas_all"]


def test_predictions_far_outside_the_type_range_are_out_of_domain(bundle):
    """Nitrazepam's ring N-H (measured 10.8, drug data compilations, from memory) belongs to a site type
    the training data never labels; the model extrapolates it near 8, while the site catalog puts the
    type between 9.5 and 12.5, so the prediction is flagged and the site leaves the domain; phenol's O-H
    (9.99, CRC, from memory), well inside its type's range, is not flagged."""
    from dataclasses import replace
    checked = replace(bundle, domain={**bundle.domain, "range_margin": 1.0})
    unchecked = replace(bundle, domain={**bundle.domain, "range_margin": None})
    nitrazepam = "O=C1CN=C(c2ccccc2)c2cc([N+](=O)[O-])ccc2N1"
    mols, sites = predict(checked, [nitrazepam, "Oc1ccccc1"])
    ring_nh = sites[(sites["id"] == "m0") & (sites["site_type"] == "acyl_aminoaryl_imine_nh")].iloc[0]
    assert ring_nh["pka"] < 9.5 - 1.0
    assert "outside the usual range of acyl_aminoaryl_imine_nh (9.5 to 12.5)" in ring_nh["warnings"]
    assert not ring_nh["in_domain"] and not mols.loc["m0", "in_domain"]
    phenol = sites[sites["id"] == "m1"].iloc[0]
    assert "usual range" not in str(phenol["warnings"]) and phenol["in_domain"]
    _, plain = predict(unchecked, [nitrazepam])
    assert not plain["warnings"].fillna("").str.contains("usual range").any()
    assert plain["pka"].tolist() == sites[sites["id"] == "m0"]["pka"].tolist()  # values are untouched


def test_hydroxy_drawings_of_oxo_heterocycles_are_flagged(bundle):
    """2-Hydroxypyridine, 4-hydroxyquinoline, 2-mercaptopyridine and a hydroxypyrimidine are the minor
    tautomers in water (the pyridone, quinolone and thione forms predominate: Albert and Katritzky's
    tautomer studies, from memory). Site perception follows the drawing, so the drawing gets a warning;
    plain phenols (3-hydroxypyridine, 8-hydroxyquinoline, phenol) and the oxo drawings do not."""
    flagged = ["Oc1ccccn1", "Oc1ccnc2ccccc12", "Sc1ccccn1", "Cc1cc(O)nc(C)n1"]
    plain = ["O=c1cccc[nH]1", "Oc1cccnc1", "Oc1cccc2cccnc12", "Oc1ccccc1", "OC(=O)c1ccccn1"]
    mols, _ = predict(bundle, flagged + plain)
    warned = mols["warnings"].str.contains("hydroxy/mercapto tautomer", regex=False).tolist()
    assert warned == [True] * len(flagged) + [False] * len(plain)
    assert (mols["status"] == "ok").all()


def test_azole_nh_tautomers_that_differ_are_flagged_and_predicted_alike(bundle):
    """A 4(5)-substituted imidazole (histamine), a 3(5)-substituted pyrazole and a 7H/9H purine exist in
    water as a mixture of their two N-H tautomers (common practice; histamine mostly N-tau-H, from
    memory), which no drawing tells apart: both drawings are predicted as one fixed tautomer, with a
    warning.  Imidazole, pyrazole and benzimidazole, whose two tautomers are the same structure, and
    N-alkyl azoles are not flagged."""
    flagged = ["NCCc1c[nH]cn1", "NCCc1cnc[nH]1", "Cc1cc[nH]n1", "Cc1n[nH]cc1", "Nc1ncnc2[nH]cnc12",
               "Nc1ncnc2nc[nH]c12", "Cc1nn[nH]n1"]
    plain = ["c1c[nH]cn1", "c1cc[nH]n1", "c1ccc2[nH]cnc2c1", "Cn1ccnc1", "CCN"]
    mols, sites = predict(bundle, flagged + plain)
    warned = mols["warnings"].fillna("").str.contains("azole ring whose N-H tautomers", regex=False).tolist()
    assert warned == [True] * len(flagged) + [False] * len(plain)
    assert (mols["status"] == "ok").all()
    for a, b in (("m0", "m1"), ("m2", "m3"), ("m4", "m5")):  # the two drawings of one compound
        assert mols.loc[a, "macro_pkas"] == mols.loc[b, "macro_pkas"]
        assert mols.loc[a, "charge_at_ph"] == mols.loc[b, "charge_at_ph"]
        assert sorted(sites[sites["id"] == a]["pka"]) == sorted(sites[sites["id"] == b]["pka"])


def test_charge_state_and_species(bundle):
    mols, sites = predict(bundle, ["CC(=O)O", "C1CCNCC1", "NCC(=O)O"], ph=7.4)
    assert mols.loc["m0", "charge_at_ph"] == pytest.approx(-1, abs=0.05)
    assert mols.loc["m1", "charge_at_ph"] == pytest.approx(1, abs=0.05)
    assert mols.loc["m2", "charge_at_ph"] == pytest.approx(0, abs=0.1)
    assert Chem.MolFromSmiles(mols.loc["m0", "major_species"]).GetAtomWithIdx(3).GetFormalCharge() == -1
    assert mols.loc["m2", "major_species"] == "[NH3+]CC(=O)[O-]"  # zwitterion dominates at 7.4
    low, _ = predict(bundle, ["CC(=O)O"], ph=1.0)
    assert low.loc["m0", "charge_at_ph"] == pytest.approx(0, abs=0.01) and low.loc["m0", "fraction_neutral"] > 0.99
    assert (sites["pka_low"] < sites["pka"]).all() and (sites["pka"] < sites["pka_high"]).all()
    assert list(sites.columns) == SITE_COLUMNS


def test_site_atoms_refer_to_the_input_smiles(bundle):
    # salt form: the counter-ion comes first, so the acid O index must be mapped back to the input
    _, sites = predict(bundle, ["[Na+].OC(=O)c1ccccc1"])
    atom = Chem.MolFromSmiles("[Na+].OC(=O)c1ccccc1").GetAtomWithIdx(int(sites.iloc[0]["atom"]))
    assert atom.GetSymbol() == "O" and sites.iloc[0]["site_type"] == "carboxylic_acid"


def test_bad_input_rows_get_a_status_and_nothing_is_dropped(tmp_path):
    out = tmp_path / "out.csv"
    res = subprocess.run([sys.executable, "-m", "pkasite.pipeline.cli", "predict", str(DATA / "bad_inputs_invented.csv"),
                          "-o", str(out), "--sites", str(tmp_path / "sites.csv"), "--quiet"],
                         capture_output=True, text=True)
    assert res.returncode == 0, res.stderr
    assert "Traceback" not in res.stderr
    df = pd.read_csv(out, keep_default_na=False)
    src = pd.read_csv(DATA / "bad_inputs_invented.csv", keep_default_na=False)
    assert len(df) == len(src) and list(df["id"]) == list(src["compound"]) and list(df.columns) == MOLECULE_COLUMNS
    status = dict(zip(df.index, df["status"]))
    assert [status[i] for i in range(len(df))] == [
        "ok", "unreadable_smiles", "empty", "ok", "unsupported_element", "radical", "ok", "ok", "ok", "ok", "too_large",
        "unreadable_smiles", "unreadable_smiles", "ok"]
    w = df["warnings"].tolist()
    assert "mixture or salt" in w[3] and "isotope" in w[6] and "charged input" in w[7]
    assert "duplicate id (also row 1)" in w[8] and "no ionizable site" in w[9]
    # RDKit alone would read "CC O" and "CCÖ" as ethane; a CXSMILES extension after a space is fine
    assert "whitespace at position 3" in w[11] and "'CC'" in w[11] and "'Ö'" in w[12]
    assert df["acid_pka"].iloc[13] != ""


@pytest.mark.parametrize("content,message", [("", "the file is empty"),
                                             ("name,value\na,1\n", "no SMILES column found"),
                                             ("smiles\n", "header but no rows")])
def test_unusable_files_are_one_clear_error(tmp_path, content, message):
    f = tmp_path / "in.csv"
    f.write_text(content)
    res = subprocess.run([sys.executable, "-m", "pkasite.pipeline.cli", "predict", str(f), "-o", str(tmp_path / "o.csv")],
                         capture_output=True, text=True)
    assert res.returncode == 1 and "Traceback" not in res.stderr
    assert message in res.stderr and len(res.stderr.strip().splitlines()) == 1


def test_input_formats_agree(tmp_path):
    smiles = ["CC(=O)O", "c1ccncc1", "OC(=O)c1ccccc1O"]
    pd.DataFrame({"ID": ["a", "b", "c"], "SMILES": smiles}).to_csv(tmp_path / "in.tsv", sep="\t", index=False)
    pd.DataFrame({"name": ["a", "b", "c"], "smi": smiles}).to_parquet(tmp_path / "in.parquet")
    (tmp_path / "in.smi").write_text("".join(f"{s} {n}\n" for s, n in zip(smiles, "abc")))
    with Chem.SDWriter(str(tmp_path / "in.sdf")) as w:
        for s, n in zip(smiles, "abc"):
            m = Chem.MolFromSmiles(s)
            m.SetProp("_Name", n)
            w.write(m)
    results = []
    for name in ("in.tsv", "in.parquet", "in.smi", "in.sdf"):
        out = tmp_path / f"{name}.out.parquet"
        run_batch(tmp_path / name, out, default_model_path(), progress=False)
        results.append(pd.read_parquet(out))
    for df in results:
        assert list(df["id"]) == ["a", "b", "c"]
        assert df["acid_pka"].round(2).tolist()[0] == results[0]["acid_pka"].round(2).tolist()[0]
        assert df["base_pka"].round(2).tolist()[1] == results[0]["base_pka"].round(2).tolist()[1]


def _input(tmp_path, n=12):
    smiles = ["CC(=O)O", "c1ccncc1", "Oc1ccccc1", "CN", "C[C", ""] * (n // 6)
    path = tmp_path / "in.csv"
    pd.DataFrame({"smiles": smiles}).to_csv(path, index=False)
    return path


def test_interrupted_run_resumes_from_finished_chunks(tmp_path, monkeypatch):
    path = _input(tmp_path)
    clean = tmp_path / "clean.csv"
    run_batch(path, clean, default_model_path(), chunk_size=3, progress=False)
    out = tmp_path / "out.csv"
    real = batch._write_part

    def interrupted(df, target):  # Ctrl-C while the third chunk is being written
        if target.name == "mol_000002.parquet":
            raise KeyboardInterrupt
        return real(df, target)
    monkeypatch.setattr(batch, "_write_part", interrupted)
    with pytest.raises(KeyboardInterrupt):
        run_batch(path, out, default_model_path(), chunk_size=3, progress=False)
    finished = {p.name for p in (tmp_path / "out.csv.parts").glob("mol_*.parquet")}
    assert not out.exists() and {"mol_000000.parquet", "mol_000001.parquet"} <= finished
    assert "mol_000002.parquet" not in finished
    monkeypatch.setattr(batch, "_write_part", real)
    res = run_batch(path, out, default_model_path(), chunk_size=3, progress=False)
    assert res.resumed_chunks == len(finished) and res.rows == 12
    pd.testing.assert_frame_equal(pd.read_csv(out), pd.read_csv(clean))
    assert sorted(p.name for p in tmp_path.iterdir()) == ["clean.csv", "in.csv", "out.csv"]  # nothing left behind


@pytest.mark.slow
def test_worker_processes_give_the_same_table(tmp_path):
    path = _input(tmp_path, 60)
    one, two = tmp_path / "one.parquet", tmp_path / "two.parquet"
    run_batch(path, one, default_model_path(), chunk_size=7, jobs=1, progress=False)
    run_batch(path, two, default_model_path(), chunk_size=7, jobs=2, progress=False)
    a, b = pd.read_parquet(one), pd.read_parquet(two)
    assert len(a) == 60
    pd.testing.assert_frame_equal(a, b)


def test_explain_adds_chemistry_words(tmp_path):
    src = tmp_path / "in.csv"
    pd.DataFrame({"smiles": ["OC(=O)C(F)(F)F", "c1ccncc1"]}).to_csv(src, index=False)
    res = subprocess.run([sys.executable, "-m", "pkasite.pipeline.cli", "predict", str(src), "-o", str(tmp_path / "o.csv"),
                          "--sites", str(tmp_path / "s.csv"), "--explain", "--quiet"], capture_output=True, text=True)
    assert res.returncode == 0, res.stderr
    sites = pd.read_csv(tmp_path / "s.csv")
    assert "explanation" in sites.columns
    tfa = sites[sites["id"] == "row1"]["explanation"].iloc[0]
    assert ("fluorine" in tfa or "electronegativ" in tfa) and ":" in tfa  # the inductive effect is named
    bad = subprocess.run([sys.executable, "-m", "pkasite.pipeline.cli", "predict", str(src), "-o", str(tmp_path / "o.csv"),
                          "--explain"], capture_output=True, text=True)
    assert bad.returncode == 2 and "give --sites too" in bad.stderr


def test_progress_total_counts_rows_of_every_format(tmp_path):
    from pkasite.pipeline.batch import count_rows
    (tmp_path / "a.csv").write_text("id,smiles\na,CCO\nb,CCN\nc,CCC")          # no final line break
    (tmp_path / "b.smi").write_text("CCO a\nCCN b\n")
    pd.DataFrame({"smiles": ["CCO"] * 5}).to_parquet(tmp_path / "c.parquet")
    with Chem.SDWriter(str(tmp_path / "d.sdf")) as w:
        for s in ("CCO", "CCN", "CCC", "CCCl"):
            w.write(Chem.MolFromSmiles(s))
    assert [count_rows(tmp_path / n) for n in ("a.csv", "b.smi", "c.parquet", "d.sdf")] == [3, 2, 5, 4]
