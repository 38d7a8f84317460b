"""Venous-cuff schedule: linearised posterior against conjugate closed forms, never worse than equal
spacing, greedy/exchange against brute force, study section and CLI."""

from __future__ import annotations

import json
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from uncertainty.analyses import schedule as sch
from uncertainty.core.errors import InputError, StudyError
from uncertainty.study import ScheduleSection, Study

ROOT = Path(__file__).resolve().parent.parent
FOREARM = ROOT / "studies" / "forearm_volunteers.toml"


def _study(**schedule_keys) -> Study:
    doc = tomllib.loads(FOREARM.read_text(encoding="utf-8"))
    doc["schedule"] = {**doc.get("schedule", {}), **schedule_keys}
    return Study.from_dict(doc, path=FOREARM)


# ---------------------------------------------------------------------------------------------
# linear-Gaussian toy: the Fisher-information posterior is exact


def test_scalar_repeated_readings_match_the_conjugate_normal_posterior() -> None:
    # K readings of theta with noise s, prior N(m, v): posterior variance 1/(1/v + K/s^2)
    # (conjugate normal model; common practice, e.g. Gelman et al., Bayesian Data Analysis, section 2.5)
    v, s, K = 2.0, 0.7, 5
    J = sch.jacobian(lambda phi: np.repeat(phi[:, :1], K, axis=1), np.array([[0.3]]))
    info = sch.information(J, s).sum(axis=1)
    cov = sch.posterior_cov(info, np.array([[1 / v]]))
    assert cov[0, 0, 0] == pytest.approx(1 / (1 / v + K / s**2), rel=1e-9)


def test_linear_regression_posterior_matches_gaussian_conditioning() -> None:
    # y = X phi + e, phi ~ N(0, S0), e ~ N(0, s^2 I): Cov(phi | y) = S0 - S0 X^T (X S0 X^T + s^2 I)^-1 X S0
    # (conditioning a joint normal; common practice, any multivariate statistics text)
    rng = np.random.default_rng(4)
    X = rng.normal(size=(7, 3))
    A = rng.normal(size=(3, 3))
    S0 = A @ A.T + 0.5 * np.eye(3)
    s = 0.4
    J = sch.jacobian(lambda phi: phi @ X.T, rng.normal(size=(1, 3)))
    cov = sch.posterior_cov(sch.information(J, s).sum(axis=1), np.linalg.inv(S0))[0]
    closed = S0 - S0 @ X.T @ np.linalg.solve(X @ S0 @ X.T + s**2 * np.eye(7), X @ S0)
    np.testing.assert_allclose(np.sqrt(np.diag(cov)), np.sqrt(np.diag(closed)), rtol=1e-7)


def test_jacobian_of_the_cuff_model_matches_the_initial_filtration_slope() -> None:
    # d(filtration volume)/dKf at time s after one step, Kf << C_tis/s: about dPc s (initial slope Kf dPc,
    # interstitium docstring); venous part independent of Kf. dPc = (T P - Pvi)/(1 + r) (Pappenheimer 1948), the
    # filtration part referred to the isovolumetric venous pressure Pvi as in the inference model (cuff_curve)
    m = sch.cuff_model(_study(), ScheduleSection(linearisation_draws=1), seed=1)
    k = m.names.index("Kf")
    t = np.array([0.05])
    J = sch.jacobian(m.forward([40.0], t), m.points)[0, 0, k]
    v = {n: float(x[0, 0]) for n, x in m.values(m.points).items()}
    dPc = (m.transmission * 40.0 - v["Pvi"]) / (1 + v["r"])
    assert J / v["Kf"] == pytest.approx(dPc * 0.05, rel=0.02)  # phi = log Kf: dV/dlogKf = Kf dV/dKf


# ---------------------------------------------------------------------------------------------
# search


def _tiny(crit: str = "A", targets=("Kf", "Pvi")) -> sch.Problem:
    m = sch.cuff_model(_study(), ScheduleSection(linearisation_draws=3, step_min=2.0), seed=3)
    idx = tuple(m.names.index(sch.TARGETS[t]) for t in targets)
    return sch.Problem(m, (15.0, 35.0, 60.0), 2, 0.5 * np.arange(1, 9), 3, 0.01,
                       sch.Criterion(crit, idx, m.prior_cov))


@pytest.mark.parametrize("crit,targets", [("A", ("Kf", "Pvi")), ("D", ("Kf", "Pvi")), ("A", ("Kf",))])
def test_greedy_exchange_finds_the_brute_force_optimum_on_a_tiny_grid(crit, targets) -> None:
    prob = _tiny(crit, targets)
    bp, bt, bv = sch.brute_force(prob)
    op, ot, ov = sch.optimise(prob, [15.0, 35.0], sch.equal_times(prob.times, 3))
    assert ov == pytest.approx(bv, rel=1e-9, abs=1e-12)
    assert (op, ot) == (bp, bt)


@pytest.mark.parametrize("keys", [{}, {"criterion": "D"}, {"targets": ["Pvi"]}, {"noise_sd": 0.05},
                                  {"measurements": 4, "increasing": False}])
def test_optimised_schedule_is_never_worse_than_equal_spacing(keys) -> None:
    doc = sch.schedule(_study(linearisation_draws=4, **keys)).to_dict()
    assert doc["criterion_ratio"] <= 1 + 1e-12
    assert doc["optimised"]["criterion"] <= doc["equal_spacing"]["criterion"] + 1e-12
    for t in doc["targets"]:
        assert 0 < doc["optimised"]["posterior_sd"][t] < doc["prior_sd"][t]
    if len(doc["targets"]) == 1:
        t = doc["targets"][0]
        assert doc["sd_ratio"][t] <= 1 + 1e-9
    assert len(doc["optimised"]["times"]) == doc["measurements"]
    if doc["increasing"]:
        assert doc["optimised"]["pressures"] == sorted(doc["optimised"]["pressures"])


def test_more_readings_or_less_noise_never_raise_the_posterior_sd() -> None:
    a = sch.schedule(_study(linearisation_draws=2, measurements=6)).to_dict()
    b = sch.schedule(_study(linearisation_draws=2, measurements=12)).to_dict()
    c = sch.schedule(_study(linearisation_draws=2, measurements=6, noise_sd=0.002)).to_dict()
    assert b["optimised"]["criterion"] <= a["optimised"]["criterion"]
    assert c["optimised"]["criterion"] <= a["optimised"]["criterion"]


# ---------------------------------------------------------------------------------------------
# study section, CLI, figure


def test_bad_schedule_input_names_the_key() -> None:
    with pytest.raises(StudyError) as e:
        _study(readings=3)
    assert "schedule" in (e.value.key or "")
    with pytest.raises(StudyError) as e:
        _study(pressure_grid=[20.0, 250.0])
    assert e.value.key.startswith("schedule.pressure_grid")
    with pytest.raises(InputError) as e2:
        sch.schedule(_study(measurements=200, time_step_min=1.0, linearisation_draws=1))
    assert e2.value.key == "schedule.measurements"


def test_cli_design_schedule_json_and_figure(tmp_path) -> None:
    from uncertainty.app.cli import main

    res = CliRunner().invoke(main, ["design", str(FOREARM), "--schedule", "--json", "--out", str(tmp_path)])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.output)
    assert set(doc) >= {"optimised", "equal_spacing", "sd_ratio", "prior_sd"}
    assert doc["criterion_ratio"] <= 1
    assert (tmp_path / "schedule.png").exists()


def test_run_includes_the_schedule_section(tmp_path) -> None:
    # DESIGN.md section 4: every analysis section present is run by `fluidshift run`, [schedule] included
    from uncertainty.app.run import run

    study = tmp_path / "s.toml"
    study.write_text('[study]\ntitle = "invented"\ntissue = "skeletal_muscle"\nseed = 2\n'
                     "[schedule]\nsteps = 3\nmeasurements = 6\nlinearisation_draws = 2\n")
    res = run(study, tmp_path / "out", progress=False)
    doc = json.loads((tmp_path / "out" / "results.json").read_text())
    sec = doc["sections"]["schedule"]
    assert sec["status"] == "done", sec.get("message")
    ratio = sec["result"]["sd_ratio"]
    assert all(v <= 1.0 + 1e-9 for v in ratio.values())  # never worse than equal spacing
    assert any(f["kind"] == "figure" for f in sec["files"])
    assert res.passed
    html = (tmp_path / "out" / "report.html").read_text()
    assert 'id="section-schedule"' in html and "equal spacing" in html
    assert any(line.startswith("Cuff schedule:") for line in res.summary)


# ---------------------------------------------------------------------------------------------
# issue 19 item 8: naming of the rows, the verdict, Pvi as in the inference model, group comparison

_SMALL = {"steps": 5, "step_min": 1.0, "pressure_grid": [20.0, 40.0, 60.0, 80.0], "measurements": 3,
          "time_step_min": 1.0, "linearisation_draws": 1}


def test_user_protocol_and_true_equal_spacing_are_separate_rows() -> None:
    res = sch.schedule(_study(**_SMALL))
    doc = res.to_dict()
    assert doc["comparison"] == "user_protocol"
    assert doc["user_protocol"]["pressures"] == [20.0, 30.0, 40.0, 50.0, 60.0]  # the study's own cuff steps
    # equal spacing: linspace(20, 80, 5) = 20, 35, 50, 65, 80 moved to the nearest grid point (ties to the lower)
    assert doc["equal_spacing"]["pressures"] == [20.0, 40.0, 40.0, 60.0, 80.0]
    for t in doc["targets"]:  # the search may not leave any target worse than the comparison
        assert doc["sd_ratio"][t] <= 1 + 1e-9
    better = doc["criterion_ratio"] < 1 - 1e-9
    assert (doc["status"] == "optimised") == better
    assert "mL/100 g" in res.table() and "per basis" not in res.table()


def test_a_schedule_no_better_than_the_comparison_is_not_called_optimised(monkeypatch) -> None:
    def no_search(prob, pressures, times, **_):
        return list(pressures), sorted(times), prob.value(pressures, times)

    monkeypatch.setattr(sch, "optimise", no_search)
    doc = sch.schedule(_study(**_SMALL)).to_dict()
    assert doc["status"] == "no_better_schedule" and "no better schedule" in doc["verdict"]
    assert "optimised:" not in doc["verdict"]


def test_pvi_enters_as_the_isovolumetric_pressure_of_the_inference_model() -> None:
    # filtration part of cuff_curve (inference model): initial slope Kf (T P - Pvi) / (1 + r), so
    # dV/dPvi = -Kf s / (1 + r) shortly after a step (s << tau; interstitium docstring); veins do not see Pvi
    m = sch.cuff_model(_study(), ScheduleSection(linearisation_draws=1), seed=1)
    k = m.names.index("Pvi")
    s = 0.05
    J = sch.jacobian(m.forward([40.0], np.array([s])), m.points)[0, 0, k]
    v = {n: float(x[0, 0]) for n, x in m.values(m.points).items()}
    assert J == pytest.approx(-v["Kf"] * s / (1 + v["r"]), rel=0.02)
    assert not m.log[k]  # Pvi on its natural scale (normal prior, as in the inference side prior)


def test_split_jacobian_equals_the_whole_curve_jacobian() -> None:
    m = sch.cuff_model(_study(), ScheduleSection(linearisation_draws=2), seed=2)
    t = np.arange(0.5, 8.01, 0.5)
    P = [20.0, 40.0]
    whole = sch.information(sch.jacobian(m.forward(P, t), m.points), 0.01)
    np.testing.assert_allclose(m.information(P, t, 0.01), whole, rtol=1e-6, atol=1e-12 * np.abs(whole).max())


def test_group_comparison_size_against_the_normal_formula() -> None:
    # n per group = 2 (z_{0.975} + z_{0.8})^2 (b^2 + p^2) / b^2 for a difference of one between-subject sd b
    # measured with per-subject error p (normal approximation; common practice)
    from scipy import stats

    m = sch.cuff_model(_study(), ScheduleSection(linearisation_draws=1), seed=1)
    g = sch.group_comparison(m, {"Kf": 0.0005, "Pvi": 2.0})
    z = stats.norm.ppf(0.975) + stats.norm.ppf(0.8)
    for t, post in (("Kf", 0.0005), ("Pvi", 2.0)):
        b = g[t]["between_sd"]
        assert g[t]["n_per_group"] == int(np.ceil(2 * z**2 * (b**2 + post**2) / b**2))
        assert g[t]["n_per_group_perfect"] == int(np.ceil(2 * z**2))


def test_the_studys_correlations_carry_into_the_prior_precision() -> None:
    # Kf and Pv lognormal without a between-subject spread, their normal scores correlated at rho: the
    # logs are then bivariate normal with correlation exactly rho (Gaussian copula, closed form). Invented
    # test values: rho = 0.6, Kf 0.0035 (gsd 1.35), Pv 12 mmHg (gsd 1.3).
    rho = 0.6

    def study(r: float) -> Study:
        doc = tomllib.loads(FOREARM.read_text(encoding="utf-8"))
        doc["parameters"]["Kf"] = {"dist": "lognormal", "median": 0.0035, "gsd": 1.35,
                                   "unit": "mL/min/mmHg/100mL", "origin": "invented test value"}
        doc["parameters"]["Pv"] = {"dist": "lognormal", "median": 12.0, "gsd": 1.3, "unit": "mmHg",
                                   "origin": "invented test value"}
        doc["correlations"] = {"pairs": [["Kf", "Pv", r]]}
        doc["schedule"] = {**doc.get("schedule", {}), "linearisation_draws": 2}
        return Study.from_dict(doc, path=FOREARM)

    s = study(rho)
    model = sch.cuff_model(s, s.schedule, seed=3)
    i, j = model.names.index("Kf"), model.names.index("Pv")
    c = model.prior_cov
    assert model.log[i] and model.log[j]
    # 20,000 draws: the sample correlation's se is about (1 - rho^2) / sqrt(n) = 0.0045
    assert c[i, j] / math.sqrt(c[i, i] * c[j, j]) == pytest.approx(rho, abs=0.02)
    assert math.sqrt(c[i, i]) == pytest.approx(math.log(1.35), rel=0.02)
    s0 = study(0.0)
    c0 = sch.cuff_model(s0, s0.schedule, seed=3).prior_cov
    assert abs(c0[i, j] / math.sqrt(c0[i, i] * c0[j, j])) < 0.03
