"""The plain-text summary ``fluidshift design --schedule`` prints, from a schedule result's document."""

from __future__ import annotations

from typing import Any


def table(doc: dict[str, Any]) -> str:
    """Plain-text summary of a schedule result: optimised against equal spacing.

    Parameters
    ----------
    doc : dict
        ``ScheduleResult.to_dict()`` (pressures mmHg, times min, noise sd mL/100g, sd of Kf in its
        canonical unit, sd of Pvi mmHg).

    Returns
    -------
    str
        The protocol, both schedules with their posterior sds, the prior sds and ratios, notes.
    """
    lines = [f"venous-cuff schedule: {doc['steps']} steps of {doc['step_min']:g} min, {doc['measurements']} readings "
             f"(noise sd {doc['noise_sd']:g} mL/100 g per reading), criterion {doc['criterion']} over "
             f"{', '.join(doc['targets'])}"]
    for label in row_labels(doc):
        d = doc[label]
        sd = d["posterior_sd"]
        lines.append(f"{label:<15} cuff {' '.join(f'{p:g}' for p in d['pressures'])} mmHg; readings at "
                     f"{' '.join(f'{t:g}' for t in d['times'])} min; sd Kf {sd['Kf']:.3g} mL/min/mmHg/100g, "
                     f"sd Pvi {sd['Pvi']:.3g} mmHg")
    r = doc["sd_ratio"]
    comp = doc.get("comparison", "equal_spacing")
    lines.append(f"prior sd Kf {doc['prior_sd']['Kf']:.3g}, Pvi {doc['prior_sd']['Pvi']:.3g} mmHg; "
                 f"sd ratio searched / {comp.replace('_', ' ')}: Kf {r['Kf']:.3f}, Pvi {r['Pvi']:.3f}")
    if doc.get("verdict"):
        lines.append(f"verdict: {doc['verdict']}")
    for t, g in (doc.get("group_comparison") or {}).items():
        lines.append(f"group comparison, {t}: {g['n_per_group']} per group to detect one between-subject sd "
                     f"({g['between_sd']:.3g}) with this schedule, {g['n_per_group_perfect']} with error-free readings "
                     "(alpha 0.05 two-sided, power 0.8)")
    lines += [f"note: {n}" for n in doc.get("notes", [])]
    return "\n".join(lines)


def row_labels(doc: dict[str, Any]) -> list[str]:
    """The schedule rows of a result, in print order: the searched one, the user's protocol, equal spacing.

    Parameters
    ----------
    doc : dict
        ``ScheduleResult.to_dict()``.

    Returns
    -------
    list of str
        Keys of ``doc`` that hold a schedule.
    """
    return [k for k in ("optimised", "user_protocol", "equal_spacing") if isinstance(doc.get(k), dict)]
