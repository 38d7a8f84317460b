"""Design's part of report.html and of the one-screen summary, from its stored document."""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.result import Caption
from uncertainty.core.formatting import fmt
from uncertainty.core.html import table

CAPTIONS: tuple[Caption, ...] = (
    ("", "", "Simulated power and assurance (bands of twice the Monte Carlo error) against completing "
             "subjects per arm, with the noncentral-t power dashed: the trial size is the first n where "
             "power crosses the dotted target line, enlarged for dropout when enrolling."),
)


def section_html(res: dict[str, Any]) -> str:
    """The report section: the trial size for each target, power, assurance and the curve.

    Parameters
    ----------
    res : dict
        The stored ``DesignResult.to_dict()`` (n per arm, power and assurance dimensionless).

    Returns
    -------
    str
        An HTML paragraph and a table.
    """
    parts = [f"<p>Subjects per arm for the target power: <strong>{fmt(res.get('n_per_arm'))}</strong>"]
    if res.get("n_per_arm_assurance") is not None:
        parts.append(f"; for the target assurance: <strong>{fmt(res.get('n_per_arm_assurance'))}</strong>")
    parts.append(f". Power {fmt(res.get('power'), 3)}, assurance {fmt(res.get('assurance'), 3)} "
                 "(assurance: the probability of success averaged over the design prior).</p>")
    curve = [c for c in res.get("curve") or [] if isinstance(c, dict)]
    if curve:
        cols = ["n_per_arm", "power", "power_mc_se", "assurance", "assurance_mc_se"]
        parts.append(table([c.replace("_", " ") for c in cols], [[fmt(c.get(k), 3) for k in cols] for c in curve],
                           num_cols=set(range(len(cols)))))
    return "".join(parts)


def summary(des: dict[str, Any]) -> list[str]:
    """One-screen summary line: the trial size for the target power (and assurance).

    Parameters
    ----------
    des : dict
        The stored ``DesignResult.to_dict()``.

    Returns
    -------
    list of str
        One line.
    """
    part = f"Trial size: {fmt(des.get('n_per_arm'))} per arm for the target power"
    if des.get("n_per_arm_assurance") is not None:
        part += f", {fmt(des.get('n_per_arm_assurance'))} per arm for the target assurance"
    return [part]
