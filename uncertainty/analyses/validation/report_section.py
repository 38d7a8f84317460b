"""The validation section of report.html and of the one-screen summary, from its stored document: how the study's
model form, with the shipped priors, compares with each published measurement of its tissue."""

from __future__ import annotations

import re
from typing import Any

from uncertainty.analyses.result import Caption
from uncertainty.core.formatting import fmt
from uncertainty.core.html import escape

CAPTIONS: tuple[Caption, ...] = (
    ("", "", "Each panel is one published measurement: its band (grey, an arrow where it is open) beside the "
             "form's median (dot) and 95% interval (line) for the typical subject with the shipped priors; blue "
             "inside the band, orange a known gap whose reason the table gives, red outside."),
)


def _band(r: dict[str, Any]) -> str:
    high = r.get("high")
    return f"[{fmt(r.get('low'), 4)}, {'inf' if high is None else fmt(high, 4)}]"


def _interval(r: dict[str, Any]) -> str:
    ci = r.get("ci95") or [None, None]
    return f"[{fmt(ci[0], 3)}, {fmt(ci[1], 3)}]"


def _conditions(r: dict[str, Any]) -> str:
    return str(r.get("conditions_text") or ", ".join(r.get("conditions") or []) or "normal")


def _verdict(r: dict[str, Any]) -> str:
    kind = f" ({r['kind']})" if r.get("kind") in ("calibration", "input") else ""
    return f"{r.get('verdict', '')}{kind}"


def _counts(doc: dict[str, Any]) -> str:
    c = doc.get("counts") or {}
    return (f"{len(doc.get('rows') or [])} published measurements: {c.get('inside', 0)} inside their band, "
            f"{c.get('outside', 0)} outside, {c.get('known gap', 0)} known gaps")


_SENTENCE_END = re.compile(r"(?<!\bal)(?<!\be\.g)(?<!\bi\.e)\.\s+(?=[A-Z(])")


def first_sentence(text: str) -> str:
    """The first sentence of a known-gap reason (its cause; the whole reason, with the figures of what was tried,
    stays in the table, its CSV and ``fluidshift validate --sources``), closed with a full stop.

    Parameters
    ----------
    text : str

    Returns
    -------
    str
    """
    head = _SENTENCE_END.split(text.strip(), maxsplit=1)[0].rstrip(". ")
    return head + "."


def section_html(doc: dict[str, Any]) -> str:
    """The report section: a sentence on what is compared, then one line per published measurement (quantity,
    conditions, band, the form's median and 95 % interval, unit, verdict) with its source, and the reason of a
    known gap, on a full-width line beneath it.

    Parameters
    ----------
    doc : dict
        The stored ``FormValidationResult.to_dict()``.

    Returns
    -------
    str
        HTML: a paragraph and a table.
    """
    head = ["quantity", "conditions", "band", "median", "95% interval", "unit", "verdict"]
    out = [f"<p>The {escape(str(doc.get('form', '')))} form of {escape(str(doc.get('tissue', '')))} with the "
           "shipped priors (not this study's own), typical subject, beside each published measurement of the "
           f"validation table ({escape(_counts(doc))}). A known gap is a measurement the form misses, kept with its "
           "reason rather than tuned away: read them before trusting the form in those conditions. Each reason's "
           "first sentence is shown; <code>fluidshift validate --sources</code> prints the whole table with the "
           "full reasons.</p>",
           '<div class="table-wrap"><table class="validation stacked"><thead><tr>',
           *(f"<th>{escape(h)}</th>" for h in head), "</tr></thead><tbody>"]
    for r in doc.get("rows") or []:
        cells = [r.get("quantity"), _conditions(r), _band(r), fmt(r.get("median"), 3), _interval(r),
                 r.get("unit") or "", _verdict(r)]
        tds = "".join(f'<td data-label="{escape(h)}"{" class=num" if h == "median" else ""}>{escape(str(c))}</td>'
                      for h, c in zip(head, cells, strict=True))
        cls = {"inside": "ok", "outside": "bad"}.get(str(r.get("verdict")), "gap")
        out.append(f'<tr class="entry verdict-{cls}">{tds}</tr>')
        gap = (f'<br><span class="origin-label">Known gap:</span> {escape(first_sentence(str(r["known_gap"])))}'
               if r.get("known_gap") else "")
        out.append(f'<tr class="origin-row"><td colspan="{len(head)}"><span class="origin-label">Source:</span> '
                   f'<span class="origin">{escape(str(r.get("source", "")))}</span>{gap}</td></tr>')
    out.append("</tbody></table></div>")
    return "".join(out)


def text_table(doc: dict[str, Any]) -> str:
    """Plain text: one line per published measurement (quantity, conditions, band, median, 95 % interval, unit,
    verdict) and a footer with the counts.

    Parameters
    ----------
    doc : dict
        The stored ``FormValidationResult.to_dict()``.

    Returns
    -------
    str
    """
    rows = doc.get("rows") or []
    qw = max([10] + [len(str(r.get("quantity"))) + 2 for r in rows])
    lines = [f"{'quantity':<{qw}}{'conditions':<36}{'band':>20}{'median':>10}{'95% interval':>24}  {'unit':<14}verdict"]
    for r in rows:
        lines.append(f"{str(r.get('quantity')):<{qw}}{_conditions(r)[:35]:<36}{_band(r):>20}"
                     f"{fmt(r.get('median'), 3):>10}{_interval(r):>24}  {str(r.get('unit') or ''):<14}{_verdict(r)}")
    lines.append(_counts(doc) + f" ({doc.get('form')} form of {doc.get('tissue')}, shipped priors, typical subject)")
    return "\n".join(lines)


def summary(doc: dict[str, Any]) -> list[str]:
    """One-screen summary: the counts of verdicts, and the known gaps' quantities when there are any.

    Parameters
    ----------
    doc : dict
        The stored ``FormValidationResult.to_dict()``.

    Returns
    -------
    list of str
    """
    gaps = [str(r.get("quantity")) for r in doc.get("rows") or [] if r.get("verdict") == "known gap"]
    line = f"The {doc.get('form')} form against {_counts(doc)} (shipped priors)"
    if gaps:
        more = f" and {len(gaps) - 3} more" if len(gaps) > 3 else ""
        line += "; known gaps: " + "; ".join(gaps[:3]) + more
    return [line + "."]

