"""`fluidshift run` runs simulation-based calibration only when the study file has a [calibrate] section, and
the report shows its rank histograms and verdict. The runner is checked against stand-ins (tests/run_fakes.py);
the calibration is a fake whose ranks are those of a conjugate normal model with the right posterior
(theta ~ N(0, 1), y ~ N(theta, 1), posterior N(y/2, 1/2): normal conditioning, common practice), so no
refit runs."""

from __future__ import annotations

import importlib
import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
import run_fakes
from click.testing import CliRunner

from uncertainty.analyses import calibrate as calibrate_mod
from uncertainty.analyses.calibrate import stats as sbc
from uncertainty.analyses.calibrate import summarise
from uncertainty.analyses.calibrate.result import CalibrationResult
from uncertainty.app import bundle as bundle_mod
from uncertainty.app.cli import main

run_mod = importlib.import_module("uncertainty.app.run")
CALLED: list[dict] = []


@dataclass
class _Section:
    replicates: int
    bins: int
    draws: int


def _fake_calibrate(study, seed=None, *, replicates, bins, draws, executor=None) -> CalibrationResult:
    CALLED.append({"replicates": replicates, "bins": bins, "draws": draws})
    rng = np.random.default_rng(seed)
    outcomes = []
    for i in range(replicates):
        theta = rng.standard_normal()
        y = theta + rng.standard_normal()
        post = y / 2 + np.sqrt(0.5) * rng.standard_normal(draws)
        lo, hi = np.quantile(post, [0.05, 0.95])
        outcomes.append({"index": i, "passed": True, "ranks": {"Pc": sbc.rank_of(theta, post, rng)},
                         "covered": {"Pc": bool(lo <= theta <= hi)}})
    s = summarise(outcomes, ["Pc"], draws, bins)
    doc = {"method": "simulation-based calibration (fake)", "model": "classic", "seed": seed,
           "replicates": replicates, "replicates_used": s["used"], "failed": 0, "failures": [], "bins": bins,
           "draws": draws, "level": "the study's individual", "alpha_per_test": s["alpha_per_test"],
           "family_alpha": sbc.FAMILY_ALPHA, "band99": s["band99"], "quantities": s["quantities"],
           "flagged": s["flagged"], "calibrated": not s["flagged"],
           "verdict": "fake verdict: consistent with calibration" if not s["flagged"] else "fake verdict: flagged",
           "notes": [], "units": {"Pc": "mmHg"}}
    return CalibrationResult(doc=doc)


@pytest.fixture
def fakes(monkeypatch):
    def load(path):
        st = run_fakes.load_fake(path)
        sec = (st.source.document or {}).get("calibrate")
        st.calibrate = _Section(**sec) if sec is not None else None
        return st

    monkeypatch.setattr(run_mod, "LOADER", load)
    monkeypatch.setattr(run_mod, "ANALYSES", {**run_mod.ANALYSES, **run_fakes.FAKES})
    monkeypatch.setattr(calibrate_mod, "calibrate", _fake_calibrate)
    run_fakes.CALLS.clear()
    CALLED.clear()


BASE = '[study]\ntitle = "calibrate in run (invented)"\nseed = 7\n[[observations]]\nkind = "measurement"\n'


def test_run_does_not_calibrate_without_the_section(fakes, tmp_path: Path) -> None:
    study = tmp_path / "s.toml"
    study.write_text(BASE)
    run_mod.run(study, tmp_path / "without", progress=False)
    assert "calibrate" not in bundle_mod.read_results(tmp_path / "without")["sections"] and not CALLED


def test_run_calibrates_with_the_section_and_reports_histograms_and_verdict(fakes, tmp_path: Path) -> None:
    study = tmp_path / "s.toml"
    study.write_text(BASE + "[calibrate]\nreplicates = 60\nbins = 4\ndraws = 19\n")
    out = tmp_path / "with"
    run_mod.run(study, out, progress=False)
    doc = bundle_mod.read_results(out)  # validated against the schema on read
    assert list(doc["sections"])[-1] == "calibrate"
    assert CALLED == [{"replicates": 60, "bins": 4, "draws": 19}]  # the section's settings
    files = {f["path"] for f in doc["sections"]["calibrate"]["files"]}
    assert {"figures/calibrate-rank_histograms.png", "tables/calibrate.csv"} <= files, files
    assert (out / "figures" / "calibrate-rank_histograms.png").read_bytes().startswith(b"\x89PNG")
    html = (out / "report.html").read_text(encoding="utf-8")
    section = html[html.index("Calibration of the inference"):]
    assert "fake verdict" in section  # the verdict, and the histogram embedded with its caption
    assert "<figure><img" in section and "<figcaption>For each quantity, how the ranks of the true values" in section
    assert any(line.startswith("Calibration (60 of 60 refits used): fake verdict") for line in doc["summary"])
    stored = json.loads((out / "results.json").read_text(encoding="utf-8"))["sections"]["calibrate"]
    assert stored["status"] == "done"


def test_check_refuses_a_calibrate_section_without_observations(tmp_path: Path) -> None:
    path = tmp_path / "s.toml"
    path.write_text('[study]\ntitle = "no data (invented)"\ntissue = "skeletal_muscle"\n'
                    "[calibrate]\nreplicates = 60\nbins = 4\ndraws = 19\n")
    result = CliRunner().invoke(main, ["check", str(path)])
    assert result.exit_code == 2
    assert "calibrate" in result.stderr and "\n" not in result.stderr.strip()
