"""Scenarios' part of report.html and of the one-screen summary, from its stored document."""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.result import Caption
from uncertainty.analyses.scenarios.rows import HEADLINE, describe, rows
from uncertainty.core.formatting import fmt
from uncertainty.core.html import escape, table

CAPTIONS: tuple[Caption, ...] = (
    ("", "", "The paired change of Jv under each scenario (the scenario minus the baseline on the same draw): "
             "median and 95% interval for the typical subject and the individual before updating, and for the "
             "typical subject after updating when inference ran; an interval clear of zero is a change in a "
             "known direction."),
)


def section_html(res: dict[str, Any]) -> str:
    """The report section: one table of paired changes of the headline outputs per scenario and subject.

    Parameters
    ----------
    res : dict
        The stored ``ScenariosResult.to_dict()`` (changes in each output's canonical unit).

    Returns
    -------
    str
        An HTML paragraph and a table.
    """
    body = []
    for r in rows(res, HEADLINE):
        body.append([r["scenario"], r["source"], r["who"], r["output"], fmt(r["median"], 3),
                     f"[{fmt(r['ci95_low'], 3)}, {fmt(r['ci95_high'], 3)}]", fmt(r["p_decrease"], 3),
                     fmt(r["p_increase"], 3), r["unit"]])
    scen = "; ".join(f"{sc.get('name')}: {describe(sc)}" for sc in res.get("scenarios") or [])
    return ("<p>Each scenario's effect is the paired change of an output: the scenario minus the baseline on "
            "the same draw, so the uncertainty both share cancels. Scenarios: " + escape(scen) + ".</p>"
            + table(["scenario", "source", "who", "output", "median change", "95% interval", "P(<0)", "P(>0)",
                     "unit"], body, num_cols={4, 6, 7}))


def summary(doc: dict[str, Any]) -> list[str]:
    """One-screen summary: per scenario, the change of Jv for the typical subject (posterior if present).

    Parameters
    ----------
    doc : dict
        The stored ``ScenariosResult.to_dict()``.

    Returns
    -------
    list of str
        One line per scenario with a Jv summary.
    """
    out = []
    unit = (doc.get("units") or {}).get("Jv", "")
    for sc in doc.get("scenarios") or []:
        post = (sc.get("posterior") or {}).get("typical") or {}
        source, s = ("posterior", post.get("Jv")) if post.get("Jv") else (
            "prior", ((sc.get("prior") or {}).get("typical") or {}).get("Jv"))
        if not isinstance(s, dict):
            continue
        ci = s.get("ci95") or [None, None]
        out.append(f"Scenario {sc.get('name')}: Jv change {fmt(s.get('median'), 3)} {unit} "
                   f"(95% {fmt(ci[0], 3)} to {fmt(ci[1], 3)}; P(decrease) {fmt(s.get('p_decrease'), 2)}), "
                   f"typical subject, {source}")
    return out
