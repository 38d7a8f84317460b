"""The plain-text summary ``fluidshift infer`` prints, from an inference result's document."""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.inference import answers_table, posterior_sensitivity
from uncertainty.analyses.inference.diagnostics import describe, gate_message
from uncertainty.analyses.inference.posterior_timeline import coverage_line
from uncertainty.analyses.propagate.timeline import printed_times


def _fmt(x: Any) -> str:
    if x is None:
        return "-"
    x = float(x)
    return "nan" if x != x else f"{x:.4g}"


def _ci(block: dict[str, Any], key: str = "ci95") -> str:
    lo, hi = block[key]
    return f"[{_fmt(lo)}, {_fmt(hi)}]"


#: The time courses printed: the share of the intervention's volume in the plasma, and the plasma volume change.
TIMELINE_PRINTED = ("infused_retained_fraction", "plasma_volume_change")


def timeline_rows(doc: dict[str, Any]) -> list[tuple[str, str, list[str], list[tuple[str, list[str]]]]]:
    """The printed part of a ``whole_body`` study's posterior time courses (``doc["timeline"]``): for each course of
    :data:`TIMELINE_PRINTED`, (course, unit, time labels, rows), a row (level label, cells) per level (typical
    subject, then each subject; or the study's individual), a cell "median [low, high]" per printed time
    (``propagate.timeline.printed_times``). Empty without a timeline."""
    tl = doc.get("timeline")
    if not tl:
        return []
    times = list(tl["times_min"])
    at = printed_times(times)
    levels = ([("typical", tl["typical"])] + list(tl["subjects"].items())) if "subjects" in tl else \
        [("individual", tl["individual"])]
    out = []
    for name in TIMELINE_PRINTED:
        rows = [(label, [f"{_fmt(b[name]['median'][i])} [{_fmt(b[name]['ci95'][i][0])}, "
                         f"{_fmt(b[name]['ci95'][i][1])}]" for i in at]) for label, b in levels]
        out.append((name, tl["units"].get(name, ""), [f"{times[i]:g} min" for i in at], rows))
    return out


#: The posterior time courses' heading, and what their cells are.
TIMELINE_HEAD = "where the volume is over time"
TIMELINE_NOTE = ("posterior median [95% interval] of each course; infused_retained_fraction: the share of the infused "
                 "volume in the plasma, after a bleed the share of the plasma lost still missing")


def timeline_text(doc: dict[str, Any]) -> str:
    """:func:`timeline_rows` as text ("" without a timeline)."""
    blocks = timeline_rows(doc)
    if not blocks:
        return ""
    width = max(len(label) for _, _, _, rows in blocks for label, _ in rows) + 2
    lines = [f"{TIMELINE_HEAD} ({TIMELINE_NOTE})"]
    for name, unit, heads, rows in blocks:
        title = name + (f" ({unit})" if unit and unit != "1" else "")
        lines += ["", f"{title:<{width + 2}}" + "".join(f"{h:>26}" for h in heads)]
        lines += [f"  {label:<{width}}" + "".join(f"{c:>26}" for c in cells) for label, cells in rows]
    counted = coverage_line(doc["timeline"])
    return "\n".join(lines + (["", counted] if counted else []))


def table(doc: dict[str, Any]) -> str:
    """Plain-text summary of an inference result document.

    Parameters
    ----------
    doc : dict
        ``InferenceResult.to_dict()`` (canonical units; Jv's unit printed beside it).

    Returns
    -------
    str
        Jv's intervals, one row per subject and per updated quantity, diagnostics, flagged checks,
        the model comparison, notes and the sampler settings.
    """
    u = doc["units"].get("Jv", "")
    flag = [] if doc["diagnostics"].get("passed", True) else [
        f"QUALITY GATE FAILED ({gate_message(doc['diagnostics']) or 'see the sampler checks'}); "
        "nothing below is trustworthy", ""]
    lines = flag + [f"Jv ({doc['level']}): mean {_fmt(doc['Jv']['mean'])} {u}, sd {_fmt(doc['Jv']['sd'])}, "
             f"95% equal-tailed {_ci(doc['Jv'])}, 95% HDI {_ci(doc['Jv'], 'hdi95')}"]
    lines.append(f"Jv typical subject: {_ci(doc['typical']['Jv'])}   new subject: "
                 f"{_ci(doc['new_subject']['Jv'])}")
    answers = answers_table.text(doc)
    if answers:
        lines += ["", answers]
    elif doc["subjects"]:
        lines.append("")
        lines.append(f"{'subject':<10}{'group':<8}{'Jv mean':>11}{'95% interval':>26}")
        for sid, b in doc["subjects"].items():
            lines.append(f"{sid:<10}{b.get('group', ''):<8}{_fmt(b['Jv']['mean']):>11}{_ci(b['Jv']):>26}")
    lines.append("")
    head = f"{'quantity':<24}{'prior mean':>11}{'prior sd':>11}{'post mean':>11}{'post sd':>11}" \
           f"{'95% interval':>26}{'contraction':>13}"
    lines += [head, "-" * len(head)]
    rows = list(doc["parameters"].items()) + [(k, v) for k, v in doc["other_parameters"].items()
                                              if "prior" in v]
    for name, p in rows:
        flag = "  prior-bound" if p.get("prior_bound") else ""
        lines.append(f"{name:<24}{_fmt(p['prior']['mean']):>11}{_fmt(p['prior']['sd']):>11}"
                     f"{_fmt(p['mean']):>11}{_fmt(p['sd']):>11}{_ci(p):>26}{_fmt(p['contraction']):>13}{flag}")
    sens = posterior_sensitivity.text(doc)
    if sens:
        lines += ["", sens]
    course = timeline_text(doc)
    if course:
        lines += ["", course]
    d = doc["diagnostics"]
    lines.append("")
    lines += [f"sampler check: {line}" for line in describe(d)]
    checks = doc.get("checks", {})
    for row in checks.get("prior_data_conflict", []) if isinstance(checks.get("prior_data_conflict"), list) \
            else []:
        if row["conflict"]:
            lines.append(f"prior-data conflict: {row['observation']} ({row['label']}), tail p "
                         f"{_fmt(row['p_tail'])}, {_fmt(row.get('p_adjusted'))} allowing for all readings")
    sens = checks.get("prior_sensitivity", {})
    for v in sens.values():
        if isinstance(v, dict) and v.get("diagnosis", "-") != "-":
            lines.append(f"power scaling: {v.get('sentence', v['diagnosis'])}")
    if "comparison" in doc:
        c = doc["comparison"]
        lines.append(f"model comparison ({c.get('method', '')}): " + ", ".join(
            f"{m} elpd {_fmt(v['elpd'])} (se {_fmt(v['se'])})" for m, v in c.get("models", {}).items())
            + (f"; {c['verdict']}" if c.get("verdict") else
               f"; preferred {c['preferred']}" if c.get("preferred") else ""))
    for n in doc["notes"]:
        lines.append(f"note: {n}")
    lines.append(f"{doc['chains']} chains x {doc['draws']} draws, sampler {doc['sampler']}, seed {doc['seed']}")
    return "\n".join(lines)
