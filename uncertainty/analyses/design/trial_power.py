"""Closed forms for trial sizing: power, sample size, assurance, interval half-width.

All effects and spreads are on the analysis scale (natural units for a shift, natural log for a
ratio). ``design`` is one of

- ``parallel``: two arms of ``n`` subjects each, two-sample t test, ``df = 2n - 2``,
  standard error ``sd * sqrt(2/n)``;
- ``ancova``: as parallel, adjusted for a baseline measurement; ``sd`` is then the residual sd
  ``sd * sqrt(1 - rho^2)`` and ``df = 2n - 3``; the standard error carries the variance of the
  estimated baseline slope, a factor ``1 + 1/(2n - 4)`` on the variance (the mean of
  dx^2 / Sxx with dx ~ N(0, 2 s_x^2/n) and Sxx ~ s_x^2 chi2_{2n-2}, E[1/chi2_k] = 1/(k - 2));
- ``paired``: before/after in the same ``n`` subjects, one-sample t test on the differences,
  ``df = n - 1``, standard error ``sd_diff / sqrt(n)``;
- ``crossover``: AB/BA two-period crossover with ``n`` subjects per sequence (N = 2n), ``sd`` the sd of
  a period difference, sqrt(2) sigma_w = sqrt(2 (1 - rho)) sigma (sigma_w the within-subject sd, rho the
  between-period correlation); ``df = 2n - 2``, standard error ``sd / sqrt(2n)``, i.e. the variance
  2 sigma_w^2 / N of the crossover estimate (Julious 2004, Stat Med 23:1921, section on crossover trials;
  from memory).

Power is the probability of the desired outcome: the test rejects *in the direction of benefit*
(``direction`` +1: the effect raises the endpoint, -1: lowers it). A significant result in the
harmful direction is never a success. Exact from the noncentral t distribution for a normal
endpoint. ``test`` is one of

- ``two_sided`` (default): reject when ``direction * T > t_{1-alpha/2, df}``;
- ``one_sided``: reject when ``direction * T > t_{1-alpha, df}`` (alpha is one-sided);
- ``non_inferiority``: H0 ``direction * delta <= -margin`` (``margin`` >= 0 on the analysis scale: the
  loss of benefit tolerated), rejected when ``(direction * estimate + margin) / se > t_{1-alpha, df}``,
  so the noncentrality is ``(direction * delta + margin) / se``.

Assurance averages that same power over a design prior on the
effect (O'Hagan, Stevens & Campbell 2005, Pharm Stat 4:187-201).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

DESIGNS = ("parallel", "ancova", "paired", "crossover")
TESTS = ("two_sided", "one_sided", "non_inferiority")


def tail_alpha(alpha: float, test: str = "two_sided") -> float:
    """The tail area of the critical value: ``alpha / 2`` for ``two_sided``, ``alpha`` for the one-sided tests.

    Parameters
    ----------
    alpha : float
        Significance level as stated (two-sided for ``two_sided``, one-sided otherwise; dimensionless).
    test : str
        ``two_sided``, ``one_sided`` or ``non_inferiority``.

    Returns
    -------
    float
        The upper-tail probability of the critical value (dimensionless).

    Raises
    ------
    ValueError
        For an unknown test.
    """
    if test not in TESTS:
        raise ValueError(f"unknown test {test!r}")
    return alpha / 2 if test == "two_sided" else alpha


def _shift(margin: float, test: str) -> float:
    return float(margin) if test == "non_inferiority" else 0.0


def _df_se(n: np.ndarray | int, sd: float, design: str) -> tuple[np.ndarray, np.ndarray]:
    n = np.asarray(n, dtype=float)
    if design == "parallel":
        return 2 * n - 2, sd * np.sqrt(2.0 / n)
    if design == "ancova":
        return 2 * n - 3, sd * np.sqrt(2.0 / n * (1.0 + 1.0 / (2 * n - 4)))
    if design == "paired":
        return n - 1, sd / np.sqrt(n)
    if design == "crossover":
        return 2 * n - 2, sd / np.sqrt(2 * n)
    raise ValueError(f"unknown design {design!r}")


def standard_error(n: np.ndarray | int, sd: float, design: str = "parallel") -> np.ndarray:
    """Standard error of the estimated effect with ``n`` subjects per arm (per sequence for a crossover).

    Parameters
    ----------
    n : int or array of int
        Subjects per arm (completing).
    sd : float
        sd of the endpoint on the analysis scale (endpoint unit, or log units).
    design : str
        ``parallel``, ``ancova``, ``paired`` or ``crossover`` (see the module docstring).

    Returns
    -------
    numpy.ndarray
        The standard error (unit of ``sd``): ``sd sqrt(2/n)`` for two arms, ``sd / sqrt(n)`` paired,
        ``sd / sqrt(2n)`` crossover.
    """
    return np.asarray(_df_se(np.asarray(n, dtype=float), sd, design)[1], dtype=float)


def z_sample_size(delta: float, sd: float, alpha: float = 0.05, power: float = 0.8,
                  design: str = "parallel", test: str = "two_sided", margin: float = 0.0,
                  direction: float | None = None) -> int:
    """Normal-approximation n per arm: 2 (z_{1-a'} + z_{1-b})^2 sd^2 / (d delta + m)^2 (paired: without the 2;
    crossover, n per sequence with ``sd`` the sd of a period difference: a half instead of the 2, i.e. the
    total N = 2 (z_{1-a'} + z_{1-b})^2 sigma_w^2 / delta^2 of Julious 2004).

    a' is ``alpha / 2`` for a two-sided test and ``alpha`` for the one-sided and non-inferiority tests;
    m is ``margin`` for non-inferiority (else 0), d the direction of benefit (Julious 2004, Stat Med
    23:1921, the normal-data formulas for superiority and non-inferiority; from memory).

    Parameters
    ----------
    delta, sd : float
        Effect and the endpoint's sd, in the endpoint's analysis unit.
    alpha, power : float
        Significance level (see ``test``) and target power (dimensionless).
    design : str
        ``parallel``, ``ancova`` or ``paired``.
    test : str
        ``two_sided``, ``one_sided`` or ``non_inferiority``.
    margin : float
        Non-inferiority margin (>= 0, analysis unit).
    direction : float, optional
        +1 or -1, the direction of benefit; None takes the sign of ``delta``.

    Returns
    -------
    int
        Subjects per arm (rounded up).

    Raises
    ------
    ValueError
        For an unknown test, or when ``d delta + m`` is not positive (no n reaches the power).
    """
    z = stats.norm.ppf(1 - tail_alpha(alpha, test)) + stats.norm.ppf(power)
    k = {"paired": 1.0, "crossover": 0.5}.get(design, 2.0)
    sign = benefit_sign(delta) if direction is None else float(direction)
    gap = sign * delta + _shift(margin, test)
    if gap <= 0:
        raise ValueError("the effect in the direction of benefit plus the margin must be > 0")
    return int(math.ceil(k * z**2 * sd**2 / gap**2))


def benefit_sign(effect: float) -> float:
    """Default direction of benefit: the sign of the expected effect (+1 for zero)."""
    return -1.0 if effect < 0 else 1.0


def t_power(n: np.ndarray | int, delta: np.ndarray | float, sd: float, alpha: float = 0.05,
            design: str = "parallel", direction: float | None = None, test: str = "two_sided",
            margin: float = 0.0) -> np.ndarray:
    """Exact probability that the t test rejects in the direction of benefit (noncentral t).

    Parameters
    ----------
    n : subjects per arm (completing).
    delta, sd : true effect and the endpoint's sd, in the analysis unit.
    alpha : significance level (two-sided for ``two_sided``, one-sided for the others).
    design : ``parallel``, ``ancova`` or ``paired``.
    direction : +1 or -1, the direction of benefit; None takes the sign of ``delta``.
    test : ``two_sided``, ``one_sided`` or ``non_inferiority``.
    margin : non-inferiority margin, >= 0 in the analysis unit (ignored by the other tests).

    Returns
    -------
    Power, dimensionless: P((direction * estimate + margin) / se > t_{1-a', df}), a' = alpha/2 (two-sided)
    or alpha.
    """
    df, se = _df_se(n, sd, design)
    sign = benefit_sign(float(np.mean(delta))) if direction is None else float(direction)
    ncp = (sign * np.asarray(delta) + _shift(margin, test)) / se
    tc = stats.t.ppf(1 - tail_alpha(alpha, test), df)
    with np.errstate(all="ignore"):
        p = stats.nct.sf(tc, df, ncp)
    # far in the tails scipy's nct can return nan; the normal approximation is exact to print there
    approx = stats.norm.sf(tc - ncp)
    return np.where(np.isfinite(p), p, approx)


def n_for_power(delta: float, sd: float, alpha: float, target: float, design: str,
                n_min: int, n_max: int, direction: float | None = None, test: str = "two_sided",
                margin: float = 0.0) -> int | None:
    """Smallest n per arm in [n_min, n_max] whose exact power (in the direction of benefit, ``test`` and
    ``margin`` as in :func:`t_power`) reaches ``target``; None if none does."""
    n = np.arange(int(n_min), int(n_max) + 1)
    p = t_power(n, delta, sd, alpha, design, direction, test, margin)
    hit = np.nonzero(p >= target)[0]
    return int(n[hit[0]]) if hit.size else None


def z_assurance(n: np.ndarray | int, prior_mean: float, prior_sd: float, sd: float,
                alpha: float = 0.05, design: str = "parallel", direction: float | None = None,
                test: str = "two_sided", margin: float = 0.0) -> np.ndarray:
    """Assurance of the two-sided z test with known sd under a normal design prior (closed form).

    The estimate D is marginally N(m, tau^2 + s^2) with tau the standard error; success is a
    significant result in the direction of benefit d (default: the sign of m), so
    P(d D > z tau) = Phi((d m - z tau)/r), r = sqrt(tau^2 + s^2)
    (O'Hagan, Stevens & Campbell 2005, Pharm Stat 4:187, section 2); z is z_{1-alpha/2} for a two-sided
    test, z_{1-alpha} otherwise, and a non-inferiority margin m adds m to d m in the numerator.
    """
    _, tau = _df_se(n, sd, design)
    z = stats.norm.ppf(1 - tail_alpha(alpha, test))
    r = np.sqrt(tau**2 + prior_sd**2)
    sign = benefit_sign(prior_mean) if direction is None else float(direction)
    return stats.norm.cdf((sign * prior_mean + _shift(margin, test) - z * tau) / r)


def t_assurance(n: np.ndarray | int, prior: stats.rv_continuous | None, sd: float,
                alpha: float = 0.05, design: str = "parallel", nodes: int = 400,
                direction: float | None = None, test: str = "two_sided", margin: float = 0.0) -> np.ndarray:
    """Exact t power in the direction of benefit averaged over a design prior (scipy frozen) by quadrature.

    Midpoint rule in probability: the prior's ppf at (k + 1/2)/nodes; exact enough for smooth
    priors (a test compares it with scipy.integrate.quad). ``direction`` defaults to the sign of the
    prior's median; a draw of the effect in the harmful direction contributes only its (small)
    chance of a significant result in the beneficial direction.
    """
    u = (np.arange(nodes) + 0.5) / nodes
    deltas = prior.ppf(u)
    sign = benefit_sign(float(prior.median())) if direction is None else float(direction)
    n_arr = np.atleast_1d(np.asarray(n))
    out = np.array([np.mean(t_power(int(k), deltas, sd, alpha, design, sign, test, margin)) for k in n_arr])
    return out if np.ndim(n) else out[0]


def half_width_probability(n: np.ndarray | int, sd: float, half_width: float, alpha: float = 0.05,
                           design: str = "parallel") -> np.ndarray:
    """Probability that the (1 - alpha) t interval's half-width is at most ``half_width``.

    Half-width = t_{1-a/2,df} s k with s^2 ~ sd^2 chi2_df / df, so the probability is
    P(chi2_df <= df (w / (t sd k))^2), k = sqrt(2/n) (two arms), 1/sqrt(n) (paired) or 1/sqrt(2n) (crossover).
    """
    df, se = _df_se(n, sd, design)
    tc = stats.t.ppf(1 - alpha / 2, df)
    return stats.chi2.cdf(df * (half_width / (tc * se)) ** 2, df)


def n_for_half_width(sd: float, half_width: float, probability: float, alpha: float, design: str,
                     n_min: int, n_max: int) -> int | None:
    """Smallest n per arm whose interval half-width is <= ``half_width`` with ``probability``."""
    n = np.arange(max(int(n_min), 3), int(n_max) + 1)
    p = half_width_probability(n, sd, half_width, alpha, design)
    hit = np.nonzero(p >= probability)[0]
    return int(n[hit[0]]) if hit.size else None


def bayes_success_probability(n: np.ndarray | int, delta_mean: float, delta_sd: float, sd: float,
                              analysis_mean: float, analysis_sd: float, alpha: float = 0.05,
                              design: str = "parallel", direction: float = 1.0, test: str = "two_sided",
                              margin: float = 0.0) -> np.ndarray:
    """Probability that the posterior probability of benefit exceeds 1 - a' (known sd, conjugate).

    The estimate D ~ N(delta, tau^2) with delta ~ N(delta_mean, delta_sd^2) (delta_sd = 0 for a fixed
    effect); the analysis prior N(analysis_mean, analysis_sd^2) gives the posterior
    N((a/s0^2 + D/tau^2)/(1/s0^2 + 1/tau^2), 1/(1/s0^2 + 1/tau^2)); benefit means
    ``direction * effect > -m`` (m the non-inferiority margin, else 0). Success when
    (direction * post_mean + m) / post_sd > z_{1-a'}, a' = alpha/2 (two-sided) or alpha.
    """
    _, tau = _df_se(n, sd, design)
    z = stats.norm.ppf(1 - tail_alpha(alpha, test))
    m = _shift(margin, test)
    prec = 1 / analysis_sd**2 + 1 / tau**2
    post_sd = 1 / np.sqrt(prec)
    # direction * (a/s0^2 + D/tau^2)/prec + m > z post_sd  <=>  direction * D > threshold
    thr = tau**2 * ((z * post_sd - m) * prec - direction * analysis_mean / analysis_sd**2)
    r = np.sqrt(tau**2 + delta_sd**2)
    return stats.norm.sf((thr - direction * delta_mean) / r)
