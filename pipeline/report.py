"""Model-validation report: one self-contained HTML file for a reviewer.

Everything is inline: CSS in a ``<style>`` block, figures as base64 PNG (matplotlib,
Agg canvas, no pyplot state), structure depictions as inline SVG (RDKit
rdMolDraw2D).  Nothing in the page refers to a network resource.

:func:`render_report` builds the page from a :class:`~pkasite.pipeline.bundle.ModelBundle`;
:func:`write_report` writes it atomically.
"""
from __future__ import annotations

import base64
import datetime as _dt
import html
import io
import os
import platform
import re
import sys
import tempfile
from importlib import metadata
from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from rdkit import Chem
from rdkit.Chem.Draw import rdMolDraw2D

from pkasite.features.sites import KINDS
from pkasite.models.calibration import ConformalCalibrator
from pkasite.models.domain import similarity_bin
from pkasite.models.splits import group_kfold

from .bundle import ModelBundle, load_bundle
from .explain import explain_sites_full, format_explanation

__all__ = ["SECTIONS", "render_report", "write_report", "coverage_curve", "calibration_curve", "worst_predictions"]

SECTIONS = (
    ("how-measured", "How these figures were measured"),
    ("summary", "Summary and cautions"),
    ("provenance", "Data provenance and licences"),
    ("curation", "Curation funnel"),
    ("assignment", "Site assignment"),
    ("cross-validation", "Cross-validation"),
    ("parity", "Predicted against measured"),
    ("residuals-by-type", "Residuals by site type"),
    ("domain", "Error and applicability domain"),
    ("calibration", "Interval calibration"),
    ("worst-predictions", "The 20 largest errors"),
    ("model-card", "Model card"),
    ("environment", "Environment and code version"),
)
MODEL_LABELS = {
    "site_model": "site model (molecule's predicted constant)",
    "type_median": "baseline: site-type median",
    "mol_morgan": "baseline: molecule Morgan GBM",
    "site_attribution_check": "site attribution check (diagnostic)",
}
HEADLINE_MODELS = ("site_model", "type_median", "mol_morgan")
DIAGNOSTIC_NOTE = ("Diagnostic, not a headline figure: the prediction at the site the measured value was attached "
                   "to. That site was chosen with the measured value itself, so for molecules with several "
                   "candidate sites this figure is optimistic by construction.")
SCHEME_LABELS = {"molecule": "grouped by molecule", "scaffold": "grouped by scaffold",
                 "site_type": "unseen site types (each held out entirely)"}
N_WORST = 20
N_TYPES = 20
CAL_LEVELS = tuple(round(x, 2) for x in np.arange(0.50, 0.951, 0.05))
ACID_COLOUR, BASE_COLOUR, INK = "#b5562b", "#2b6cb5", "#333333"

CAUTION = ("Predicted pKa values are estimates from a statistical model. They are not a substitute for "
           "measurement, least of all for decisions on safety, dosing or regulatory filings. Handle all "
           "chemicals under your local safety rules and their safety data sheets; nothing in this report is "
           "handling advice.")

CSS = """
body{font-family:system-ui,-apple-system,"Segoe UI",Roboto,"DejaVu Sans",sans-serif;margin:0;color:#222;
background:#f6f5f2;line-height:1.45;font-size:15px}
main{max-width:1120px;margin:0 auto;padding:8px 28px 60px;background:#fff;box-shadow:0 0 10px #0001}
header{padding:22px 0 6px;border-bottom:3px solid #3d5a6c}
h1{margin:0 0 4px;font-size:26px;color:#233a48}
h2{margin:34px 0 10px;font-size:20px;color:#233a48;border-bottom:1px solid #d8dde0;padding-bottom:4px}
h3{font-size:16px;margin:18px 0 6px;color:#3d5a6c}
.sub{color:#5b6770;font-size:14px}
nav{font-size:13px;margin:12px 0 0;display:flex;flex-wrap:wrap;gap:4px 14px}
nav a{color:#3d5a6c;text-decoration:none}
nav a:hover{text-decoration:underline}
table{border-collapse:collapse;margin:8px 0 14px;font-size:13px}
th,td{border-bottom:1px solid #e3e6e8;padding:4px 9px;text-align:left;vertical-align:top}
th{background:#eef1f3;font-weight:600}
td.num,th.num{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
tr.best td{font-weight:600}
tr.first td{border-top:2px solid #c9d0d4}
.caution{background:#fff7e0;border-left:5px solid #d9a400;padding:10px 14px;margin:12px 0}
.banner{background:#8e1b1b;color:#fff;padding:12px 16px;font-weight:700;font-size:16px;margin:14px 0;
border-radius:3px}
.cards{display:flex;flex-wrap:wrap;gap:12px;margin:10px 0}
.card{border:1px solid #d8dde0;border-radius:4px;padding:8px 14px;min-width:150px}
.card .v{font-size:22px;font-weight:650;color:#233a48}
.card .k{font-size:12px;color:#5b6770}
figure{margin:10px 0 18px}
figure img{max-width:100%;height:auto;border:1px solid #eceeef}
figcaption{font-size:13px;color:#5b6770;margin-top:4px;max-width:900px}
.depict svg{width:200px;height:150px;display:block}
td.expl{font-size:12px;max-width:380px}
pre{background:#f3f4f5;padding:10px;overflow-x:auto;font-size:12px;white-space:pre-wrap}
.muted{color:#7a848b}
details summary{cursor:pointer;color:#3d5a6c}
"""

# ----------------------------------------------------------------------------- small helpers


def _e(x) -> str:
    return html.escape("" if x is None else str(x))


def _num(x, digits=2) -> str:
    try:
        v = float(x)
    except (TypeError, ValueError):
        return _e(x)
    if not np.isfinite(v):
        return "-"
    return f"{v:.{digits}f}"


def _table(header: list[str], rows: list[list], numeric: set[int] = frozenset(), row_class=None,
           classes: dict[int, str] | None = None) -> str:
    classes = dict(classes or {})
    for i in numeric:
        classes[i] = (classes.get(i, "") + " num").strip()
    head = "".join(f'<th class="num">{_e(h)}</th>' if i in numeric else f"<th>{_e(h)}</th>"
                   for i, h in enumerate(header))
    body = []
    for r, row in enumerate(rows):
        cls = f' class="{row_class(r)}"' if row_class and row_class(r) else ""
        cells = "".join(f'<td class="{classes[i]}">{c}</td>' if i in classes else f"<td>{c}</td>"
                        for i, c in enumerate(row))
        body.append(f"<tr{cls}>{cells}</tr>")
    return f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _figure(fig: Figure, alt: str, caption: str = "") -> str:
    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100, bbox_inches="tight", facecolor="white")
    data = base64.b64encode(buf.getvalue()).decode("ascii")
    cap = f"<figcaption>{caption}</figcaption>" if caption else ""
    return f'<figure><img alt="{_e(alt)}" src="data:image/png;base64,{data}">{cap}</figure>'


def _new_fig(w: float, h: float, ncols: int = 1):
    fig = Figure(figsize=(w, h))
    axes = [fig.add_subplot(1, ncols, i + 1) for i in range(ncols)]
    for ax in axes:
        ax.spines[["top", "right"]].set_visible(False)
        ax.tick_params(labelsize=9)
    return fig, axes


def _missing(what: str) -> str:
    return f'<p class="muted">{_e(what)} is not stored in this bundle.</p>'


def depict_svg(smiles: str, atom: int | None, size=(200, 150)) -> str:
    """Inline SVG of a structure with the site atom highlighted (no XML header)."""
    mol = Chem.MolFromSmiles(smiles)
    if mol is None:
        return '<span class="muted">(cannot draw)</span>'
    drawer = rdMolDraw2D.MolDraw2DSVG(*size)
    opts = drawer.drawOptions()
    opts.clearBackground = True
    opts.addStereoAnnotation = False
    opts.fixedBondLength = 26  # small molecules stay at a readable size instead of filling the box
    highlight = [int(atom)] if atom is not None and 0 <= int(atom) < mol.GetNumAtoms() else []
    colours = {a: (0.95, 0.55, 0.2) for a in highlight}
    rdMolDraw2D.PrepareAndDrawMolecule(drawer, mol, highlightAtoms=highlight, highlightAtomColors=colours,
                                       highlightBonds=[])
    drawer.FinishDrawing()
    svg = drawer.GetDrawingText()
    return re.sub(r"^<\?xml[^>]*>\s*", "", svg).replace("\n", " ")


# ----------------------------------------------------------------------------- computations


def coverage_curve(residuals: pd.DataFrame) -> pd.DataFrame:
    """RMSE of the sites at or above each similarity threshold against the share of sites kept."""
    r = residuals.dropna(subset=["similarity", "residual"]).sort_values("similarity", ascending=False)
    if r.empty:
        return pd.DataFrame(columns=["threshold", "kept", "share_kept", "rmse"])
    sim = r["similarity"].to_numpy()
    sq = np.cumsum(r["residual"].to_numpy() ** 2)
    n = np.arange(1, len(r) + 1)
    last = np.r_[sim[1:] != sim[:-1], True]          # keep ties together: one point per distinct threshold
    return pd.DataFrame({"threshold": sim[last], "kept": n[last], "share_kept": n[last] / len(r),
                         "rmse": np.sqrt(sq[last] / n[last])})


def calibration_curve(residuals: pd.DataFrame, levels=CAL_LEVELS, folds: int = 5, seed: int = 0,
                      min_group: int = 50) -> pd.DataFrame:
    """Observed coverage of split-conformal intervals on held-out molecule folds of the CV residuals.

    For each fold (grouped by ``mol_id``) a :class:`ConformalCalibrator` is fitted on the other
    folds' residuals, per similarity bin as in prediction (``binned``) and with one pooled group
    (``pooled``); coverage is the share of held-out residuals inside the half-width.
    """
    res = residuals.dropna(subset=["similarity", "residual"]).reset_index(drop=True)
    r = res["residual"].to_numpy()
    bins = similarity_bin(res["similarity"].to_numpy())
    pooled = np.full(len(res), "all")
    rows = []
    covered = {name: np.zeros((len(levels), len(res)), bool) for name in ("binned", "pooled")}
    width = {name: np.zeros((len(levels), len(res))) for name in ("binned", "pooled")}
    for tr, te in group_kfold(res["mol_id"].to_numpy(), folds, seed):
        for name, groups in (("binned", bins), ("pooled", pooled)):
            cal = ConformalCalibrator(levels=tuple(levels), min_group=min_group).fit(r[tr], groups[tr])
            for k, lv in enumerate(levels):
                half = cal.half_width(groups[te], lv)
                covered[name][k, te] = np.abs(r[te]) <= half
                width[name][k, te] = half
    for k, lv in enumerate(levels):
        rows.append({"nominal": lv, "observed_binned": covered["binned"][k].mean(),
                     "observed_pooled": covered["pooled"][k].mean(),
                     "mean_half_width_binned": width["binned"][k].mean(),
                     "mean_half_width_pooled": width["pooled"][k].mean()})
    return pd.DataFrame(rows)


def _site_atom(row) -> int | None:
    """The site the prediction came from (value-free bundles), else the attached site."""
    atom = row.get("pred_atom") if hasattr(row, "get") else None
    if atom is None or (isinstance(atom, float) and np.isnan(atom)) or atom == -1:
        atom = row.get("atom") if hasattr(row, "get") else None
    if atom is not None and not (isinstance(atom, float) and np.isnan(atom)):
        return int(atom)
    # older bundles without an atom column: the first catalogue site of the labeled type
    from pkasite.features.sites import find_sites
    mol = Chem.MolFromSmiles(row["smiles"])
    if mol is None:
        return None
    for s in find_sites(mol):
        if s.type == row["site_type"] and s.kind == row["kind"]:
            return int(s.atom)
    return None


def worst_predictions(bundle: ModelBundle, n: int = N_WORST) -> pd.DataFrame:
    """The ``n`` largest |pred_site_model - label| of the molecule scheme, with an explanation each."""
    cvp = bundle.cv_predictions
    mol_cv = cvp[cvp["scheme"] == "molecule"].dropna(subset=["pred_site_model", "label"]).copy()
    mol_cv["error"] = mol_cv["pred_site_model"] - mol_cv["label"]
    worst = mol_cv.reindex(mol_cv["error"].abs().sort_values(ascending=False).index).head(n).reset_index(drop=True)
    worst["site_atom"] = [_site_atom(row) for _, row in worst.iterrows()]
    items, where = [], []
    for i, row in worst.iterrows():
        mol = Chem.MolFromSmiles(row["smiles"])
        if mol is not None and row["site_atom"] is not None and row["kind"] in KINDS:
            stype = row.get("pred_site_type") or row["site_type"]
            items.append((mol, int(row["site_atom"]), row["kind"], stype))
            where.append(i)
    expl = [""] * len(worst)
    final = [np.nan] * len(worst)
    if items:
        full = explain_sites_full(bundle, items)
        for i, e in zip(where, full):
            if e is not None:
                expl[i] = format_explanation(e.top(4))
                final[i] = e.prediction
    worst["explanation"] = expl
    worst["final_pred"] = final
    return worst


# ----------------------------------------------------------------------------- sections


def _how_measured(bundle: ModelBundle) -> str:
    card = bundle.card
    text = card.get("how_measured")
    if not text:
        return ('<p class="muted">This bundle was trained before value-free validation figures; its headline '
                "figures may use the measured value to choose a site. Retrain it for figures a reviewer can "
                "rely on.</p>")
    held = card.get("heldout") or {}
    extra = ""
    if held:
        extra = ("<p>Held out: the measurements of the configured evaluation split were never used for fitting, "
                 "label assignment or calibration; they were predicted once by the final model.</p>")
    return f"<p>{_e(text)}</p>{extra}"


def _summary(bundle: ModelBundle) -> str:
    card = bundle.card
    cards = [("measurements", card.get("n_measurements")), ("molecules with a site", card.get("n_molecules"))]
    m = bundle.cv_metrics
    if m is not None:
        sel = m[(m.subset == "overall") & (m.model == "site_model")].set_index("scheme")
        labels = {"molecule": "CV RMSE, molecule folds", "scaffold": "CV RMSE, scaffold folds",
                  "site_type": "CV RMSE, unseen site type"}
        for scheme, label in labels.items():
            if scheme in sel.index:
                cards.append((label, f"{sel.loc[scheme].rmse:.2f}"))
        if "molecule" in sel.index:
            cards.append(("within 1 log unit (molecule folds)", f"{100 * sel.loc['molecule'].within_1:.0f}%"))
        base = m[(m.scheme == "molecule") & (m.subset == "overall")].set_index("model")
        for b in ("type_median", "mol_morgan"):
            if b in base.index:
                cards.append((f"RMSE {MODEL_LABELS[b]}", f"{base.loc[b].rmse:.2f}"))
    held = card.get("heldout") or {}
    for kind in KINDS:
        if f"test_rmse_{kind}" in held:
            cards.append((f"held-out test RMSE, {kind}", f"{held[f'test_rmse_{kind}']:.2f}"))
    cov = bundle.coverage
    if cov is not None and len(cov):
        where = "held-out test" if (cov["where"] == "held-out test").any() else "molecule CV (cross-fitted)"
        c = cov[(cov["where"] == where) & (cov["level"] == "molecule") & (cov["nominal"] == cov["nominal"].max())]
        if len(c):
            cards.append((f"{int(100 * c.nominal.iloc[0])}% interval of the molecule's constant, observed "
                          f"coverage {' / '.join(c.kind)} ({where})", " / ".join(f"{100 * x:.0f}%" for x in c.observed)))
    cards.append(("domain similarity threshold", _num(bundle.domain.get("threshold"))))
    tiles = "".join(f'<div class="card"><div class="v">{_e(v)}</div><div class="k">{_e(k)}</div></div>'
                    for k, v in cards)
    return (f"<p>{_e(card.get('intended_use', ''))}</p><div class=\"cards\">{tiles}</div>"
            f'<div class="caution"><strong>Caution.</strong> {_e(CAUTION)}</div>'
            "<p>Every figure on these cards is value-free: the molecule's predicted constant against its measured "
            "value. Cross-validation numbers are out-of-fold: every value was predicted by a model that did not see "
            "that molecule (or scaffold, or site type). RMSE, MAE and R<sup>2</sup> are in pKa log units; "
            "bracketed ranges are bootstrap 95% intervals.</p>")


def _provenance(bundle: ModelBundle) -> str:
    card = bundle.card
    out = []
    if card.get("non_commercial"):
        srcs = ", ".join(card.get("non_commercial_sources") or []) or "a non-commercial source"
        out.append(f'<div class="banner">NON-COMMERCIAL USE ONLY: this model was trained on data licensed for '
                   f"non-commercial use ({_e(srcs)}). Do not use it or its predictions commercially.</div>")
    by_source = (bundle.curation or {}).get("rows_in_by_source", {})
    rows = [[f"<strong>{_e(s.get('name'))}</strong>", _e(s.get("licence")), _e(s.get("citation")),
             _e(by_source.get(s.get("name"), "-"))] for s in card.get("sources", [])]
    out.append(_table(["source", "licence", "citation", "rows read"], rows, numeric={3}))
    out.append(f"<p>Dataset sha256 (the curated measurements the model was trained on): "
               f"<code>{_e(card.get('dataset_sha256'))}</code></p>")
    return "".join(out)


def _curation(bundle: ModelBundle) -> str:
    cur = bundle.curation
    if not cur:
        return _missing("The curation summary")
    rows = [["rows read", f"{cur.get('rows_in', 0):,}"]]
    rows += [[f"&nbsp;&nbsp;from {_e(k)}", f"{v:,}"] for k, v in cur.get("rows_in_by_source", {}).items()]
    rows += [["rows rejected", f"{cur.get('rows_rejected', 0):,}"]]
    reasons = sorted(cur.get("rejected_by_reason", {}).items(), key=lambda kv: -kv[1])
    rows += [[f"&nbsp;&nbsp;{_e(k)}", f"{v:,}"] for k, v in reasons]
    rows += [["rows kept", f"{cur.get('rows_kept', 0):,}"],
             ["measurements (after merging replicates)", f"{cur.get('measurements', 0):,}"]]
    rows += [[f"&nbsp;&nbsp;{_e(k)}", f"{v:,}"] for k, v in cur.get("measurements_by_kind", {}).items()]
    rows += [["replicate groups (n &gt; 1)", f"{cur.get('replicate_groups', 0):,}"],
             ["flagged conflicting replicates", f"{cur.get('flagged_conflicts', 0):,}"],
             ["kind suspects (the value fits only a site of the other kind by the catalog's ranges)",
              f"{cur.get('kind_suspects', 0):,}"]]
    if "kind_suspects_withheld" in bundle.card:
        rows += [["&nbsp;&nbsp;of them withheld from fitting and cross-validation (train.fit_kind_suspects: "
                  "false; a held-out evaluation keeps them)", f"{bundle.card['kind_suspects_withheld']:,}"]]
    # how each measurement meets its prediction in the value-free figures; none of these reads the value
    rows += [["later constants (rank 2 or more of their kind; compared with that macro constant)",
              f"{cur.get('later_constants_kept', 0):,}"],
             ["drawn against their kind (compared with the step out of the drawn charge)",
              f"{cur.get('drawn_against_kind', 0):,}"],
             ["site named by the source's name of the titrating group (compared with that site)",
              f"{cur.get('sites_from_groups', 0):,}"]]
    fig, (ax1, ax2) = _new_fig(10, max(2.6, 0.32 * (len(reasons) + 2)), ncols=2)
    stages = [("read", cur.get("rows_in", 0)), ("kept", cur.get("rows_kept", 0)),
              ("measurements", cur.get("measurements", 0))]
    ax1.barh([s for s, _ in stages][::-1], [v for _, v in stages][::-1], color="#3d5a6c")
    for i, (_, v) in enumerate(stages[::-1]):
        ax1.text(v, i, f" {v:,}", va="center", fontsize=9)
    ax1.set_title("funnel (rows)", fontsize=10)
    if reasons:
        ax2.barh([k for k, _ in reasons][::-1], [v for _, v in reasons][::-1], color="#b5562b")
        for i, (_, v) in enumerate(reasons[::-1]):
            ax2.text(v, i, f" {v:,}", va="center", fontsize=8)
    ax2.set_title("rejections by reason", fontsize=10)
    fig.tight_layout()
    return (_table(["step", "rows"], rows, numeric={1})
            + _figure(fig, "curation funnel", "Left: rows read, kept and merged into measurements. Right: why "
                      "rows were rejected; every rejected row is listed with its reason in the rejects table."))


def _assignment(bundle: ModelBundle) -> str:
    a = bundle.card.get("assignment") or {}
    if not a:
        return _missing("Site-assignment statistics")
    rows = [["measurements", a.get("measurements")], ["attached to a site", a.get("assigned")],
            ["no ionizable site of the measured kind", a.get("no_site")],
            ["one candidate site", a.get("single_candidate")],
            ["several candidate sites", a.get("multiple_candidates")],
            ["site atom given in the data", a.get("explicit_site_atom")],
            ["mean assignment confidence", _num(a.get("mean_confidence"))],
            ["labels moved per re-assignment round", _e(", ".join(str(x) for x in a.get("moved_per_round", [])))]]
    out = ("<p>A molecule-level constant belongs to one site: the most acidic site for an acid constant, the most "
           "basic for a base constant, among the sites whose type can carry the measured value (catalog range "
           "widened by the assignment tolerance). Labels start at the site-type prior and are moved by the model's "
           "own out-of-fold predictions for a few rounds; a site given in the data never moves. The rounds run once "
           "on all training molecules, before cross-validation, so a molecule a CV fold later holds out has "
           "already taken part, through its value, in choosing which site its neighbours' values belong to. "
           "No prediction of a held-out molecule reads its own value, but the CV figures are not entirely "
           "blind to it (bench/nested_assignment.py, which redoes the assignment inside each fold, measured "
           "about 0.01 log units of RMSE on the publishers' training files); a held-out evaluation split, "
           "when the run has one, is.</p>" + _table(["", "count"], [[_e(k), _e(v)] for k, v in rows],
                                                                  numeric={1}))
    by_type = sorted((a.get("labels_by_type") or {}).items(), key=lambda kv: -kv[1])[:N_TYPES]
    if by_type:
        fig, (ax,) = _new_fig(8, 0.25 * len(by_type) + 0.8)
        ax.barh([k for k, _ in by_type][::-1], [v for _, v in by_type][::-1], color="#5f7f91")
        ax.set_xlabel("labeled sites", fontsize=9)
        fig.tight_layout()
        out += _figure(fig, "labels by site type", f"Labeled sites per site type (the {len(by_type)} most frequent).")
    return out


def _cv(bundle: ModelBundle) -> str:
    m = bundle.cv_metrics
    if m is None:
        return _missing("The cross-validation table")
    out = ["<p>Fold schemes of the same job: folds grouped by molecule, grouped by Bemis-Murcko scaffold, and "
           "folds that hold whole site types out of training (unseen site types). Both baselines run on the same folds and are scored the same value-free way. "
           "The lowest RMSE of each block is in bold.</p>"]
    header = ["model", "n", "RMSE [95% CI]", "MAE [95% CI]", "R\u00b2 [95% CI]", "within 1", "within 2"]

    def ci(r, k, d=2):
        return f"{_num(r[k], d)} <span class=\"muted\">[{_num(r.get(k + '_low'), d)}, {_num(r.get(k + '_high'), d)}]</span>"

    def block_table(ms, models, mark_best):
        rows, flags = [], []
        for subset in ("overall", "kind:acid", "kind:base"):
            block = ms[(ms.subset == subset) & ms.model.isin(models)].copy()
            if block.empty:
                continue
            block["order"] = block.model.map({k: i for i, k in enumerate(MODEL_LABELS)}).fillna(99)
            block = block.sort_values("order")
            best = block.rmse.idxmin()
            for j, (idx, r) in enumerate(block.iterrows()):
                rows.append([f"<strong>{_e(subset.replace('kind:', ''))}</strong>" if j == 0 else "",
                             _e(MODEL_LABELS.get(r.model, r.model)), _e(int(r.n)), ci(r, "rmse"), ci(r, "mae"),
                             ci(r, "r2"), f"{100 * r.within_1:.0f}%", f"{100 * r.within_2:.0f}%"])
                flags.append(("best " if mark_best and idx == best else "") + ("first" if j == 0 else ""))
        return _table(["molecules"] + header, rows, numeric={2, 3, 4, 5, 6, 7},
                      row_class=lambda i, f=flags: f[i].strip()) if rows else ""

    diagnostics = []
    for scheme in ("molecule", "scaffold", "site_type"):
        ms = m[m.scheme == scheme]
        if ms.empty:
            continue
        out.append(f"<h3>{_e(SCHEME_LABELS.get(scheme, scheme))}</h3>" + block_table(ms, HEADLINE_MODELS, True))
        diag = block_table(ms, ("site_attribution_check",), False)
        if diag:
            diagnostics.append(f"<h4>{_e(SCHEME_LABELS.get(scheme, scheme))}</h4>" + diag)
    if diagnostics:
        out.append(f"<h3>Site attribution check (diagnostic)</h3><p>{_e(DIAGNOSTIC_NOTE)}</p>"
                   + "<details><summary>tables</summary>" + "".join(diagnostics) + "</details>")
    return "".join(out)


def _parity(bundle: ModelBundle) -> str:
    cvp = bundle.cv_predictions
    if cvp is None:
        return _missing("Out-of-fold predictions")
    d = cvp[(cvp.scheme == "molecule")].dropna(subset=["pred_site_model", "label"])
    kinds = [k for k in KINDS if (d.kind == k).any()]
    fig, axes = _new_fig(5 * max(1, len(kinds)), 4.8, ncols=max(1, len(kinds)))
    for ax, kind in zip(axes, kinds):
        s = d[d.kind == kind]
        lo = float(min(s.label.min(), s.pred_site_model.min())) - 0.5
        hi = float(max(s.label.max(), s.pred_site_model.max())) + 0.5
        ax.fill_between([lo, hi], [lo - 1, hi - 1], [lo + 1, hi + 1], color="#dddddd", alpha=0.6, lw=0,
                        label="within 1 log unit")
        ax.plot([lo, hi], [lo, hi], color=INK, lw=0.8)
        ax.scatter(s.label, s.pred_site_model, s=9, alpha=0.5, lw=0,
                   color=ACID_COLOUR if kind == "acid" else BASE_COLOUR)
        rmse = float(np.sqrt(np.mean((s.pred_site_model - s.label) ** 2)))
        ax.set_xlim(lo, hi)
        ax.set_ylim(lo, hi)
        ax.set_aspect("equal")
        ax.set_xlabel("measured pKa" if kind == "acid" else "measured pKaH", fontsize=9)
        ax.set_ylabel("predicted (out of fold)", fontsize=9)
        ax.set_title(f"{kind} sites: n = {len(s)}, RMSE = {rmse:.2f}", fontsize=10)
        ax.legend(fontsize=8, loc="upper left", frameon=False)
    fig.tight_layout()
    return _figure(fig, "parity plots", "Value-free out-of-fold predictions: each molecule's predicted constant of the "
                   "measured kind against its value, folds grouped by molecule. The grey band is +/- 1 log unit. Base "
                   "values are pKa of the conjugate acid.")


def _level(residuals: pd.DataFrame, level: str) -> pd.DataFrame:
    """Rows of one residual level (older bundles have one level, value-attached, without the column)."""
    return residuals[residuals["level"] == level] if "level" in residuals.columns else residuals


def _residuals_by_type(bundle: ModelBundle) -> str:
    r = _level(bundle.residuals, "molecule").dropna(subset=["residual"])
    if r.empty:
        return _missing("Residuals")
    counts = r.site_type.value_counts().head(N_TYPES)
    types = list(counts.index)
    med = {t: r.loc[r.site_type == t, "residual"].median() for t in types}
    data = [r.loc[r.site_type == t, "residual"].to_numpy() for t in types][::-1]
    labels = [f"{t} (n={counts[t]})" for t in types][::-1]
    fig, (ax,) = _new_fig(9, 0.32 * len(types) + 1.2)
    ax.boxplot(data, orientation="horizontal", widths=0.6, showfliers=True, patch_artist=True,
               boxprops={"facecolor": "#dfe7ec", "edgecolor": "#3d5a6c"},
               medianprops={"color": "#b5562b", "lw": 1.5}, flierprops={"markersize": 3, "alpha": 0.5})
    ax.set_yticks(range(1, len(labels) + 1))
    ax.set_yticklabels(labels, fontsize=8)
    ax.axvline(0, color=INK, lw=0.8)
    ax.set_xlabel("residual = predicted - measured (log units)", fontsize=9)
    fig.tight_layout()
    rows = [[_e(t), _e(int(counts[t])), _num(med[t]),
             _num(np.sqrt(np.mean(r.loc[r.site_type == t, "residual"] ** 2)))] for t in types]
    return (_figure(fig, "residuals by site type", f"Value-free out-of-fold residuals (molecule folds) of the molecules' "
                    f"predicted constants, grouped by the type of the site the constant came from, for the {len(types)} "
                    "most frequent types. A box off zero means the model is biased for that type.")
            + "<details><summary>table</summary>" + _table(["site type", "n", "median residual", "RMSE"], rows,
                                                            numeric={1, 2, 3}) + "</details>")


def _domain(bundle: ModelBundle) -> str:
    r = _level(bundle.residuals, "site").dropna(subset=["similarity", "residual"])
    if r.empty:
        return _missing("Residuals with similarity")
    thr = float(bundle.domain.get("threshold", np.nan))
    target = bundle.domain.get("target_rmse")
    curve = coverage_curve(r)
    fig, (ax1, ax2) = _new_fig(11, 4.2, ncols=2)
    colours = np.where(r.kind == "acid", ACID_COLOUR, BASE_COLOUR)
    ax1.scatter(r.similarity, r.residual.abs(), s=8, alpha=0.45, lw=0, c=colours)
    ax1.axvline(thr, color=INK, ls="--", lw=1)
    ax1.text(thr, ax1.get_ylim()[1] * 0.95, f" threshold {thr:.2f}", fontsize=8, va="top")
    ax1.set_xlabel("similarity to the nearest training site (Tanimoto)", fontsize=9)
    ax1.set_ylabel("|residual| (log units)", fontsize=9)
    ax1.set_title("error against applicability-domain score", fontsize=10)
    ax2.plot(curve.share_kept, curve.rmse, color="#3d5a6c", lw=1.5)
    if len(curve):
        at = curve[curve.threshold >= thr]
        if len(at):
            p = at.iloc[-1]
            ax2.plot([p.share_kept], [p.rmse], "o", color="#b5562b")
            ax2.annotate(f"threshold {thr:.2f}: {100 * p.share_kept:.0f}% kept, RMSE {p.rmse:.2f}",
                         (p.share_kept, p.rmse), textcoords="offset points", xytext=(-10, 14), fontsize=8, ha="right")
    if target is not None:
        ax2.axhline(float(target), color="#999999", ls=":", lw=1)
        ax2.text(0.02, float(target), f"target RMSE {float(target):.1f}", fontsize=8, ha="left", va="bottom",
                 color="#777777")
    ax2.set_xlim(0, 1.02)
    ax2.set_xlabel("share of sites kept (similarity at or above the threshold)", fontsize=9)
    ax2.set_ylabel("RMSE of kept sites", fontsize=9)
    ax2.set_title("coverage curve", fontsize=10)
    fig.tight_layout()
    rows = []
    for t in (0.3, 0.5, 0.7, thr, 0.9):
        if not np.isfinite(t):
            continue
        kept = r[r.similarity >= t]
        rows.append([_num(t), f"{100 * len(kept) / len(r):.0f}%",
                     _num(np.sqrt(np.mean(kept.residual ** 2))) if len(kept) else "-",
                     _num(np.sqrt(np.mean(r[r.similarity < t].residual ** 2))) if (r.similarity < t).any() else "-"])
    rows.sort(key=lambda x: float(x[0]))
    return (_figure(fig, "domain", "Value-free residuals of molecules whose site is known without the value (one "
                    "candidate site, or a site atom given in the data). Left: absolute out-of-fold error against the "
                    "similarity of the site's neighbourhood to the nearest training site of its kind (orange acids, "
                    "blue bases). Right: RMSE of the sites "
                    "at or above a similarity threshold against the share of sites kept; the marked point is the "
                    "bundle's domain threshold.")
            + _table(["similarity threshold", "sites kept", "RMSE kept", "RMSE dropped"], rows, numeric={0, 1, 2, 3}))


def _calibration(bundle: ModelBundle) -> str:
    out = ["<p>Split-conformal intervals by similarity bin, calibrated on value-free molecule-grouped CV residuals: "
           "site intervals (per-site <code>pka_low</code>, <code>pka_high</code>) on molecules whose site is known "
           "without the value, molecule intervals (<code>acid_pka_low</code> ... <code>base_pka_high</code>) on every "
           "molecule's predicted constant.</p>"]
    cov = bundle.coverage
    if cov is not None and len(cov):
        rows = [[_e(r.where), _e(r.level), _e(r.kind), f"{r.nominal:.2f}",
                 f"{r.observed:.3f} <span class=\"muted\">[{r.observed_low:.3f}, {r.observed_high:.3f}]</span>",
                 _num(r.mean_half_width), _e(r.n),
                 _e(f"{100 * (r.observed - r.nominal):+.1f}")] for r in cov.itertuples()]
        out.append("<h3>Nominal against observed coverage on data the calibration never saw</h3>"
                   "<p>Molecule CV (cross-fitted): each fold judged by calibrators fitted on the other folds. Scaffold "
                   "folds: residuals of the scaffold-grouped CV models, each fold judged by calibrators fitted on the "
                   "molecule-CV residuals of the other scaffold folds (new chemistry). Held-out test: the final model's "
                   "residuals on the evaluation split, judged by the shipped calibrators. Brackets: bootstrap 95% "
                   "intervals.</p>"
                   + _table(["where", "interval", "kind", "nominal", "observed [95% CI]", "mean half-width", "n",
                             "observed - nominal (points)"], rows, numeric={3, 4, 5, 6, 7}))
        miss = cov[(cov.observed - cov.nominal).abs() > 0.03]
        if len(miss):
            worst = miss.loc[(miss.observed - miss.nominal).abs().idxmax()]
            out.append(f"<p><strong>Where coverage misses by more than 3 points:</strong> "
                       f"{_e(', '.join(sorted(set(miss['where']))))}; the largest gap is "
                       f"{100 * (worst.observed - worst.nominal):+.1f} points ({_e(worst['where'])}, {_e(worst['level'])}, "
                       f"{_e(worst['kind'])}, nominal {worst['nominal']:.2f}). The intervals are calibrated on "
                       "molecule-grouped residuals; molecules from scaffolds the model has not seen are predicted "
                       "less well than that, so their intervals are too narrow. Widen them by that margin for new "
                       "chemistry, or read the scaffold-fold rows as the coverage to expect there.</p>")
        else:
            out.append("<p>Every check is within 3 points of its nominal level.</p>")
    r = bundle.residuals
    levels = ("site", "molecule") if "level" in r.columns else (None,)
    fig, axes = _new_fig(5.2 * len(levels), 4.8, ncols=len(levels))
    for ax, level in zip(axes, levels):
        res = _level(r, level) if level else r
        if res.dropna(subset=["similarity", "residual"]).mol_id.nunique() < 5:
            continue
        cal = calibration_curve(res, min_group=getattr(bundle.calibrator, "min_group", 50))
        ax.plot([0.45, 1], [0.45, 1], color=INK, lw=0.8, label="ideal")
        ax.plot(cal.nominal, cal.observed_binned, "o-", color="#b5562b", ms=4, label="per similarity bin")
        ax.plot(cal.nominal, cal.observed_pooled, "s--", color="#3d5a6c", ms=3.5, label="pooled")
        ax.set_xlim(0.45, 1)
        ax.set_ylim(0.45, 1)
        ax.set_aspect("equal")
        ax.set_title(f"{level or 'site'} intervals", fontsize=10)
        ax.set_xlabel("nominal level", fontsize=9)
        ax.set_ylabel("observed coverage (held-out folds)", fontsize=9)
        ax.legend(fontsize=8, frameon=False, loc="upper left")
    fig.tight_layout()
    out.append(_figure(fig, "calibration", "Calibration curves on the molecule-grouped CV residuals, cross-fitted (fitted "
                       "on four fifths, checked on the remaining fifth, in turn). Points on the diagonal mean the "
                       "intervals hold their stated level."))
    return "".join(out)


def _worst(bundle: ModelBundle) -> str:
    if bundle.cv_predictions is None:
        return _missing("Out-of-fold predictions")
    w = worst_predictions(bundle)
    rows = []
    for i, r in w.iterrows():
        rows.append([str(i + 1), f'<div class="depict">{depict_svg(r.smiles, r.site_atom)}</div>'
                     f'<div class="muted" style="font-size:11px;max-width:200px;word-break:break-all">'
                     f"{_e(r.smiles)}</div>",
                     _e(r.get("pred_site_type") or r.site_type) + f"<br><span class=\"muted\">{_e(r.kind)}</span>",
                     _num(r.label), _num(r.pred_site_model), _num(r.error), _num(r.final_pred),
                     _e(r.explanation)])
    table = _table(["#", "structure (predicting site highlighted)", "site type", "measured", "predicted (CV)", "error",
                    "final model", "why the final model says so (log units)"], rows, numeric={0, 3, 4, 5, 6},
                   classes={7: "expl"})
    return ("<p>The largest value-free out-of-fold errors (folds grouped by molecule): the molecule's predicted constant "
            "against its value, with the site the constant came from highlighted. The explanation lists "
            "the four largest feature-group contributions of the final model, trained on all data including this "
            "molecule, so it explains the final model's value rather than the out-of-fold one. Large errors "
            "often point at a wrongly attached label, a doubtful literature value or a chemotype the data barely "
            "covers.</p>" + f'<div class="worst">{table}</div>')


def _model_card(bundle: ModelBundle) -> str:
    card = bundle.card
    rows = [["name", card.get("name")], ["created", card.get("created")], ["code version", card.get("code_version")],
            ["intended use", card.get("intended_use")],
            ["non-commercial", "yes: " + ", ".join(card.get("non_commercial_sources") or [])
             if card.get("non_commercial") else "no"],
            ["measurements", card.get("n_measurements")], ["molecules", card.get("n_molecules")],
            ["dataset sha256", card.get("dataset_sha256")]]
    out = [_table(["field", "value"], [[_e(k), _e(v)] for k, v in rows])]
    if card.get("heldout"):
        out.append("<h3>Held-out evaluation</h3>" + _table(
            ["metric", "value"], [[_e(k), _num(v, 3) if isinstance(v, float) else _e(v)]
                                  for k, v in sorted(card["heldout"].items())], numeric={1})
            + "<p>Metrics named site_attribution_check_... or unflagged_... are diagnostics that read the "
              "measured value (to choose the site, or through the kind_suspect flag that leaves out rows); "
              "test_... and baseline_... are value-free.</p>")
    out.append(f"<h3>Applicability domain and intervals</h3><p>{_e(card.get('domain_note', ''))}</p>")
    if card.get("limitations"):
        out.append("<h3>Limitations</h3><ul>" + "".join(f"<li>{_e(x)}</li>" for x in card["limitations"]) + "</ul>")
    md = bundle.path / "model_card.md" if bundle.path else None
    if md is not None and md.is_file():
        out.append(f"<details><summary>model_card.md as stored in the bundle</summary><pre>{_e(md.read_text())}"
                   "</pre></details>")
    return "".join(out)


def _version(name: str) -> str:
    try:
        return metadata.version(name)
    except metadata.PackageNotFoundError:
        return "not installed"


def _environment(bundle: ModelBundle, run_info: dict | None) -> str:
    import rdkit
    rows = [["python", sys.version.split()[0]], ["platform", platform.platform()], ["rdkit", rdkit.__version__],
            ["lightgbm", _version("lightgbm")], ["mlflow", _version("mlflow")], ["pandas", _version("pandas")],
            ["numpy", _version("numpy")], ["matplotlib", _version("matplotlib")], ["pkasite", _version("pkasite")],
            ["model code version", bundle.card.get("code_version")],
            ["bundle catalogue version", bundle.catalog_version],
            ["feature settings", bundle.settings.to_dict()],
            ["bundle folder", bundle.path],
            ["report written", _dt.datetime.now().astimezone().strftime("%Y-%m-%d %H:%M %Z")]]
    out = _table(["", "version"], [[_e(k), _e(v)] for k, v in rows])
    if run_info:
        out += "<h3>Run</h3>" + _table(["", ""], [[_e(k), _e(v)] for k, v in run_info.items()])
    return out


# ----------------------------------------------------------------------------- page


def render_report(bundle: ModelBundle, title: str | None = None, run_info: dict | None = None) -> str:
    """The whole validation report as one self-contained HTML string."""
    title = title or f"Validation report: {bundle.card.get('name', 'pkasite site model')}"
    builders = {
        "how-measured": lambda: _how_measured(bundle),
        "summary": lambda: _summary(bundle), "provenance": lambda: _provenance(bundle),
        "curation": lambda: _curation(bundle), "assignment": lambda: _assignment(bundle),
        "cross-validation": lambda: _cv(bundle), "parity": lambda: _parity(bundle),
        "residuals-by-type": lambda: _residuals_by_type(bundle), "domain": lambda: _domain(bundle),
        "calibration": lambda: _calibration(bundle), "worst-predictions": lambda: _worst(bundle),
        "model-card": lambda: _model_card(bundle), "environment": lambda: _environment(bundle, run_info),
    }
    body = [f'<section id="{sid}"><h2>{_e(head)}</h2>{builders[sid]()}</section>' for sid, head in SECTIONS]
    nav = "".join(f'<a href="#{sid}">{_e(head)}</a>' for sid, head in SECTIONS)
    banner = ""
    if bundle.card.get("non_commercial"):
        banner = '<div class="banner">NON-COMMERCIAL USE ONLY (see data provenance)</div>'
    sub = (f"model created {_e(bundle.card.get('created'))} &middot; code {_e(bundle.card.get('code_version'))}"
           f" &middot; {_e(bundle.card.get('n_measurements'))} measurements")
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"><title>{_e(title)}</title>"
            f"<style>{CSS}</style></head><body><main><header><h1>{_e(title)}</h1><div class=\"sub\">{sub}</div>"
            f"<nav>{nav}</nav></header>{banner}{''.join(body)}"
            f'<footer class="caution" style="margin-top:40px">{_e(CAUTION)}</footer></main></body></html>\n')


def write_report(bundle_path_or_bundle, out_path, run_info: dict | None = None, title: str | None = None) -> Path:
    """Render the report and write it atomically (temporary name in the same folder, then rename)."""
    bundle = bundle_path_or_bundle if isinstance(bundle_path_or_bundle, ModelBundle) \
        else load_bundle(Path(bundle_path_or_bundle))
    text = render_report(bundle, title=title, run_info=run_info)
    out = Path(out_path)
    out.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{out.name}.", suffix=".tmp", dir=out.parent)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(text)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp creates 0600; give the file ordinary permissions
        os.replace(tmp, out)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return out
