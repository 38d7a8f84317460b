"""Trial design to a requested precision: the simulated trials per design point double until the
Monte Carlo error of every headline probability (power, assurance, Bayesian success) is within a
tolerance, or a cap stops the doubling (QualityGateError, exit 3, the flagged result attached)."""

from __future__ import annotations

import math
from typing import Any

from uncertainty.analyses.design import MAX_TRIALS, design, parse_design
from uncertainty.analyses.design.result import DesignResult
from uncertainty.core.errors import InputError, QualityGateError

#: the headline probabilities whose Monte Carlo error the tolerance bounds (keys of the design JSON)
HEADLINE = ("power", "assurance", "bayesian_success")
#: 97.5 % standard normal quantile: the half-width of a 95 % interval in standard errors (common practice;
#: the trials per point are at least 100, so the normal quantile, not a t quantile)
Z975 = 1.959963984540054


def widest_half_width(doc: dict[str, Any]) -> tuple[float, str]:
    """The widest 95 % Monte Carlo half-width (dimensionless probability) among the headline figures the
    design reports, and which one it is ("" and 0 when none carries a Monte Carlo error)."""
    worst, where = 0.0, ""
    for key in HEADLINE:
        se = doc.get(f"{key}_mc_se")
        if se is not None and math.isfinite(se) and Z975 * se > worst:
            worst, where = Z975 * se, key
    return worst, where


def design_within(study: Any, tol: float, *, max_trials: int | None = None, trials: int | None = None,
                  **kwargs: Any) -> DesignResult:
    """:func:`~uncertainty.analyses.design.design` with the trials per point doubled until the 95 % Monte
    Carlo half-width of power, assurance and Bayesian success (those reported) is below ``tol``.

    Parameters
    ----------
    study : Study
        A study with a ``[design]`` section.
    tol : float
        Tolerance on each headline probability's 95 % half-width (absolute, dimensionless, in (0, 0.5)).
    max_trials : int, optional
        Cap on the trials per point (default :data:`~uncertainty.analyses.design.MAX_TRIALS`).
    trials : int, optional
        Trials per point to start from (default the study's).
    **kwargs
        Passed to :func:`~uncertainty.analyses.design.design` (seed, exact, executor).

    Returns
    -------
    DesignResult
        The last design, its JSON with ``tol``, ``converged`` and ``precision_history`` (one row per
        size: trials, widest half-width, which figure), and a note.

    Raises
    ------
    InputError
        A tolerance outside (0, 0.5) or a cap below the starting trials.
    QualityGateError
        The tolerance is not met when the next doubling would pass the cap (exit 3, result attached).
    """
    if isinstance(tol, bool) or not isinstance(tol, int | float) or not 0 < tol < 0.5:
        raise InputError("the tolerance on a probability must lie between 0 and 0.5", key="--tol", value=tol)
    cap = int(max_trials or MAX_TRIALS)
    spec = parse_design(study)
    n = int(trials or (spec.exact_trials if kwargs.get("exact") else spec.trials))
    if n > cap:
        raise InputError(f"max-trials is below the starting {n} trials per point", key="--max-trials",
                         value=max_trials)
    history: list[dict[str, Any]] = []
    while True:
        result = design(study, trials=n, **kwargs)
        worst, where = widest_half_width(result.doc)
        history.append({"trials": n, "widest_half_width": worst, "widest": where})
        converged = worst < tol
        if converged or 2 * n > cap:
            break
        n *= 2
    doc = result.doc
    doc["tol"], doc["converged"], doc["precision_history"] = tol, converged, history
    if not where:
        doc["notes"].append("no headline probability of this design carries a Monte Carlo error (all exact): "
                            "the tolerance holds at once")
    doc["notes"].append(f"tolerance {tol:g} on the 95% Monte Carlo half-width of "
                        + ", ".join(k for k in HEADLINE if doc.get(f"{k}_mc_se") is not None)
                        + (f": met at {n} trials per point" if converged else
                           f": NOT met, the cap max-trials={cap} stopped the doubling at {n} trials per point "
                           f"(widest half-width {worst:.3g}, {where})"))
    if not converged:
        raise QualityGateError(f"95% Monte Carlo half-width of {where} ({worst:.3g}) is still above tol={tol:g} "
                               f"at {n} trials per point; the next doubling would exceed max-trials={cap}",
                               result=result)
    return result
