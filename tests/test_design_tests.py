"""One-sided and non-inferiority tests in ``[design] test``: closed forms, the simulated success rule,
the headline, and bad input (no PyMC)."""

from __future__ import annotations

import importlib
import math
from types import SimpleNamespace

import numpy as np
import pytest
from scipy import stats

from uncertainty.analyses.design import trial_power as tp
from uncertainty.analyses.design.report_section import protocol_markdown
from uncertainty.analyses.design.table import headline, table
from uncertainty.core.errors import InputError
from uncertainty.priors import parse_prior

dz = importlib.import_module("uncertainty.analyses.design")


def _study(section: dict) -> SimpleNamespace:
    # Kf prior: median 0.004 mL/min/mmHg/100g, gsd 1.3, between-subject cv 0.35 (invented test values;
    # every check below compares our figures with closed forms, so any values do)
    decl = {"dist": "lognormal", "median": 0.004, "gsd": 1.3, "unit": "mL/min/mmHg/100g",
            "between_subject": {"cv": 0.35}}
    pri = {"Kf": parse_prior("Kf", decl)}
    return SimpleNamespace(path="trial.toml", seed=5, priors=pri, names=list(pri), correlation=None,
                           design=section)


BASE = {"design": "parallel", "endpoint": "Kf", "effect": {"parameter": "Kf", "multiply": 0.7},
        "measurement": {"cv": 0.2}, "n_range": [8, 60], "n_points": 3, "trials": 1500}


@pytest.mark.parametrize("design", ["parallel", "ancova", "paired"])
@pytest.mark.parametrize("delta", [0.6, -0.6, 0.1])
def test_one_sided_at_alpha_is_two_sided_at_twice_alpha(design: str, delta: float) -> None:
    # closed form: the two-sided test at 2 alpha counted in the direction of benefit rejects when
    # d T > t_{1 - alpha}, which is the one-sided test at alpha
    n = np.arange(4, 80)
    for alpha in (0.025, 0.05, 0.1):
        one = tp.t_power(n, delta, 1.3, alpha, design, test="one_sided")
        two = tp.t_power(n, delta, 1.3, 2 * alpha, design)
        np.testing.assert_allclose(one, two, rtol=1e-12, atol=1e-15)
        assert np.all(one > tp.t_power(n, delta, 1.3, alpha, design))  # one-sided is the more powerful
    # and against scipy's one-sided t test on simulated trials
    rng = np.random.default_rng(3)
    a, b = rng.normal(0, 1.3, (20000, 15)), rng.normal(0.6, 1.3, (20000, 15))
    sim = np.mean(stats.ttest_ind(b, a, axis=1, alternative="greater").pvalue < 0.05)
    assert abs(float(tp.t_power(15, 0.6, 1.3, 0.05, test="one_sided")) - sim) < 4 * math.sqrt(sim * (1 - sim) / 20000)


def test_non_inferiority_sample_size_against_the_textbook_formula() -> None:
    # n = 2 (z_{1-a} + z_{1-b})^2 sigma^2 / (delta + margin)^2 per arm, alpha one-sided
    # (Julious 2004, Stat Med 23(12):1921-1986, non-inferiority with normal data; paper found with search,
    # the formula from memory)
    for delta, margin, sd in ((0.0, 0.05, 0.1), (0.02, 0.05, 0.1), (-0.01, 0.3, 1.0)):
        z = stats.norm.ppf(0.95) + stats.norm.ppf(0.8)
        expected = math.ceil(2 * z**2 * sd**2 / (delta + margin) ** 2)
        assert tp.z_sample_size(delta, sd, 0.05, 0.8, test="non_inferiority", margin=margin,
                                direction=1.0) == expected
        # the exact t search needs at least that n, and at most 2 more (the t correction)
        n = tp.n_for_power(delta, sd, 0.05, 0.8, "parallel", 2, 5000, direction=1.0,
                           test="non_inferiority", margin=margin)
        assert expected <= n <= expected + 2
    # worked value: sd 0.1, margin 0.05, no true difference, alpha 0.05 one-sided, power 0.8: n = 50 per arm
    # (Chow, Shao & Wang, Sample Size Calculations in Clinical Research, two-sample non-inferiority example,
    # as quoted at www2.ccrb.cuhk.edu.hk/stat/mean/tsmp_sup.htm, found with search)
    assert tp.z_sample_size(0.0, 0.1, 0.05, 0.8, test="non_inferiority", margin=0.05) == 50
    # worked power: means 30 vs 35 (true loss 5), sd 6, margin 8, 50 per arm, 95 %: 80.38 %, normal
    # approximation (Chow, Shao & Wang, as quoted at drsm.in PowerSTCTRatioNonInferiorityHelp, found with search)
    z_pow = stats.norm.cdf((-5 + 8) / (6 * math.sqrt(2 / 50)) - stats.norm.ppf(0.95))
    assert z_pow == pytest.approx(0.8038, abs=5e-5)
    t_pow = float(tp.t_power(50, -5.0, 6.0, 0.05, direction=1.0, test="non_inferiority", margin=8.0))
    assert z_pow - 0.01 < t_pow < z_pow  # within the t correction
    # a one-sided superiority test is the non-inferiority test with margin 0
    assert float(tp.t_power(30, 0.4, 1.0, test="non_inferiority", margin=0.0)) == pytest.approx(
        float(tp.t_power(30, 0.4, 1.0, test="one_sided")))


def test_non_inferiority_assurance_and_bayes_success_closed_forms() -> None:
    # assurance: z power Phi((d delta + m)/tau - z_{1-a}) integrated over N(mean, s^2) in closed form
    n, m, s, sd = 40, 0.2, 0.15, 0.8
    tau = sd * math.sqrt(2 / n)
    grid = np.linspace(-0.05 - 8 * s, -0.05 + 8 * s, 20001)
    num = np.trapezoid(stats.norm.cdf((grid + m) / tau - stats.norm.ppf(0.95)) * stats.norm.pdf(grid, -0.05, s), grid)
    closed = float(tp.z_assurance(n, -0.05, s, sd, 0.05, direction=1.0, test="non_inferiority", margin=m))
    assert closed == pytest.approx(num, abs=1e-6)
    # Bayesian success with a flat-ish analysis prior tends to the z power of the same test
    bs = float(tp.bayes_success_probability(n, 0.0, 0.0, sd, 0.0, 1e6, 0.05, direction=1.0,
                                            test="non_inferiority", margin=m))
    assert bs == pytest.approx(stats.norm.cdf(m / tau - stats.norm.ppf(0.95)), abs=1e-6)


@pytest.mark.parametrize("patch", [
    {"test": "one_sided"},
    {"test": "non_inferiority", "margin": 1.1, "effect": {"parameter": "Kf", "multiply": 0.95}},
])
def test_simulated_success_rule_matches_the_noncentral_t(patch: dict) -> None:
    st = _study(dict(BASE, **patch))
    spec = dz.parse_design(st)
    res = dz.design(st).to_dict()
    sd, effect = res["sd_analysis_scale"], res["effect_analysis_scale"]
    m = math.log(1.1) if patch["test"] == "non_inferiority" else 0.0
    for row in res["curve"]:
        exact = float(tp.t_power(row["n_per_arm"], effect, sd, 0.05, "parallel", -1.0, patch["test"], m))
        assert abs(row["power"] - exact) < 4 * max(row["power_mc_se"], 1e-3)
    assert res["test"] == patch["test"] and spec.test == patch["test"]
    assert res["n_per_arm_analysed"] == tp.n_for_power(effect, sd, 0.05, 0.8, "parallel", 8, 60, -1.0,
                                                       patch["test"], m)
    words = "non-inferiority" if patch["test"] == "non_inferiority" else "one-sided"
    assert words in res["test_text"] and words in headline(res)
    assert any(words in r["value"] for r in res["assumptions"])


@pytest.mark.parametrize(("patch", "key", "value"), [
    ({"test": "three_sided"}, "design.test", "three_sided"),
    ({"test": "non_inferiority"}, "design.margin", None),
    ({"margin": 0.5}, "design.margin", 0.5),
    ({"test": "non_inferiority", "margin": 0.9}, "design.margin", 0.9),  # ratio on the beneficial side
    ({"test": "non_inferiority", "margin": -0.001, "effect": {"parameter": "Kf", "shift": -0.001}},
     "design.margin", -0.001),
    ({"test": "non_inferiority", "margin": "1 mmHg"}, "design.margin", "1 mmHg"),
])
def test_bad_test_or_margin_names_key_and_value(patch: dict, key: str, value: object) -> None:
    with pytest.raises(InputError) as err:
        dz.parse_design(_study(dict(BASE, **patch)))
    assert err.value.key == key and err.value.file == "trial.toml"
    assert err.value.value == value


def test_ratio_margin_side_follows_the_direction_of_benefit() -> None:
    spec = dz.parse_design(_study(dict(BASE, test="non_inferiority", margin=0.9, benefit="increase",
                                       effect={"parameter": "Kf", "multiply": 1.2})))
    assert spec.margin_analysis == pytest.approx(-math.log(0.9))
    spec = dz.parse_design(_study(dict(BASE, test="non_inferiority", margin=0.002,
                                       effect={"parameter": "Kf", "shift": -0.001})))
    assert spec.margin_analysis == 0.002 and spec.direction == -1.0


# ----------------------------------------------------------------------------- group-sequential looks

@pytest.mark.parametrize(("shape", "published", "tol"), [
    # inflation factor R for K = 5 equally spaced looks, alpha 0.05 two-sided, power 0.9: O'Brien-Fleming 1.026,
    # Pocock 1.207 (Jennison & Turnbull 2000, Group Sequential Methods with Applications to Clinical Trials,
    # tables 2.4 and 2.2, for the classical boundaries; from memory). The Lan-DeMets spending versions wired
    # here are close to, not equal to, the classical boundaries: O'Brien-Fleming within 0.005; the Pocock-shaped
    # spending spends more early than the constant boundary and needs slightly less (within 0.02)
    ("obrien_fleming", 1.026, 0.005),
    ("pocock", 1.207, 0.02),
])
def test_inflation_factor_for_five_looks(shape: str, published: float, tol: float) -> None:
    spec = dz.parse_design(_study(dict(BASE, looks=5, spending=shape, target_power=0.9)))
    plan = dz.sequential_plan(spec, 100)
    assert plan["inflation"] == pytest.approx(published, abs=tol)
    assert plan["n_per_arm_max_completing"] == math.ceil(100 * plan["inflation"])
    assert plan["n_per_arm_at_looks"][-1] == plan["n_per_arm_max_completing"]
    # expected n: below the maximum under H1 and H0 (a trial can stop early under either)
    assert plan["expected_n_per_arm_alternative"] < plan["n_per_arm_max_completing"]
    assert plan["expected_n_per_arm_null"] <= plan["n_per_arm_max_completing"]
    assert len(plan["boundaries_z"]) == 5 and plan["alpha_spent"][-1] == pytest.approx(0.05)


def test_looks_in_the_result_and_bad_looks() -> None:
    res = dz.design(_study(dict(BASE, looks=3, n_points=2, trials=300))).to_dict()
    gsq = res["group_sequential"]
    assert gsq["n_per_arm_fixed_completing"] == res["n_per_arm_completing"]
    assert gsq["n_per_arm_max_completing"] >= res["n_per_arm_completing"]
    assert "group-sequential, 3 looks" in table(res)
    assert "Group-sequential: 3 equally spaced analyses" in protocol_markdown(res)
    for patch, key, value in (({"looks": 0}, "design.looks", 0), ({"looks": 2.5}, "design.looks", 2.5),
                              ({"spending": "haybittle"}, "design.spending", "haybittle"),
                              ({"looks": 3, "test": "one_sided"}, "design.looks", 3)):
        with pytest.raises(InputError) as err:
            dz.parse_design(_study(dict(BASE, **patch)))
        assert (err.value.key, err.value.value) == (key, value)
