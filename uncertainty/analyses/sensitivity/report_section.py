"""Sensitivity's part of report.html and of the one-screen summary, from its stored document.

Every function takes the section's ``result`` as stored in results.json and reads it defensively.
"""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.result import Caption
from uncertainty.core.formatting import fmt
from uncertainty.core.html import escape, table

CAPTIONS: tuple[Caption, ...] = (
    ("over_time", "", "Indices against time: each leading input's ranking index (line, 95% band) and first-order "
                      "index (dashed) of the time course at the report times, from one set of model runs."),
    ("convergence", "", "Each input's ranking index with its 95% band against the sample size: "
                        "flat, well separated lines mean the ranking has settled."),
    ("", "morris", "Morris screening: the mean absolute elementary effect (mu*) of each input on "
                   "{output} with its 95% interval; the tallest bars are the inputs that move "
                   "{output} most."),
    ("", "shapley", "Each input's Shapley share (Sh) of the variance of {output}, which shares "
                    "interactions and correlations out fairly and sums to one, beside its "
                    "first-order (S1) and total (ST) index with 95% intervals: the tallest bars are "
                    "the inputs worth measuring better."),
    ("", "", "The share of the variance of {output} each input explains alone (S1) and with its "
             "interactions (ST), with 95% intervals: the tallest bars are the inputs worth "
             "measuring better."),
)


def top_inputs(sens: dict[str, Any], k: int = 3) -> list[str]:
    """The ``k`` inputs ranked first (the ranking, else the largest ST or mu*).

    Parameters
    ----------
    sens : dict
        The stored ``SensitivityResult.to_dict()``.
    k : int
        How many.

    Returns
    -------
    list of str
        Input names, most influential first.
    """
    ranking = sens.get("ranking") or []
    names = [r if isinstance(r, str) else (r.get("parameter") or r.get("name") or str(r)) if isinstance(r, dict)
             else str(r) for r in ranking]
    if not names and isinstance(sens.get("indices"), dict):
        idx = sens["indices"]
        names = sorted(idx, key=lambda p: -(idx[p].get("ST") or idx[p].get("mu_star") or 0))
    return names[:k]


def section_html(res: dict[str, Any]) -> str:
    """The report section: what the indices mean, one row per input, the ranking.

    Parameters
    ----------
    res : dict
        The stored ``SensitivityResult.to_dict()`` (indices dimensionless; Morris' in the output's unit).

    Returns
    -------
    str
        HTML paragraphs and a table.
    """
    idx = res.get("indices") or {}
    keys: list[str] = []
    for v in idx.values():
        if isinstance(v, dict):
            keys += [k for k in v if k not in keys]
    rows = [[p] + [fmt(v.get(k), 3) for k in keys] for p, v in idx.items() if isinstance(v, dict)]
    meaning = []
    if "Sh" in keys:
        meaning.append("Sh is the input's Shapley share of the variance (interactions and correlations shared "
                       "out; the shares sum to 1)")
    if "S1" in keys or "ST" in keys:
        meaning.append("S1 is the share of the output's variance an input explains alone, ST the share "
                       "including its interactions")
    if "mu_star" in keys:
        meaning.append("mu_star is the mean absolute elementary effect (Morris) and sigma their spread, a sign "
                       "of non-linearity or interaction")
    meaning.append("_ci gives the 95% interval and _se the standard error")
    parts = [f"<p>Method: {escape(res.get('method', ''))}; output: {escape(res.get('output', ''))}. "
             + escape("; ".join(meaning)) + ".</p>"]
    parts.append(table(["input"] + keys, rows, num_cols=set(range(1, len(keys) + 1))))
    top = top_inputs(res, k=len(idx) or 10)
    if top:
        parts.append("<p>Ranking: " + escape(", ".join(top)) + ".</p>")
    return "".join(parts)


def summary(sens: dict[str, Any]) -> list[str]:
    """One-screen summary line: the inputs that matter most.

    Parameters
    ----------
    sens : dict
        The stored ``SensitivityResult.to_dict()``.

    Returns
    -------
    list of str
        One line, or none without a ranking.
    """
    top = top_inputs(sens)
    if not top:
        return []
    return [f"Inputs that matter most for {sens.get('output', 'Jv')} ({sens.get('method', '')}): " + ", ".join(top)]
