"""The arithmetic of simulation-based calibration: ranks, binning, the uniformity and coverage tests.

A study's model is calibrated when, over truths drawn from its prior and readings simulated from them,
the rank of each truth among L posterior draws is uniform on 0..L (Talts et al. 2018, arXiv:1804.06788,
theorem 1). These helpers are plain numpy/scipy on arrays of ranks, so they are checked against
closed forms and fakes without any sampling.

- :func:`rank_of`: the rank of a truth among thinned draws (ties split at random).
- :func:`bin_counts`: ranks 0..L into B equal bins (B must divide L + 1, so every bin is equally likely).
- :func:`uniformity_test`: Pearson's chi-square of the bin counts against N/B each (B - 1 degrees of freedom).
- :func:`coverage_test`: how often the central 90 % posterior interval held the truth, against Binomial(N, 0.9).
- :func:`uniform_band`: the range a bin count of a uniform histogram stays in with probability 0.99 (per bin).
- :func:`chi2_power`: power of the uniformity test against given bin probabilities (noncentral chi-square).
- :func:`shape_of`: which way a flagged histogram leans (too narrow, too wide, shifted), in words.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

#: share of the posterior inside the interval whose coverage is counted (central 90 %)
COVERAGE_LEVEL = 0.9
#: probability a uniform bin count stays inside the band drawn on the histogram
BAND_LEVEL = 0.99
#: family-wise false-alarm rate of the verdicts over all quantities and both tests (common practice: 0.01)
FAMILY_ALPHA = 0.01


def thin(draws: np.ndarray, L: int) -> np.ndarray:
    """Every k-th of the pooled posterior draws, k = floor(len / L), first L kept (thinning lowers the
    autocorrelation the rank test assumes away, Talts et al. 2018 section 4.1).

    Parameters
    ----------
    draws : numpy.ndarray
        Posterior draws of one scalar quantity, chains concatenated (its canonical unit).
    L : int
        Number of draws to keep.

    Returns
    -------
    numpy.ndarray
        L draws (same unit).

    Raises
    ------
    ValueError
        Fewer than L draws.
    """
    x = np.asarray(draws, dtype=float).ravel()
    if x.size < L:
        raise ValueError(f"{x.size} posterior draws cannot be thinned to {L}")
    return x[:: x.size // L][:L]


def rank_of(truth: float, draws: np.ndarray, rng: np.random.Generator | None = None) -> int:
    """Number of draws below ``truth`` (0..len(draws)); draws equal to the truth count as below with
    probability 1/2 each (randomised ties keep the rank uniform for atoms such as a bound).

    Parameters
    ----------
    truth : float
        The value the data were simulated from (the draws' unit).
    draws : numpy.ndarray
        Thinned posterior draws.
    rng : numpy.random.Generator, optional
        Stream for the ties (none needed when there are none).

    Returns
    -------
    int
        The rank.
    """
    x = np.asarray(draws, dtype=float).ravel()
    below = int(np.sum(x < truth))
    ties = int(np.sum(x == truth))
    if ties:
        rng = rng or np.random.default_rng(0)
        below += int(rng.integers(0, ties + 1))
    return below


def check_bins(bins: int, L: int) -> str | None:
    """Why ``bins`` does not suit ranks 0..L, or None: at least 2 bins, and B must divide L + 1 so
    that every bin holds the same number of possible ranks."""
    if bins < 2:
        return "need at least 2 bins"
    if (L + 1) % bins:
        return f"the bins must divide the {L + 1} possible ranks 0..{L} evenly (draws + 1 = a multiple of bins)"
    return None


def bin_counts(ranks: Sequence[int] | np.ndarray, L: int, bins: int) -> np.ndarray:
    """Counts of ranks (0..L) in ``bins`` equal bins: rank r goes to bin floor(r * B / (L + 1)).

    Parameters
    ----------
    ranks : sequence of int
        Ranks, each in 0..L.
    L : int
        Posterior draws each truth was ranked among.
    bins : int
        B, a divisor of L + 1.

    Returns
    -------
    numpy.ndarray
        B counts (int).

    Raises
    ------
    ValueError
        A rank outside 0..L, or bins that do not divide L + 1.
    """
    why = check_bins(bins, L)
    if why:
        raise ValueError(why)
    r = np.asarray(ranks, dtype=int)
    if r.size and (r.min() < 0 or r.max() > L):
        raise ValueError(f"ranks must lie in 0..{L}")
    return np.bincount(r * bins // (L + 1), minlength=bins).astype(int)


def uniformity_test(counts: Sequence[int] | np.ndarray) -> dict[str, float]:
    """Pearson's chi-square of bin counts against equal expected counts.

    Parameters
    ----------
    counts : sequence of int
        B bin counts (N = their sum).

    Returns
    -------
    dict
        ``chi2`` (statistic), ``df`` (B - 1), ``p_value`` (upper tail; NaN without counts).
    """
    from scipy import stats

    c = np.asarray(counts, dtype=float)
    n, b = float(c.sum()), c.size
    if n <= 0 or b < 2:
        return {"chi2": float("nan"), "df": float(b - 1), "p_value": float("nan")}
    expected = n / b
    chi2 = float(np.sum((c - expected) ** 2) / expected)
    return {"chi2": chi2, "df": float(b - 1), "p_value": float(stats.chi2.sf(chi2, b - 1))}


def coverage_test(covered: int, n: int, level: float = COVERAGE_LEVEL,
                  band: float = BAND_LEVEL) -> dict[str, Any]:
    """How often the central ``level`` posterior interval held the truth, against Binomial(n, level).

    Parameters
    ----------
    covered : int
        Replicates whose interval held the truth.
    n : int
        Replicates counted.
    level : float
        Nominal coverage (dimensionless).
    band : float
        Probability of the central range reported.

    Returns
    -------
    dict
        ``covered``, ``n``, ``level``, ``expected`` (n * level), ``range`` ([low, high], the central
        ``band`` range of Binomial(n, level)) and ``p_value`` (two-sided exact binomial test; NaN for n = 0).
    """
    from scipy import stats

    if n <= 0:
        return {"covered": int(covered), "n": 0, "level": level, "expected": 0.0, "range": [0, 0],
                "p_value": float("nan")}
    lo = int(stats.binom.ppf((1 - band) / 2, n, level))
    hi = int(stats.binom.isf((1 - band) / 2, n, level))
    p = float(stats.binomtest(int(covered), int(n), level).pvalue)
    return {"covered": int(covered), "n": int(n), "level": level, "expected": n * level, "range": [lo, hi],
            "p_value": p}


def uniform_band(n: int, bins: int, level: float = BAND_LEVEL) -> list[int]:
    """The central ``level`` range of one bin's count when the ranks are uniform: Binomial(n, 1/B)
    quantiles (the grey band of the rank histogram, Talts et al. 2018 figure 2's construction, from memory).

    Parameters
    ----------
    n : int
        Replicates in the histogram.
    bins : int
        B.
    level : float
        Probability inside the band, per bin.

    Returns
    -------
    list of int
        [low, high] counts.
    """
    from scipy import stats

    return [int(stats.binom.ppf((1 - level) / 2, n, 1 / bins)), int(stats.binom.isf((1 - level) / 2, n, 1 / bins))]


def chi2_power(n: int, probs: Sequence[float] | np.ndarray, alpha: float) -> float:
    """Power of the chi-square uniformity test at level ``alpha`` with ``n`` ranks whose true bin
    probabilities are ``probs``: P(noncentral chi2(B - 1, lambda) > critical value), lambda =
    n * sum((p_i - 1/B)^2 / (1/B)) (the usual large-sample approximation, common practice).

    Parameters
    ----------
    n : int
        Replicates.
    probs : sequence of float
        True probability of each of the B bins (sums to 1).
    alpha : float
        Level of the test.

    Returns
    -------
    float
        Power (dimensionless).
    """
    from scipy import stats

    p = np.asarray(probs, dtype=float)
    b = p.size
    lam = float(n * np.sum((p - 1 / b) ** 2) * b)
    crit = stats.chi2.isf(alpha, b - 1)
    return float(stats.ncx2.sf(crit, b - 1, lam)) if lam > 0 else float(alpha)


def scaled_posterior_bins(scale: float, bins: int, shift: float = 0.0) -> np.ndarray:
    """Bin probabilities of the rank of a standard-normal truth among draws of a posterior that is
    ``scale`` times as wide as the right one and shifted by ``shift`` right-posterior sds, in a normal
    model with the right posterior N(0, 1) around the truth's conditional mean: the normalised rank is
    Phi((truth - shift) / scale) with truth ~ N(0, 1) (closed form, used for the power in the docs).

    Parameters
    ----------
    scale : float
        Posterior sd over the right one (below 1: too narrow).
    bins : int
        B.
    shift : float
        Bias of the posterior, in right-posterior sds.

    Returns
    -------
    numpy.ndarray
        B probabilities.
    """
    from scipy import stats

    edges = np.linspace(0.0, 1.0, bins + 1)
    # P(Phi((Z - shift)/scale) <= u) = Phi(scale * Phi^-1(u) + shift)
    with np.errstate(divide="ignore"):
        cdf = stats.norm.cdf(scale * stats.norm.ppf(edges) + shift)
    return np.diff(cdf)


def shape_of(counts: np.ndarray, mean_rank: float, coverage: dict[str, Any]) -> str:
    """Which way a flagged rank histogram leans, in words (the rank of a truth is high when the
    posterior sits below it).

    Parameters
    ----------
    counts : numpy.ndarray
        Bin counts.
    mean_rank : float
        Mean of the normalised ranks (rank / L, 0..1; 0.5 when calibrated).
    coverage : dict
        :func:`coverage_test` result.

    Returns
    -------
    str
        A clause such as "the posterior is too narrow (truths fall outside it too often)".
    """
    parts = []
    n = max(int(coverage.get("n", 0)), 1)
    share = coverage.get("covered", 0) / n
    lo, hi = coverage.get("range", [0, n])
    if coverage.get("covered", 0) < lo or share < coverage.get("level", COVERAGE_LEVEL) - 0.05:
        parts.append("the posterior is too narrow (truths fall outside its 90 % interval too often)")
    elif coverage.get("covered", 0) > hi:
        parts.append("the posterior is too wide (its 90 % interval holds the truth more often than 90 %)")
    if mean_rank > 0.55:
        parts.append("it tends to sit below the truth")
    elif mean_rank < 0.45:
        parts.append("it tends to sit above the truth")
    if not parts:
        parts.append("the ranks bunch unevenly without a simple pattern")
    return "; ".join(parts)
