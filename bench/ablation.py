"""Ablation on the published split: which feature groups and training choices earn their place.

    python bench/ablation.py [--mirror DIR] [--only LABEL,...]
    (also: python bench/train_bench.py --ablation)

Data: the publishers' training files (dwpka *_train.csv) for fitting and cross-validation, their
test files (*_test.csv) evaluated once per variant.  The site labels are assigned once, with the
default settings, and shared by every variant, so a difference comes from the variant alone.

Figures are value-free: a molecule's predicted constant is its most acidic (acid) or most basic
(base) predicted site, compared with the measurement; the measured value never picks a site.
"molecule CV" and "scaffold CV" are 5-fold CV on the training files grouped by molecule and by
Bemis-Murcko scaffold; "test" is the published test files.  Choices are made on the CV columns,
never on the test column.  The "tuned" variant picks per-kind booster settings by molecule CV on
the training files, so its molecule-CV figure saw the answer (selection) and is marked with *.
"""
from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parents[1]

GROUPS = {  # feature-name prefix -> what the group is (features/FEATURES.md)
    "env_": "site-rooted environments",
    "type_": "site-type one-hot",
    "type_prior": "catalog prior of the site type (features.type_prior)",
    "ctx_": "site atom context",
    "res_": "resonance partners",
    "ind_": "inductive substituents by distance",
    "chg_": "Gasteiger charges",
    "hb_": "H-bond partners",
    "mol_desc": "molecule descriptors",
    "mol_fp_": "molecule Morgan counts",
}


@dataclass(frozen=True)
class Variant:
    label: str
    drop: tuple[str, ...] = ()          # GROUPS keys whose columns the model may not use
    censored: bool = True               # other sites as one-sided bounds
    prior_init: bool = False            # learn the correction to the site type's catalog prior
    seeds: int = 1                      # boosters averaged over this many seeds
    params: dict = field(default_factory=dict)   # booster settings, or {"acid": {...}, "base": {...}}


VARIANTS = [Variant("default (censored bounds)"), Variant("no censored bounds", censored=False)]
VARIANTS += [Variant(f"without {g.rstrip('_')}", drop=(g,)) for g in GROUPS]
VARIANTS += [Variant("catalog prior as start score", prior_init=True),
             Variant("3 seeds averaged", seeds=3),
             Variant("tuned per kind*")]
GRID = [{"num_leaves": nl, "min_child_samples": mc, "colsample_bytree": cs}
        for nl in (24, 48, 96) for mc in (4, 8, 16) for cs in (0.3, 0.5)]


def _columns(names: list[str], group: str) -> np.ndarray:
    names = np.array(names)
    if group == "mol_desc":
        return np.flatnonzero(np.char.startswith(names, "mol_") & ~np.char.startswith(names, "mol_fp_"))
    if group == "type_":  # the one-hot columns only
        return np.flatnonzero(np.char.startswith(names, group) & (names != "type_prior"))
    return np.flatnonzero(np.char.startswith(names, group))


class Bench:
    def __init__(self, mirror: Path):
        from pkasite.features.site_features import site_feature_names
        from pkasite.pipeline import train as T
        from pkasite.pipeline.config import load_config
        from pkasite.pipeline.workflow import curate_step, pull_step
        self.T = T
        self.cfg = load_config(REPO / "configs" / "published_split.yaml").with_overrides({"mlflow.enabled": False})
        with tempfile.TemporaryDirectory() as tmp:
            files = pull_step(self.cfg, cache=Path(tmp) / "cache", mirror=mirror)
            meas = curate_step(self.cfg, files, Path(tmp) / "curated").result.measurements
        self.prep = T.prepare(T.split_filter(meas, ["train"]), self.cfg)
        self.test = T.prepare(T.split_filter(meas, ["test"]), self.cfg)
        T.reassign_labels(self.prep, self.cfg)
        self.names = site_feature_names(self.prep.settings, self.prep.site_types)
        self.splits = {s: T.make_splits(self.prep, s, self.cfg) for s in ("molecule", "scaffold")}

    def _params(self, variant: Variant, kind: str):
        from pkasite.pipeline.config import booster_params
        p = variant.params.get(kind, variant.params) if variant.params else {}
        return replace(booster_params(self.cfg.model), **{k: v for k, v in p.items() if k not in ("acid", "base")})

    def fit_predict(self, variant: Variant, train_sets: list[np.ndarray], queries: list[tuple]) -> list[np.ndarray]:
        """For each training set (mol_ids of the training prep), predictions for its query (X, kinds, prior)."""
        from pkasite.models.regressor import fit_many
        T, prep = self.T, self.prep
        X = prep.X
        if variant.drop:
            X = X.copy()
            for g in variant.drop:
                X[:, _columns(self.names, g)] = 0.0  # constant columns: the booster cannot split on them
        cfg = self.cfg.with_overrides({"model.censored_sites": variant.censored})
        prior = prep.sites["prior"].to_numpy()
        y = prep.sites["label"].to_numpy() - (prior if variant.prior_init else 0.0)
        out = [np.zeros(len(q[0])) for q in queries]
        for kind in ("acid", "base"):
            params = self._params(variant, kind)
            jobs = [replace(T.site_job(prep, tr, cfg, only_kinds={kind}), X=X, y=y) for tr in train_sets]
            for seed in range(variant.seeds):
                regs = fit_many(jobs, params, seed=self.cfg.seed + seed)
                for o, (Xq, kq, pq), reg in zip(out, queries, regs):
                    m = kq == kind
                    o[m] += (reg.predict(Xq[m], kq[m]) + (pq[m] if variant.prior_init else 0.0)) / variant.seeds
        return out

    def _query(self, prep, rows=None):
        rows = np.arange(len(prep.sites)) if rows is None else rows
        return (prep.X[rows], prep.sites["kind"].to_numpy()[rows], prep.sites["prior"].to_numpy()[rows])

    def cv(self, variant: Variant, scheme: str) -> dict:
        T, prep = self.T, self.prep
        splits = self.splits[scheme]
        rows = [T._test_rows(prep, te) for _, _, te in splits]
        preds = self.fit_predict(variant, [tr for _, tr, _ in splits], [self._query(prep, r) for r in rows])
        site_pred = np.full(len(prep.sites), np.nan)
        for r, p in zip(rows, preds):
            site_pred[r] = p
        return self._score(prep, site_pred)

    def heldout(self, variant: Variant) -> dict:
        all_mols = np.arange(len(self.prep.table.molecules))
        (pred,) = self.fit_predict(variant, [all_mols], [self._query(self.test)])
        return self._score(self.test, pred, boot=True)

    def _score(self, prep, site_pred, boot=False) -> dict:
        from pkasite.models.metrics import bootstrap_metrics
        T = self.T
        mols = T._labels(prep)
        from pkasite.pipeline.evaluation import constants_by_mol
        strongest = constants_by_mol(prep.table, site_pred)[mols["mol_id"].to_numpy()]
        out = {}
        for kind in ("acid", "base", "all"):
            m = (mols["kind"] == kind).to_numpy() if kind != "all" else np.ones(len(mols), bool)
            r = bootstrap_metrics(mols["label"].to_numpy()[m], strongest[m], n_boot=1000 if boot else 2, seed=0)
            out[kind] = (r["rmse"], r.get("rmse_low"), r.get("rmse_high"))
        return out

    def tune(self) -> dict:
        """Per kind, the grid point with the lowest value-free molecule-CV RMSE on the training files."""
        best = {}
        for kind in ("acid", "base"):
            scores = []
            for p in GRID:
                r = self.cv(Variant("grid", params={kind: p}), "molecule")[kind][0]
                scores.append((r, p))
                print(f"    grid {kind} {p}: {r:.3f}", file=sys.stderr, flush=True)
            best[kind] = min(scores, key=lambda t: t[0])[1]
        return best


def run(mirror: Path, only: list[str] | None = None) -> pd.DataFrame:
    t0 = time.monotonic()
    bench = Bench(mirror)
    rows = []
    for variant in VARIANTS:
        if only and variant.label not in only:
            continue
        if variant.label.startswith("tuned"):
            variant = replace(variant, params=bench.tune())
        t = time.monotonic()
        mol, scaf, test = bench.cv(variant, "molecule"), bench.cv(variant, "scaffold"), bench.heldout(variant)
        rows.append({"variant": variant.label, "molecule CV": mol["all"][0], "scaffold CV": scaf["all"][0],
                     **{f"test {k}": f"{test[k][0]:.3f} ({test[k][1]:.2f}-{test[k][2]:.2f})" for k in ("acid", "base")},
                     "seconds": round(time.monotonic() - t), "settings": variant.params or ""})
        print(f"  {rows[-1]}", file=sys.stderr, flush=True)
    table = pd.DataFrame(rows)
    print(f"\nablation on the published split ({time.monotonic() - t0:.0f} s); value-free RMSE")
    print(table.round(3).to_string(index=False))
    return table


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--mirror", default=os.environ.get("PKASITE_MIRROR", REPO.parent / "shared" / "data"))
    ap.add_argument("--only", help="comma-separated variant labels")
    args = ap.parse_args()
    print(f"machine: {os.cpu_count()} cores, load average {os.getloadavg()[0]:.2f} at start")
    run(Path(args.mirror), args.only.split(",") if args.only else None)


if __name__ == "__main__":
    main()
