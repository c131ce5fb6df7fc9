"""Macroscopic constants of molecules with several sites, against a handbook reference set.

    python bench/macro_bench.py [--model BUNDLE] [--window 0,14] [--per-molecule]

Reference: tests/data/multiconstant_reference.csv (two or more measured aqueous constants per
molecule; sources in the file).  For each molecule the model's predicted macroscopic constants inside
the window are matched one-to-one to the measured constants (minimum total absolute difference,
Hungarian algorithm; every measured constant is matched while predictions last).  Printed for the
interacting microstate model (what `pkasite predict` reports in `macro_pkas`) and, side by side, for
the same site predictions treated as independent sites (the model before interactions):

  RMSE, MAE      over matched pairs (log units)
  matched        share of measured constants that found a predicted partner
  extra 2-12     predicted constants between 2 and 12 left without a measured partner, and their
                 share of all predicted constants in 2-12

The reference molecules were never used to fit the interaction parameters (fitted on the separate
calibration set configs/site_interactions.csv).  Two things can have seen some of them, and the script
says which: the open training data (the molecule's InChIKey among the model's training molecules), and
the site catalog, whose ``source`` notes cite handbook molecules for the typical pKa (``prior``) of a
type (a parent heterocycle such as benzimidazole stands for its type) and, for a few types, the
molecules they were added for.  The table is printed for every molecule and again for the blind rest,
neither in the training data nor named in the catalog: that row is the one to quote as held-out.
"""
from __future__ import annotations

import argparse
import csv
import sys
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.optimize import linear_sum_assignment

REPO = Path(__file__).resolve().parents[1]
REFERENCE = REPO / "tests" / "data" / "multiconstant_reference.csv"


def read_reference(path: Path = REFERENCE) -> pd.DataFrame:
    lines = [ln for ln in path.read_text(encoding="utf-8").splitlines() if ln.strip() and not ln.startswith("#")]
    rows = list(csv.DictReader(lines))
    df = pd.DataFrame(rows)
    df["constants"] = df["constants"].map(lambda s: [float(x) for x in s.split(";")])
    return df


def match(pred: list[float], meas: list[float]) -> tuple[list[tuple[float, float]], list[float]]:
    """One-to-one pairs (pred, meas) with the least total |difference|, and the unmatched predictions."""
    if not pred or not meas:
        return [], list(pred)
    cost = np.abs(np.subtract.outer(np.array(pred), np.array(meas)))
    r, c = linear_sum_assignment(cost)
    used = set(r)
    return [(pred[i], meas[j]) for i, j in zip(r, c)], [p for i, p in enumerate(pred) if i not in used]


def independent_constants(sites: pd.DataFrame, window) -> list[float]:
    from pkasite.models.microstates import Microstates
    if sites.empty:
        return []
    pk, _ = Microstates(sites["pka"].to_numpy(float), sites["kind"].to_numpy()).macro_constants()
    return [float(x) for x in pk if window[0] <= x <= window[1]]


def catalog_citations(names: list[str]) -> dict[str, list[str]]:
    """Reference name -> the catalog site types whose ``source`` note names the molecule (its name before
    any parenthesis, or a name given in the parenthesis, whole words, case-insensitive)."""
    import re
    from pkasite.features.sites import load_catalog
    types = load_catalog().types
    out = {}
    for name in names:
        head, _, rest = name.partition(" (")
        aliases = [head] + [a.strip() for a in rest.rstrip(")").split(";") if a.strip() and "stereo" not in a
                            and a.strip() not in ("racemic", "trans")]
        pats = [re.compile(rf"(?<![\w-]){re.escape(a)}(?![\w-])", re.I) for a in aliases]
        out[name] = [t.name for t in types if any(p.search(t.source or "") for p in pats)]
    return out


def score(rows: list[dict], key: str) -> dict:
    pairs = [p for r in rows for p in r[f"{key}_pairs"]]
    extra = [x for r in rows for x in r[f"{key}_extra"] if 2 <= x <= 12]
    in_range = [x for r in rows for x in r[f"{key}_pred"] if 2 <= x <= 12]
    err = np.array([a - b for a, b in pairs])
    n_meas = sum(len(r["measured"]) for r in rows)
    return {"rmse": float(np.sqrt(np.mean(err ** 2))), "mae": float(np.mean(np.abs(err))),
            "matched": len(pairs) / n_meas, "extra_2_12": len(extra),
            "extra_share": len(extra) / max(len(in_range), 1), "predicted_2_12": len(in_range)}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--model", help="bundle folder (default: the shipped model)")
    ap.add_argument("--window", default="0,14")
    ap.add_argument("--per-molecule", action="store_true")
    args = ap.parse_args()
    from pkasite.pipeline.bundle import load_bundle
    from pkasite.pipeline.predict import default_model_path, predict_records
    window = tuple(float(x) for x in args.window.split(","))
    bundle = load_bundle(Path(args.model) if args.model else default_model_path())
    ref = read_reference()
    mols, sites = predict_records(bundle, ref["name"].tolist(), ref["smiles"].tolist(), window=window)
    rows = []
    for r, m in zip(ref.itertuples(), mols.itertuples()):
        inter = [float(x) for x in str(m.macro_pkas or "").split(";") if x]
        indep = independent_constants(sites[sites["id"] == r.name], window)
        row = {"name": r.name, "measured": r.constants, "status": m.status}
        for key, pred in (("interacting", inter), ("independent", indep)):
            pairs, extra = match(pred, r.constants)
            row.update({f"{key}_pred": pred, f"{key}_pairs": pairs, f"{key}_extra": extra})
        rows.append(row)
    train = set(bundle.cv_predictions["inchikey"]) if bundle.cv_predictions is not None else set()
    from rdkit import Chem
    cited = catalog_citations(ref["name"].tolist())
    for r, smiles in zip(rows, ref["smiles"]):
        r["in_training"] = Chem.MolToInchiKey(Chem.MolFromSmiles(smiles)) in train
        r["catalog"] = cited[r["name"]]
    blind = [r for r in rows if not r["in_training"] and not r["catalog"]]
    n_cited = sum(bool(r["catalog"]) for r in rows)
    print(f"reference set: {len(ref)} molecules, {sum(len(c) for c in ref['constants'])} measured constants; "
          f"{sum(r['in_training'] for r in rows)} of the molecules are in the model's training data, {n_cited} are "
          f"named in the site catalog's notes; {len(blind)} are in neither (blind); window {window}")
    table = pd.DataFrame({f"{k} ({subset})": score(sub, k) for subset, sub in (("all", rows), ("blind", blind))
                          for k in ("interacting", "independent")}).T
    print(table.to_string(float_format=lambda x: f"{x:.3f}"))
    if args.per_molecule:
        for r in rows:
            seen = ", ".join((["training data"] if r["in_training"] else [])
                             + [f"catalog: {t}" for t in r["catalog"]]) or "blind"
            print(f"{r['name']:<28} measured {r['measured']}  interacting {[round(x, 2) for x in r['interacting_pred']]}"
                  f"  independent {[round(x, 2) for x in r['independent_pred']]}  [{seen}]")


if __name__ == "__main__":
    sys.exit(main())
