"""A first-order sensitivity index from any set of paired draws (the given-data, binning estimator).

Shared by sensitivity (``first_order_given_data``), rank and propagate's threshold probabilities
(``uncertainty.analyses.propagate.thresholds``), so that none of them imports another analysis.
"""

from __future__ import annotations

import math

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
