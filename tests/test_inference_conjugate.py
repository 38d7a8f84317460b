"""Closed-form checks of the sampled posterior (conjugate normal cases) and a non-identified model.

Normal prior N(m0, s0^2) and a normal reading y with sd s: posterior precision 1/s0^2 + 1/s^2,
mean (m0/s0^2 + y/s^2) / precision (the conjugate normal update; e.g. Gelman et al., Bayesian Data
Analysis, 3rd ed., 2013, section 2.5). Agreement is asked within 4 Monte Carlo standard errors
(ArviZ mcse) of the draws.
"""

from __future__ import annotations

import numpy as np
import pytest
from inference_helpers import FIXED, lognormal, normal, problem

from uncertainty.analyses.inference.api import fit
from uncertainty.analyses.inference.summaries import flat

pytestmark = pytest.mark.slow


def _conjugate(m0, s0, y, s):
    prec = 1 / s0**2 + 1 / s**2
    return (m0 / s0**2 + y / s**2) / prec, prec**-0.5


def _check(result, name, mean, sd):
    import arviz as az

    idata = result.idata
    var = f"{name}__subject"
    x = flat(idata, var)[:, 0]
    se_mean = float(az.mcse(idata, var_names=[var], method="mean")[var].values.ravel()[0])
    # normal-theory standard error of an sd, sd / sqrt(2 ESS) (the posterior here is normal)
    ess = float(az.ess(idata, var_names=[var])[var].values.ravel()[0])
    se_sd = sd / np.sqrt(2 * ess)
    assert abs(x.mean() - mean) < 4 * se_mean, (x.mean(), mean, se_mean)
    assert abs(x.std() - sd) < 4 * se_sd, (x.std(), sd, se_sd)
    assert result.doc["parameters"][name]["mean"] == pytest.approx(x.mean())


def test_normal_measurement_matches_closed_form():
    # prior Pc ~ N(20, 3^2), reading 24 +- 2 mmHg (invented round numbers)
    res = fit(problem({"Pc": normal("Pc", 20.0, 3.0)},
                      [{"kind": "measurement", "parameter": "Pc", "value": 24.0, "sd": 2.0}]),
              seed=11, draws=1500, tune=700)
    assert res.passed
    mean, sd = _conjugate(20.0, 3.0, 24.0, 2.0)
    _check(res, "Pc", mean, sd)
    # contraction = 1 - var_post / var_prior, closed form s^2 / (s0^2 + s^2) ... as 1 - sd^2/s0^2
    assert res.doc["parameters"]["Pc"]["contraction"] == pytest.approx(1 - sd**2 / 9.0, abs=0.06)


def test_normal_lymph_flow_with_jv_linear_in_pc_matches_closed_form():
    # Jv = Kf (Pc - c), c = Pi + sigma (pi_c - pi_i); a reading of Jv with sd s is a reading of Pc
    # at y/Kf + c with sd s/Kf.
    kf = FIXED["Kf"]
    c = FIXED["Pi"] + FIXED["sigma"] * (FIXED["pi_c"] - FIXED["pi_i"])
    y, s = 0.045, 0.008
    res = fit(problem({"Pc": normal("Pc", 24.0, 4.0)},
                      [{"kind": "lymph_flow", "value": y, "sd": s, "unit": "mL/min/100g"}]),
              seed=12, draws=1500, tune=700)
    assert res.passed
    mean, sd = _conjugate(24.0, 4.0, y / kf + c, s / kf)
    _check(res, "Pc", mean, sd)
    # Jv posterior is the same linear map of Pc
    jv = res.doc["Jv"]
    assert jv["mean"] == pytest.approx(kf * (res.doc["parameters"]["Pc"]["mean"] - c), rel=1e-9)
    assert any("post-nodal" in n for n in res.doc["notes"])


def test_only_the_product_kf_times_net_pressure_is_identified():
    # Kf lognormal (log-sd 0.26) and Pc normal with net pressure 10 +- 2.6 mmHg: equal relative
    # widths. A precise lymph-flow reading fixes Jv = Kf * net pressure, not the two factors.
    kf = lognormal("Kf", 0.004, float(np.exp(0.26)))
    pc = normal("Pc", 14.3 + 10.0, 2.6)
    res = fit(problem({"Kf": kf, "Pc": pc},
                      [{"kind": "lymph_flow", "value": 0.04, "cv": 0.02}]),
              seed=13, draws=1500, tune=1000)
    doc = res.doc
    assert doc["Jv"]["contraction"] > 0.9          # the product is pinned down
    pairs = doc["identifiability"]["confounded"]
    assert len(pairs) == 1 and set(pairs[0]["pair"]) == {"Kf", "Pc"}
    assert pairs[0]["posterior_correlation"] < -0.8
    assert pairs[0]["contraction_unidentified"] < 0.15  # the ratio direction keeps its prior width
    assert any("only a combination of Kf and Pc" in n for n in doc["notes"])
    # neither factor alone is pinned: each keeps well over a third of its prior variance
    assert doc["parameters"]["Kf"]["contraction"] < 0.7
    assert doc["parameters"]["Pc"]["contraction"] < 0.7


@pytest.mark.parametrize("reading_sd, prior_flagged", [(0.2, False), (20.0, True)])
def test_power_scaling_flags_the_prior_only_where_the_reading_is_weak(reading_sd, prior_flagged):
    """Conjugate normal case (prior sd 2 mmHg, invented): raising the prior to a power alpha makes its
    sd 2 / sqrt(alpha); with a reading of sd 0.2 the posterior sd, (alpha / 4 + 25)^-1/2, hardly moves
    (prior sensitivity below the threshold, likelihood sensitivity above); with a reading of sd 20 the
    posterior is nearly the prior and moves with it (flagged, prior dominates)."""
    from uncertainty.analyses.inference.checks import PSENS_THRESHOLD, power_scaling, top_level

    obs = [{"kind": "measurement", "parameter": "Pc", "value": 21.0, "sd": reading_sd}]
    result = fit(problem({"Pc": normal("Pc", 20.0, 2.0)}, obs), seed=5, draws=1000, tune=500, checks=False)
    assert top_level(result.built.model) == ["Pc__z"]
    sens = power_scaling(result.built, result.idata, ["Pc__subject"])["Pc"]
    assert (sens["prior"] >= PSENS_THRESHOLD) is prior_flagged, sens
    assert (sens["likelihood"] >= PSENS_THRESHOLD) is not prior_flagged, sens
    assert sens["diagnosis"] == ("prior-driven" if prior_flagged else "-")
