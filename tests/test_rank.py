"""Value of information against linear-Gaussian closed forms; study-level ranking and bad input."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from uncertainty.analyses.rank import Reading, rank_draws
from uncertainty.core.errors import InputError

# Linear-Gaussian model Y = sum_i c_i theta_i, theta_i ~ N(0, v_i) independent, reading X = theta + N(0, s^2):
# E[Var(Y)] - E[Var(Y|X)] = c^2 v^2 / (v + s^2) (normal conditioning; common practice, any Bayesian text).
C = np.array([1.5, -2.0, 0.7])
V = np.array([4.0, 1.0, 2.0])


def _draws(n: int = 6000, seed: int = 0) -> tuple[dict, np.ndarray]:
    rng = np.random.default_rng(seed)
    th = rng.standard_normal((n, 3)) * np.sqrt(V)
    return {"a": th[:, 0], "b": th[:, 1], "c": th[:, 2]}, th @ C


def _closed(i: int, s: float) -> float:
    return C[i] ** 2 * V[i] ** 2 / (V[i] + s**2)


def _tol(se: float, y_var_n: int = 6000) -> float:
    # MC error of the figure plus that of the sample variance of Y (sd of a variance: var sqrt(2/n))
    return 4 * np.hypot(se, float(C**2 @ V) * np.sqrt(2 / y_var_n))


def test_single_readings_match_closed_form_and_stay_below_perfect_information() -> None:
    vals, y = _draws()
    cands = [Reading("A", "a", sd=1.0), Reading("B", "b", sd=0.2), Reading("C", "c", sd=3.0)]
    res = rank_draws(vals, y, cands, seed=1)
    by = {r["name"]: r for r in res["candidates"]}
    for name, i, s in (("A", 0, 1.0), ("B", 1, 0.2), ("C", 2, 3.0)):
        row = by[name]
        assert abs(row["expected_variance_reduction"] - _closed(i, s)) < _tol(row["mc_se"])
        # perfect information: Var(Y) S1 = c^2 v
        assert abs(row["perfect_information_bound"] - C[i] ** 2 * V[i]) < _tol(row["perfect_information_mc_se"])
        assert row["expected_variance_reduction"] < row["perfect_information_bound"] + _tol(row["mc_se"])
    assert [r["name"] for r in res["candidates"]] == ["A", "B", "C"]  # 7.2 > 3.85 > 0.18
    assert by["C"]["method"] == "importance" and by["B"]["method"] == "regression"


def test_regression_and_importance_agree_where_both_apply() -> None:
    vals, y = _draws(seed=3)
    c = [Reading("A", "a", sd=2.5)]
    r1 = rank_draws(vals, y, c, seed=2, method="regression")["candidates"][0]
    r2 = rank_draws(vals, y, c, seed=2, method="importance")["candidates"][0]
    assert abs(r1["expected_variance_reduction"] - r2["expected_variance_reduction"]) < 4 * np.hypot(
        r1["mc_se"], r2["mc_se"]) + 0.2
    assert abs(r2["expected_variance_reduction"] - _closed(0, 2.5)) < _tol(r2["mc_se"])


def test_best_pair_is_joint_not_the_sum_of_singles() -> None:
    # two readings of the same quantity: posterior precision 1/v + 1/s1^2 + 1/s2^2, so the pair reduces
    # c^2 (v - 1/(1/v + 1/s1^2 + 1/s2^2)) = 7.5, well below the sum of singles 7.2 + 4.5 = 11.7
    vals, y = _draws(seed=5)
    cands = [Reading("A1", "a", sd=1.0, cost=1), Reading("A2", "a", sd=2.0, cost=1),
             Reading("B", "b", sd=0.2, cost=3)]
    res = rank_draws(vals, y, cands, seed=4, budget=2)
    pair = res["best_pair"]
    assert set(pair["names"]) == {"A1", "A2"}
    joint = C[0] ** 2 * (V[0] - 1 / (1 / V[0] + 1 / 1.0 + 1 / 4.0))
    assert abs(pair["expected_variance_reduction"] - joint) < _tol(pair["mc_se"])
    assert set(res["best_set"]["names"]) == {"A1", "A2"}
    # with a larger budget the best set takes the complementary reading of b, not a second reading of a:
    # A1 + B jointly: 7.2 + 3.846 (independent quantities add exactly here)
    res = rank_draws(vals, y, cands, seed=4, budget=4)
    assert set(res["best_set"]["names"]) == {"A1", "B"}
    assert abs(res["best_set"]["expected_variance_reduction"] - (_closed(0, 1.0) + _closed(1, 0.2))) < _tol(
        res["best_set"]["mc_se"])


def test_correlated_inputs_joint_closed_form() -> None:
    # theta ~ N(0, S) correlated, readings of theta_1 and theta_2: reduction = c' S H' (H S H' + R)^-1 H S c
    rng = np.random.default_rng(8)
    S = np.array([[1.0, 0.6], [0.6, 2.0]])
    c = np.array([1.0, 1.0])
    th = rng.multivariate_normal([0, 0], S, 6000)
    y = th @ c
    R = np.diag([0.5**2, 1.0**2])
    expect = float(c @ S @ np.linalg.solve(S + R, S @ c))
    res = rank_draws({"p": th[:, 0], "q": th[:, 1]}, y, [Reading("P", "p", sd=0.5), Reading("Q", "q", sd=1.0)],
                     seed=9)
    pair = res["best_pair"]
    tol = 4 * np.hypot(pair["mc_se"], float(c @ S @ c) * np.sqrt(2 / 6000))
    assert abs(pair["expected_variance_reduction"] - expect) < tol


def test_expected_width_is_the_normal_posterior_width_and_importance_meets_its_error_target() -> None:
    # normal posterior of a linear-Gaussian Y: its 95% width is 2 z_{0.975} sd(Y | X), the same for every X
    # (normal quantiles; common practice), so the expected width is 2 z sqrt(Var(Y) - c^2 v^2 / (v + s^2))
    vals, y = _draws(seed=12)
    z = stats.norm.ppf(0.975)
    res = rank_draws(vals, y, [Reading("A", "a", sd=1.0), Reading("C", "c", sd=3.0)], seed=13)
    by = {r["name"]: r for r in res["candidates"]}
    assert by["A"]["method"] == "regression" and by["C"]["method"] == "importance"
    for name, i, s in (("A", 0, 1.0), ("C", 2, 3.0)):
        row = by[name]
        width = 2 * z * np.sqrt(float(C**2 @ V) - _closed(i, s))
        # MC error of the figure, and that of a sample 95% range: sqrt(2 p (1 - p) / n) / (phi(z) 2 z) = 1.3% of
        # the width at p = 0.025, n = 6000 (asymptotic variance of a sample quantile; common practice)
        assert abs(row["expected_ci95_width"] - width) < 4 * np.hypot(row["expected_ci95_width_mc_se"], 0.013 * width)
        assert row["expected_var_post_mc_se"] > 0 and row["per_cost_mc_se"] > 0
    # importance reweighting: outer readings grown until the MC error is below 5% of the reduction (issue 6)
    assert by["C"]["mc_rel_error"] <= 0.05 and by["C"]["importance_outer"] >= 800


def test_expected_width_of_a_lognormal_output_matches_its_closed_form() -> None:
    # theta ~ N(0, v), Y = exp(theta), reading X = theta + N(0, s^2): theta | X ~ N(m, vp), vp = 1/(1/v + 1/s^2),
    # m ~ N(0, v - vp) over X (conjugate normal; common practice). Y | X is lognormal, 95% width
    # exp(m) (exp(z sqrt(vp)) - exp(-z sqrt(vp))) and variance exp(2m + vp)(exp(vp) - 1) (lognormal quantiles
    # and moments; common practice); over m, E[exp(k m)] = exp(k^2 (v - vp) / 2). The width changes with X,
    # so a location-shift reading of the residuals (one residual spread for every X) would be too wide.
    v, s = 0.36, 0.3
    vp = 1 / (1 / v + 1 / s**2)
    z = stats.norm.ppf(0.975)
    width = np.exp((v - vp) / 2) * 2 * np.sinh(z * np.sqrt(vp))
    var_post = np.exp(2 * (v - vp) + vp) * (np.exp(vp) - 1)
    th = np.random.default_rng(22).standard_normal(8192) * np.sqrt(v)
    row = rank_draws({"t": th}, np.exp(th), [Reading("T", "t", sd=s)], seed=1)["candidates"][0]
    assert row["method"] == "regression"
    assert abs(row["expected_ci95_width"] - width) < 4 * row["expected_ci95_width_mc_se"] + 0.02 * width
    assert abs(row["expected_var_post"] - var_post) < 4 * row["expected_var_post_mc_se"] + 0.02 * var_post


def test_unknown_quantity_is_an_input_error() -> None:
    vals, y = _draws(200)
    with pytest.raises(InputError):
        rank_draws(vals, y, [Reading("Z", "zz", sd=1.0)])


# ---------------------------------------------------------------------------------------------
# ranking from the current posterior (observations present)

# Conjugate normal: Pc ~ N(20, 3^2) (invented), one reading 23 with sd 2 already observed, candidate a second
# reading with sd 2. Posterior variance after n readings: 1/(1/v + sum 1/s_i^2) (conjugate normal model;
# common practice, e.g. Gelman et al., Bayesian Data Analysis, section 2.5). Jv = Kf (Pc - Pi - sigma (pi_c -
# pi_i)) is linear in Pc with everything else fixed, so Var(Jv | .) = Kf^2 Var(Pc | .).
_KF, _V, _S1, _S2 = 0.01, 9.0, 2.0, 2.0


def _conjugate_doc(tmp_path) -> dict:
    return {
        "study": {"title": "conjugate check (invented)", "tissue": "skeletal_muscle", "model": "classic",
                  "seed": 11},
        "parameters": {"Pc": {"dist": "normal", "mean": 20.0, "sd": 3.0, "unit": "mmHg"}, "Kf": _KF,
                       "Pi": -1.0, "pi_c": 25.0, "pi_i": 10.0, "sigma": 0.9},
        "observations": [{"kind": "measurement", "parameter": "Pc", "value": 23.0, "sd": _S1, "unit": "mmHg"}],
        "rank": {"candidates": [{"name": "second Pc", "parameter": "Pc", "sd": _S2, "unit": "mmHg"}]},
    }


@pytest.mark.slow
def test_rank_from_posterior_matches_two_reading_conjugate_closed_form(tmp_path) -> None:
    from uncertainty.analyses.rank import rank
    from uncertainty.study import Study

    study = Study.from_dict(_conjugate_doc(tmp_path), base_dir=tmp_path)
    assert study.names == ["Pc"]
    doc = rank(study, samples=4096).to_dict()
    assert doc["from"] == "posterior" and doc["posterior_draws"]["draws"] >= 1000
    v1 = 1 / (1 / _V + 1 / _S1**2)               # after the observed reading
    v2 = 1 / (1 / _V + 1 / _S1**2 + 1 / _S2**2)  # after the candidate as well
    n = doc["samples"]
    assert doc["prior"]["var"] == pytest.approx(_KF**2 * v1, rel=4 * np.sqrt(2 / n))
    row = doc["candidates"][0]
    tol = 4 * np.hypot(row["mc_se"], _KF**2 * v1 * np.sqrt(2 / n))
    assert abs(row["expected_var_post"] - _KF**2 * v2) < tol
    assert abs(row["expected_variance_reduction"] - _KF**2 * (v1 - v2)) < tol
    # perfect information on the posterior draws: Jv is a function of Pc alone, S1 = 1
    assert row["perfect_information_S1"] == pytest.approx(1.0, abs=0.05)
    # the prior path stays available and gives the one-reading figure instead
    prior_doc = rank(study, samples=8192, from_prior=True).to_dict()
    assert prior_doc["from"] == "prior"
    prow = prior_doc["candidates"][0]
    v1p = 1 / (1 / _V + 1 / _S2**2)
    assert abs(prow["expected_var_post"] - _KF**2 * v1p) < 4 * np.hypot(prow["mc_se"], _KF**2 * _V * np.sqrt(2 / 8192))
