"""`fluidshift demo` end to end with the real analyses (once per test module): exit 0, a bundle that
validates against the results schema, intact files, posterior.nc, a report that renders in chromium,
and the same numbers from the same study and seed."""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from test_report import check_in_browser, needs_chromium

from uncertainty.app import bundle as bundle_mod
from uncertainty.core.resources import studies_dir

pytestmark = pytest.mark.slow  # PyMC sampling inside

ANALYSES = ("propagate", "sensitivity", "infer", "rank", "design", "validation")


def _fluidshift() -> list[str]:
    exe = shutil.which("fluidshift")
    return [exe] if exe else [sys.executable, "-c", "from uncertainty.app.cli import main; main()"]


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "demo-results"
    proc = subprocess.run([*_fluidshift(), "demo", "--out", str(out)], capture_output=True, text=True, timeout=1200)
    return proc, out


def test_demo_exits_0_with_summary(demo):
    proc, out = demo
    assert proc.returncode == 0, proc.stderr[-3000:]
    assert "Jv, individual" in proc.stdout and "report.html" in proc.stdout


def test_demo_bundle_validates_against_schema(demo):
    _, out = demo
    doc = bundle_mod.read_results(out)  # raises unless it matches the schema
    bundle_mod.ResultsDoc.model_validate(doc)
    assert doc["complete"] is True and doc["quality_gate"]["passed"] is True
    assert list(doc["sections"]) == ["check", *ANALYSES]
    assert all(r["status"] == "done" for r in doc["sections"].values()), {
        n: r["message"] for n, r in doc["sections"].items()}
    assert doc["study"]["hash"] == bundle_mod.sha256_file(studies_dir() / "demo.toml")
    assert doc["provenance"]["seed"] == doc["study"]["seed"]
    b = bundle_mod.Bundle(out)
    for name in ANALYSES:
        files = doc["sections"][name]["files"]
        assert all(b.intact(f) for f in files)
        assert any(f["path"].endswith(".csv") for f in files), name
        assert any(f["path"].endswith(".png") for f in files) and any(f["path"].endswith(".svg") for f in files), name
    assert (out / "posterior.nc").is_file() and (out / "report.html").is_file()
    assert not (out / ".partial").exists()
    # each result carries the keys of DESIGN.md section 5
    res = {n: doc["sections"][n]["result"] for n in ANALYSES}
    assert {"outputs", "typical", "p_absorption"} <= set(res["propagate"])
    assert {"method", "output", "indices", "ranking"} <= set(res["sensitivity"])
    assert {"Jv", "parameters", "diagnostics"} <= set(res["infer"])
    assert {"candidates", "best_pair"} <= set(res["rank"])
    assert {"n_per_arm", "power", "curve"} <= set(res["design"])


def test_demo_posterior_opens_with_arviz(demo):
    import arviz as az

    _, out = demo
    idata = az.from_netcdf(out / "posterior.nc")
    assert "posterior" in idata.groups()


@pytest.mark.browser
@needs_chromium
def test_demo_report_renders_in_chromium(demo, tmp_path):
    _, out = demo
    n_fig = len({Path(f["path"]).stem for r in bundle_mod.read_results(out)["sections"].values()
                 for f in r["files"] if f["kind"] == "figure"})
    check_in_browser(out / "report.html", tmp_path, min_images=n_fig)


def test_same_study_and_seed_same_numbers(demo, tmp_path):
    """The demo's forward sections, run again from a copy without observations (no PyMC), twice."""
    from uncertainty.app.run import run

    _, out = demo
    text = (studies_dir() / "demo.toml").read_text()
    head, _, rest = text.partition("[[observations]]")
    rest = rest[rest.index("[rank]"):]
    copy = tmp_path / "demo_no_obs.toml"
    copy.write_text(head + rest)
    a = run(copy, tmp_path / "a", progress=False).doc
    b = run(copy, tmp_path / "b", progress=False).doc
    sections = ("propagate", "sensitivity", "rank", "design")
    dump = json.dumps
    for s in sections:
        assert dump(a["sections"][s]["result"], sort_keys=True) == dump(b["sections"][s]["result"], sort_keys=True), s
    demo_doc = bundle_mod.read_results(out)
    for s in ("propagate", "sensitivity"):  # same inputs as in the demo: the same numbers as there
        assert demo_doc["sections"][s]["key"] == a["sections"][s]["key"]
        ra = {k: v for k, v in a["sections"][s]["result"].items() if k != "study"}
        rd = {k: v for k, v in demo_doc["sections"][s]["result"].items() if k != "study"}
        assert dump(ra, sort_keys=True) == dump(rd, sort_keys=True), s


def test_demo_twice_same_numbers_in_every_section(demo, tmp_path):
    """The whole demo again (PyMC sampling included) with --force into another folder: every section's
    numbers in results.json are the same as in the first run (same study, same seed)."""
    _, out = demo
    again = tmp_path / "again"
    proc = subprocess.run([*_fluidshift(), "demo", "--out", str(again), "--force", "--quiet"], capture_output=True,
                          text=True, timeout=1200)
    assert proc.returncode == 0, proc.stderr[-3000:]
    a, b = bundle_mod.read_results(out), bundle_mod.read_results(again)
    assert list(a["sections"]) == list(b["sections"]) == ["check", *ANALYSES]
    for name in a["sections"]:
        assert a["sections"][name]["key"] == b["sections"][name]["key"], name
        assert json.dumps(a["sections"][name]["result"], sort_keys=True) == json.dumps(
            b["sections"][name]["result"], sort_keys=True), name
    assert a["summary"] == b["summary"]
