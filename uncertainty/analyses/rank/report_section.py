"""Rank's part of report.html and of the one-screen summary, from its stored document."""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.result import Caption
from uncertainty.core.formatting import fmt
from uncertainty.core.html import escape, table

CAPTIONS: tuple[Caption, ...] = (
    ("", "", "For each candidate measurement, the expected reduction of the variance of {output} (blue, "
             "with twice its Monte Carlo error) inside the perfect-information bound (grey): the longest "
             "blue bar is the measurement that would narrow the estimate most."),
)


def top_measurements(rank: dict[str, Any], k: int = 3) -> list[str]:
    """The ``k`` candidates with the largest expected variance reduction.

    Parameters
    ----------
    rank : dict
        The stored ``RankResult.to_dict()``.
    k : int
        How many.

    Returns
    -------
    list of str
        Candidate names, best first.
    """
    cands = [c for c in rank.get("candidates") or [] if isinstance(c, dict)]
    cands.sort(key=lambda c: -(c.get("expected_variance_reduction") or 0))
    return [str(c.get("name") or c.get("parameter")) for c in cands[:k]]


def section_html(res: dict[str, Any]) -> str:
    """The report section: one row per candidate, the best pair and set.

    Parameters
    ----------
    res : dict
        The stored ``RankResult.to_dict()`` (variances in the output's unit squared, widths in its unit).

    Returns
    -------
    str
        HTML paragraphs and a table.
    """
    cands = [c for c in res.get("candidates") or [] if isinstance(c, dict)]
    cols = ["name", "parameter", "expected_var_post", "expected_variance_reduction", "expected_ci95_width",
            "perfect_information_bound", "per_cost", "mc_se"]
    rows = [[fmt(c.get(k), 3) for k in cols] for c in cands]
    parts = ["<p>Expected effect of one more measurement on the Jv estimate (value of information), "
             "before the measurement is made.</p>",
             table([c.replace("_", " ") for c in cols], rows, num_cols=set(range(2, len(cols))))]
    if res.get("tol") is not None:
        hist = [h for h in res.get("precision_history") or [] if isinstance(h, dict)]
        last = hist[-1] if hist else {}
        state = "met" if res.get("converged") else "NOT met (the cap on draws stopped the doubling)"
        parts.append(f"<p>Precision: tolerance {escape(fmt(res.get('tol'), 3))} on the 95 % Monte Carlo half-width "
                     f"of every expected variance reduction, relative to it, {escape(state)} at "
                     f"{escape(fmt(last.get('samples')))} draws (widest "
                     f"{escape(fmt(last.get('widest_half_width'), 3))}, {escape(str(last.get('widest', '')))}).</p>")
    for key, label in (("best_pair", "Best pair"), ("best_set", "Best set within the budget")):
        v = res.get(key)
        if v:
            names = v.get("names") or v.get("candidates") or v if isinstance(v, dict) else v
            parts.append(f"<p>{label} (computed jointly): {escape(fmt(names))}</p>")
    return "".join(parts)


def summary(rk: dict[str, Any]) -> list[str]:
    """One-screen summary line: the measurements that would narrow Jv most.

    Parameters
    ----------
    rk : dict
        The stored ``RankResult.to_dict()``.

    Returns
    -------
    list of str
        One line, or none without candidates.
    """
    top = top_measurements(rk)
    return ["Measurements that would narrow Jv most: " + ", ".join(top)] if top else []
