"""The plain-text summary ``fluidshift calibrate`` prints, and the report's HTML, from a calibration document."""

from __future__ import annotations

from typing import Any

from uncertainty.core.formatting import fmt
from uncertainty.core.html import escape
from uncertainty.core.html import table as html_table


def rows(doc: dict[str, Any]) -> list[dict[str, Any]]:
    """One row per quantity: bin counts, chi-square p-value, 90 % coverage and whether it is flagged.

    Parameters
    ----------
    doc : dict
        ``CalibrationResult.to_dict()``.

    Returns
    -------
    list of dict
        ``{quantity, unit, replicates, p_value, covered, coverage_range, mean_rank, flagged, counts}``
        (mean_rank is rank / L, dimensionless).
    """
    out = []
    for name, q in (doc.get("quantities") or {}).items():
        cov = q.get("coverage90") or {}
        out.append({"quantity": name, "unit": (doc.get("units") or {}).get(name, ""), "replicates": cov.get("n"),
                    "p_value": q.get("p_value"), "covered": cov.get("covered"),
                    "coverage_range": "-".join(str(v) for v in cov.get("range") or []),
                    "mean_rank": q.get("mean_rank"), "flagged": q.get("flagged"),
                    "counts": " ".join(str(c) for c in q.get("counts") or [])})
    return out


def table(doc: dict[str, Any]) -> str:
    """Plain-text summary: the run, one line per quantity, one verdict sentence per quantity, the overall one.

    Parameters
    ----------
    doc : dict
        ``CalibrationResult.to_dict()``.

    Returns
    -------
    str
        The text.
    """
    s = doc.get("sampler") or {}
    lines = [f"calibration of the {doc.get('model')} model ({doc.get('level')}): {doc.get('replicates')} replicates "
             f"({doc.get('replicates_used')} passed the quality gate, {doc.get('failed')} failed), ranks among "
             f"{doc.get('draws')} thinned draws in {doc.get('bins')} bins; refits of {s.get('chains')} chains x "
             f"{s.get('draws')} draws after {s.get('tune')} warm-up; seed {doc.get('seed')}",
             f"{'quantity':<10} {'ranks p':>9} {'in 90% interval':>16} {'99% range':>10} {'mean rank':>9}  bin counts"]
    for r in rows(doc):
        held = f"{r['covered']} of {r['replicates']}"
        lines.append(f"{r['quantity']:<10} {fmt(r['p_value'], 3):>9} {held:>16} "
                     f"{r['coverage_range']:>10} {fmt(r['mean_rank'], 3):>9}  {r['counts']}"
                     + ("  FLAGGED" if r["flagged"] else ""))
    lines.append(f"(a quantity is flagged when either test gives p < {fmt(doc.get('alpha_per_test'), 2)}: "
                 f"{fmt(doc.get('family_alpha'), 2)} shared over all quantities and both tests; "
                 f"a uniform bin count stays in {doc.get('band99')} with probability 0.99)")
    for q in (doc.get("quantities") or {}).values():
        lines.append(q.get("verdict", ""))
    lines.append(str(doc.get("verdict", "")))
    failures = doc.get("failures") or []
    for f in failures[:5]:
        lines.append(f"replicate {f['replicate']} failed: {f['reason']}")
    if len(failures) > 5:
        lines.append(f"... and {len(failures) - 5} more failed replicates (all in the JSON)")
    lines.extend(f"note: {n}" for n in doc.get("notes") or [])
    return "\n".join(lines)


def section_html(doc: dict[str, Any]) -> str:
    """The calibration's part of an HTML report: the overall verdict and the per-quantity table.

    Parameters
    ----------
    doc : dict
        ``CalibrationResult.to_dict()`` (any mapping renders).

    Returns
    -------
    str
        A paragraph and a table.
    """
    body = [[r["quantity"], fmt(r["p_value"], 3), f"{r['covered']} of {r['replicates']}", r["coverage_range"],
             fmt(r["mean_rank"], 3), "yes" if r["flagged"] else "no"] for r in rows(doc)]
    return (f"<p>{escape(doc.get('verdict', ''))}</p>"
            + html_table(["quantity", "ranks p", "in 90 % interval", "99 % range", "mean rank / L", "flagged"], body,
                         num_cols={1, 4}))
