"""The plain-text table ``fluidshift rank`` prints, from a rank result's document."""

from __future__ import annotations

from typing import Any


def table(doc: dict[str, Any]) -> str:
    """Plain-text table of a rank result (best first).

    Parameters
    ----------
    doc : dict
        ``RankResult.to_dict()`` (variances in the output's unit squared, widths in its unit).

    Returns
    -------
    str
        A heading, one row per candidate, the best pair and set, the sizes tried under a tolerance, notes.
    """
    lines = [f"expected effect of one measurement on {doc['output']} ({doc.get('from', 'prior')} 95% width "
             f"{doc['prior']['ci95_width']:.3g}; {doc['samples']} draws, seed {doc['seed']})",
             f"{'candidate':<28}{'reads':<7}{'Var reduction':>15}{'+-mc_se':>10}{'bound':>11}"
             f"{'95% width':>11}{'narrow/cost':>13}"]
    for r in doc["candidates"]:
        lines.append(f"{r['name'][:27]:<28}{r['parameter']:<7}{r['expected_variance_reduction']:>15.3g}"
                     f"{r['mc_se']:>10.2g}{r['perfect_information_bound']:>11.3g}{r['expected_ci95_width']:>11.3g}"
                     f"{r['per_cost']:>13.3g}")
    for key in ("best_pair", "best_set"):
        b = doc.get(key)
        if b:
            lines.append(f"{key}: {' + '.join(b['names'])} (cost {b['cost']:g}): Var reduction "
                         f"{b['expected_variance_reduction']:.3g} +- {b['mc_se']:.2g}, 95% width "
                         f"{b['expected_ci95_width']:.3g} (fitted jointly)")
    if doc.get("precision_history"):  # whether the tolerance was met is one of the notes
        lines.append(f"tolerance {doc['tol']:g}, draws tried (widest 95% half-width over the reduction): " + ", ".join(
            f"{h['samples']} ({h['widest_half_width']:.3g})" for h in doc["precision_history"]))
    lines += [f"note: {n}" for n in doc.get("notes", [])]
    return "\n".join(lines)
