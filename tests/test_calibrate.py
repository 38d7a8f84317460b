"""`fluidshift calibrate`: simulation-based calibration (Talts et al. 2018, arXiv:1804.06788) of a study.

Quick tests check the arithmetic (ranks, bins, the chi-square and coverage tests, the uniform band, the
power) against scipy.stats closed forms and against fakes of a conjugate normal model whose right
posterior is known in closed form: the right posterior passes, an overconfident one is flagged. One
slow test runs the whole machinery on a small study and checks that 1 and 2 workers give the same ranks.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from scipy import stats

import uncertainty.analyses.calibrate as calibrate_mod
from uncertainty.analyses.calibrate import calibrate, summarise
from uncertainty.analyses.calibrate import stats as sbc
from uncertainty.app.cli import main
from uncertainty.core.parallel import make_executor
from uncertainty.core.serialise import to_json
from uncertainty.study import load_study

STUDY = """
[study]
title = "one lymph reading (invented)"
tissue = "skeletal_muscle"
model = "classic"
seed = 20180406

[parameters]
Kf = { dist = "lognormal", median = 0.004, gsd = 1.3, unit = "mL/min/mmHg/100g" }
Pc = { dist = "normal", mean = 24.3, sd = 2.6, unit = "mmHg" }
Pi = -1.0
pi_c = 25.0
pi_i = 8.0
sigma = 0.9

[[observations]]
kind = "lymph_flow"
value = 0.04
sd = 0.008
unit = "mL/min/100g"
"""
# the priors, forces and reading above are invented test values


def test_thin_rank_and_bins_by_hand() -> None:
    x = np.arange(100.0)
    assert sbc.thin(x, 10).tolist() == list(range(0, 100, 10))
    assert sbc.rank_of(3.5, np.array([1.0, 2.0, 5.0])) == 2
    assert sbc.rank_of(-1.0, np.array([1.0, 2.0])) == 0 and sbc.rank_of(9.0, np.array([1.0, 2.0])) == 2
    # a tie counts below with probability 1/2: over many draws the mean rank is 1/2 (hand arithmetic)
    rng = np.random.default_rng(1)
    assert np.mean([sbc.rank_of(1.0, np.array([1.0]), rng) for _ in range(2000)]) == pytest.approx(0.5, abs=0.05)
    # ranks 0..19 in 5 bins: 4 ranks per bin
    assert sbc.bin_counts([0, 3, 4, 19, 19], 19, 5).tolist() == [2, 1, 0, 0, 2]
    assert sbc.check_bins(3, 19) is not None and sbc.check_bins(10, 99) is None
    with pytest.raises(ValueError):
        sbc.bin_counts([20], 19, 5)


def test_uniformity_and_coverage_match_scipy() -> None:
    counts = np.array([25, 18, 22, 15, 20, 19, 21, 23, 17, 20])
    got = sbc.uniformity_test(counts)
    ref = stats.chisquare(counts)
    assert got["chi2"] == pytest.approx(ref.statistic) and got["p_value"] == pytest.approx(ref.pvalue)
    cov = sbc.coverage_test(170, 200)
    assert cov["p_value"] == pytest.approx(stats.binomtest(170, 200, 0.9).pvalue)
    assert cov["range"] == [int(v) for v in stats.binom.interval(0.99, 200, 0.9)]
    assert sbc.uniform_band(200, 10) == [int(v) for v in stats.binom.interval(0.99, 200, 0.1)]


def test_power_closed_forms() -> None:
    # a calibrated posterior gives uniform bins (closed form), and then the power is the level
    assert sbc.scaled_posterior_bins(1.0, 10) == pytest.approx(np.full(10, 0.1))
    assert sbc.chi2_power(200, np.full(10, 0.1), 0.01) == pytest.approx(0.01)
    # against a direct multinomial simulation of the same test (2000 runs, +-0.035 is ~3 binomial se)
    probs = sbc.scaled_posterior_bins(0.8, 10)
    rng = np.random.default_rng(7)
    counts = rng.multinomial(200, probs, size=2000)
    crit = stats.chi2.isf(0.01, 9)
    simulated = np.mean(((counts - 20.0) ** 2 / 20.0).sum(axis=1) > crit)
    assert sbc.chi2_power(200, probs, 0.01) == pytest.approx(simulated, abs=0.035)


def _conjugate_outcomes(n: int, L: int, scale: float, seed: int) -> list[dict]:
    """Replicates of theta ~ N(0, 1), y ~ N(theta, 1), whose right posterior is N(y/2, 1/2) (closed form);
    the fake posterior is that one with its sd multiplied by ``scale``."""
    rng = np.random.default_rng(seed)
    out = []
    for i in range(n):
        theta = rng.standard_normal()
        y = theta + rng.standard_normal()
        draws = y / 2 + scale * np.sqrt(0.5) * rng.standard_normal(L)
        lo, hi = np.quantile(draws, [0.05, 0.95])
        out.append({"index": i, "passed": True, "ranks": {"theta": sbc.rank_of(theta, draws, rng)},
                    "covered": {"theta": bool(lo <= theta <= hi)}})
    return out


def test_right_posterior_passes_and_overconfident_fake_is_flagged() -> None:
    good = summarise(_conjugate_outcomes(200, 99, 1.0, seed=3), ["theta"], 99, 10)["quantities"]["theta"]
    assert not good["flagged"], good
    bad = summarise(_conjugate_outcomes(200, 99, 0.5, seed=3), ["theta"], 99, 10)
    q = bad["quantities"]["theta"]
    assert q["flagged"] and bad["flagged"] == ["theta"]
    assert q["p_value"] < 1e-6 and "too narrow" in q["verdict"]


def test_failed_replicates_are_left_out() -> None:
    outcomes = _conjugate_outcomes(60, 19, 1.0, seed=5)
    for o in outcomes[:10]:
        o["passed"], o["ranks"]["theta"] = False, 19
    s = summarise(outcomes, ["theta"], 19, 5)
    assert s["used"] == 50 and sum(s["quantities"]["theta"]["counts"]) == 50


@pytest.mark.parametrize(("flags", "key", "value"), [
    (["--bins", "7"], "--bins", "7"),
    (["--replicates", "20"], "--replicates", "20"),
    (["--replicates", "0"], "--replicates", "0"),
])
def test_bad_flags_exit_2_in_one_line(tmp_path: Path, flags: list[str], key: str, value: str) -> None:
    path = tmp_path / "s.toml"
    path.write_text(STUDY)
    result = CliRunner().invoke(main, ["calibrate", str(path), *flags])
    assert result.exit_code == 2, result.output
    line = result.stderr.strip()
    assert "\n" not in line and key in line and value in line


def test_study_without_observations_exits_2(tmp_path: Path) -> None:
    path = tmp_path / "plain.toml"
    path.write_text('[study]\ntitle = "no data (invented)"\ntissue = "skeletal_muscle"\n')
    result = CliRunner().invoke(main, ["calibrate", str(path)])
    assert result.exit_code == 2
    line = result.stderr.strip()
    assert "\n" not in line and "observations" in line


@pytest.mark.slow
def test_calibration_runs_and_is_the_same_on_two_workers(tmp_path: Path) -> None:
    path = tmp_path / "s.toml"
    path.write_text(STUDY)
    s = load_study(path)
    # small refits: 2 chains x 400 draws, gate lowered to what 800 draws of this ridge give (test scaffolding)
    opts = {"replicates": 30, "bins": 5, "draws": 19, "chains": 2, "posterior_draws": 400, "tune": 300,
            "gate": {"r_hat_max": 1.05, "ess_bulk_min": 100.0, "ess_tail_min": 100.0}}
    one = calibrate(s, **opts)
    with make_executor(workers=2) as ex:
        two = calibrate(s, executor=ex, **opts)
    doc = json.loads(to_json(one.to_dict()))
    assert {"replicates", "replicates_used", "failed", "failures", "bins", "draws", "quantities", "band99",
            "verdict", "calibrated", "units"} <= set(doc)
    assert set(doc["quantities"]) == {"Kf", "Pc", "Jv"}
    assert doc["replicates_used"] + doc["failed"] == 30 and doc["replicates_used"] >= 25
    for name, q in doc["quantities"].items():
        assert all(0 <= r <= 19 for r in q["ranks"]) and sum(q["counts"]) == doc["replicates_used"]
        assert {"p_value", "coverage90", "flagged", "verdict"} <= set(q)
        assert q["ranks"] == two.doc["quantities"][name]["ranks"]
    assert one.doc["failures"] == two.doc["failures"]
    files = one.plot(str(tmp_path / "out"))
    assert any(f.endswith("rank_histograms.png") for f in files) and all(Path(f).stat().st_size > 0 for f in files)


def test_calibrate_section_is_checked(tmp_path: Path) -> None:
    path = tmp_path / "s.toml"
    path.write_text(STUDY + "\n[calibrate]\nreplicates = 100\nbins = 7\ndraws = 99\n")
    result = CliRunner().invoke(main, ["check", str(path)])
    assert result.exit_code == 2
    assert "calibrate" in result.stderr and "\n" not in result.stderr.strip()
    path.write_text(STUDY + "\n[calibrate]\nreplicates = 100\nbins = 5\ndraws = 19\n")
    section = load_study(path).calibrate
    assert (section.replicates, section.bins, section.draws) == (100, 5, 19)


def test_too_few_usable_replicates_give_no_verdict() -> None:
    outcomes = _conjugate_outcomes(20, 19, 0.3, seed=5)
    for o in outcomes[:5]:
        o["passed"] = False
    q = summarise(outcomes, ["theta"], 19, 4)["quantities"]["theta"]
    assert not q["flagged"] and "no verdict" in q["verdict"]


class _Fake:
    """A Session stand-in counting its makings (test scaffolding)."""

    made = 0

    def __init__(self, problem, sampler="nutpie") -> None:
        type(self).made += 1


def test_process_session_compiles_once_per_key(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(calibrate_mod, "Session", _Fake)
    monkeypatch.setattr(calibrate_mod, "as_problem", lambda s: s)
    monkeypatch.setattr(calibrate_mod, "_SESSIONS", {})
    _Fake.made = 0
    calibrate_mod.SessionWarmup("run-a", object(), "nutpie")()
    task = calibrate_mod.ReplicateTask(object(), {}, [], None, sampler="nutpie", chains=1, draws=1, tune=1,
                                       target_accept=0.8, L=1, session_key="run-a")
    first = task.session()
    assert _Fake.made == 1 and first is calibrate_mod._SESSIONS["run-a"]   # the warm-up's, not a second compile
    calibrate_mod.process_session("run-b", object(), "nutpie")
    calibrate_mod.process_session("run-c", object(), "nutpie")
    assert _Fake.made == 3 and set(calibrate_mod._SESSIONS) == {"run-b", "run-c"}   # only the latest kept


class _StopHere(Exception):
    pass


class _Recorder:
    """An executor stand-in: records warm() and the task function map() is given, then stops the run."""

    def __init__(self) -> None:
        self.calls: list[tuple[str, object]] = []

    def warm(self, fn) -> None:
        self.calls.append(("warm", fn))

    def map(self, fn, tasks, *, seed, label="tasks"):
        self.calls.append(("map", fn))
        raise _StopHere


def test_calibrate_warms_the_workers_before_it_simulates(tmp_path: Path) -> None:
    path = tmp_path / "s.toml"
    path.write_text(STUDY)
    ex = _Recorder()
    with pytest.raises(_StopHere):
        calibrate(load_study(path), replicates=50, bins=5, draws=19, executor=ex)
    (w, warm), (m, task) = ex.calls
    assert (w, m) == ("warm", "map")
    assert isinstance(warm, calibrate_mod.SessionWarmup) and warm.key == task.session_key and task.cores == 1
