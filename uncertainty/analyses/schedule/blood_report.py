"""Text, report section and summary line of a blood-sampling schedule, from its stored document."""

from __future__ import annotations

from typing import Any

from uncertainty.core.formatting import fmt
from uncertainty.core.html import escape
from uncertainty.core.html import table as html_table

#: the ``kind`` of a blood-sampling schedule's document (a cuff schedule's has none)
KIND = "blood_sampling"
#: the figure's caption (its file name holds "blood")
CAPTION = ("Top: the individual's prior haemoglobin ratio (Hb over its value at 0 min; median and 95% band) with "
           "the searched sampling times (filled) and equally spaced ones (open) marked; bottom: the target's "
           "expected posterior sd against the number of samples after the baseline, searched and equally spaced.")


def _names(doc: dict[str, Any]) -> dict[str, str]:
    return {"optimised": "searched (" + str(doc.get("status", "optimised")).replace("_", " ") + ")",
            "equal_spacing": "equal spacing"}


def table(doc: dict[str, Any]) -> str:
    """Plain-text summary of a blood-sampling schedule: searched against equal spacing.

    Parameters
    ----------
    doc : dict
        ``BloodScheduleResult.to_dict()`` (times min, sds in the target's unit, hb_sd g/dL).

    Returns
    -------
    str
        The settings, both schedules with the target's posterior sd, the prior sd and ratio, the curve, notes.
    """
    t, unit = doc["target"], doc.get("unit") or ""
    lines = [f"blood-sampling schedule: baseline at 0 min plus {doc['samples']} of {len(doc['candidates'])} "
             f"candidate times ({' '.join(f'{x:g}' for x in doc['candidates'])} min); haemoglobin sd "
             f"{doc['hb_sd']:g} g/dL at {doc['hb_baseline']:g} g/dL; target {t} ({unit})"]
    for label, name in _names(doc).items():
        d = doc[label]
        lines.append(f"{name:<22} samples at {' '.join(f'{x:g}' for x in d['times'])} min; posterior sd {t} "
                     f"{d['posterior_sd'][t]:.3g}; Hb ratio there {' '.join(f'{x:.3f}' for x in d['hb_ratio'])}")
    lines.append(f"prior sd {t} {doc['prior_sd'][t]:.3g}; sd ratio searched / equal spacing {doc['sd_ratio'][t]:.3f}")
    c = doc.get("by_samples") or {}
    if c.get("samples"):
        lines.append("posterior sd by number of samples: " + ", ".join(
            f"{k}: {a:.3g} (equal {b:.3g})" for k, a, b in zip(c["samples"], c["optimised"], c["equal_spacing"],
                                                                strict=True)))
    if doc.get("verdict"):
        lines.append(f"verdict: {doc['verdict']}")
    lines += [f"note: {n}" for n in doc.get("notes", [])]
    return "\n".join(lines)


def section_html(res: dict[str, Any]) -> str:
    """The report section: the chosen blood-sampling times against equal spacing with the target's sd.

    Parameters
    ----------
    res : dict
        The stored ``BloodScheduleResult.to_dict()``.

    Returns
    -------
    str
        An HTML paragraph and a table.
    """
    t = str(res.get("target", ""))
    rows = []
    for label, name in _names(res).items():
        d = res.get(label) or {}
        sd = (d.get("posterior_sd") or {}).get(t)
        rows.append([name, " ".join(fmt(x, 3) for x in d.get("times") or []),
                     " ".join(fmt(x, 3) for x in d.get("hb_ratio") or []), fmt(sd, 3)])
    ratio = (res.get("sd_ratio") or {}).get(t)
    prior = (res.get("prior_sd") or {}).get(t)
    return ("<p>Blood-sampling times (min; a baseline sample at 0 min is always drawn) among the candidates "
            + escape(" ".join(fmt(x, 3) for x in res.get("candidates") or [])) + " min that most narrow "
            + f"<strong>{escape(t)}</strong> ({escape(res.get('unit') or '')}) from serial haemoglobin, against equal "
            f"spacing; prior sd {escape(fmt(prior, 3))}, sd ratio searched / equal spacing "
            f"{escape(fmt(ratio, 3))} (below 1 is a gain). " + escape(str(res.get("verdict", ""))) + ".</p>"
            + html_table(["schedule", "times (min)", "Hb ratio at those times (prior median)",
                          f"posterior sd {t}"], rows, num_cols={3}))


def summary(doc: dict[str, Any]) -> list[str]:
    """One-screen summary line: the chosen times and the sd ratio against equal spacing.

    Parameters
    ----------
    doc : dict
        The stored ``BloodScheduleResult.to_dict()``.

    Returns
    -------
    list of str
        One line, or none without a ratio.
    """
    ratio = doc.get("sd_ratio")
    if not isinstance(ratio, dict):
        return []
    t = str(doc.get("target", ""))
    times = " ".join(fmt(x, 3) for x in (doc.get("optimised") or {}).get("times") or [])
    return [f"Blood sampling: draw at 0 and {times} min; posterior sd of {t} searched / equal spacing "
            f"{fmt(ratio.get(t), 3)}"]


def is_blood_doc(doc: Any) -> bool:
    """True when a schedule document is a blood-sampling one.

    Parameters
    ----------
    doc : Any
        A schedule result's ``to_dict()``.

    Returns
    -------
    bool
    """
    return isinstance(doc, dict) and doc.get("kind") == KIND
