"""The plain-text table ``fluidshift sensitivity`` prints, from a sensitivity result's document."""

from __future__ import annotations

from typing import Any

#: the indices shown per method, in column order
COLUMNS = {"sobol": ["S1", "ST"], "shapley": ["Sh", "S1", "ST"], "morris": ["mu_star", "sigma"]}
#: what the convergence table's sample size counts, per method
SIZES = {"sobol": "base samples N", "morris": "trajectories", "shapley": "random orders"}


def _fmt(x: float) -> str:
    return "nan" if x != x else f"{x:.3f}"


def table(doc: dict[str, Any]) -> str:
    """Plain-text table of a sensitivity result in ranking order, with its convergence table.

    Parameters
    ----------
    doc : dict
        ``SensitivityResult.to_dict()`` (indices are dimensionless, Morris' in the output's unit).

    Returns
    -------
    str
        The table, settings, convergence rows, notes and warnings, one per line.
    """
    method, ranking, indices = doc["method"], doc["ranking"], doc["indices"]
    keys = COLUMNS[method]
    lines = [f"{method} indices of {doc['output']} ({doc['layer']} layer), ranked by {doc['ranked_by']}"]
    head = f"{'rank':<6}{'input':<12}" + "".join(
        f"{k:>10}{'95% interval':>22}" if f"{k}_ci" in indices[ranking[0]] else f"{k:>10}"
        for k in keys)
    lines += [head, "-" * len(head)]
    for i, p in enumerate(ranking, 1):
        ix = indices[p]
        row = f"{i:<6}{p:<12}"
        for k in keys:
            if method == "morris":
                row += f"{ix[k]:>10.3g}"
            else:
                row += f"{_fmt(ix[k]):>10}"
            if f"{k}_ci" in ix:
                lo, hi = ix[f"{k}_ci"]
                ci = f"[{lo:.3g}, {hi:.3g}]" if method == "morris" else f"[{_fmt(lo)}, {_fmt(hi)}]"
                row += f"{ci:>22}"
        lines.append(row)
    size = SIZES[method].removesuffix(" N")
    lines.append(f"{doc['samples']} {size}, {doc['evaluations']} model runs, "
                 f"{doc['replicates']} independent replicates, seed {doc['seed']}")
    if doc.get("tol") is not None:  # whether the tolerance was met is one of the notes below
        lines.append(f"tolerance {doc['tol']:g}, {size} tried (widest 95% half-width): " + ", ".join(
            f"{h['samples']} ({_fmt(h['widest_half_width'])})" for h in doc.get("history") or []))
    if doc["convergence"]:
        key = doc["ranked_by"]
        cell = (lambda v: f"{v:.3g}") if method == "morris" else _fmt
        lines.append("")
        lines.append(f"convergence ({key} by {SIZES[method]}):")
        lines.append(f"{'N':>8}" + "".join(f"{p:>12}" for p in ranking))
        for row in doc["convergence"]:
            lines.append(f"{row['samples']:>8}" + "".join(f"{cell(row['indices'][p][key]):>12}" for p in ranking))
    for n in doc["notes"]:
        lines.append(f"note: {n}")
    for w in doc["warnings"]:
        lines.append(f"warning: {w}")
    return "\n".join(lines)
