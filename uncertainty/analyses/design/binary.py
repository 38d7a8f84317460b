"""Binary responder endpoints: two proportions compared by the z test with continuity correction.

A subject responds when the endpoint lies beyond a stated cut (below or above it). With ``n`` subjects per
arm and ``x0``, ``x1`` responders (control, treated), the test statistic is

    z = (|p1 - p0| - 1/n) / sqrt(2 pbar (1 - pbar) / n),   pbar = (x0 + x1) / (2n),

the critical-ratio test with Yates' continuity correction (1/2 (1/n + 1/n)), whose square is the corrected
chi-square of the 2 x 2 table (Fleiss 1981, Statistical Methods for Rates and Proportions, 2nd ed., chapter 2;
from memory). A trial succeeds when z exceeds z_{1-a'} (a' = alpha/2 for a two-sided test, alpha for a one-sided
one) and the difference lies in the direction of benefit.

Sample size: the normal approximation with continuity correction of Fleiss, Tytun & Ury (1980, Biometrics
36:343), and the exact power of the test, summed over the two binomial distributions (scipy.stats.binom).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import stats

from uncertainty.analyses.design.trial_power import tail_alpha


def z_cc(x0: np.ndarray, x1: np.ndarray, n: int) -> np.ndarray:
    """Signed continuity-corrected z statistic for x1 / n against x0 / n (treated minus control).

    Parameters
    ----------
    x0, x1 : array of int
        Responders among ``n`` control and ``n`` treated subjects (counts).
    n : int
        Subjects per arm.

    Returns
    -------
    numpy.ndarray
        sign(p1 - p0) max(|p1 - p0| - 1/n, 0) / sqrt(2 pbar (1 - pbar) / n) (dimensionless); 0 where every
        subject or none responded.
    """
    x0, x1 = np.asarray(x0, dtype=float), np.asarray(x1, dtype=float)
    d = (x1 - x0) / n
    pbar = (x0 + x1) / (2 * n)
    var = 2 * pbar * (1 - pbar) / n
    with np.errstate(divide="ignore", invalid="ignore"):
        z = np.sign(d) * np.maximum(np.abs(d) - 1.0 / n, 0.0) / np.sqrt(var)
    return np.where(var > 0, z, 0.0)


def success(x0: np.ndarray, x1: np.ndarray, n: int, alpha: float, test: str, sign: float) -> np.ndarray:
    """Whether each trial shows a significant difference in responders in the direction of benefit.

    Parameters
    ----------
    x0, x1 : array of int
        Responders per arm (control, treated).
    n : int
        Subjects per arm.
    alpha : float
        Significance level (two-sided for ``two_sided``, one-sided for ``one_sided``).
    test : str
        ``two_sided`` or ``one_sided``.
    sign : float
        +1 when more responders on treatment is the benefit, -1 when fewer is.

    Returns
    -------
    numpy.ndarray of bool
        Success per trial.
    """
    return sign * z_cc(x0, x1, n) > stats.norm.ppf(1 - tail_alpha(alpha, test))


def exact_power(n: int | np.ndarray, p0: float, p1: float, alpha: float = 0.05, test: str = "two_sided",
                sign: float | None = None) -> np.ndarray:
    """Exact power of the continuity-corrected z test: the sum over both binomial outcomes of P(x0) P(x1)
    over the outcomes that succeed.

    Parameters
    ----------
    n : int or array of int
        Subjects per arm (completing).
    p0, p1 : float
        Response probabilities in the control and treated arms (dimensionless).
    alpha : float
        Significance level (see ``test``).
    test : str
        ``two_sided`` or ``one_sided``.
    sign : float, optional
        Direction of benefit in responders (+1 more, -1 fewer); default the sign of p1 - p0.

    Returns
    -------
    numpy.ndarray
        Power (dimensionless), one per n.
    """
    s = (1.0 if p1 >= p0 else -1.0) if sign is None else float(sign)
    ns = np.atleast_1d(np.asarray(n, dtype=int))
    out = np.empty(len(ns))
    for i, k in enumerate(ns):
        x = np.arange(k + 1)
        f0, f1 = stats.binom.pmf(x, k, p0), stats.binom.pmf(x, k, p1)
        ok = success(x[:, None], x[None, :], int(k), alpha, test, s)
        out[i] = float(f0 @ ok.astype(float) @ f1)
    return out if np.ndim(n) else out[0]


def fleiss_n(p0: float, p1: float, alpha: float = 0.05, power: float = 0.8, test: str = "two_sided") -> int:
    """n per arm by the normal approximation with continuity correction (Fleiss, Tytun & Ury 1980).

    n' = (z_{1-a'} sqrt(2 pbar qbar) + z_{power} sqrt(p0 q0 + p1 q1))^2 / D^2 and
    n = n'/4 (1 + sqrt(1 + 4 / (n' D)))^2, D = |p1 - p0|, pbar = (p0 + p1)/2.

    Parameters
    ----------
    p0, p1 : float
        Response probabilities (control, treated; dimensionless, different).
    alpha, power : float
        Significance level (two-sided for ``two_sided``) and target power.
    test : str
        ``two_sided`` or ``one_sided``.

    Returns
    -------
    int
        Subjects per arm, rounded up.

    Raises
    ------
    ValueError
        When p0 == p1 (no n reaches the power).
    """
    d = abs(p1 - p0)
    if d == 0:
        raise ValueError("the two response probabilities are equal")
    pbar = (p0 + p1) / 2
    za, zb = stats.norm.ppf(1 - tail_alpha(alpha, test)), stats.norm.ppf(power)
    n1 = (za * math.sqrt(2 * pbar * (1 - pbar)) + zb * math.sqrt(p0 * (1 - p0) + p1 * (1 - p1))) ** 2 / d**2
    return int(math.ceil(n1 / 4 * (1 + math.sqrt(1 + 4 / (n1 * d))) ** 2 - 1e-9))


def n_for_power(p0: float, p1: float, alpha: float, target: float, test: str, n_min: int, n_max: int,
                sign: float | None = None) -> int | None:
    """Smallest n per arm in [n_min, n_max] whose exact power reaches ``target`` (searched from about half
    the Fleiss n, since exact power saw-tooths with n); None when none does.

    Parameters
    ----------
    p0, p1 : float
        Response probabilities (control, treated).
    alpha, target : float
        Significance level and target power (dimensionless).
    test : str
        ``two_sided`` or ``one_sided``.
    n_min, n_max : int
        Range of subjects per arm searched.
    sign : float, optional
        Direction of benefit in responders (+1 more, -1 fewer); default the sign of p1 - p0.

    Returns
    -------
    int or None
        Subjects per arm (completing).
    """
    s = (1.0 if p1 >= p0 else -1.0) if sign is None else float(sign)
    if s * (p1 - p0) <= 0:
        return None
    start = max(int(n_min), int(0.5 * fleiss_n(p0, p1, alpha, target, test)))
    if start > n_max:
        return None
    lo = int(n_min) if start <= n_min else start
    for k in range(lo, int(n_max) + 1):
        if exact_power(k, p0, p1, alpha, test, s) >= target:
            return k
    return None


def proportions(mean: float, sd: float, delta: float, cut: float, side: str) -> tuple[float, float]:
    """Response probabilities of a normal endpoint (analysis scale) in the control and treated arms.

    Parameters
    ----------
    mean, sd : float
        Mean and sd of the control arm's endpoint on the analysis scale (log units or the endpoint's unit).
    delta : float
        Effect of treatment on the same scale.
    cut : float
        Responder cut on the same scale.
    side : str
        ``below`` (responder when the endpoint is below the cut) or ``above``.

    Returns
    -------
    tuple of float
        (p0, p1), dimensionless.
    """
    f = stats.norm.cdf if side == "below" else stats.norm.sf
    return float(f((cut - mean) / sd)), float(f((cut - mean - delta) / sd))
