"""Schedule's part of report.html and of the one-screen summary, from its stored document."""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.result import Caption
from uncertainty.core.formatting import fmt
from uncertainty.core.html import escape, table

CAPTIONS: tuple[Caption, ...] = (
    ("", "", "The optimised venous-cuff protocol beside equal spacing: cuff pressure steps and the "
             "expected limb-volume course, with the reading times marked; the optimised readings sit "
             "where the curve says most about Kf and Pvi."),
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
    rows = []
    for label in ("optimised", "equal_spacing"):
        d = res.get(label) or {}
        sd = d.get("posterior_sd") or {}
        rows.append([label.replace("_", " "), " ".join(fmt(x, 3) for x in d.get("pressures") or []),
                     " ".join(fmt(x, 3) for x in d.get("times") or []),
                     *[fmt(sd.get(k), 3) for k in ("Kf", "Pvi")]])
    ratio = res.get("sd_ratio") or {}
    return ("<p>Cuff pressures (mmHg per step) and reading times (min) that minimise the expected posterior "
            "sd of Kf and Pvi, against equal spacing; a ratio below 1 is a gain: "
            + escape(", ".join(f"{k} {fmt(v, 3)}" for k, v in ratio.items())) + ".</p>"
            + table(["schedule", "pressures", "times", "posterior sd Kf", "posterior sd Pvi"], rows,
                    num_cols={3, 4}))


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
    if not isinstance(sch.get("sd_ratio"), dict):
        return []
    return ["Cuff schedule: posterior sd optimised / equal spacing " + ", ".join(
        f"{k} {fmt(v, 3)}" for k, v in sch["sd_ratio"].items())]
