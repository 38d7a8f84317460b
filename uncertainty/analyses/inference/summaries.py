"""Summaries of posterior draws shared by the inference core and its figures: mean, sd, equal-tailed and
highest-density intervals, chain-stacked draws, and the thresholds the result's flags use."""

from __future__ import annotations

from typing import Any

import numpy as np

#: contraction below which a quantity is reported as prior-bound (common practice: the data
#: leave at least 90% of the prior variance in place).
PRIOR_BOUND_CONTRACTION = 0.1
#: posterior |correlation| above which an (a priori uncorrelated) pair is reported as confounded
#: (common practice).
CONFOUNDED_CORRELATION = 0.7


def summarise(draws: Any, *, hdi: bool = True) -> dict[str, Any]:
    """Mean, sd, equal-tailed 95% interval and 95% highest-density interval of 1-d draws."""
    x = np.asarray(draws, dtype=float).ravel()
    x = x[np.isfinite(x)]
    if x.size == 0:
        return {"mean": float("nan"), "sd": float("nan"), "ci95": [float("nan")] * 2,
                "hdi95": [float("nan")] * 2}
    out = {"mean": float(x.mean()), "sd": float(x.std(ddof=1)) if x.size > 1 else 0.0,
           "ci95": [float(v) for v in np.quantile(x, [0.025, 0.975])]}
    if hdi:
        out["hdi95"] = _hdi(x, 0.95)
    return out


def _hdi(x: np.ndarray, prob: float) -> list[float]:
    """Shortest interval holding ``prob`` of the draws (unimodal HDI, as ArviZ computes it).

    Parameters
    ----------
    x : numpy.ndarray
        1-d finite draws (any unit).
    prob : float
        Probability mass of the interval, in (0, 1).

    Returns
    -------
    list of float
        [low, high], in the draws' unit.
    """
    s = np.sort(x)
    n = s.size
    k = int(np.floor(prob * n))
    if k < 1 or k >= n:
        return [float(s[0]), float(s[-1])]
    widths = s[k:] - s[: n - k]
    i = int(np.argmin(widths))
    return [float(s[i]), float(s[i + k])]


def flat(idata: Any, name: str, group: str = "posterior") -> np.ndarray:
    """Draws of ``name`` with chain and draw stacked into the first axis."""
    arr = np.asarray(getattr(idata, group)[name].values)
    return arr.reshape((-1,) + arr.shape[2:])
