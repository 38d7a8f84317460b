"""The answers of an inference document (``answers.add_answers``) as text (rich tables, compact), tidy
rows for the CSV tables (one table per kind of row) and HTML for the report. Every reader takes the
stored document, so a bundle's answers can be shown again without the draws."""

from __future__ import annotations

import io
import shutil
from typing import Any

from uncertainty.core.formatting import fmt
from uncertainty.core.html import table

#: cohort levels, in the order they are shown
LEVELS = (("typical", "typical subject"), ("new_subject", "new subject"), ("cohort_total", "cohort total"))


#: how whole-tissue flows are headed in the terminal and report (the CSV keeps the quantity's name)
LABELS = {"Jv_mL_per_h": "Jv", "Jv_L_per_day": "Jv"}


def num(x: Any) -> str:
    """A number with 3 significant figures, without an exponent between 1e-4 and 1e5 ('-' for None)."""
    if x is None or isinstance(x, bool) or not isinstance(x, int | float):
        return fmt(x, 3)
    if x != x:
        return "nan"
    return f"{float(f'{x:.3g}'):g}" if x == 0 or 1e-4 <= abs(x) < 1e5 else f"{x:.3g}"


def _cell(block: dict[str, Any] | None) -> str:
    """'mean [low, high]' with 3 significant figures, '-' when missing."""
    if not isinstance(block, dict) or "mean" not in block:
        return "-"
    lo, hi = (block.get("ci95") or [None, None])[:2]
    return f"{num(block['mean'])} [{num(lo)}, {num(hi)}]"


def _head(doc: dict[str, Any], name: str) -> str:
    unit = (doc.get("units") or {}).get(name, "")
    label = LABELS.get(name, name)
    return f"{label} ({unit})" if unit and unit != "1" else label


def _rows_summary(level: str, name: str, unit: str, b: dict[str, Any]) -> dict[str, Any]:
    lo, hi = (b.get("ci95") or [float("nan")] * 2)[:2]
    return {"level": level, "quantity": name, "unit": unit, "mean": b.get("mean"), "sd": b.get("sd"),
            "ci95_low": lo, "ci95_high": hi}


def subject_rows(doc: dict[str, Any]) -> list[dict[str, Any]]:
    """Tidy rows: one per subject and subject-level quantity (subject, group, quantity, unit, mean,
    sd, ci95_low, ci95_high), units as in ``doc["units"]``."""
    rows = []
    units = doc.get("units") or {}
    for sid, block in (doc.get("subjects") or {}).items():
        for name in doc.get("subject_quantities") or []:
            b = block.get(name)
            if isinstance(b, dict):
                row = _rows_summary("", name, units.get(name, ""), b)
                row.pop("level")
                rows.append({"subject": sid, "group": block.get("group", ""), **row})
    return rows


def cohort_rows(doc: dict[str, Any]) -> list[dict[str, Any]]:
    """Tidy rows: one per cohort level (typical subject, new subject, cohort total, or the study's
    individual) and quantity."""
    rows = []
    units = doc.get("units") or {}
    levels = [("individual", "individual")] if doc.get("individual") else list(LEVELS)
    for key, label in levels:
        for name, b in (doc.get(key) or {}).items():
            if isinstance(b, dict) and "mean" in b:
                rows.append(_rows_summary(label, name, units.get(name, ""), b))
    return rows


def effect_rows(doc: dict[str, Any]) -> list[dict[str, Any]]:
    """Tidy rows: one per group effect (quantity, group, reference, measure, of, estimate, ci95_low,
    ci95_high, direction, p_direction, unit)."""
    rows = []
    for e in doc.get("group_effects") or []:
        lo, hi = (e.get("ci95") or [float("nan")] * 2)[:2]
        rows.append({k: e.get(k) for k in ("quantity", "group", "reference", "measure", "of", "estimate")}
                    | {"ci95_low": lo, "ci95_high": hi, "direction": e.get("direction"),
                       "p_direction": e.get("p_direction"), "unit": e.get("unit")})
    return rows


def _effect_text(e: dict[str, Any]) -> str:
    lo, hi = (e.get("ci95") or [None, None])[:2]
    unit = "" if e.get("measure") == "ratio" else f" {e.get('unit', '')}"
    return f"{num(e.get('estimate'))} [{num(lo)}, {num(hi)}]{unit}".rstrip()


def _p(e: dict[str, Any]) -> str:
    p = e.get("p_direction")
    return f"{p:.3f} {e.get('direction', '')}" if isinstance(p, float) and p == p else "-"


def _chunks(doc: dict[str, Any], lead: list[tuple[str, list[str]]], cells: dict[str, list[str]],
            width: int) -> list[list[str]]:
    """Quantities split into runs whose table (the ``lead`` columns repeated) fits ``width`` characters."""
    def w(head: str, col: list[str]) -> int:
        return max([len(head), *map(len, col)]) + 2

    base = sum(w(h, c) for h, c in lead)
    chunks: list[list[str]] = [[]]
    used = base
    for name, col in cells.items():
        need = w(_head(doc, name), col)
        if chunks[-1] and used + need > width:
            chunks.append([])
            used = base
        chunks[-1].append(name)
        used += need
    return chunks


def text(doc: dict[str, Any]) -> str:
    """The answers as compact rich tables rendered to plain text: per-subject values (mean and 95%
    interval), the cohort (typical subject, a new subject, the cohort total) and group effects. Wide
    tables are split into several, each as wide as the terminal (120 characters when not a terminal).

    Parameters
    ----------
    doc : dict
        An inference document with answers (canonical units, printed in each column's heading).

    Returns
    -------
    str
        The tables, or "" when the document has no answers.
    """
    from rich import box
    from rich.console import Console
    from rich.table import Table

    tables: list[Any] = []
    names = list(doc.get("subject_quantities") or [])
    subjects = doc.get("subjects") or {}
    width = shutil.get_terminal_size((120, 24)).columns
    if names and subjects:
        with_group = any(b.get("group") for b in subjects.values())
        lead = [("subject", list(subjects))] + ([("group", [b.get("group", "") for b in subjects.values()])]
                                                 if with_group else [])
        cells = {n: [_cell(b.get(n)) for b in subjects.values()] for n in names}
        for part, chunk in enumerate(_chunks(doc, lead, cells, width)):
            t = Table(title="Per subject: posterior mean [95% interval]" + (" (continued)" if part else ""),
                      box=box.SIMPLE_HEAD, pad_edge=False, title_justify="left")
            for head, _ in lead:
                t.add_column(head)
            for name in chunk:
                t.add_column(_head(doc, name), justify="right")
            for k in range(len(subjects)):
                t.add_row(*[col[k] for _, col in lead], *[cells[n][k] for n in chunk])
            tables.append(t)
    levels = [("individual", "the study's individual")] if doc.get("individual") else list(LEVELS)
    found = [n for key, _ in levels for n in (doc.get(key) or {}) if isinstance((doc.get(key) or {}).get(n), dict)]
    cols = [n for n in names if n in found] + [n for n in dict.fromkeys(found) if n not in names]
    if cols and (names or doc.get("individual") or doc.get("cohort_total")):
        shown = [(key, label) for key, label in levels
                 if any(isinstance((doc.get(key) or {}).get(n), dict) for n in cols)]
        title = "Cohort" if not doc.get("individual") else "The study's individual"
        t = Table(title=f"{title}: posterior mean [95% interval]", box=box.SIMPLE_HEAD, pad_edge=False,
                  title_justify="left")
        t.add_column("quantity")
        for _, label in shown:
            t.add_column(label, justify="right")
        for name in cols:
            t.add_row(_head(doc, name), *[_cell((doc.get(key) or {}).get(name)) for key, _ in shown])
        tables.append(t)
    effects = doc.get("group_effects") or []
    if effects:
        t = Table(title="Group effects: median [95% interval], P(direction)", box=box.SIMPLE_HEAD,
                  pad_edge=False, title_justify="left")
        for c in ("quantity", "group vs reference", "of", "measure", "effect", "P(direction)"):
            t.add_column(c, justify="right" if c in ("effect", "P(direction)") else "left")
        for e in effects:
            t.add_row(e["quantity"], f"{e['group']} vs {e['reference']}", e.get("of", ""), e.get("measure", ""),
                      _effect_text(e), _p(e))
        tables.append(t)
    if not tables:
        return ""
    buf = io.StringIO()
    console = Console(file=buf, width=1000, color_system=None, highlight=False)   # no wrapping: one row a line
    for t in tables:
        console.print(t)
    return "\n".join(line.rstrip() for line in buf.getvalue().rstrip().splitlines())


def html(doc: dict[str, Any]) -> str:
    """The answers as HTML tables for the report (the same content as :func:`text`).

    Parameters
    ----------
    doc : dict
        An inference document with answers.

    Returns
    -------
    str
        Headings and tables; "" without answers.
    """
    parts = []
    names = list(doc.get("subject_quantities") or [])
    subjects = doc.get("subjects") or {}
    if names and subjects:
        rows = [[sid, b.get("group", ""), *[_cell(b.get(n)) for n in names]] for sid, b in subjects.items()]
        parts.append("<h3>Per subject</h3><p>Posterior mean [95% credible interval] of each subject-level "
                     "quantity, in the unit beside its name.</p>")
        parts.append(table(["subject", "group", *[_head(doc, n) for n in names]], rows))
    crow = cohort_rows(doc)
    if crow and (names or doc.get("individual")):
        parts.append("<h3>Cohort</h3>" + table(["", "quantity", "unit", "mean [95% interval]"],
                                                [[r["level"], r["quantity"], r["unit"],
                                                  f"{num(r['mean'])} [{num(r['ci95_low'])}, "
                                                  f"{num(r['ci95_high'])}]"] for r in crow]))
    effects = doc.get("group_effects") or []
    if effects:
        parts.append("<h3>Group effects</h3><p>Ratio (positive quantities) or difference against the "
                     "reference group: the model's effect on the typical value where the study gives one, "
                     "else the contrast of the cohort's subjects; P(direction) is the posterior probability "
                     "of the side of no effect the median lies on.</p>")
        parts.append(table(["quantity", "group vs reference", "of", "measure", "median [95% interval]",
                            "P(direction)"],
                           [[e["quantity"], f"{e['group']} vs {e['reference']}", e.get("of", ""),
                             e.get("measure", ""), _effect_text(e),
                             _p(e)]
                            for e in effects]))
    return "".join(parts)
