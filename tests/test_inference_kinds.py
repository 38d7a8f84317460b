"""Sampling checks of the clearance_rate, swelling_rate and protein_ratio kinds and of group effects,
each against a reference outside the sampler.

- clearance_rate with lognormal Kf and V_dist priors and a lognormal (cv) reading of k = Jv / V_dist:
  in log space the model is linear-Gaussian, so log Kf has a closed-form normal posterior (the
  conjugate normal update with the prior variance of log V_dist added to the reading's; Gelman et
  al., Bayesian Data Analysis, 3rd ed., 2013, section 2.5 and 3.5).
- swelling_rate dV/dt = Jv - JL with a normal Pc prior, a normal lymph prior and a normal reading:
  linear-Gaussian again, so Pc has a closed-form normal posterior.
- protein_ratio (Patlak steady state) with only sigma uncertain: the posterior mean and sd of sigma
  against a numerical integration of prior x likelihood on a fine grid (scipy.integrate.trapezoid).
- group effects: lymph-flow readings of two invented groups with a Kf effect; the posterior of the
  log effect against the groups' difference in mean log readings (the maximum-likelihood estimate).
Agreement is asked within 4 Monte Carlo standard errors (ArviZ mcse) of the draws.
"""

from __future__ import annotations

import numpy as np
import pytest
from inference_helpers import FIXED, lognormal, normal, problem, starling_outputs
from scipy import integrate, stats

from uncertainty.analyses.inference.api import fit
from uncertainty.analyses.inference.summaries import flat
from uncertainty.physiology import solute
from uncertainty.priors import Prior

pytestmark = pytest.mark.slow

PC = 20.0  # mmHg, invented fixed capillary pressure of the stand-in tissue
NET = PC - FIXED["Pi"] - FIXED["sigma"] * (FIXED["pi_c"] - FIXED["pi_i"])  # net pressure, mmHg


def _agree(idata, var, mean, sd, column=0):
    import arviz as az

    x = flat(idata, var)
    x = x[:, column] if x.ndim > 1 else x
    se_mean = float(np.ravel(az.mcse(idata, var_names=[var], method="mean")[var].values)[column])
    ess = float(np.ravel(az.ess(idata, var_names=[var])[var].values)[column])
    assert abs(x.mean() - mean) < 4 * se_mean, (var, x.mean(), mean, se_mean)
    assert abs(x.std() - sd) < 4 * sd / np.sqrt(2 * ess), (var, x.std(), sd)


def test_clearance_rate_log_kf_matches_closed_form():
    # invented round numbers: Kf median 0.004 (gsd 1.5), V_dist median 12 mL/100 g (gsd 1.3),
    # k read as 0.0025 /min with cv 0.2
    kf_med, kf_gsd, v_med, v_gsd, k_obs, cv = 0.004, 1.5, 12.0, 1.3, 0.0025, 0.2
    obs = {"kind": "clearance_rate", "value": k_obs, "cv": cv, "unit": "1/min",
           "volume": {"dist": "lognormal", "median": v_med, "gsd": v_gsd, "unit": "mL/100g"}}
    res = fit(problem({"Kf": lognormal("Kf", kf_med, kf_gsd)}, [obs], fixed=FIXED | {"Pc": PC}),
              seed=5, draws=1500, tune=800)
    assert res.passed, res.doc["diagnostics"]["failing"]
    # log k = log Kf + log NET - log V + e: prior of log Kf N(m, s^2), "reading" of log Kf
    # y = log k_obs - log NET + log V_med with variance s_V^2 + s_e^2
    m, s = np.log(kf_med), np.log(kf_gsd)
    noise_var = np.log(v_gsd) ** 2 + np.log1p(cv * cv)
    y = np.log(k_obs) - np.log(NET) + np.log(v_med)
    prec = 1 / s**2 + 1 / noise_var
    idata = res.idata
    idata.posterior["logKf"] = np.log(idata.posterior["Kf__subject"])
    _agree(idata, "logKf", (m / s**2 + y / noise_var) / prec, prec**-0.5)


def test_swelling_rate_pc_matches_closed_form():
    # invented: Pc ~ N(20, 3^2), lymph JL ~ N(0.010, 0.004^2) mL/min/100 g, dV/dt read 0.012 +- 0.005
    kf = FIXED["Kf"]
    c = FIXED["Pi"] + FIXED["sigma"] * (FIXED["pi_c"] - FIXED["pi_i"])
    jl_m, jl_s, y, s = 0.010, 0.004, 0.012, 0.005
    obs = {"kind": "swelling_rate", "value": y, "sd": s, "unit": "mL/min/100g",
           "lymph": {"dist": "normal", "mean": jl_m, "sd": jl_s, "unit": "mL/min/100g"}}
    res = fit(problem({"Pc": normal("Pc", 20.0, 3.0)}, [obs]), seed=6, draws=1500, tune=800)
    assert res.passed, res.doc["diagnostics"]["failing"]
    # y = Kf (Pc - c) - JL + e: a reading of Pc at (y + JL_m)/Kf + c with sd sqrt(s^2 + JL_s^2)/Kf
    r_mean, r_sd = (y + jl_m) / kf + c, np.hypot(s, jl_s) / kf
    prec = 1 / 3.0**2 + 1 / r_sd**2
    _agree(res.idata, "Pc__subject", (20.0 / 9.0 + r_mean / r_sd**2) / prec, prec**-0.5)


def test_protein_ratio_sigma_matches_grid_posterior():
    # invented: sigma ~ Beta(mean 0.85, sd 0.06), PS fixed 0.002 mL/min/100 g, ratio read 0.45 +- 0.04
    ps, r_obs, r_sd = 0.002, 0.45, 0.04
    prior = Prior("sigma", "beta", {"mean": 0.85, "sd": 0.06})
    fixed = {k: v for k, v in FIXED.items() if k != "sigma"} | {"Pc": PC, "PS": ps}
    res = fit(problem({"sigma": prior}, [{"kind": "protein_ratio", "value": r_obs, "sd": r_sd}], fixed=fixed),
              seed=7, draws=1500, tune=800)
    assert res.passed, res.doc["diagnostics"]["failing"]
    grid = np.linspace(1e-4, 1 - 1e-4, 20001)
    jv = starling_outputs({**fixed, "sigma": grid}, np)["Jv"]
    ratio = solute.steady_state_ratio(jv, grid, ps)
    dens = prior.frozen().pdf(grid) * stats.norm.pdf(r_obs, ratio, r_sd)
    z = integrate.trapezoid(dens, grid)
    mean = integrate.trapezoid(grid * dens, grid) / z
    sd = np.sqrt(integrate.trapezoid((grid - mean) ** 2 * dens, grid) / z)
    _agree(res.idata, "sigma__subject", mean, sd)


def test_group_effect_on_kf_recovered_from_lymph_flow():
    # invented: 12 subjects, group T has Kf x 1.6 against C; one lymph-flow reading each (cv 0.1)
    rng = np.random.default_rng(42)
    kf_prior = lognormal("Kf", 0.004, 1.3, between_subject={"cv": 0.15})
    obs = []
    for s in range(12):
        group = "T" if s % 2 else "C"
        kf = 0.004 * np.exp(0.15 * rng.standard_normal()) * (1.6 if group == "T" else 1.0)
        jv = kf * NET * np.exp(0.1 * rng.standard_normal())
        obs.append({"kind": "lymph_flow", "value": float(jv), "cv": 0.1, "unit": "mL/min/100g",
                    "subject": f"S{s:02d}", "group": group, "effects": ["Kf"]})
    res = fit(problem({"Kf": kf_prior}, obs, fixed=FIXED | {"Pc": PC}), seed=8, draws=1000, tune=1000)
    assert res.passed, res.doc["diagnostics"]["failing"]
    log_ratio = flat(res.idata, "Kf__effect")[:, 0]  # log ratio of group T against C (first seen)
    # reference: the difference of the groups' mean log readings (the maximum-likelihood log ratio
    # under these lognormal errors), with its standard error from the known spreads (0.15 and 0.1)
    logs = np.log([o["value"] for o in obs])
    d = logs[1::2].mean() - logs[0::2].mean()
    se = np.sqrt(2 * (0.15**2 + 0.1**2) / 6)
    lo, hi = np.quantile(log_ratio, [0.025, 0.975])
    assert lo <= d <= hi and lo > 0.0, (lo, d, hi)
    assert abs(np.median(log_ratio) - d) < se, (np.median(log_ratio), d, se)
