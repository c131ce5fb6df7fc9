"""The HTML validation report of the shipped model, checked as a file and as rendered by a browser.

External references used for the checks:
- HTML Living Standard (WHATWG): ``<script src>``, ``<link href>``, ``<img src>`` and CSS ``url()`` are
  the ways a page pulls in other resources; a self-contained page has none pointing at http(s).
- Debian's ``chromium`` package (headless mode, ``--screenshot``) renders the page; the PNG is read back
  with matplotlib.
- MLflow tracking API (``MlflowClient.create_run``, ``log_artifacts``, ``list_artifacts``) for the
  run round trip.
"""
from __future__ import annotations

import re
import shutil
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from pkasite.pipeline.bundle import load_bundle
from pkasite.pipeline.cli_report import report_command
from pkasite.pipeline.predict import default_model_path
from pkasite.pipeline.report import calibration_curve, coverage_curve, render_report, write_report

pytestmark = pytest.mark.slow

CHROMIUM = Path("/usr/bin/chromium")
SECTION_IDS = ["summary", "provenance", "curation", "assignment", "cross-validation", "parity",
               "residuals-by-type", "domain", "calibration", "worst-predictions", "model-card", "environment"]


@pytest.fixture(scope="module")
def bundle():
    return load_bundle(default_model_path())


@pytest.fixture(scope="module")
def report_file(bundle, tmp_path_factory):
    out = tmp_path_factory.mktemp("report") / "report.html"
    write_report(bundle, out, run_info={"purpose": "test"})
    return out


class _Page(HTMLParser):
    """Collects ids, resource references, images, inline SVGs and table rows of a page."""

    def __init__(self):
        super().__init__()
        self.ids, self.refs, self.imgs, self.svgs, self.rows = [], [], [], 0, {}
        self.scripts = 0
        self._section = None

    def handle_starttag(self, tag, attrs):
        a = dict(attrs)
        if "id" in a and tag == "section":
            self._section = a["id"]
        if "id" in a:
            self.ids.append(a["id"])
        if tag == "script":
            self.scripts += 1
        for key in ("src", "href", "data", "poster", "srcset", "xlink:href"):
            if key in a:
                self.refs.append((tag, key, a[key]))
        if tag == "img":
            self.imgs.append(a.get("src", ""))
        if tag == "svg":
            self.svgs += 1
        if tag == "tr" and self._section:
            self.rows[self._section] = self.rows.get(self._section, 0) + 1


def _section(text: str, sid: str) -> str:
    """The HTML of the report section ``sid``."""
    section = text[text.index(f'<section id="{sid}">'):]
    return section[:section.index("</section>")]


@pytest.fixture(scope="module")
def page(report_file):
    p = _Page()
    p.feed(report_file.read_text(encoding="utf-8"))
    return p


def test_every_section_is_there_with_a_heading(page, report_file):
    text = report_file.read_text(encoding="utf-8")
    for sid in SECTION_IDS:
        assert sid in page.ids, f"section {sid} missing"
        assert re.search(rf'<section id="{sid}"><h2>[^<]+</h2>', text), f"section {sid} has no <h2>"


def test_page_is_self_contained(page, report_file):
    text = report_file.read_text(encoding="utf-8")
    external = [(t, k, v) for t, k, v in page.refs if re.match(r"\s*(https?:)?//", v)]
    assert not external, external[:5]
    assert page.scripts == 0
    assert not re.search(r"url\(\s*['\"]?(https?:)?//", text), "CSS pulls a remote resource"
    assert "@import" not in text
    for src in page.imgs:
        assert src.startswith("data:image/png;base64,")


def test_enough_figures_and_depictions(page):
    assert len(page.imgs) + page.svgs >= 6
    assert len(page.imgs) >= 5      # curation, assignment, parity, residuals, domain, calibration
    assert page.svgs >= 20          # one depiction per worst prediction


def test_worst_predictions_match_the_cv_table(bundle, report_file, page):
    """The 20 rows are the 20 largest |pred - label| of the molecule scheme, recomputed here from the bundle."""
    cvp = bundle.cv_predictions
    mol = cvp[cvp.scheme == "molecule"].dropna(subset=["pred_site_model", "label"])
    err = (mol.pred_site_model - mol.label).abs()
    top = mol.loc[err.sort_values(ascending=False).index[:20]]
    section = _section(report_file.read_text(encoding="utf-8"), "worst-predictions")
    assert page.rows["worst-predictions"] == 21          # header + 20
    assert section.count("<svg") == 20
    for smi, label, pred in zip(top.smiles, top.label, top.pred_site_model):
        assert pd.notna(smi)
        assert f"{label:.2f}" in section and f"{pred:.2f}" in section
    # every row carries an explanation with signed log-unit values
    assert len(re.findall(r'<td class="expl">[^<]*: [+-]\d+\.\d', section)) == 20


def test_cautions_and_licences(bundle, report_file):
    text = report_file.read_text(encoding="utf-8")
    assert "not a substitute for measurement" in text
    assert "local safety rules" in text
    for src in bundle.card["sources"]:
        assert src["name"] in text
    assert ("NON-COMMERCIAL USE ONLY" in text) == bool(bundle.card.get("non_commercial"))


def test_assignment_section_says_what_the_cv_figures_are_not_blind_to(report_file):
    """Label assignment reads every training value before the CV folds are drawn; the reviewer is told."""
    section = " ".join(_section(report_file.read_text(encoding="utf-8"), "assignment").split())
    assert "not entirely blind" in section and "held-out evaluation split" in section


def test_non_commercial_banner_when_the_card_says_so(bundle):
    import copy
    nc = copy.copy(bundle)
    nc.card = dict(bundle.card, non_commercial=True, non_commercial_sources=["iupac"])
    text = render_report(nc)
    assert text.count('class="banner"') >= 2 and "iupac" in text


def test_coverage_curve_by_hand():
    """RMSE of the sites at or above each threshold, computed directly."""
    r = pd.DataFrame({"similarity": [0.9, 0.8, 0.8, 0.3], "residual": [1.0, -2.0, 2.0, 4.0], "mol_id": range(4)})
    c = coverage_curve(r).set_index("threshold")
    assert list(c.index) == [0.9, 0.8, 0.3]
    assert c.loc[0.8, "kept"] == 3 and c.loc[0.8, "share_kept"] == 0.75
    assert c.loc[0.8, "rmse"] == pytest.approx(np.sqrt((1 + 4 + 4) / 3))
    assert c.loc[0.3, "rmse"] == pytest.approx(np.sqrt((1 + 4 + 4 + 16) / 4))


def test_calibration_curve_holds_its_level_on_exchangeable_residuals():
    """Split conformal guarantees coverage >= level for exchangeable data (Vovk et al., Algorithmic
    Learning in a Random World, 2005); with 4000 normal residuals it lands within a few points."""
    rng = np.random.default_rng(0)
    n = 4000
    r = pd.DataFrame({"mol_id": np.arange(n) // 2, "similarity": rng.uniform(0, 1, n),
                      "residual": rng.normal(0, 1.5, n)})
    cal = calibration_curve(r)
    assert np.all(np.abs(cal.observed_binned - cal.nominal) < 0.03)
    assert np.all(np.abs(cal.observed_pooled - cal.nominal) < 0.03)
    # half-width of the pooled 90% interval is the normal quantile 1.645 * sigma
    w90 = cal.set_index("nominal").loc[0.9, "mean_half_width_pooled"]
    assert w90 == pytest.approx(1.645 * 1.5, rel=0.06)


def test_report_renders_in_headless_chromium(report_file, tmp_path):
    if not CHROMIUM.is_file():
        pytest.fail("headless browser /usr/bin/chromium not found: install Debian's chromium package "
                    "(apt-get update && apt-get install -y chromium)")
    png = tmp_path / "shot.png"
    cmd = [str(CHROMIUM), "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
           "--disable-background-networking", "--disable-component-update", "--disable-sync",
           f"--user-data-dir={tmp_path / 'profile'}", "--window-size=1280,4000", f"--screenshot={png}",
           f"file://{report_file}"]
    proc = subprocess.run(cmd, capture_output=True, text=True, timeout=180)
    assert png.is_file(), f"no screenshot; chromium said: {proc.stderr[-800:]}"
    import matplotlib.image as mpimg
    img = mpimg.imread(str(png))[..., :3]
    assert img.shape[0] >= 3000 and img.shape[1] >= 1200
    assert img.std() > 0.05, "the page rendered blank"
    non_white = (img < 0.95).any(axis=2).mean()
    assert non_white > 0.10, f"only {non_white:.1%} of the pixels are not white"
    # the figures arrive: orange (acid) points of the parity plot or curation bars appear somewhere
    orange = ((img[..., 0] > 0.6) & (img[..., 1] < 0.45) & (img[..., 2] < 0.3)).sum()
    assert orange > 200


def test_cli_writes_the_report_for_a_bundle_folder(bundle, tmp_path):
    out = tmp_path / "r.html"
    res = CliRunner().invoke(report_command, ["--model", str(bundle.path), "-o", str(out),
                                              "--tracking-uri", f"sqlite:///{tmp_path / 'm.db'}"])
    assert res.exit_code == 0, res.output
    assert out.is_file() and '<section id="environment">' in out.read_text(encoding="utf-8")


def test_cli_errors_are_one_line(tmp_path):
    res = CliRunner().invoke(report_command, ["--model", str(tmp_path / "nothing-here"), "-o",
                                              str(tmp_path / "x.html")])
    assert res.exit_code == 1
    assert len(res.output.strip().splitlines()) == 1 and "nothing-here" in res.output
    empty = tmp_path / "empty"
    empty.mkdir()
    res = CliRunner().invoke(report_command, ["--model", str(empty), "-o", str(tmp_path / "x.html")])
    assert res.exit_code == 1 and "not a model bundle" in res.output
    assert not (tmp_path / "x.html").exists()
    res = CliRunner().invoke(report_command, ["no-such-run", "--tracking-uri",
                                              f"sqlite:///{tmp_path / 'm.db'}", "-o", str(tmp_path / "x.html")])
    assert res.exit_code == 1 and "no-such-run" in res.output
    assert len(res.output.strip().splitlines()) == 1


def test_cli_run_id_reads_the_run_model_and_logs_the_report(bundle, tmp_path):
    """A run whose artifacts hold the bundle under model/: the report is built and logged back to the run."""
    from mlflow.tracking import MlflowClient

    uri = f"sqlite:///{tmp_path / 'mlflow.db'}"
    client = MlflowClient(tracking_uri=uri)
    exp = client.create_experiment("report-test", artifact_location=(tmp_path / "artifacts").as_uri())
    run = client.create_run(exp)
    staged = tmp_path / "staged"
    shutil.copytree(bundle.path, staged / "artifacts" / "bundle")
    client.log_artifacts(run.info.run_id, str(staged), artifact_path="model")
    client.set_terminated(run.info.run_id)
    out = tmp_path / "run_report.html"
    res = CliRunner().invoke(report_command, [run.info.run_id, "--tracking-uri", uri, "-o", str(out)])
    assert res.exit_code == 0, res.output
    text = out.read_text(encoding="utf-8")
    assert run.info.run_id in text and "report-test" in text
    names = [f.path for f in client.list_artifacts(run.info.run_id)]
    assert "run_report.html" in names


def test_curation_section_says_how_records_meet_their_predictions(bundle, report_file):
    """A reviewer sees how many records are compared with a later constant, a drawn charge's step or a site
    named by the source, with the counts of the bundle's curation summary."""
    section = " ".join(_section(report_file.read_text(encoding="utf-8"), "curation").split())
    cur = bundle.curation
    for label, key in [("later constants", "later_constants_kept"), ("drawn against their kind", "drawn_against_kind"),
                       ("name of the titrating group", "sites_from_groups")]:
        assert re.search(rf"{label}[^<]*</td><td[^>]*>{cur.get(key, 0):,}<", section), label
