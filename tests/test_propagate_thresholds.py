"""Threshold questions of propagate against closed forms: P(X1 + X2 > t) for independent standard normals,
its Monte Carlo error against the binomial sqrt(p(1-p)/N), and the first-order index of the indicator
1{X1 + X2 > t} against the bivariate-normal orthant probability."""

from __future__ import annotations

import math

import numpy as np
import pytest
from fakes_uncertainty import CLASSIC, SIGMA, classic_study, evaluate
from scipy import stats

from uncertainty.analyses.propagate import propagate
from uncertainty.analyses.propagate.result import PropagateResult
from uncertainty.analyses.propagate.thresholds import pooled_order, threshold_probability, threshold_specs
from uncertainty.core.errors import InputError
from uncertainty.study.thresholds import threshold_in_unit

R, PER = 16, 1024  # 16 replicates of 1024 plain Monte Carlo draws


def _sum_of_normals(seed: int = 7) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    rng = np.random.default_rng(seed)
    x = rng.standard_normal((3, R * PER))
    return x[0] + x[1], {"X1": x[0], "X2": x[1], "X3": x[2]}


def _s1_closed_form(t: float) -> float:
    """Var(E[1{X1+X2>t} | X1]) / Var(1{...}) for independent N(0,1): E[1 | X1] = Phi(X1 - t), and
    E[Phi(X1 - t)^2] = P(W1 < -t, W2 < -t) for (W1, W2) of variances 2 and covariance 1 (closed form,
    common practice), i.e. a bivariate normal CDF at -t/sqrt(2) with correlation 1/2."""
    p = stats.norm.sf(t / math.sqrt(2))
    both = stats.multivariate_normal(mean=[0, 0], cov=[[1, 0.5], [0.5, 1]]).cdf([-t / math.sqrt(2)] * 2)
    return float((both - p * p) / (p * (1 - p)))


@pytest.mark.parametrize("t", [0.0, 1.0, -1.5])
def test_probability_and_error_match_closed_forms(t):
    y, x = _sum_of_normals()
    res = threshold_probability(y, "above", t, R, x)
    p = stats.norm.sf(t / math.sqrt(2))  # P(X1 + X2 > t) = 1 - Phi(t / sqrt 2)
    binomial_se = math.sqrt(p * (1 - p) / y.size)  # plain Monte Carlo (binomial, common practice)
    assert abs(res["p"] - p) < 4 * binomial_se
    # the replicate estimate of the error has ~15 df: within a factor 1.6 of the binomial value
    assert binomial_se / 1.6 < res["mc_se"] < binomial_se * 1.6
    s1 = _s1_closed_form(t)
    for name in ("X1", "X2"):
        est = res["sensitivity"][name]
        assert abs(est["S1"] - s1) < 4 * est["mc_se"] + 0.02, (name, est, s1)
    # X3 does not enter Y: its share is zero
    assert abs(res["sensitivity"]["X3"]["S1"]) < 4 * res["sensitivity"]["X3"]["mc_se"] + 0.01
    assert res["ranking"][-1] == "X3"


def test_s1_at_zero_is_one_third():
    # Sheppard's orthant formula P = 1/4 + arcsin(rho)/(2 pi) with rho = 1/2 gives 1/3 - 1/4 over 1/4
    assert _s1_closed_form(0.0) == pytest.approx(1 / 3, abs=1e-6)


def test_below_is_the_complement_and_nan_draws_are_left_out():
    y, x = _sum_of_normals(3)
    above = threshold_probability(y, "above", 0.5, R)
    below = threshold_probability(y, "below", 0.5, R)
    assert above["p"] + below["p"] == pytest.approx(1.0)
    y = y.copy()
    y[::100] = np.nan
    res = threshold_probability(y, "above", 0.5, R)
    assert res["nan_draws"] == len(y[::100]) and res["n"] == y.size - res["nan_draws"]


def test_constant_event_has_no_drivers():
    y, x = _sum_of_normals()
    res = threshold_probability(y, "above", 100.0, R, x)
    assert res["p"] == 0.0 and res["ranking"] == []
    assert all(math.isnan(v["S1"]) for v in res["sensitivity"].values())


def test_error_paths():
    y, _ = _sum_of_normals()
    with pytest.raises(InputError):
        threshold_probability(y, "over", 0.0, R)
    with pytest.raises(InputError):
        threshold_probability(y[:-1], "above", 0.0, R)


def test_pooled_order_follows_replicates():
    # two batches of 2 replicates: [a0 a1 | b0 b1] -> replicate 0 (a0, b0), then replicate 1 (a1, b1)
    out = pooled_order([np.array([0, 0, 1, 1]), np.array([2, 3])], 2)
    assert out.tolist() == [0, 0, 2, 1, 1, 3]


def test_threshold_units():
    assert threshold_in_unit("Jv", "0.02 mL/min/100g") == pytest.approx(0.02)
    # per 100 g from per 100 mL through the package's default tissue density 1.05 g/mL
    assert threshold_in_unit("Jv", "0.021 mL/min/100mL") == pytest.approx(0.02)
    # a whole-organ volume over 2 kg of tissue (20 units of 100 g): arithmetic
    assert threshold_in_unit("oedema_volume", "50 mL", tissue_mass_kg=2.0) == pytest.approx(2.5)
    assert threshold_in_unit("net_pressure", 3) == 3.0


def test_study_thresholds_through_propagate():
    study = classic_study(between=False)
    study.propagate = {"thresholds": [{"output": "net_pressure", "above": "1.5 kPa"},
                                      {"output": "Jv", "below": 0}]}
    res = propagate(study, samples=4096, method="mc", seed=5, outputs=["Jv"], evaluate=evaluate)
    doc = res.to_dict()
    assert [t["output"] for t in doc["thresholds"]] == ["net_pressure", "Jv"]
    assert "net_pressure" in doc["outputs"]  # a threshold's output is summarised too
    # net pressure is a sum of independent normals (the fake's invented priors, sigma fixed)
    mean = CLASSIC["Pc"][0] - CLASSIC["Pi"][0] - SIGMA * (CLASSIC["pi_c"][0] - CLASSIC["pi_i"][0])
    sd = math.sqrt(CLASSIC["Pc"][1] ** 2 + CLASSIC["Pi"][1] ** 2
                   + SIGMA ** 2 * (CLASSIC["pi_c"][1] ** 2 + CLASSIC["pi_i"][1] ** 2))
    t = doc["thresholds"][0]["threshold"]
    assert t == pytest.approx(1.5 * 7.50062, rel=1e-4)  # 1 kPa = 7.50062 mmHg (pint; from memory)
    ind = doc["thresholds"][0]["individual"]
    assert abs(ind["p"] - stats.norm.sf(t, mean, sd)) < 4 * ind["mc_se"] + 1e-3
    # Kf does not enter the net pressure
    assert abs(ind["sensitivity"]["Kf"]["S1"]) < 4 * ind["sensitivity"]["Kf"]["mc_se"] + 0.01
    # P(Jv < 0) is P(absorption)
    assert doc["thresholds"][1]["individual"]["p"] == pytest.approx(doc["p_absorption"])
    back = PropagateResult.from_dict(doc)
    assert back.to_dict()["thresholds"] == doc["thresholds"]
    assert "P(net_pressure > 11.25 mmHg)" in res.table() and "drivers, individual" in res.table()
    assert "Threshold questions" in res.html_section()


def test_no_thresholds_leaves_the_document_alone():
    study = classic_study(between=False)
    doc = propagate(study, samples=2048, seed=5, evaluate=evaluate).to_dict()
    assert "thresholds" not in doc


def test_output_the_model_lacks_is_refused():
    study = classic_study(between=False)
    study.propagate = {"thresholds": [{"output": "oedema_volume", "above": 1.0}]}
    with pytest.raises(InputError) as exc:
        threshold_specs(study, ["Jv", "net_pressure"])
    assert exc.value.key == "propagate.thresholds[0].output"
