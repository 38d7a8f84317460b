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
             f"(noise sd {doc['noise_sd']:g} mL/100g), criterion {doc['criterion']} over {', '.join(doc['targets'])}"]
    for label in ("optimised", "equal_spacing"):
        d = doc[label]
        sd = d["posterior_sd"]
        lines.append(f"{label:<14} cuff {' '.join(f'{p:g}' for p in d['pressures'])} mmHg; readings at "
                     f"{' '.join(f'{t:g}' for t in d['times'])} min; sd Kf {sd['Kf']:.3g}, sd Pvi {sd['Pvi']:.3g} mmHg")
    r = doc["sd_ratio"]
    lines.append(f"prior sd Kf {doc['prior_sd']['Kf']:.3g}, Pvi {doc['prior_sd']['Pvi']:.3g} mmHg; "
                 f"sd ratio optimised / equal spacing: Kf {r['Kf']:.3f}, Pvi {r['Pvi']:.3f}")
    lines += [f"note: {n}" for n in doc.get("notes", [])]
    return "\n".join(lines)
