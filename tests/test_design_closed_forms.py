"""Closed-form trial sizing against textbook formulas, scipy.stats and numerical integration."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

from uncertainty.analyses.design import trial_power as tp


def test_normal_approximation_sample_size() -> None:
    # 2 (z_{0.975} + z_{0.8})^2 sd^2 / delta^2 with sd = 1, delta = 0.5: 62.8 -> 63 per arm
    # (two-sample formula of Chow, Shao & Wang 2008, Sample Size Calculations in Clinical Research, ch. 3)
    expected = 2 * (stats.norm.ppf(0.975) + stats.norm.ppf(0.8)) ** 2 / 0.5**2
    assert tp.z_sample_size(0.5, 1.0, 0.05, 0.8) == int(np.ceil(expected)) == 63
    # paired: (z + z)^2 sd_d^2 / delta^2 = 31.4 -> 32 (same source)
    assert tp.z_sample_size(0.5, 1.0, 0.05, 0.8, design="paired") == 32


def test_exact_t_search_matches_textbook_and_noncentral_t() -> None:
    # standardised effect 0.5, alpha 0.05 two-sided, power 0.8: 64 per group
    # (Cohen 1988, Statistical Power Analysis, table 2.4.1; from memory)
    n = tp.n_for_power(0.5, 1.0, 0.05, 0.8, "parallel", 2, 500)
    assert n == 64
    # our search against scipy.stats.nct evaluated directly at n and n - 1
    df = 2 * n - 2
    tc = stats.t.ppf(0.975, df)
    ncp = 0.5 / np.sqrt(2 / n)
    assert stats.nct.sf(tc, df, ncp) + stats.nct.cdf(-tc, df, ncp) >= 0.8
    df1 = 2 * (n - 1) - 2
    ncp1 = 0.5 / np.sqrt(2 / (n - 1))
    tc1 = stats.t.ppf(0.975, df1)
    assert stats.nct.sf(tc1, df1, ncp1) + stats.nct.cdf(-tc1, df1, ncp1) < 0.8
    # exact t needs at least the normal-approximation n, and at most 2 more here
    assert tp.z_sample_size(0.5, 1.0) <= n <= tp.z_sample_size(0.5, 1.0) + 2


def test_t_power_agrees_with_simulated_scipy_t_tests() -> None:
    rng = np.random.default_rng(1)
    n, delta, sd, reps = 12, 0.9, 1.3, 40000
    a = rng.normal(0.0, sd, (reps, n))
    b = rng.normal(delta, sd, (reps, n))
    # power counts a significant two-sided test in the direction of benefit (here: an increase)
    test = stats.ttest_ind(b, a, axis=1)
    sim = np.mean((test.pvalue < 0.05) & (test.statistic > 0))
    se = np.sqrt(sim * (1 - sim) / reps)
    assert abs(tp.t_power(n, delta, sd) - sim) < 4 * se
    # paired: one-sample t test on differences (scipy.stats.ttest_1samp)
    d = rng.normal(delta, sd, (reps, n))
    test = stats.ttest_1samp(d, 0.0, axis=1)
    sim = np.mean((test.pvalue < 0.05) & (test.statistic > 0))
    se = np.sqrt(sim * (1 - sim) / reps)
    assert abs(tp.t_power(n, delta, sd, design="paired") - sim) < 4 * se


def test_assurance_closed_form_against_quadrature_of_z_power() -> None:
    # O'Hagan, Stevens & Campbell 2005 (Pharm Stat 4:187): assurance = integral over the design prior
    # of the probability of the desired outcome, a significant result in the direction of benefit;
    # for a known-sd z test and a normal prior it has a closed form.
    n, m, s, sd = 30, 0.4, 0.3, 1.0
    tau = sd * np.sqrt(2 / n)
    z = stats.norm.ppf(0.975)

    def zpow(d: float) -> float:
        return stats.norm.sf(z - d / tau)  # rejects in the beneficial (upward) direction

    quad = integrate.quad(lambda d: zpow(d) * stats.norm.pdf(d, m, s), -np.inf, np.inf)[0]
    assert tp.z_assurance(n, m, s, sd) == pytest.approx(quad, abs=1e-8)
    # no prior uncertainty: assurance is the power
    assert tp.z_assurance(n, m, 1e-12, sd) == pytest.approx(zpow(m), abs=1e-9)


def test_harmful_significant_results_are_not_success() -> None:
    # A vague design prior centred near no effect (invented: N(-0.05, 0.3) on a log ratio, benefit = a
    # decrease): the two directions add up to the two-sided rejection probability (quadrature), and
    # assurance counts only the beneficial one, well below the two-sided figure.
    n, m, s, sd = 30, -0.05, 0.3, 0.4
    tau = sd * np.sqrt(2 / n)
    z = stats.norm.ppf(0.975)
    two_sided = integrate.quad(lambda d: (stats.norm.sf(z - d / tau) + stats.norm.cdf(-z - d / tau))
                               * stats.norm.pdf(d, m, s), -np.inf, np.inf)[0]
    down = tp.z_assurance(n, m, s, sd, direction=-1.0)
    up = tp.z_assurance(n, m, s, sd, direction=1.0)
    assert down + up == pytest.approx(two_sided, abs=1e-8)
    assert tp.z_assurance(n, m, s, sd) == down  # default direction: the sign of the prior mean
    assert down < 0.7 * two_sided
    # the same with the exact t test: two-sided noncentral-t power (scipy.stats.nct) over the prior
    df, tc = 2 * n - 2, stats.t.ppf(0.975, 2 * n - 2)
    def t_reject(d: float) -> float:  # far out scipy's nct returns nan where the answer is 1
        p = stats.nct.sf(tc, df, d / tau) + stats.nct.cdf(-tc, df, d / tau)
        return float(p) if np.isfinite(p) else 1.0

    t_two_sided = integrate.quad(lambda d: t_reject(d) * stats.norm.pdf(d, m, s), m - 10 * s, m + 10 * s)[0]
    prior = stats.norm(m, s)
    both = tp.t_assurance(n, prior, sd, direction=-1.0, nodes=2000) + tp.t_assurance(n, prior, sd, direction=1.0,
                                                                                       nodes=2000)
    assert both == pytest.approx(t_two_sided, abs=2e-4)


def test_ancova_power_allows_for_the_estimated_slope() -> None:
    # ANCOVA by least squares per simulated trial (numpy.linalg.lstsq, the general-purpose reference):
    # y = mu + delta g + beta x + e; the analytic power with the slope-variance factor 1 + 1/(2n - 4)
    # (the mean of dx^2/Sxx, an inverse chi-square moment) agrees with the simulated rejection rate.
    rng = np.random.default_rng(4)
    n, delta, sd_res, reps = 10, 0.5, 0.5, 20000
    g = np.repeat([0.0, 1.0], n)
    x = rng.normal(0.0, 1.0, (reps, 2 * n))
    y = delta * g + 0.8 * x + rng.normal(0.0, sd_res, (reps, 2 * n))
    hits = 0
    for i in range(reps):
        design = np.column_stack([np.ones(2 * n), g, x[i]])
        coef, rss, *_ = np.linalg.lstsq(design, y[i], rcond=None)
        cov = rss[0] / (2 * n - 3) * np.linalg.inv(design.T @ design)
        hits += coef[1] / np.sqrt(cov[1, 1]) > stats.t.ppf(0.975, 2 * n - 3)
    sim = hits / reps
    se = np.sqrt(sim * (1 - sim) / reps)
    assert abs(tp.t_power(n, delta, sd_res, design="ancova") - sim) < 4 * se


def test_t_assurance_against_quadrature_of_exact_t_power() -> None:
    n, m, s, sd = 20, 0.5, 0.25, 1.0
    prior = stats.norm(m, s)
    quad = integrate.quad(lambda d: tp.t_power(n, d, sd, direction=1.0) * prior.pdf(d), m - 10 * s, m + 10 * s)[0]
    assert tp.t_assurance(n, prior, sd, nodes=2000) == pytest.approx(quad, abs=2e-4)
    # large n: the t assurance approaches the z closed form
    assert tp.t_assurance(400, prior, sd) == pytest.approx(tp.z_assurance(400, m, s, sd), abs=2e-3)


def test_half_width_probability_against_simulation() -> None:
    rng = np.random.default_rng(2)
    n, sd, w, reps = 15, 2.0, 1.5, 40000
    a = rng.normal(0, sd, (reps, n))
    b = rng.normal(0, sd, (reps, n))
    pooled = np.sqrt((a.var(axis=1, ddof=1) + b.var(axis=1, ddof=1)) / 2)
    hw = stats.t.ppf(0.975, 2 * n - 2) * pooled * np.sqrt(2 / n)
    sim = np.mean(hw <= w)
    se = np.sqrt(sim * (1 - sim) / reps)
    assert abs(tp.half_width_probability(n, sd, w) - sim) < 4 * se
    n_hw = tp.n_for_half_width(sd, w, 0.9, 0.05, "parallel", 2, 500)
    assert tp.half_width_probability(n_hw, sd, w) >= 0.9 > tp.half_width_probability(n_hw - 1, sd, w)


def test_bayes_success_against_simulated_conjugate_posteriors() -> None:
    rng = np.random.default_rng(3)
    n, sd, dm, ds, a0, s0, reps = 25, 1.0, -0.5, 0.2, 0.0, 0.5, 200000
    tau = sd * np.sqrt(2 / n)
    delta = rng.normal(dm, ds, reps)
    d_hat = rng.normal(delta, tau)
    prec = 1 / s0**2 + 1 / tau**2
    post_mean = (a0 / s0**2 + d_hat / tau**2) / prec
    # benefit = a negative effect; success when P(effect < 0 | data) > 0.975 (normal posterior)
    sim = np.mean(stats.norm.cdf(-post_mean * np.sqrt(prec)) > 0.975)
    se = np.sqrt(sim * (1 - sim) / reps)
    got = tp.bayes_success_probability(n, dm, ds, sd, a0, s0, design="parallel", direction=-1.0)
    assert abs(got - sim) < 4 * se
    # a vague analysis prior and a fixed effect: the one-sided z power Phi(|delta|/tau - z)
    vague = tp.bayes_success_probability(n, dm, 0.0, sd, 0.0, 1e6, direction=-1.0)
    assert vague == pytest.approx(stats.norm.cdf(0.5 / tau - stats.norm.ppf(0.975)), abs=1e-6)
