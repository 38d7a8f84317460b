"""report.html: self-contained, cautions, every prior with its origin, one sentence per figure, diagnostics;
rendered in headless chromium (figures decoded, tables present, fits a phone width, prints to PDF)."""

from __future__ import annotations

import html
import importlib
import re
import shutil
import subprocess
from pathlib import Path

import pytest
import run_fakes

from uncertainty.app import report

# the module itself: the package attribute uncertainty.app.run is the API function
run_mod = importlib.import_module("uncertainty.app.run")

CHROMIUM = next((shutil.which(n) for n in ("chromium", "chromium-browser") if shutil.which(n)), None)
needs_chromium = pytest.mark.skipif(
    CHROMIUM is None, reason="headless chromium is not installed here (apt-get install -y chromium; CI installs it)")

# Flags for a machine without network: without them chromium waits on connections it cannot make.
CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                  "--disable-background-networking", "--disable-component-update", "--disable-sync",
                  "--hide-scrollbars", "--mute-audio"]

PROBE = """<script>
window.addEventListener('load', function () {
  var imgs = Array.prototype.slice.call(document.images);
  var ok = imgs.filter(function (i) {
    return i.complete && i.naturalWidth > 0 && i.getBoundingClientRect().width > 0; });
  var b = document.body;
  b.setAttribute('data-images', String(imgs.length));
  b.setAttribute('data-images-rendered', String(ok.length));
  b.setAttribute('data-tables', String(document.querySelectorAll('table tbody tr').length));
  b.setAttribute('data-overflow', String(document.documentElement.scrollWidth > window.innerWidth + 1));
  var origins = Array.prototype.slice.call(document.querySelectorAll('.origin'));
  b.setAttribute('data-origins', String(origins.length));
  b.setAttribute('data-origins-clipped', String(origins.filter(function (o) {
    return o.getBoundingClientRect().right > window.innerWidth + 1; }).length));
});
</script></body>"""


def chromium(args: list[str], tmp: Path, timeout: float = 120) -> subprocess.CompletedProcess:
    """Run headless chromium with a fresh profile; its output."""
    profile = tmp / f"profile-{len(list(tmp.glob('profile-*')))}"
    return subprocess.run([CHROMIUM, *CHROMIUM_FLAGS, f"--user-data-dir={profile}", *args], capture_output=True,
                          text=True, timeout=timeout)


@pytest.fixture(scope="module")
def bundle(tmp_path_factory):
    """A bundle from the stand-in analyses (tests/run_fakes.py)."""
    tmp = tmp_path_factory.mktemp("report")
    study = tmp / "study.toml"
    study.write_text(run_fakes.STUDY_TEXT + "\n[rank]\nbudget = 3\n")
    mp = pytest.MonkeyPatch()
    mp.setattr(run_mod, "LOADER", run_fakes.load_fake)
    mp.setattr(run_mod, "ANALYSES", {**run_mod.ANALYSES, "propagate": run_fakes.fake_propagate,
                                     "sensitivity": run_fakes.fake_sensitivity, "design": run_fakes.fake_design,
                                     "rank": run_fakes.fake_rank})
    try:
        res = run_mod.run(study, tmp / "out", progress=False)
    finally:
        mp.undo()
    return res


def test_report_is_self_contained(bundle):
    text = bundle.report_path.read_text()
    assert not re.search(r"""(src|href)\s*=\s*["'](https?:|//|file:)""", text)
    assert "<link" not in text and "@import" not in text
    assert '<meta name="viewport"' in text and "@media print" in text and "@media (max-width" in text
    figures = {Path(f["path"]).stem for r in bundle.doc["sections"].values() for f in r["files"]
               if f["kind"] == "figure"}
    assert len(figures) == 4  # propagate, sensitivity, rank, design: PNG+SVG each, embedded once
    assert text.count('<img src="data:image/svg+xml;base64,') == len(figures)


def test_report_has_cautions_priors_captions_and_diagnostics(bundle):
    text = bundle.report_path.read_text()
    assert "not a diagnostic device" in text
    assert "licensed practitioners" in text and "local protocols" in text
    for row in bundle.doc["priors"]:  # every prior used, with its origin on the row beneath it
        m = re.search(rf'<td data-label="symbol">{re.escape(row["symbol"])}</td>.*?</tr>'
                      r'<tr class="origin-row"><td[^>]*>(.*?)</td></tr>', text)
        assert m, row["symbol"]
        assert html.escape(row["origin"], quote=True) in m.group(1)
    # one sentence per figure, in its caption
    captions = re.findall(r"<figcaption>(.*?)</figcaption>", text)
    assert len(captions) == 4 and all(c.endswith(".") and c.count(". ") == 0 for c in captions)
    assert 'id="diagnostics"' in text and 'id="provenance"' in text
    assert bundle.doc["provenance"]["study_hash"] in text


def test_summary_lines_name_the_key_numbers(bundle):
    lines = bundle.summary
    jv = bundle.doc["sections"]["propagate"]["result"]["outputs"]["Jv"]
    assert any(line.startswith("Jv, individual") and report.fmt(jv["median"], 3) in line for line in lines)
    assert any("P(absorption" in line for line in lines)
    assert any("Pc, Kf" in line for line in lines)  # the ranking of the fake sensitivity
    assert any(line.startswith("Measurements that would narrow Jv most: micropipette Pc, wick Pi") for line in lines)
    assert any("42 per arm" in line for line in lines)


def test_caption_lookup():
    # each figure the analyses write (uncertainty/figures/*.py stems) gets the sentence for what it shows
    assert report.caption("infer", "inference_prior_posterior").startswith("Prior (grey) beside posterior")
    assert "each subject" in report.caption("infer", "inference_jv_subjects")
    assert "posterior predictive" in report.caption("infer", "inference_curves_obs0__volume_time_course")
    assert "perfect-information bound" in report.caption("rank", "rank_Jv", {"output": "Jv"})
    assert "Var" not in report.caption("rank", "rank_Jv") and "shortest" not in report.caption("rank", "rank_Jv")
    assert report.caption("design", "design_Kf").startswith("Simulated power")
    assert "(mu*)" in report.caption("sensitivity", "sensitivity_Jv", {"method": "morris", "output": "Jv"})
    assert "Shapley" in report.caption("sensitivity", "sensitivity_Jv", {"method": "shapley", "output": "Jv"})
    assert "(S1)" in report.caption("sensitivity", "sensitivity_Jv", {"method": "sobol", "output": "Jv"})
    assert "net_pressure" in report.caption("sensitivity", "sensitivity_net_pressure", {"output": "net_pressure"})
    assert "sample size" in report.caption("sensitivity", "sensitivity_Jv_convergence", {"method": "sobol"})
    assert report.caption("nonsense", "x")
    for sec, _, _, text in report.CAPTIONS:  # one sentence each
        assert text.endswith(".") and ". " not in text, (sec, text)


def test_gate_banner(bundle):
    doc = {**bundle.doc, "quality_gate": {"passed": False, "failed": ["propagate"], "errors": []}}
    html = report.render(doc, bundle.out_dir)
    assert "Quality gate failed" in html
    assert "Quality gate failed" not in bundle.report_path.read_text()


def _probe_copy(report_path: Path, tmp: Path) -> Path:
    """A copy of the report with a measuring script (the shipped report has no script)."""
    assert "<script" not in report_path.read_text()
    probe = tmp / "probe.html"
    probe.write_text(report_path.read_text().replace("</body>", PROBE))
    return probe


def _attrs(dom: str) -> dict[str, str]:
    body = re.search(r"<body([^>]*)>", dom).group(1)
    return dict(re.findall(r'(data-[a-z-]+)="([^"]*)"', body))


def check_in_browser(report_path: Path, tmp: Path, min_images: int) -> None:
    """Open the report in headless chromium: DOM says figures decoded and tables rendered, a screenshot
    has content, at phone width nothing overflows sideways, and it prints to PDF."""
    probe = _probe_copy(report_path, tmp)
    out = chromium(["--window-size=1200,2000", "--virtual-time-budget=5000", "--dump-dom", probe.as_uri()], tmp)
    attrs = _attrs(out.stdout)
    assert int(attrs["data-images"]) >= min_images, out.stderr[-2000:]
    assert attrs["data-images-rendered"] == attrs["data-images"]  # every embedded figure decoded and shown
    assert int(attrs["data-tables"]) >= 5
    # a phone (390 CSS px wide): the page itself does not scroll sideways (wide tables scroll in their box)
    out = chromium(["--window-size=390,844", "--virtual-time-budget=5000", "--dump-dom", probe.as_uri()], tmp)
    phone = _attrs(out.stdout)
    assert phone["data-overflow"] == "false"
    # every prior's origin reads whole on the phone's screen, not cut off inside a sideways-scrolling table
    assert int(phone["data-origins"]) >= 1 and phone["data-origins-clipped"] == "0", phone
    # screenshot: the right size and not blank
    shot = tmp / "shot.png"
    chromium(["--window-size=1000,1600", f"--screenshot={shot}", report_path.as_uri()], tmp)
    import matplotlib.image as mpimg
    import numpy as np

    img = mpimg.imread(shot)
    assert img.shape[:2] == (1600, 1000)
    ink = np.mean(img[..., :3].min(axis=2) < 0.9)  # share of pixels that are not (near) white
    assert 0.03 < ink < 0.9, ink
    # print: a PDF with more than one page
    pdf = tmp / "report.pdf"
    chromium(["--no-pdf-header-footer", f"--print-to-pdf={pdf}", report_path.as_uri()], tmp)
    data = pdf.read_bytes()
    assert data.startswith(b"%PDF") and len(re.findall(rb"/Type\s*/Page[^s]", data)) >= 2


@pytest.mark.browser
@needs_chromium
def test_report_renders_in_chromium(bundle, tmp_path):
    check_in_browser(bundle.report_path, tmp_path, min_images=4)


def test_inference_diagnostics_and_checks_are_tables(bundle):
    """Sampler diagnostics per quantity and the model checks are laid out as tables, not printed dicts."""
    infer = {"Jv": {"mean": 0.01, "sd": 0.0025, "ci95": [0.005, 0.015], "hdi95": [0.005, 0.0148]},
             "level": "the study's individual", "units": {"Jv": "mL/min/100g"},
             "diagnostics": {"r_hat_max": 1.004, "ess_bulk_min": 2649.8, "divergences": 0, "passed": True,
                             "failing": [], "per_quantity": {"Kf": {"r_hat": 1.0022, "ess_bulk": 6128.3,
                                                                    "ess_tail": 2913.1}}},
             "checks": {"prior_data_conflict": [{"observation": "observations[0]", "kind": "lymph_flow",
                                                 "label": "lymph flow", "p_tail": 0.664, "conflict": False,
                                                 "prior_predictive": {"mean": 0.025, "ci95": [-0.03, 0.11]}}],
                        "posterior_predictive": {"obs0__lymph_flow": {"observation": "observations[0]",
                                                                      "kind": "lymph_flow", "p_value_mean": 0.52,
                                                                      "coverage95": 1.0, "n": 1}},
                        "prior_sensitivity": {"Kf": {"prior": 0.0686, "likelihood": 0.0403,
                                                     "diagnosis": "prior dominates (weak likelihood)"}}},
             "identifiability": {"prior_bound": ["Pa"], "confounded": []}, "trustworthy": True}
    rec = {**bundle.doc["sections"]["propagate"], "name": "infer", "result": infer, "files": []}
    doc = {**bundle.doc, "sections": {**bundle.doc["sections"], "infer": rec}}
    page = report.render(doc, bundle.out_dir)
    diag = page[page.index('id="diagnostics"'):]
    assert "{'" not in diag and "[]" not in diag  # no Python reprs
    assert "<td>Kf</td><td class=\"num\">1.002</td><td class=\"num\">6128</td><td class=\"num\">2913</td>" in diag
    assert "<td>lymph flow</td><td>lymph_flow</td><td class=\"num\">0.664</td>" in diag  # conflict, by label
    assert "<td>lymph flow</td><td>lymph_flow</td><td class=\"num\">0.52</td>" in diag  # predictive, by label
    assert "prior dominates (weak likelihood)" in diag and "Prior sensitivity" in diag
    assert any("Jv after the observations (the study's individual)" in line and "mL/min/100g" in line
               for line in report.summary_lines(doc))
