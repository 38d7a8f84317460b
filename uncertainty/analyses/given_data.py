"""A first-order sensitivity index from any set of paired draws (the given-data, binning estimator).

Shared by sensitivity (``first_order_given_data``), rank, propagate's threshold probabilities
(``uncertainty.analyses.propagate.thresholds``) and inference's sensitivity of the posterior
(``given_data_indices`` on posterior and prior draws), so that none of them imports another analysis.
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from uncertainty.core.errors import InputError


def default_bins(n: int) -> int:
    """Equal-count bins for n pairs: about sqrt(n), at least 5 pairs per bin (dimensionless).

    Parameters
    ----------
    n : int
        Number of finite pairs.

    Returns
    -------
    int
    """
    return int(min(max(2, round(math.sqrt(n))), n // 5))



def binned_first_order(xs_order: np.ndarray, y: np.ndarray, bins: int) -> float:
    """Var(E[Y|X]) / Var(Y) from the pairs sorted by x, in ``bins`` equal-count bins (dimensionless).

    Parameters
    ----------
    xs_order : ndarray of int
        Indices that sort x (ascending).
    y : ndarray
        The outputs, finite.
    bins : int
        Number of equal-count bins (2..n/2).

    Returns
    -------
    float
        The ANOVA-corrected between-bin share of the variance; NaN when y is constant.
    """
    ys = y[xs_order]
    n = ys.size
    edges = np.linspace(0, n, bins + 1).astype(int)
    sums = np.add.reduceat(ys, edges[:-1])
    counts = np.diff(edges)
    means = sums / counts
    grand = ys.mean()
    ssb = float(np.sum(counts * (means - grand) ** 2))
    sst = float(np.sum((ys - grand) ** 2))
    ssw = sst - ssb
    # ANOVA correction: E[SSB] = (M - 1) s_w^2 + n Var(E[Y|X]) (common practice, one-way ANOVA)
    var_m = (ssb - (bins - 1) * ssw / (n - bins)) / n
    return var_m / (sst / n) if sst > 0 else float("nan")


def first_order_given_data(x: np.ndarray, y: np.ndarray, bins: int | None = None,
                           n_boot: int = 200, seed: int = 0) -> tuple[float, float]:
    """First-order index Var(E[Y|X]) / Var(Y) from paired draws (x, y), and its standard error.

    Any draws serve (Monte Carlo, posterior draws thinned for autocorrelation): x is sorted into
    ``bins`` equal-count bins (default about sqrt(n), at least 5 draws per bin), the between-bin
    variance is corrected for the noise of the bin means (one-way ANOVA expectation), and the
    standard error is a bootstrap over the pairs. Dimensionless. Non-finite pairs are dropped.
    """
    x = np.asarray(x, dtype=float).ravel()
    y = np.asarray(y, dtype=float).ravel()
    if x.shape != y.shape:
        raise InputError("x and y must have the same length", key="x", value=(x.size, y.size))
    keep = np.isfinite(x) & np.isfinite(y)
    x, y = x[keep], y[keep]
    n = x.size
    if n < 20:
        raise InputError("a given-data index needs at least 20 finite pairs", key="x", value=n)
    bins = bins or default_bins(n)
    if not 2 <= bins <= n // 2:
        raise InputError("bins must be between 2 and n/2", key="bins", value=bins)
    order = np.argsort(x, kind="stable")
    s1 = binned_first_order(order, y, bins)
    rng = np.random.default_rng(seed)
    boot = np.empty(n_boot)
    for b in range(n_boot):
        idx = np.sort(rng.integers(0, n, n))  # x is pre-sorted: sorted indices keep the order
        boot[b] = binned_first_order(order[idx], y, bins)
    return float(s1), float(np.std(boot, ddof=1))


def given_data_indices(inputs: Mapping[str, np.ndarray], y: np.ndarray, *, se_factor: float = 1.0,
                       n_boot: int = 200, seed: int = 0) -> dict[str, dict[str, float]]:
    """First-order given-data index of ``y`` for each input, in decreasing order, with standard errors.

    Each index is :func:`first_order_given_data` on the pairs (input, y); inputs that do not vary
    (a fixed quantity) are left out. Dimensionless.

    Parameters
    ----------
    inputs : mapping of str to ndarray
        Draws of each input, paired row by row with ``y`` (any unit).
    y : ndarray
        Draws of the output (any unit).
    se_factor : float
        Multiplies every bootstrap standard error (>= 1): sqrt(n / ESS) for autocorrelated draws such as
        MCMC output, whose bootstrap over pairs would treat n correlated draws as independent.
    n_boot : int
        Bootstrap resamples per index.
    seed : int
        Seed of the bootstrap.

    Returns
    -------
    dict
        ``{input: {"S1": index, "se": standard error}}``, largest index first (NaN last).

    Raises
    ------
    InputError
        Fewer than 20 finite pairs, or lengths that differ.
    """
    y = np.asarray(y, dtype=float).ravel()
    out: dict[str, dict[str, float]] = {}
    for name, x in inputs.items():
        x = np.broadcast_to(np.asarray(x, dtype=float), y.shape) if np.ndim(x) == 0 else np.asarray(x, float)
        finite = x[np.isfinite(x)]
        if finite.size == 0 or np.ptp(finite) == 0:
            continue
        s1, se = first_order_given_data(x, y, n_boot=n_boot, seed=seed)
        out[name] = {"S1": s1, "se": se * max(1.0, float(se_factor))}
    return dict(sorted(out.items(), key=lambda kv: -kv[1]["S1"] if np.isfinite(kv[1]["S1"]) else np.inf))
