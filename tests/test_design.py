"""Trial design on a study: simulated power against exact noncentral t, assurance, dropout, bad input."""

from __future__ import annotations

import importlib
import math
from types import SimpleNamespace

import numpy as np
import pytest
from scipy import integrate, stats

from uncertainty.analyses.design import trial_power as tp
from uncertainty.core.errors import InputError
from uncertainty.priors import parse_prior

# the module itself: the package attribute uncertainty.analyses.design is the API function
dz = importlib.import_module("uncertainty.analyses.design")


def _study(section: dict, **priors: dict) -> SimpleNamespace:
    # Kf prior: median 0.004 mL/min/mmHg/100g, gsd 1.3, between-subject cv 0.35 (invented test values;
    # the checks below compare our figures with closed forms, so any values do)
    decls = priors or {"Kf": {"dist": "lognormal", "median": 0.004, "gsd": 1.3,
                              "unit": "mL/min/mmHg/100g", "between_subject": {"cv": 0.35}}}
    pri = {k: parse_prior(k, v) for k, v in decls.items()}
    return SimpleNamespace(path="trial.toml", seed=11, priors=pri, names=list(pri), correlation=None,
                           design=section)


BASE = {"design": "parallel", "endpoint": "Kf", "effect": {"parameter": "Kf", "multiply": 0.7},
        "measurement": {"cv": 0.2}, "n_range": [8, 60], "n_points": 4, "trials": 2000}


def test_log_scale_sd_from_cvs() -> None:
    spec = dz.parse_design(_study(BASE))
    sd, _ = dz.analytic_sd(_study(BASE), spec)
    # sd of a log endpoint from a cv: sqrt(ln(1 + cv^2)) (lognormal identity; common practice)
    assert sd == pytest.approx(math.sqrt(math.log1p(0.35**2) + math.log1p(0.2**2)))
    assert spec.scale == "log" and spec.effects[0].analysis_value() == pytest.approx(math.log(0.7))


def test_simulated_power_matches_exact_noncentral_t() -> None:
    st = _study(BASE)
    res = dz.design(st).to_dict()
    sd = res["sd_analysis_scale"]
    for row in res["curve"]:
        exact = float(tp.t_power(row["n_per_arm"], math.log(0.7), sd))  # scipy.stats.nct
        assert abs(row["power"] - exact) < 4 * max(row["power_mc_se"], 1e-3)
    # n_per_arm is the exact-t search result
    assert res["n_per_arm_analysed"] == tp.n_for_power(math.log(0.7), sd, 0.05, 0.8, "parallel", 8, 60)


def test_paired_design_uses_within_subject_spread() -> None:
    sec = dict(BASE, design="paired", within_subject={"Kf": {"cv": 0.15}})
    st = _study(sec)
    res = dz.design(st).to_dict()
    w2, m2 = math.log1p(0.15**2), math.log1p(0.2**2)
    assert res["sd_analysis_scale"] == pytest.approx(math.sqrt(2 * (w2 + m2)))  # sd of a difference
    for row in res["curve"]:
        exact = float(tp.t_power(row["n_per_arm"], math.log(0.7), res["sd_analysis_scale"], design="paired"))
        assert abs(row["power"] - exact) < 4 * max(row["power_mc_se"], 1e-3)


def test_ancova_on_baseline_gains_power_as_theory_says() -> None:
    sec = dict(BASE, baseline=True, within_subject={"Kf": {"cv": 0.1}}, n_range=[10, 30], n_points=3)
    st = _study(sec)
    res = dz.design(st).to_dict()
    b2, w2, m2 = math.log1p(0.35**2), math.log1p(0.1**2), math.log1p(0.2**2)
    total = b2 + w2 + m2
    rho = b2 / total  # baseline/follow-up correlation of one subject's readings
    assert res["sd_analysis_scale"] == pytest.approx(math.sqrt(total * (1 - rho**2)))
    for row in res["curve"]:
        approx = float(tp.t_power(row["n_per_arm"], math.log(0.7), res["sd_analysis_scale"], design="ancova"))
        # the ANCOVA formula ignores the estimated slope's variance: allow 0.03 beyond MC error
        assert abs(row["power"] - approx) < 4 * row["power_mc_se"] + 0.03
        t_only = float(tp.t_power(row["n_per_arm"], math.log(0.7), math.sqrt(total)))
        assert row["power"] > t_only + 0.05


def test_assurance_simulated_against_closed_form_and_dropout() -> None:
    sec = dict(BASE, design_prior={"dist": "normal", "mean": -0.357, "sd": 0.15}, target_assurance=0.6,
               dropout=0.15, analysis_prior={"mean": 0.0, "sd": 1.0})
    res = dz.design(_study(sec)).to_dict()
    sd = res["sd_analysis_scale"]
    for row in res["curve"]:
        # assurance = E_prior[power] (O'Hagan et al. 2005), here by scipy.integrate.quad of exact t power
        def integrand(d: float, n: int = row["n_per_arm"]) -> float:
            return float(tp.t_power(n, d, sd, direction=-1.0)) * stats.norm.pdf(d, -0.357, 0.15)

        quad = integrate.quad(integrand, -0.357 - 1.5, -0.357 + 1.5)[0]
        assert abs(row["assurance"] - quad) < 4 * max(row["assurance_mc_se"], 1e-3)
        assert row["assurance_analytic"] == pytest.approx(quad, abs=2e-3)
        assert row["n_enrolled"] == math.ceil(row["n_per_arm"] / 0.85)
    assert res["n_per_arm"] == math.ceil(res["n_per_arm_analysed"] / 0.85)
    n_a = res["n_per_arm_assurance_analysed"]
    prior = stats.norm(-0.357, 0.15)
    assert tp.t_assurance(n_a, prior, sd) >= 0.6 > tp.t_assurance(n_a - 1, prior, sd)
    assert 0 < res["bayesian_success"] <= 1


def test_bayesian_success_against_its_conjugate_closed_form() -> None:
    # probability that the posterior probability of benefit exceeds 0.975 under an N(0, 1) analysis prior, the
    # effect from the N(-0.357, 0.15^2) design prior: conjugate normal closed form with known sd
    # (trial_power.bayes_success_probability, itself checked against simulated conjugate posteriors); the trials
    # plug in their estimated sd, so allow 0.02 beyond the MC error (t against z at n >= 8 per arm)
    sec = dict(BASE, design_prior={"dist": "normal", "mean": -0.357, "sd": 0.15},
               analysis_prior={"mean": 0.0, "sd": 1.0})
    res = dz.design(_study(sec)).to_dict()
    sd = res["sd_analysis_scale"]
    for row in res["curve"]:
        closed = float(tp.bayes_success_probability(row["n_per_arm"], -0.357, 0.15, sd, 0.0, 1.0, direction=-1.0))
        assert abs(row["bayesian_success"] - closed) < 4 * row["bayesian_success_mc_se"] + 0.02


def test_shift_effect_is_analysed_on_the_natural_scale() -> None:
    # Pc: typical N(20, 2^2), between-subject sd 3, reading sd 2 (invented test values); effect -3 mmHg.
    # The endpoint sd is sqrt(3^2 + 2^2) (independent normal parts; common practice); the typical value cancels
    # in the difference, so the power is the exact noncentral t (scipy.stats.nct) at delta -3
    pri = {"Pc": {"dist": "normal", "mean": 20.0, "sd": 2.0, "unit": "mmHg", "between_subject": {"sd": 3.0}}}
    sec = {"design": "parallel", "endpoint": "Pc", "effect": {"parameter": "Pc", "shift": -3.0},
           "measurement": {"sd": 2.0}, "n_range": [6, 40], "n_points": 4, "trials": 2000}
    res = dz.design(_study(sec, **pri)).to_dict()
    assert res["scale"] == "natural" and res["sd_analysis_scale"] == pytest.approx(math.sqrt(13.0))
    for row in res["curve"]:
        exact = float(tp.t_power(row["n_per_arm"], -3.0, math.sqrt(13.0)))
        assert abs(row["power"] - exact) < 4 * max(row["power_mc_se"], 1e-3)


def test_half_width_sample_size_and_its_probability() -> None:
    # n for a 95% half-width <= 0.25 (log units) with probability 0.8: the chi-square closed form
    # (trial_power.half_width_probability, checked against simulated t intervals), and the simulated trials'
    # share of intervals that narrow, against the same closed form
    res = dz.design(_study(dict(BASE, target_half_width=0.25, half_width_probability=0.8))).to_dict()
    sd = res["sd_analysis_scale"]
    hw = res["half_width"]
    assert hw["n_per_arm_analysed"] == tp.n_for_half_width(sd, 0.25, 0.8, 0.05, "parallel", 8, 60)
    assert hw["probability"] >= 0.8
    for row in res["curve"]:
        closed = float(tp.half_width_probability(row["n_per_arm"], sd, 0.25))
        assert abs(row["p_half_width"] - closed) < 4 * max(row["p_half_width_mc_se"], 1e-3)


@pytest.mark.parametrize("endpoint", ["Jv", "lymph_flow"])
def test_model_endpoint_jv_matches_the_noncentral_t(tmp_path, endpoint: str) -> None:
    # classic form with only Pc uncertain (invented test values): Jv = Kf (Pc - Pi - sigma (pi_c - pi_i)) is
    # linear in Pc (Starling 1896), so a Pc shift of -3 mmHg moves Jv by Kf * -3 and the per-subject sd of Jv is
    # sqrt((Kf * 3)^2 + 0.01^2) (between-subject sd 3 mmHg, reading sd 0.01); power = exact noncentral t
    from uncertainty.study import Study

    doc = {"study": {"title": "linear Jv endpoint (invented)", "tissue": "skeletal_muscle", "model": "classic",
                     "seed": 3},
           "parameters": {"Pc": {"dist": "normal", "mean": 20.0, "sd": 2.0, "unit": "mmHg",
                                 "between_subject": {"sd": 3.0}},
                          "Kf": 0.01, "Pi": -1.0, "pi_c": 25.0, "pi_i": 10.0, "sigma": 0.9},
           "design": {"endpoint": endpoint, "effect": {"parameter": "Pc", "shift": -3.0},
                      "measurement": {"sd": 0.01}, "n_range": [6, 40], "n_points": 4, "simulations": 2000}}
    res = dz.design(Study.from_dict(doc, base_dir=tmp_path)).to_dict()
    sd = math.hypot(0.01 * 3.0, 0.01)
    assert res["sd_analysis_scale"] == pytest.approx(sd, rel=0.05)  # pilot of 4000 per arm: sd within 5%
    for row in res["curve"]:
        exact = float(tp.t_power(row["n_per_arm"], -0.03, sd))
        assert abs(row["power"] - exact) < 4 * max(row["power_mc_se"], 1e-3)


@pytest.mark.parametrize(("patch", "key"), [
    ({"target_power": 1.5}, "design.target_power"),
    ({"target_power": 0}, "design.target_power"),
    ({"n_range": [50, 10]}, "design.n_range"),
    ({"n_range": []}, "design.n_range"),
    ({"effect": {"parameter": "Qz", "shift": 1}}, "design.effect.parameter"),
    ({"design": "paired"}, "design.within_subject"),
    ({"endpoint": "nonsense"}, "design.endpoint"),
    ({"effect": {"parameter": "Kf", "multiply": -1}}, "design.effect.multiply"),
    ({"trials": 2}, "design.simulations"),
    ({"benefit": "sideways"}, "design.benefit"),
])
def test_bad_design_input_names_file_key_value(patch: dict, key: str) -> None:
    with pytest.raises(InputError) as err:
        dz.parse_design(_study(dict(BASE, **patch)))
    assert err.value.key == key
    assert err.value.file == "trial.toml"


def test_power_error_stays_positive_when_every_trial_succeeds() -> None:
    # a huge effect: every simulated trial succeeds; the error is the sd of the Jeffreys posterior
    # Beta(k + 1/2, n - k + 1/2) (Brown, Cai & DasGupta 2001), checked with scipy.stats.beta
    res = dz.design(_study(dict(BASE, effect={"parameter": "Kf", "multiply": 0.2}, trials=200,
                                n_range=[40, 40], n_points=2))).to_dict()
    row = res["curve"][0]
    assert row["power"] == 1.0
    assert row["power_mc_se"] == pytest.approx(stats.beta(200.5, 0.5).std(), rel=1e-9)


def test_same_numbers_for_same_seed_and_any_executor(tmp_path) -> None:
    from uncertainty.core.parallel import InProcess

    st = _study(dict(BASE, trials=200))
    a = dz.design(st, seed=3).to_dict()["curve"]
    b = dz.design(st, seed=3, executor=InProcess(checkpoint_dir=tmp_path)).to_dict()["curve"]
    assert a == b
    c = dz.design(st, seed=4).to_dict()["curve"]
    assert [r["power"] for r in a] != [r["power"] for r in c]


def test_checkpoint_resumes_an_unchanged_study_and_never_reuses_a_changed_one(tmp_path, monkeypatch) -> None:
    from uncertainty.core.parallel import InProcess

    calls: list[int] = []
    run_point = dz._run_point

    def counting(study, spec, point, ss):  # noqa: ANN001, ANN202 - a stand-in with _run_point's signature
        calls.append(point.n)
        return run_point(study, spec, point, ss)

    monkeypatch.setattr(dz, "_run_point", counting)
    # target power out of reach: the design points (sizes 8..20) do not depend on the effect
    sec = dict(BASE, trials=100, n_range=[8, 20], target_power=0.999)
    first = dz.design(_study(sec), seed=3, executor=InProcess(checkpoint_dir=tmp_path)).to_dict()["curve"]
    done = len(calls)
    # the same study, loaded afresh: every point comes from the checkpoint
    again = dz.design(_study(sec), seed=3, executor=InProcess(checkpoint_dir=tmp_path)).to_dict()["curve"]
    assert again == first and len(calls) == done
    # a changed effect with the same points, seed and label: recomputed, equal to a run without checkpoints
    other = dict(sec, effect={"parameter": "Kf", "multiply": 0.6})
    changed = dz.design(_study(other), seed=3, executor=InProcess(checkpoint_dir=tmp_path)).to_dict()["curve"]
    assert [r["n_per_arm"] for r in changed] == [r["n_per_arm"] for r in first]
    assert len(calls) == 2 * done
    assert changed == dz.design(_study(other), seed=3).to_dict()["curve"]


@pytest.mark.slow
def test_two_dask_workers_give_the_in_process_numbers() -> None:
    from uncertainty.core.parallel import make_executor

    st = _study(dict(BASE, trials=200))
    ref = dz.design(st, seed=3).to_dict()["curve"]
    with make_executor(workers=2) as ex:
        assert dz.design(st, seed=3, executor=ex).to_dict()["curve"] == ref


@pytest.mark.slow
def test_exact_mcmc_path_agrees_with_fast_path_on_power() -> None:
    # small case: n = 12 per arm, 40 simulated trials refitted with NUTS; the fast (t test) and exact
    # (posterior probability of a direction > 1 - alpha/2) decisions are taken on the same trials
    st = _study(dict(BASE, n_range=[12, 12], n_points=2, exact_trials=40))
    res = dz.design(st, exact=True, seed=9).to_dict()
    row = res["curve"][0]
    assert res["path"] == "exact"
    diff_se = max(row["power_exact_minus_fast_mc_se"], 1 / 40)
    assert abs(row["power"] - row["power_fast"]) <= 3 * diff_se
    exact_t = float(tp.t_power(12, math.log(0.7), res["sd_analysis_scale"]))
    assert abs(row["power"] - exact_t) < 4 * np.sqrt(exact_t * (1 - exact_t) / 40)
