"""The one-screen summary and the self-contained HTML report of a whole-study run.

Both are built from the results document alone (``results.json``) plus the bundle's figure files,
which are embedded (SVG, else PNG, as base64 data URIs), so ``report.html`` is one file that reads on
a phone (responsive CSS) and prints (print CSS). The page template is ``report_template.html``.
"""

from __future__ import annotations

import base64
import os
from importlib import resources
from pathlib import Path
from string import Template
from typing import Any

from uncertainty.analyses.registry import ANALYSES, DIAGNOSTICS, analysis
from uncertainty.app.bundle import REPORT, Bundle, FileRecord
from uncertainty.core.formatting import fmt, interval
from uncertainty.core.html import escape, kv_table, table

CAUTIONS = (
    "fluidshift is a research tool. It is not a diagnostic device and not a medical device of any kind; "
    "its numbers are model estimates whose quality rests on the priors and data given to it.",
    "Clinical decisions rest with licensed practitioners, following local protocols. Nothing in this "
    "report is advice about a patient.",
    "Prior values marked \"from memory\" were recalled, not looked up; check them against the sources "
    "before relying on them. Example studies and their data are invented scenarios.",
)

#: one sentence per figure: (section, substring of the file name or "" for the section default, method of
#: the section's result or "" for any method, text); ``{output}`` is the result's output (default Jv).
#: The first row whose section, substring and method match wins, so the specific rows come first. The
#: rows come from each analysis's report_section (in run order).
CAPTIONS: list[tuple[str, str, str, str]] = [(a.name, *row) for a in ANALYSES for row in a.captions]


def caption(section: str, filename: str, result: dict[str, Any] | None = None) -> str:
    """The one-sentence meaning of a figure, by section, file name and (from ``result``, the section's
    to_dict) the method and output it shows."""
    low = filename.lower()
    res = result if isinstance(result, dict) else {}
    method = str(res.get("method") or "").lower()
    output = str(res.get("output") or "Jv")
    for sec, pattern, meth, text in CAPTIONS:
        if sec == section and (not pattern or pattern in low) and (not meth or meth == method):
            return text.replace("{output}", output)
    return "A figure of this analysis; see the table beside it for the numbers."


# --------------------------------------------------------------------------------------------
# One-screen summary
# --------------------------------------------------------------------------------------------

def _result(doc: dict[str, Any], name: str) -> dict[str, Any] | None:
    rec = doc.get("sections", {}).get(name)
    res = rec.get("result") if rec else None
    return res if isinstance(res, dict) else None


def summary_lines(doc: dict[str, Any]) -> list[str]:
    """The one-screen summary of a results document: Jv (individual and typical), P(absorption),
    top inputs and measurements, the posterior interval, the trial size and the quality gate."""
    lines: list[str] = []
    study = doc.get("study", {})
    lines.append(f"{study.get('title') or 'study'}  (model {study.get('model') or '?'}, "
                 f"tissue {study.get('tissue') or '?'}, seed {study.get('seed')})")
    for a in ANALYSES:
        res = _result(doc, a.name)
        if res:
            lines += a.summary(res)
    gate = doc.get("quality_gate", {})
    if gate.get("failed") or gate.get("errors"):
        bits = []
        if gate.get("failed"):
            bits.append("quality gate failed in " + ", ".join(gate["failed"]))
        if gate.get("errors"):
            bits.append("error in " + ", ".join(gate["errors"]))
        lines.append("ATTENTION: " + "; ".join(bits) + " (see the report)")
    reused = [n for n, r in doc.get("sections", {}).items() if r.get("reused")]
    if reused:
        lines.append("Reused unchanged from the previous run: " + ", ".join(reused))
    return lines


# --------------------------------------------------------------------------------------------
# HTML pieces
# --------------------------------------------------------------------------------------------

TITLES = {"check": "Study check", **{a.name: a.title for a in ANALYSES}}


def _figure_uri(path: Path) -> str:
    mime = {".svg": "image/svg+xml", ".png": "image/png"}[path.suffix.lower()]
    return f"data:{mime};base64," + base64.b64encode(path.read_bytes()).decode("ascii")


def _figures(name: str, rec: dict[str, Any], root: Path) -> str:
    by_stem: dict[str, dict[str, Path]] = {}
    for f in rec.get("files", []):
        if f.get("kind") != "figure":
            continue
        p = root / f["path"]
        if p.suffix.lower() in (".svg", ".png") and p.is_file():
            by_stem.setdefault(p.stem, {})[p.suffix.lower()] = p
    out = []
    for stem, versions in sorted(by_stem.items()):
        p = versions.get(".svg") or versions[".png"]
        cap = caption(name, stem, rec.get("result"))
        out.append(f'<figure><img src="{_figure_uri(p)}" alt="{escape(cap)}" loading="eager">'
                   f"<figcaption>{escape(cap)}</figcaption></figure>")
    return "".join(out)


def _priors(doc: dict[str, Any]) -> str:
    """The priors table: one row of numbers per quantity, then its origin (and note) on a full-width row
    beneath it, so the origin reads whole on a phone and in print instead of in a narrow last column."""
    head = ["symbol", "distribution", "median", "95% interval", "unit", "basis", "between-subject"]
    out = ['<div class="table-wrap"><table class="priors stacked"><thead><tr>']
    out += [f"<th>{escape(h)}</th>" for h in head]
    out.append("</tr></thead><tbody>")
    for r in doc.get("priors", []):
        bs = r.get("between_subject")
        bs_text = ", ".join(f"{k} {fmt(v, 3)}" for k, v in bs.items()) if isinstance(bs, dict) else fmt(bs)
        cells = [r.get("symbol"), r.get("dist"), fmt(r.get("median"), 4), interval(r.get("ci95"), 4),
                 r.get("unit") or "", r.get("basis") or "", bs_text]
        tds = []
        for i, (h, c) in enumerate(zip(head, cells, strict=True)):
            cls = ' class="num"' if i == 2 else ""
            tds.append(f'<td data-label="{escape(h)}"{cls}>{escape(c)}</td>')
        out.append('<tr class="prior entry">' + "".join(tds) + "</tr>")
        origin = r.get("origin") or "(no origin given)"
        note = f' <span class="note">Note: {escape(r["note"])}</span>' if r.get("note") else ""
        out.append(f'<tr class="origin-row"><td colspan="{len(head)}"><span class="origin-label">Origin:</span> '
                   f'<span class="origin">{escape(origin)}</span>{note}</td></tr>')
    out.append("</tbody></table></div>")
    if not doc.get("priors"):
        return "<p>No priors recorded.</p>"
    return "".join(out)


def _diagnostics(doc: dict[str, Any]) -> str:
    rows = []
    for name, rec in doc.get("sections", {}).items():
        rows.append([name, rec.get("status"), "yes" if rec.get("reused") else "no", fmt(rec.get("seconds"), 3),
                     rec.get("message") or ""])
    parts = [table(["section", "status", "reused", "seconds", "message"], rows, num_cols={3})]
    for a in DIAGNOSTICS:
        res = _result(doc, a.name)
        if res and a.diagnostics is not None:
            parts.append(a.diagnostics(res))
    warns = [(n, w) for n, rec in doc.get("sections", {}).items() for w in rec.get("warnings", [])]
    if warns:
        parts.append("<h3>Warnings</h3><ul>" + "".join(
            f"<li><strong>{escape(n)}</strong>: {escape(w.splitlines()[0] if w else w)}</li>" for n, w in warns)
            + "</ul>")
    return "".join(parts)


def _provenance(doc: dict[str, Any]) -> str:
    p = doc.get("provenance", {})
    deps = ", ".join(f"{k} {v}" for k, v in (p.get("dependencies") or {}).items() if v)
    rows = [["package", f"{p.get('package')} {p.get('version')}"], ["python", p.get("python")],
            ["platform", p.get("platform")], ["study file", p.get("study_path")],
            ["study SHA-256", p.get("study_hash")], ["seed", p.get("seed")], ["started", p.get("started")],
            ["finished", p.get("finished")], ["command line", p.get("command_line")], ["dependencies", deps]]
    return table(["", ""], [[a, fmt(b)] for a, b in rows])


def render(doc: dict[str, Any], root: str | os.PathLike) -> str:
    """The whole report page for a results document; figures are read from ``root`` and embedded."""
    root = Path(root)
    study = doc.get("study", {})
    title = study.get("title") or "fluidshift study"
    gate = doc.get("quality_gate", {})
    body = [f'<header class="top"><h1>{escape(title)}</h1>'
            f'<p class="meta">fluidshift {escape(doc.get("provenance", {}).get("version", ""))} · model '
            f'{escape(study.get("model"))} · tissue {escape(study.get("tissue"))} · seed {escape(study.get("seed"))} · '
            f'{escape(doc.get("provenance", {}).get("finished") or "")}</p></header>']
    body.append('<section class="caution" id="cautions"><strong>Cautions</strong><ul>'
                + "".join(f"<li>{escape(c)}</li>" for c in CAUTIONS) + "</ul></section>")
    if gate.get("failed"):
        body.append('<section class="gate-bad" id="quality-gate"><strong>Quality gate failed.</strong> '
                    + escape("; ".join(f"{n}: {doc['sections'][n].get('message')}" for n in gate["failed"]))
                    + " The numbers of the flagged sections are shown but should not be relied on.</section>")
    if gate.get("errors"):
        body.append('<section class="gate-bad" id="section-errors"><strong>Some sections did not complete.</strong> '
                    + escape("; ".join(f"{n}: {doc['sections'][n].get('message')}" for n in gate["errors"]))
                    + "</section>")
    if not gate.get("failed") and not gate.get("errors"):
        body.append('<p id="quality-gate" class="gate-ok">Every quality gate passed.</p>')
    body.append('<section class="glance" id="summary"><h2>At a glance</h2><ul>'
                + "".join(f"<li>{escape(line)}</li>" for line in doc.get("summary") or summary_lines(doc))
                + "</ul></section>")
    for name, rec in doc.get("sections", {}).items():
        if name == "check":
            continue
        body.append(f'<section id="section-{escape(name)}"><h2>{escape(TITLES.get(name, name))} '
                    f'<span class="status {escape(rec.get("status"))}">({escape(rec.get("status"))})</span></h2>')
        res = rec.get("result")
        if rec.get("message"):
            body.append(f"<p><strong>Note:</strong> {escape(rec['message'])}</p>")
        if isinstance(res, dict):
            a = analysis(name)
            try:
                body.append(a.section_html(res) if a is not None else kv_table(res))
            except Exception:  # noqa: BLE001 - an unexpected result shape still shows as key/value pairs
                body.append(kv_table(res))
            notes = res.get("notes") or []
            if notes:
                body.append("<ul>" + "".join(f"<li>{escape(n)}</li>" for n in notes) + "</ul>")
        body.append(_figures(name, rec, root))
        body.append("</section>")
    body.append('<section id="priors"><h2>Priors used, with their origin</h2><p>Every quantity the model uses, '
                "after the tissue's prior set, the conditions and the study's overrides, in canonical units.</p>"
                + _priors(doc) + "</section>")
    if doc.get("notes"):
        body.append('<section id="notes"><h2>Notes</h2><ul>' + "".join(f"<li>{escape(n)}</li>" for n in doc["notes"])
                    + "</ul></section>")
    body.append('<section id="diagnostics"><h2>Diagnostics</h2>' + _diagnostics(doc) + "</section>")
    body.append('<section id="provenance"><h2>Provenance</h2>' + _provenance(doc) + "</section>")
    body.append("<footer>Generated by fluidshift, a research tool; not a diagnostic device. The numbers in "
                "results.json are the reference; this page shows them rounded.</footer>")
    template = Template(resources.files("uncertainty.app").joinpath("report_template.html").read_text(encoding="utf-8"))
    return template.substitute(title=escape(title), version=escape(doc.get("provenance", {}).get("version", "")),
                               body="\n".join(body))


def write_report(doc: dict[str, Any], bundle: Bundle) -> FileRecord:
    """Render the report for ``doc`` and write ``report.html`` into the bundle atomically."""
    return bundle.write_text(REPORT, render(doc, bundle.root), "report")
