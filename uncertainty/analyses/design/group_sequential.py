"""Group-sequential designs: two-sided symmetric boundaries by Lan-DeMets alpha spending, exit
probabilities, power and expected sample size (normal test statistics with independent increments).

At information fractions 0 < t_1 < ... < t_K = 1 the score process S(t) = Z(t) sqrt(t) is Brownian
motion with drift theta (theta = the effect over its standard error at full information). The trial
stops at look k when |Z_k| >= c_k. Boundaries are chosen so that the type I error spent by look k is
the spending function alpha(t_k) (Lan & DeMets 1983, Biometrika 70:659):

- O'Brien-Fleming shape: per side 2 - 2 Phi(z_{1-alpha/4} / sqrt(t)) (the one-sided function at alpha/2);
- Pocock shape: alpha(t) = alpha ln(1 + (e - 1) t).

Crossing probabilities come from the recursive integration of Armitage, McPherson & Rowe (1969, J R
Stat Soc A 132:235): the sub-density of S on the continuation region is carried from look to look by
the normal transition kernel, on a grid (trapezoid rule).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import numpy as np
from scipy import optimize, stats

_GRID = 401  # grid points over a continuation interval (boundaries to about 1e-4; a test compares 1601)


def obf_spending(t: np.ndarray | float, alpha: float) -> np.ndarray:
    """Lan-DeMets O'Brien-Fleming-shaped two-sided alpha spent by information fraction ``t`` (dimensionless).

    Each side spends the one-sided function at alpha/2, 2 - 2 Phi(z_{1 - alpha/4} / sqrt(t)), the
    convention of symmetric two-sided designs (Reboussin, DeMets, Kim & Lan 2000, Control Clin Trials
    21:190); the two sides together spend twice that.
    """
    t = np.asarray(t, dtype=float)
    z = stats.norm.ppf(1 - alpha / 4)
    return np.where(t > 0, 2 * (2 - 2 * stats.norm.cdf(z / np.sqrt(np.maximum(t, 1e-300)))), 0.0)


def pocock_spending(t: np.ndarray | float, alpha: float) -> np.ndarray:
    """Lan-DeMets Pocock-shaped two-sided alpha spent by information fraction ``t``: alpha ln(1 + (e - 1) t)."""
    return alpha * np.log1p((math.e - 1) * np.asarray(t, dtype=float))


SPENDING: dict[str, Callable[[np.ndarray | float, float], np.ndarray]] = {
    "obrien_fleming": obf_spending, "pocock": pocock_spending}


def boundaries(t: Sequence[float], alpha: float = 0.05, shape: str = "obrien_fleming") -> np.ndarray:
    """Two-sided symmetric Z boundaries c_k at information fractions ``t`` (last = 1) by alpha spending.

    Parameters
    ----------
    t : sequence of float
        Increasing information fractions in (0, 1], the last 1.
    alpha : float
        Two-sided type I error over the whole trial.
    shape : str
        ``obrien_fleming`` or ``pocock`` (Lan-DeMets spending functions).

    Returns
    -------
    numpy.ndarray
        Z boundaries (dimensionless), one per look.

    Raises
    ------
    ValueError
        For fractions that do not increase to 1 or an unknown shape.
    """
    t = np.asarray(t, dtype=float)
    if np.any(np.diff(t) <= 0) or t[0] <= 0 or abs(t[-1] - 1) > 1e-12:
        raise ValueError("information fractions must increase from above 0 to 1")
    spend = SPENDING[shape](t, alpha)
    inc = np.diff(np.concatenate([[0.0], spend]))
    f = x = w = None
    prev = 0.0
    out = []
    for tk, a in zip(t, inc, strict=True):
        dt = tk - prev

        def excess(c: float, tk: float = tk, dt: float = dt, a: float = a, f=f, x=x, w=w) -> float:
            up, lo = _cross_interval(f, x, w, -c * math.sqrt(tk), c * math.sqrt(tk), dt, 0.0)
            return up + lo - a

        c = optimize.brentq(excess, 0.1, 40.0, xtol=1e-10) if a > 1e-15 else 40.0
        out.append(c)
        x, w, f = _carry_interval(f, x, w, -c * math.sqrt(tk), c * math.sqrt(tk), dt, 0.0)
        prev = tk
    return np.array(out)


def exit_probabilities(t: Sequence[float], c: Sequence[float], drift: float = 0.0) -> dict[str, np.ndarray]:
    """Probabilities of stopping at each look (upper and lower boundary) under drift ``theta``.

    Parameters
    ----------
    t : sequence of float
        Information fractions (last 1).
    c : sequence of float
        Z boundaries per look.
    drift : float
        theta: the effect over its standard error at full information (0 under the null).

    Returns
    -------
    dict
        ``upper``, ``lower`` (per look, dimensionless).
    """
    out = exit_probabilities_futility(t, c, -np.asarray(c, dtype=float), drift)
    return {"upper": out["efficacy"], "lower": out["futility"]}


def design_summary(t: Sequence[float], alpha: float, power: float, shape: str,
                   n_fixed: float) -> dict[str, object]:
    """Boundaries, inflation factor, maximum and expected n of a group-sequential design.

    The drift giving ``power`` (rejections in the direction of benefit, the upper boundary) is solved
    for; the maximum n is ``n_fixed`` times (drift / (z_{1-a/2} + z_{power}))^2 (the inflation factor);
    the expected n under the alternative and under the null sum the stopping probabilities times the
    n at each look.

    Parameters
    ----------
    t : sequence of float
        Information fractions of the looks (last 1).
    alpha, power : float
        Two-sided type I error and target power.
    shape : str
        ``obrien_fleming`` or ``pocock``.
    n_fixed : float
        n per arm of the fixed (single-look) design for the same alpha and power.

    Returns
    -------
    dict
        ``boundaries`` (Z), ``inflation``, ``n_max`` (per arm), ``expected_n_alternative`` and
        ``expected_n_null`` (per arm), ``alpha_spent`` (cumulative).
    """
    c = boundaries(t, alpha, shape)
    tt = np.asarray(t, dtype=float)

    def pw(theta: float) -> float:
        return float(exit_probabilities(tt, c, theta)["upper"].sum()) - power

    z = stats.norm.ppf(1 - alpha / 2) + stats.norm.ppf(power)
    theta = optimize.brentq(pw, 0.9 * z, 1.5 * z, xtol=1e-5)  # never below the fixed design's drift z
    infl = (theta / z) ** 2
    n_max = n_fixed * infl
    ex_a = exit_probabilities(tt, c, theta)
    ex_0 = exit_probabilities(tt, c, 0.0)

    def expected(ex: dict[str, np.ndarray]) -> float:
        stop = ex["upper"] + ex["lower"]
        stop[-1] = 1 - stop[:-1].sum()
        return float(np.sum(stop * tt * n_max))

    return {"boundaries": c, "inflation": infl, "n_max": n_max, "expected_n_alternative": expected(ex_a),
            "expected_n_null": expected(ex_0), "alpha_spent": SPENDING[shape](tt, alpha)}


# --------------------------------------------------------------------------------------------
# futility: a non-binding beta-spending lower bound


def _cross_interval(f: np.ndarray | None, x: np.ndarray | None, w: np.ndarray | None, lo: float, hi: float,
                    dt: float, mean: float) -> tuple[float, float]:
    """(above ``hi``, below ``lo``) probabilities at the next look, bounds on the S scale."""
    sd = math.sqrt(dt)
    if f is None:
        return float(stats.norm.sf((hi - mean) / sd)), float(stats.norm.cdf((lo - mean) / sd))
    return (float(np.sum(w * f * stats.norm.sf((hi - x - mean) / sd))),
            float(np.sum(w * f * stats.norm.cdf((lo - x - mean) / sd))))


def _carry_interval(f: np.ndarray | None, x: np.ndarray | None, w: np.ndarray | None, lo: float, hi: float,
                    dt: float, mean: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Sub-density of S at the next look on the continuation interval (lo, hi): grid, weights, values."""
    xn = np.linspace(lo, hi, _GRID)
    wn = np.full(_GRID, xn[1] - xn[0])
    wn[[0, -1]] *= 0.5
    sd = math.sqrt(dt)
    if f is None:
        fn = stats.norm.pdf((xn - mean) / sd) / sd
    else:
        fn = (stats.norm.pdf((xn[:, None] - x[None, :] - mean) / sd) / sd) @ (w * f)
    return xn, wn, fn


def beta_spending(t: np.ndarray | float, beta: float, shape: str) -> np.ndarray:
    """Type II error spent by information fraction ``t``: the one-sided Lan-DeMets shape at level ``beta``.

    ``obrien_fleming``: 2 - 2 Phi(z_{1-beta/2} / sqrt(t)); ``pocock``: beta ln(1 + (e - 1) t) (the alpha
    spending functions of Lan & DeMets 1983, Biometrika 70:659, used for beta as in Pampallona, Tsiatis &
    Kim 2001, Drug Inf J 35:1113).

    Parameters
    ----------
    t : float or array
        Information fractions in [0, 1] (dimensionless).
    beta : float
        Type II error of the whole trial, 1 - power (dimensionless).
    shape : str
        ``obrien_fleming`` or ``pocock``.

    Returns
    -------
    numpy.ndarray
        Cumulative type II error spent (dimensionless).

    Raises
    ------
    KeyError
        For an unknown shape.
    """
    t = np.asarray(t, dtype=float)
    if shape == "obrien_fleming":
        z = stats.norm.ppf(1 - beta / 2)
        return np.where(t > 0, 2 - 2 * stats.norm.cdf(z / np.sqrt(np.maximum(t, 1e-300))), 0.0)
    if shape == "pocock":
        return beta * np.log1p((math.e - 1) * t)
    raise KeyError(shape)


def exit_probabilities_futility(t: Sequence[float], c: Sequence[float], b: Sequence[float],
                                drift: float = 0.0) -> dict[str, np.ndarray]:
    """Probabilities of stopping at each look for efficacy (Z >= c_k) or for futility (Z < b_k).

    The futility region Z < b_k takes the place of the lower (harm) boundary -c_k: a trial that
    follows the futility rule stops there. Z is counted in the direction of benefit.

    Parameters
    ----------
    t : sequence of float
        Information fractions (last 1).
    c, b : sequence of float
        Efficacy and futility Z bounds per look (b_k <= c_k; b_K = c_K ends the trial at the last look).
    drift : float
        theta: the effect over its standard error at full information (0 under the null).

    Returns
    -------
    dict
        ``efficacy``, ``futility`` (per look, dimensionless).
    """
    f = x = w = None
    prev = 0.0
    eff, fut = [], []
    for tk, ck, bk in zip(t, c, b, strict=True):
        dt, s = tk - prev, math.sqrt(tk)
        up, lo = _cross_interval(f, x, w, bk * s, ck * s, dt, drift * dt)
        eff.append(up)
        fut.append(lo)
        if bk < ck:
            x, w, f = _carry_interval(f, x, w, bk * s, ck * s, dt, drift * dt)
        prev = tk
    return {"efficacy": np.array(eff), "futility": np.array(fut)}


def _futility_bounds(t: np.ndarray, c: np.ndarray, theta: float, beta: float, shape: str) -> tuple[np.ndarray, float]:
    """Futility bounds b_1..b_{K-1} spending ``beta`` by ``shape`` under drift ``theta``; b_K = c_K.

    Returns the bounds and the power (efficacy crossing probability) under ``theta``.
    """
    spend = beta_spending(t, beta, shape)
    f = x = w = None
    prev, spent, power = 0.0, 0.0, 0.0
    b = np.empty(len(t))
    for k, (tk, ck) in enumerate(zip(t, c, strict=True)):
        dt, s = tk - prev, math.sqrt(tk)
        mean = theta * dt
        if k == len(t) - 1:
            bk = ck
        else:
            target = spend[k] - spent

            def under(z: float, s: float = s, dt: float = dt, mean: float = mean, f=f, x=x, w=w, ck: float = ck,
                      target: float = target) -> float:
                return _cross_interval(f, x, w, z * s, ck * s, dt, mean)[1] - target

            floor = -ck  # never below the harm boundary of the two-sided design
            if target <= 0 or under(floor) >= 0:
                bk = floor
            elif under(ck) <= 0:
                bk = ck
            else:
                bk = optimize.brentq(under, floor, ck, xtol=1e-9)
        b[k] = bk
        up, lo = _cross_interval(f, x, w, bk * s, ck * s, dt, mean)
        spent += lo
        power += up
        if bk < ck:
            x, w, f = _carry_interval(f, x, w, bk * s, ck * s, dt, mean)
        prev = tk
    return b, power


def futility_design(t: Sequence[float], alpha: float, power: float, shape: str, futility: str,
                    n_fixed: float) -> dict[str, object]:
    """A group-sequential design with a non-binding beta-spending futility bound.

    The efficacy bounds c_k are the two-sided Lan-DeMets bounds of :func:`boundaries` (computed as if
    the trial never stopped for futility, so the type I error stays at most ``alpha`` whether or not the
    futility rule is followed: non-binding). At looks 1..K-1 the trial may stop for futility when the Z
    statistic in the direction of benefit falls below b_k, the bound that spends, under the alternative,
    the type II error ``beta = 1 - power`` by the ``futility`` shape (beta spending; Pampallona, Tsiatis &
    Kim 2001, Drug Inf J 35:1113; Jennison & Turnbull 2000, section 7.3). The drift theta is solved so
    that the power with the futility rule followed is ``power`` (then b_K = c_K); the maximum n is
    ``n_fixed`` (theta / (z_{1-a/2} + z_{power}))^2.

    Parameters
    ----------
    t : sequence of float
        Information fractions of the looks (last 1).
    alpha, power : float
        Two-sided type I error and target power (dimensionless).
    shape : str
        Alpha-spending shape, ``obrien_fleming`` or ``pocock``.
    futility : str
        Beta-spending shape, ``obrien_fleming`` or ``pocock``.
    n_fixed : float
        n per arm of the fixed design for the same alpha and power (subjects).

    Returns
    -------
    dict
        ``boundaries`` (efficacy Z), ``futility_z`` (Z, direction of benefit), ``inflation``, ``n_max``
        (per arm), ``beta_spent`` (cumulative), ``stop_null`` / ``stop_alternative`` (dicts of per-look
        ``efficacy`` and ``futility`` probabilities, futility rule followed), ``expected_n_null`` /
        ``expected_n_alternative`` (per arm), ``power`` (with the rule followed) and ``power_ignoring_futility``
        (dimensionless).
    """
    tt = np.asarray(t, dtype=float)
    c = boundaries(tt, alpha, shape)
    beta = 1 - power
    z = stats.norm.ppf(1 - alpha / 2) + stats.norm.ppf(power)
    theta = optimize.brentq(lambda th: _futility_bounds(tt, c, th, beta, futility)[1] - power, 0.9 * z, 2.0 * z,
                            xtol=1e-6)
    b, _ = _futility_bounds(tt, c, theta, beta, futility)
    infl = (theta / z) ** 2
    n_max = n_fixed * infl
    ex1 = exit_probabilities_futility(tt, c, b, theta)
    ex0 = exit_probabilities_futility(tt, c, b, 0.0)

    def expected(ex: dict[str, np.ndarray]) -> float:
        stop = ex["efficacy"] + ex["futility"]
        stop[-1] = 1 - stop[:-1].sum()
        return float(np.sum(stop * tt * n_max))

    return {"boundaries": c, "futility_z": b, "inflation": infl, "n_max": n_max, "theta": theta,
            "beta_spent": beta_spending(tt, beta, futility), "stop_null": ex0, "stop_alternative": ex1,
            "expected_n_null": expected(ex0), "expected_n_alternative": expected(ex1),
            "power": float(ex1["efficacy"].sum()),
            "power_ignoring_futility": float(exit_probabilities(tt, c, theta)["upper"].sum()),
            "alpha_spent": SPENDING[shape](tt, alpha)}
