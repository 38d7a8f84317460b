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
    lines += threshold_lines(doc.get("thresholds") or [])
    lines.append(f"{doc['samples']} draws, method {doc['method']}, {doc['replicates']} independent "
                 f"replicates, seed {doc['seed']}")
    for n in doc["notes"]:
        lines.append(f"note: {n}")
    for w in doc["warnings"]:
        lines.append(f"warning: {w}")
    return "\n".join(lines)
