"""The plain-text table ``fluidshift propagate`` prints, from a propagate result's document."""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.propagate.thresholds import threshold_lines


def _fmt(x: float) -> str:
    return "nan" if x != x else f"{x:.4g}"


def table(doc: dict[str, Any]) -> str:
    """Plain-text table of a propagate result: one row per output and layer (individual, typical).

    Parameters
    ----------
    doc : dict
        ``PropagateResult.to_dict()`` (values in each output's canonical unit, printed beside them).

    Returns
    -------
    str
        The table, P(absorption) when Jv is among the outputs, the sampling settings, notes and
        warnings, one per line.
    """
    lines = []
    head = f"{'output':<14}{'layer':<12}{'mean':>11}{'sd':>11}{'median':>11}{'95% interval':>26}" \
           f"{'MC se (ends)':>22}  unit"
    lines.append(head)
    lines.append("-" * len(head))
    for name in doc["outputs"]:
        for layer, block in (("individual", doc["outputs"]), ("typical", doc["typical"])):
            s = block[name]
            ci = f"[{_fmt(s['ci95'][0])}, {_fmt(s['ci95'][1])}]"
            se = f"{_fmt(s['mc_se']['ci95'][0])}, {_fmt(s['mc_se']['ci95'][1])}"
            lines.append(f"{name if layer == 'individual' else '':<14}{layer:<12}{_fmt(s['mean']):>11}"
                         f"{_fmt(s['sd']):>11}{_fmt(s['median']):>11}{ci:>26}{se:>22}  {s['unit']}")
    if "Jv" in doc["outputs"]:
        ind, typ = doc["outputs"]["Jv"], doc["typical"]["Jv"]
        lines.append("")
        lines.append(f"P(absorption, Jv < 0): individual {_fmt(ind['p_negative'])} "
                     f"(MC se {_fmt(doc['p_absorption_mc_se'])}), typical subject {_fmt(typ['p_negative'])}")
    lines += timeline_lines(doc.get("timeline"))
    lines += threshold_lines(doc.get("thresholds") or [])
    lines.append(f"{doc['samples']} draws, method {doc['method']}, {doc['replicates']} independent "
                 f"replicates, seed {doc['seed']}")
    for n in doc["notes"]:
        lines.append(f"note: {n}")
    for w in doc["warnings"]:
        lines.append(f"warning: {w}")
    return "\n".join(lines)


#: times (min) the terminal shows of a whole-body time course (all reported times are in results.json)
TIMELINE_TIMES = (0.0, 30.0, 60.0, 120.0, 240.0)


def timeline_lines(tl: dict[str, Any] | None) -> list[str]:
    """The typical subject's whole-body time courses at :data:`TIMELINE_TIMES` and the last reported time.

    Parameters
    ----------
    tl : dict or None
        The ``timeline`` entry of a propagate document (``times_min``, ``units``, ``typical``), or None.

    Returns
    -------
    list of str
        A blank line, a header and one line per quantity: median [95% interval] at each shown time (min);
        nothing when there is no timeline.
    """
    if not isinstance(tl, dict) or not tl.get("times_min"):
        return []
    times = list(tl["times_min"])
    want = [t for t in TIMELINE_TIMES if t <= times[-1]] + [times[-1]]
    idx = sorted({min(range(len(times)), key=lambda i, t=t: abs(times[i] - t)) for t in want})
    units = tl.get("units") or {}
    rows = []
    for name, d in (tl.get("typical") or {}).items():
        med, ci = d.get("median") or [], d.get("ci95") or []
        cells = []
        for i in idx:
            m = med[i] if i < len(med) else None
            lo, hi = ci[i] if i < len(ci) and ci[i] else (None, None)
            cells.append("-" if m is None else f"{m:.3g} [{lo:.3g}, {hi:.3g}]" if lo is not None else f"{m:.3g}")
        rows.append((f"{name} ({units[name]})" if units.get(name) else name, cells))
    first = max([len("time course (typical subject)"), *(len(r[0]) for r in rows)]) + 2
    width = max([12, *(len(c) for r in rows for c in r[1])]) + 2
    head = f"{'time course (typical subject)':<{first}}" + "".join(f"{f'{times[i]:g} min':>{width}}" for i in idx)
    lines = ["", head, "-" * len(head)]
    for label, cells in rows:
        lines.append(f"{label:<{first}}" + "".join(f"{c:>{width}}" for c in cells))
    return lines
