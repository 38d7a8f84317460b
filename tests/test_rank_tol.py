"""Value of information to a requested precision (`rank --tol`): the draws double until the 95 % Monte Carlo
half-width of every candidate's expected variance reduction is below tol times it, or a cap stops it (exit 3).

Check values: linear Gaussian. Jv = Kf (Pc - Pi - sigma (pi_c - pi_i)) is linear in Pc with the other forces
fixed; Pc ~ N(20, 3^2) and a reading X = Pc + N(0, s^2) give the conjugate posterior variance
v s^2 / (v + s^2), so the expected variance reduction of Jv is Kf^2 v^2 / (v + s^2) (normal conditioning;
common practice, e.g. Gelman et al., Bayesian Data Analysis, section 2.5). The t quantile is scipy.stats.t's.
"""

from __future__ import annotations

import json

import numpy as np
import pytest
from click.testing import CliRunner
from executor_fakes import Backwards
from scipy import stats

from uncertainty.analyses.rank import MIN_SAMPLES, Reading, rank, simulate_batches, t975
from uncertainty.app.cli import main
from uncertainty.core.errors import InputError, QualityGateError
from uncertainty.core.parallel import task_seeds
from uncertainty.core.serialise import to_json
from uncertainty.study import Study

_KF, _V = 0.01, 9.0  # invented: Kf in mL/min/mmHg/100g, prior variance of Pc in mmHg^2


def _doc(*candidates: tuple[str, float], **rank_keys: object) -> dict:
    # invented prior-only study: Pc normal, the other forces fixed
    return {"study": {"title": "rank tol (invented)", "tissue": "skeletal_muscle", "model": "classic", "seed": 3},
            "parameters": {"Pc": {"dist": "normal", "mean": 20.0, "sd": 3.0, "unit": "mmHg"}, "Kf": _KF,
                           "Pi": -1.0, "pi_c": 25.0, "pi_i": 10.0, "sigma": 0.9},
            "rank": {"candidates": [{"name": n, "parameter": "Pc", "sd": s, "unit": "mmHg"} for n, s in candidates],
                     **rank_keys}}


def _closed(s: float) -> float:
    return _KF**2 * _V**2 / (_V + s**2)


def test_draws_double_until_the_reduction_is_within_tol_and_match_the_conjugate_figure(tmp_path) -> None:
    assert t975(7) == pytest.approx(stats.t.ppf(0.975, 7), rel=1e-12)
    doc = rank(Study.from_dict(_doc(("Pc sd 2", 2.0)), base_dir=tmp_path), tol=0.05).to_dict()
    hist = doc["precision_history"]
    assert doc["tol"] == 0.05 and doc["converged"] is True and len(hist) > 1
    assert [h["samples"] for h in hist] == [MIN_SAMPLES * 2**i for i in range(len(hist))]
    assert doc["samples"] == hist[-1]["samples"] and doc["prior"]["draws"] == doc["samples"]
    assert hist[-1]["widest_half_width"] < 0.05 <= hist[-2]["widest_half_width"]
    row = doc["candidates"][0]
    # the half-width is t_{0.975, blocks - 1} x the block standard error (8 blocks: regression)
    assert row["method"] == "regression" and row["mc_df"] == 7
    assert row["mc_half_width"] == pytest.approx(stats.t.ppf(0.975, 7) * row["mc_se"], rel=1e-12)
    assert hist[-1]["widest_half_width"] == pytest.approx(row["mc_half_width"] / row["expected_variance_reduction"])
    # the estimate agrees with the conjugate figure within its reported 95% half-width
    assert abs(row["expected_variance_reduction"] - _closed(2.0)) < row["mc_half_width"]
    assert any("met at" in n and "NOT" not in n for n in doc["notes"])


def test_the_first_size_is_the_ranking_without_a_tolerance(tmp_path) -> None:
    study = Study.from_dict(_doc(("Pc sd 2", 2.0)), base_dir=tmp_path)
    plain = rank(study).to_dict()["candidates"][0]
    grown = rank(study, tol=0.05).to_dict()["precision_history"][0]
    assert grown["widest_half_width"] == pytest.approx(plain["mc_half_width"] / plain["expected_variance_reduction"],
                                                       rel=1e-12)


def test_a_grown_sample_keeps_its_earlier_readings_and_draws_new_ones_from_a_fresh_stream() -> None:
    theta = np.linspace(0.0, 1.0, 12)
    c = Reading("A", "a", sd=0.5)
    ss = task_seeds(1, 2)[0]
    alone = simulate_batches(c, theta[:4], None, np.random.default_rng(ss), ss)
    grown = simulate_batches(c, theta, (4, 4, 4), np.random.default_rng(ss), ss)
    assert np.array_equal(grown[:4], alone)
    noise = grown - theta
    assert len({tuple(np.round(noise[i:i + 4], 12)) for i in (0, 4, 8)}) == 3  # no batch repeats another's noise


def test_cap_stops_the_doubling_with_exit_3_and_the_flagged_result(tmp_path) -> None:
    study = Study.from_dict(_doc(("Pc sd 2", 2.0)), base_dir=tmp_path)
    with pytest.raises(QualityGateError) as exc:
        rank(study, tol=0.01, max_samples=2 * MIN_SAMPLES)
    doc = exc.value.result.to_dict()
    assert doc["converged"] is False and doc["samples"] == 2 * MIN_SAMPLES
    assert any("NOT met" in n and "max-samples=8192" in n for n in doc["notes"])
    assert "NOT met" in exc.value.result.html_section()  # the report says so too
    f = tmp_path / "rank.toml"
    f.write_text('[study]\ntitle = "rank cap (invented)"\ntissue = "skeletal_muscle"\nmodel = "classic"\nseed = 3\n'
                 '[parameters]\nPc = { dist = "normal", mean = 20.0, sd = 3.0, unit = "mmHg" }\nKf = 0.01\n'
                 'Pi = -1.0\npi_c = 25.0\npi_i = 10.0\nsigma = 0.9\n'
                 '[rank]\ncandidates = [{ name = "Pc", parameter = "Pc", sd = 2.0, unit = "mmHg" }]\n'
                 'tol = 0.01\nmax_samples = 8192\n', encoding="utf-8")
    out = CliRunner().invoke(main, ["rank", "--json", str(f)])
    assert out.exit_code == 3
    cli = json.loads(out.stdout)
    assert cli["converged"] is False and cli["tol"] == 0.01 and len(cli["precision_history"]) == 2
    assert CliRunner().invoke(main, ["rank", "--tol", "1.5", str(f)]).exit_code == 2


def test_bad_tolerance_or_cap_is_an_input_error(tmp_path) -> None:
    study = Study.from_dict(_doc(("Pc sd 2", 2.0)), base_dir=tmp_path)
    for kw in ({"tol": 0.0}, {"tol": 1.0}, {"tol": 0.05, "max_samples": MIN_SAMPLES // 2}):
        with pytest.raises(InputError):
            rank(study, **kw)
    with pytest.raises(Exception, match="max_samples"):
        Study.from_dict(_doc(("Pc", 2.0), samples=8192, max_samples=4096), base_dir=tmp_path)


def test_same_numbers_in_process_and_on_a_pickling_executor(tmp_path) -> None:
    # noise above the prior sd: importance first, regression once importance cannot reach the tolerance; one
    # doubling, then the cap, so both runs stop at the same place
    study = Study.from_dict(_doc(("Pc sd 4", 4.0)), base_dir=tmp_path)
    docs = []
    for ex in (None, Backwards()):
        with pytest.raises(QualityGateError) as exc:
            rank(study, tol=0.001, max_samples=2 * MIN_SAMPLES, executor=ex)
        docs.append(to_json(exc.value.result.to_dict()))
    assert docs[0] == docs[1]
    doc = json.loads(docs[0])
    assert len(doc["precision_history"]) == 2 and doc["candidates"][0]["method"] == "regression"
    row = doc["candidates"][0]
    assert abs(row["expected_variance_reduction"] - _closed(4.0)) < row["mc_half_width"]
