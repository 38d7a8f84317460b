"""The study's correlations (Gaussian copula) wherever inference uses the prior: prior-predictive draws,
the prior draws behind contraction, and the copula term of the power-scaling log prior.

References: the Gaussian copula density c(u) = N_R(z) / prod N(z_i), z = Phi^-1(u) (Nelsen, An
Introduction to Copulas, 2nd ed., Springer 2006, section 5.3; from memory); the check values below are
computed with scipy and numpy directly, not with the tool.
"""

from __future__ import annotations

import numpy as np
import pytest
from inference_helpers import FIXED, lognormal, normal, problem
from scipy import stats

from uncertainty.analyses.inference import checks

# Invented test priors (round numbers): Kf lognormal, Pc normal with a between-subject sd
KF = lognormal("Kf", 0.004, 1.3)
PC = normal("Pc", 24.3, 2.6, between_subject={"sd": 1.5})
RHO = 0.8          # invented strong correlation of the normal scores


def _problem(value=0.075, sd=0.004, rho=RHO):
    prob = problem({"Kf": KF, "Pc": PC}, [{"kind": "lymph_flow", "value": value, "sd": sd}])
    prob.correlation = np.array([[1.0, rho], [rho, 1.0]])
    return prob


def test_correlated_draws_keep_marginals_and_take_the_copula():
    rng = np.random.default_rng(1)
    n = 40_000
    indep = {"Kf": KF.frozen().rvs(n, random_state=rng), "Pc": PC.frozen().rvs(n, random_state=rng)}
    new = checks.correlate_prior_draws(_problem(), indep)
    # marginals unchanged (Kolmogorov-Smirnov against the declared prior, scipy)
    assert stats.kstest(new["Kf"], KF.frozen().cdf).pvalue > 1e-3
    assert stats.kstest(new["Pc"], PC.frozen().cdf).pvalue > 1e-3
    # normal-score correlation is RHO: log Kf and Pc are both normal, so Pearson on (log Kf, Pc)
    r = np.corrcoef(np.log(new["Kf"]), new["Pc"])[0, 1]
    assert r == pytest.approx(RHO, abs=4 * (1 - RHO**2) / np.sqrt(n))
    assert checks.correlate_prior_draws(_problem(rho=0.0), indep) == {}


def test_copula_log_density_is_the_bivariate_normal_ratio():
    x = {"Kf": np.array([0.003, 0.004, 0.006]), "Pc": np.array([20.0, 24.3, 30.0])}
    z = np.column_stack([np.log(x["Kf"] / 0.004) / np.log(1.3), (x["Pc"] - 24.3) / 2.6])
    cov = np.array([[1.0, RHO], [RHO, 1.0]])
    want = stats.multivariate_normal(np.zeros(2), cov).logpdf(z) - stats.norm.logpdf(z).sum(axis=1)
    got = checks.copula_log_density(_problem(), x)
    assert got == pytest.approx(want, rel=1e-9, abs=1e-9)


@pytest.mark.slow
def test_prior_predictive_tail_probability_uses_the_correlation():
    """One lymph reading with correlated Kf and Pc: the tail probability of the reading under the prior
    predictive equals the one from correlated numpy draws (Jv = Kf (Pc - Pi - sigma (pi_c - pi_i)),
    reading ~ N(Jv, sd)), and differs from the independent-prior value."""
    from uncertainty.analyses.inference.model_builder import build_model

    y, sd, n_ref = 0.075, 0.004, 400_000
    c = FIXED["Pi"] + FIXED["sigma"] * (FIXED["pi_c"] - FIXED["pi_i"])
    rng = np.random.default_rng(2)

    def reference(rho):
        z = rng.standard_normal((n_ref, 2)) @ np.linalg.cholesky([[1, rho], [rho, 1]]).T
        kf = 0.004 * 1.3 ** z[:, 0]
        pc = 24.3 + 2.6 * z[:, 1] + 1.5 * rng.standard_normal(n_ref)
        rep = kf * (pc - c) + sd * rng.standard_normal(n_ref)
        return 2 * min((rep <= y).mean(), (rep >= y).mean())

    p_corr, p_indep = reference(RHO), reference(0.0)
    built = build_model(_problem(y, sd))
    draws = 4000
    row = checks.prior_data_conflict(built, checks.prior_predictive(built, draws=draws, seed=3))[0]
    se = np.sqrt(p_corr * (1 - p_corr) / draws) * 2 + 2 / draws   # binomial se of a two-sided p
    assert abs(row["p_tail"] - p_corr) < 4 * se, (row["p_tail"], p_corr, p_indep)
    assert abs(p_corr - p_indep) > 8 * se


def test_log_densities_in_one_pass_equal_pymc_own():
    """``checks.add_log_densities`` (one compiled function) against PyMC's ``compute_log_prior`` (declared
    priors) and ``compute_log_likelihood`` (an outside reference: the library's own functions), on 2 x 25 draws
    of the correlated two-quantity model; the copula's term is added to the prior group as before."""
    import arviz as az
    import pymc as pm

    from uncertainty.analyses.inference.model_builder import build_model

    built = build_model(_problem())
    with built.model:
        draws = pm.sample_prior_predictive(draws=50, random_seed=3).prior
    kept = [v.name for v in built.model.free_RVs + built.model.deterministics if v.name in draws]
    posterior = {k: draws[k].values.reshape((2, 25) + draws[k].shape[2:]) for k in kept}
    ours, pymc_own = az.from_dict(posterior=posterior), az.from_dict(posterior=posterior)
    checks.add_log_densities(built, ours)
    kept_prior = ours.log_prior
    checks.add_log_densities(built, ours)          # groups already there are kept, not computed again
    assert ours.log_prior is kept_prior
    pm.compute_log_prior(pymc_own, var_names=checks.top_level(built.model), model=built.model, progressbar=False)
    pm.compute_log_likelihood(pymc_own, model=built.model, progressbar=False)
    for group in ("log_prior", "log_likelihood"):
        for name, values in getattr(pymc_own, group).data_vars.items():
            np.testing.assert_allclose(getattr(ours, group)[name].values, values.values, rtol=1e-12)
    assert set(ours.log_prior.data_vars) == set(pymc_own.log_prior.data_vars) | {"copula"}
    expected = checks.copula_log_density(built.problem, {n: posterior[n] for n in ("Kf", "Pc")})
    np.testing.assert_allclose(ours.log_prior["copula"].values, expected, rtol=1e-12)
    # the readings' recorded predictions were inputs of the graph (not the model computing them); without them in
    # the trace the model computes them, with the same values
    preds = [k for k in posterior if k.endswith("__pred")]
    assert preds
    without = az.from_dict(posterior={k: v for k, v in posterior.items() if k not in preds})
    checks.add_log_densities(built, without)
    for group in ("log_prior", "log_likelihood"):
        for name, values in getattr(pymc_own, group).data_vars.items():
            np.testing.assert_allclose(getattr(without, group)[name].values, values.values, rtol=1e-12)


def test_posterior_predictive_reads_the_prediction_from_the_trace():
    """The readings are drawn around the recorded prediction ``{term}__pred``, so the posterior predictive takes
    it from the draws instead of compiling the model again: with the trace's prediction replaced by 1000 (an
    invented value far from any the model gives), every replicated reading lies within 10 sd of 1000."""
    import arviz as az
    import pymc as pm

    from uncertainty.analyses.inference.model_builder import build_model

    built = build_model(_problem())
    with built.model:
        draws = pm.sample_prior_predictive(draws=50, random_seed=4).prior
    kept = [v.name for v in built.model.free_RVs + built.model.deterministics if v.name in draws]
    posterior = {k: draws[k].values.reshape((2, 25) + draws[k].shape[2:]) for k in kept}
    (term,) = built.terms
    assert term.predicted in posterior
    posterior[term.predicted] = np.full_like(posterior[term.predicted], 1000.0)
    idata = az.from_dict(posterior=posterior)
    checks.posterior_predictive(built, idata, seed=5)
    rep = idata.posterior_predictive[term.name].values
    assert np.all(np.abs(rep - 1000.0) < 10 * 0.004)   # sd of the reading in _problem
