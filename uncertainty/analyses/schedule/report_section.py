"""Schedule's part of report.html and of the one-screen summary, from its stored document."""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.result import Caption
from uncertainty.analyses.schedule import blood_report
from uncertainty.analyses.schedule.table import row_labels
from uncertainty.core.formatting import fmt
from uncertainty.core.html import escape, table

CAPTIONS: tuple[Caption, ...] = (
    ("blood", "", blood_report.CAPTION),
    ("", "", "The searched venous-cuff protocol beside the user's own protocol (when the study has one) and "
             "true equal spacing: cuff pressure steps and the expected limb-volume course (mL/100 g) with the "
             "reading times marked, called optimised only when its criterion is lower than the comparison's and "
             "no target's posterior sd is higher."),
)


def section_html(res: dict[str, Any]) -> str:
    """The report section: both schedules with the posterior sds of Kf and Pvi and their ratio.

    Parameters
    ----------
    res : dict
        The stored ``ScheduleResult.to_dict()`` (pressures mmHg, times min, sds in canonical units).

    Returns
    -------
    str
        An HTML paragraph and a table.
    """
    if blood_report.is_blood_doc(res):
        return blood_report.section_html(res)
    names = {"optimised": "searched (" + str(res.get("status", "optimised")).replace("_", " ") + ")",
             "user_protocol": "your protocol", "equal_spacing": "equal spacing"}
    rows = []
    for label in row_labels(res):
        d = res.get(label) or {}
        sd = d.get("posterior_sd") or {}
        rows.append([names[label], " ".join(fmt(x, 3) for x in d.get("pressures") or []),
                     " ".join(fmt(x, 3) for x in d.get("times") or []),
                     *[fmt(sd.get(k), 3) for k in ("Kf", "Pvi")]])
    ratio = res.get("sd_ratio") or {}
    comp = str(res.get("comparison", "equal_spacing")).replace("_", " ")
    group = res.get("group_comparison") or {}
    gtext = "".join(f" {escape(t)}: {fmt(g.get('n_per_group'))} per group ({fmt(g.get('n_per_group_perfect'))} "
                    "with error-free readings) to detect one between-subject sd;" for t, g in group.items())
    return ("<p>Cuff pressures (mmHg per step) and reading times (min) that minimise the expected posterior "
            f"sd of Kf and Pvi (the isovolumetric venous pressure, as in the inference model), against {comp}; "
            "a ratio below 1 is a gain: " + escape(", ".join(f"{k} {fmt(v, 3)}" for k, v in ratio.items()))
            + ". " + escape(str(res.get("verdict", ""))) + ".</p>"
            + table(["schedule", "pressures", "times", "posterior sd Kf", "posterior sd Pvi (mmHg)"], rows,
                    num_cols={3, 4})
            + (f"<p>Group comparison (alpha 0.05 two-sided, power 0.8):{gtext}</p>" if gtext else ""))


def summary(sch: dict[str, Any]) -> list[str]:
    """One-screen summary line: the posterior sd ratios, optimised over equal spacing.

    Parameters
    ----------
    sch : dict
        The stored ``ScheduleResult.to_dict()``.

    Returns
    -------
    list of str
        One line, or none without ratios.
    """
    if blood_report.is_blood_doc(sch):
        return blood_report.summary(sch)
    if not isinstance(sch.get("sd_ratio"), dict):
        return []
    comp = str(sch.get("comparison", "equal_spacing")).replace("_", " ")
    return [f"Cuff schedule: {str(sch.get('status', 'optimised')).replace('_', ' ')}; posterior sd searched / "
            f"{comp} " + ", ".join(f"{k} {fmt(v, 3)}" for k, v in sch["sd_ratio"].items())]
