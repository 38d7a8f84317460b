"""The one-screen summary and the self-contained HTML report of a whole-study run.

Both are built from the results document alone (``results.json``) plus the bundle's figure files,
which are embedded (SVG, else PNG, as base64 data URIs), so ``report.html`` is one file that reads on
a phone (responsive CSS) and prints (print CSS). The page template is ``report_template.html``.
"""

from __future__ import annotations

import base64
import html
import math
import os
from importlib import resources
from pathlib import Path
from string import Template
from typing import Any

from uncertainty.app.bundle import REPORT, Bundle, FileRecord

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
#: The first row whose section, substring and method match wins, so the specific rows come first.
CAPTIONS: list[tuple[str, str, str, str]] = [
    ("propagate", "", "", "Histograms of {output} for this study's individual (typical-subject uncertainty "
                          "plus between-subject spread) and for the typical subject (uncertainty only), with "
                          "the median and 95% interval as solid lines; for Jv the mass left of the dashed zero "
                          "line is the probability of absorption rather than filtration."),
    ("sensitivity", "convergence", "", "Each input's ranking index with its 95% band against the sample size: "
                                       "flat, well separated lines mean the ranking has settled."),
    ("sensitivity", "", "morris", "Morris screening: the mean absolute elementary effect (mu*) of each input on "
                                  "{output} with its 95% interval; the tallest bars are the inputs that move "
                                  "{output} most."),
    ("sensitivity", "", "shapley", "Each input's Shapley share (Sh) of the variance of {output}, which shares "
                                   "interactions and correlations out fairly and sums to one, beside its "
                                   "first-order (S1) and total (ST) index with 95% intervals: the tallest bars are "
                                   "the inputs worth measuring better."),
    ("sensitivity", "", "", "The share of the variance of {output} each input explains alone (S1) and with its "
                            "interactions (ST), with 95% intervals: the tallest bars are the inputs worth "
                            "measuring better."),
    ("infer", "curves", "", "Observed limb-volume readings (dots) against the posterior predictive median and 95% "
                            "band for each subject: readings inside the band mean the model reproduces what was "
                            "seen."),
    ("infer", "jv_subjects", "", "Posterior mean and 95% credible interval of Jv for the study's individual or each "
                                 "subject, the typical subject and a new subject from the population; left of the "
                                 "dotted zero line is absorption."),
    ("infer", "", "", "Prior (grey) beside posterior (blue) for each updated quantity, with the contraction in "
                      "the title: the narrower the posterior than the prior, the more the observations taught "
                      "about that quantity."),
    ("rank", "", "", "For each candidate measurement, the expected reduction of the variance of {output} (blue, "
                     "with twice its Monte Carlo error) inside the perfect-information bound (grey): the longest "
                     "blue bar is the measurement that would narrow the estimate most."),
    ("design", "", "", "Simulated power and assurance (bands of twice the Monte Carlo error) against completing "
                       "subjects per arm, with the noncentral-t power dashed: the trial size is the first n where "
                       "power crosses the dotted target line, enlarged for dropout when enrolling."),
    ("schedule", "", "", "The optimised venous-cuff protocol beside equal spacing: cuff pressure steps and the "
                         "expected limb-volume course, with the reading times marked; the optimised readings sit "
                         "where the curve says most about Kf and Pvi."),
]


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
# Number formatting
# --------------------------------------------------------------------------------------------

def fmt(x: Any, digits: int = 4) -> str:
    """A number with ``digits`` significant figures; '-' for missing values."""
    if x is None:
        return "-"
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, int):
        return str(x)
    if isinstance(x, float):
        if not math.isfinite(x):
            return "-"
        return f"{x:.{digits}g}"
    if isinstance(x, list | tuple):
        return "[" + ", ".join(fmt(v, digits) for v in x) + "]"
    return str(x)


def _interval(ci: Any, digits: int = 3) -> str:
    if isinstance(ci, list | tuple) and len(ci) == 2:
        return f"{fmt(ci[0], digits)} to {fmt(ci[1], digits)}"
    return fmt(ci, digits)


# --------------------------------------------------------------------------------------------
# One-screen summary
# --------------------------------------------------------------------------------------------

def _result(doc: dict[str, Any], name: str) -> dict[str, Any] | None:
    rec = doc.get("sections", {}).get(name)
    res = rec.get("result") if rec else None
    return res if isinstance(res, dict) else None


def _top_inputs(sens: dict[str, Any], k: int = 3) -> list[str]:
    ranking = sens.get("ranking") or []
    names = [r if isinstance(r, str) else (r.get("parameter") or r.get("name") or str(r)) if isinstance(r, dict)
             else str(r) for r in ranking]
    if not names and isinstance(sens.get("indices"), dict):
        idx = sens["indices"]
        names = sorted(idx, key=lambda p: -(idx[p].get("ST") or idx[p].get("mu_star") or 0))
    return names[:k]


def _top_measurements(rank: dict[str, Any], k: int = 3) -> list[str]:
    cands = [c for c in rank.get("candidates") or [] if isinstance(c, dict)]
    cands.sort(key=lambda c: -(c.get("expected_variance_reduction") or 0))
    return [str(c.get("name") or c.get("parameter")) for c in cands[:k]]


def summary_lines(doc: dict[str, Any]) -> list[str]:
    """The one-screen summary of a results document: Jv (individual and typical), P(absorption),
    top inputs and measurements, the posterior interval, the trial size and the quality gate."""
    lines: list[str] = []
    study = doc.get("study", {})
    lines.append(f"{study.get('title') or 'study'}  (model {study.get('model') or '?'}, "
                 f"tissue {study.get('tissue') or '?'}, seed {study.get('seed')})")
    prop = _result(doc, "propagate")
    if prop and isinstance(prop.get("outputs"), dict) and "Jv" in prop["outputs"]:
        unit = (prop.get("units") or {}).get("Jv", "")
        ind, typ = prop["outputs"]["Jv"], (prop.get("typical") or {}).get("Jv", {})
        lines.append(f"Jv, individual: median {fmt(ind.get('median'), 3)}, 95% interval "
                     f"{_interval(ind.get('ci95'))} {unit}")
        if typ:
            lines.append(f"Jv, typical subject: median {fmt(typ.get('median'), 3)}, 95% interval "
                         f"{_interval(typ.get('ci95'))} {unit}")
        if prop.get("p_absorption") is not None:
            lines.append(f"P(absorption, Jv < 0) for the individual: {fmt(prop['p_absorption'], 3)}")
    sens = _result(doc, "sensitivity")
    if sens:
        top = _top_inputs(sens)
        if top:
            lines.append(f"Inputs that matter most for {sens.get('output', 'Jv')} ({sens.get('method', '')}): "
                         + ", ".join(top))
    inf = _result(doc, "infer")
    if inf and isinstance(inf.get("Jv"), dict):
        jv = inf["Jv"]
        diag = inf.get("diagnostics") or {}
        unit = (inf.get("units") or {}).get("Jv", "")
        level = f" ({inf['level']})" if inf.get("level") else ""
        lines.append(f"Jv after the observations{level}: mean {fmt(jv.get('mean'), 3)}, 95% credible interval "
                     f"{_interval(jv.get('ci95'))} {unit}".rstrip()
                     + (f"  (diagnostics {'passed' if diag.get('passed') else 'FAILED'})" if diag else ""))
    rk = _result(doc, "rank")
    if rk:
        top = _top_measurements(rk)
        if top:
            lines.append("Measurements that would narrow Jv most: " + ", ".join(top))
    des = _result(doc, "design")
    if des:
        part = f"Trial size: {fmt(des.get('n_per_arm'))} per arm for the target power"
        if des.get("n_per_arm_assurance") is not None:
            part += f", {fmt(des.get('n_per_arm_assurance'))} per arm for the target assurance"
        lines.append(part)
    sch = _result(doc, "schedule")
    if sch and isinstance(sch.get("sd_ratio"), dict):
        lines.append("Cuff schedule: posterior sd optimised / equal spacing " + ", ".join(
            f"{k} {fmt(v, 3)}" for k, v in sch["sd_ratio"].items()))
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

def _e(x: Any) -> str:
    return html.escape(str(x), quote=True)


def _table(head: list[str], rows: list[list[Any]], num_cols: set[int] | None = None,
           cls: dict[int, str] | None = None) -> str:
    num_cols = num_cols or set()
    cls = cls or {}
    out = ['<div class="table-wrap"><table><thead><tr>']
    out += [f"<th>{_e(h)}</th>" for h in head]
    out.append("</tr></thead><tbody>")
    for row in rows:
        out.append("<tr>")
        for i, cell in enumerate(row):
            c = "num" if i in num_cols else cls.get(i, "")
            out.append(f'<td class="{c}">' if c else "<td>")
            out.append(_e(cell))
            out.append("</td>")
        out.append("</tr>")
    out.append("</tbody></table></div>")
    return "".join(out)


def _value(v: Any, digits: int = 4) -> str:
    """A cell value: numbers rounded, empty lists as 'none', nested mappings as 'key value; ...'."""
    if isinstance(v, dict):
        return "; ".join(f"{a} {_value(b, digits)}" for a, b in v.items()) or "none"
    if isinstance(v, list | tuple) and not v:
        return "none"
    if isinstance(v, list | tuple) and not all(isinstance(x, int | float) and not isinstance(x, bool) for x in v):
        return ", ".join(_value(x, digits) for x in v)
    return fmt(v, digits)


def _kv_table(d: dict[str, Any]) -> str:
    rows = [[k, _value(v)] for k, v in d.items() if not isinstance(v, list) or len(v) <= 4]
    return _table(["key", "value"], rows) if rows else ""


def _summary_rows(d: dict[str, Any], units: dict[str, str], layer: str) -> list[list[Any]]:
    rows = []
    for name, s in d.items():
        if not isinstance(s, dict):
            continue
        se = s.get("mc_se") or {}
        se_ci = se.get("ci95") if isinstance(se, dict) else None
        rows.append([name, layer, fmt(s.get("mean")), fmt(s.get("sd")), fmt(s.get("median")),
                     _interval(s.get("ci95"), 4), fmt(se_ci, 2), units.get(name, s.get("unit", ""))])
    return rows


def _section_propagate(res: dict[str, Any]) -> str:
    units = res.get("units") or {}
    rows = _summary_rows(res.get("outputs") or {}, units, "individual")
    rows += _summary_rows(res.get("typical") or {}, units, "typical")
    parts = ["<p>Monte Carlo propagation of the priors "
             f"({_e(res.get('method', ''))}, {fmt(res.get('samples'))} samples in {fmt(res.get('replicates'))} "
             "independent replicates). The individual carries both the uncertainty about the typical value and "
             "the between-subject spread; the typical subject carries only the first. MC s.e. is the Monte "
             "Carlo standard error of the interval ends, from the replicates.</p>"]
    if res.get("p_absorption") is not None:
        parts.append(f"<p><strong>P(absorption, Jv &lt; 0)</strong> for the individual: "
                     f"{fmt(res['p_absorption'], 3)} (MC s.e. {fmt(res.get('p_absorption_mc_se'), 2)}); "
                     f"typical subject: {fmt(res.get('typical_p_absorption'), 3)}.</p>")
    parts.append(_table(["output", "layer", "mean", "sd", "median", "95% interval", "MC s.e. of ends", "unit"],
                        rows, num_cols={2, 3, 4, 6}))
    return "".join(parts)


def _section_sensitivity(res: dict[str, Any]) -> str:
    idx = res.get("indices") or {}
    keys: list[str] = []
    for v in idx.values():
        if isinstance(v, dict):
            keys += [k for k in v if k not in keys]
    rows = [[p] + [fmt(v.get(k), 3) for k in keys] for p, v in idx.items() if isinstance(v, dict)]
    meaning = []
    if "Sh" in keys:
        meaning.append("Sh is the input's Shapley share of the variance (interactions and correlations shared "
                       "out; the shares sum to 1)")
    if "S1" in keys or "ST" in keys:
        meaning.append("S1 is the share of the output's variance an input explains alone, ST the share "
                       "including its interactions")
    if "mu_star" in keys:
        meaning.append("mu_star is the mean absolute elementary effect (Morris) and sigma their spread, a sign "
                       "of non-linearity or interaction")
    meaning.append("_ci gives the 95% interval and _se the standard error")
    parts = [f"<p>Method: {_e(res.get('method', ''))}; output: {_e(res.get('output', ''))}. "
             + _e("; ".join(meaning)) + ".</p>"]
    parts.append(_table(["input"] + keys, rows, num_cols=set(range(1, len(keys) + 1))))
    top = _top_inputs(res, k=len(idx) or 10)
    if top:
        parts.append("<p>Ranking: " + _e(", ".join(top)) + ".</p>")
    return "".join(parts)


def _section_infer(res: dict[str, Any]) -> str:
    parts = []
    jv = res.get("Jv")
    if isinstance(jv, dict):
        parts.append(f"<p><strong>Jv after the observations</strong>: mean {fmt(jv.get('mean'))}, sd "
                     f"{fmt(jv.get('sd'))}, 95% credible interval {_e(_interval(jv.get('ci95'), 4))}, "
                     f"95% HDI {_e(_interval(jv.get('hdi95'), 4))}.</p>")
    new = (res.get("new_subject") or {}).get("Jv") if isinstance(res.get("new_subject"), dict) else None
    if isinstance(new, dict):
        parts.append(f"<p>A new subject from the population: Jv 95% interval {_e(_interval(new.get('ci95'), 4))}."
                     "</p>")
    params = res.get("parameters") or {}
    if params:
        rows = [[p, fmt(v.get("mean")), fmt(v.get("sd")), _interval(v.get("ci95"), 4), fmt(v.get("contraction"), 3)]
                for p, v in params.items() if isinstance(v, dict)]
        parts.append("<h3>Updated quantities</h3><p>Contraction is 1 - posterior variance / prior variance: "
                     "near 1 the data determined the quantity, near 0 they said little about it.</p>")
        parts.append(_table(["quantity", "mean", "sd", "95% credible interval", "contraction"], rows,
                            num_cols={1, 2, 4}))
    subjects = res.get("subjects") or {}
    if isinstance(subjects, dict) and subjects:
        rows = [[s, _interval((v.get("Jv") or {}).get("ci95"), 4)] for s, v in subjects.items() if isinstance(v, dict)]
        parts.append("<h3>Subjects</h3>" + _table(["subject", "Jv 95% credible interval"], rows))
    return "".join(parts)


def _section_rank(res: dict[str, Any]) -> str:
    cands = [c for c in res.get("candidates") or [] if isinstance(c, dict)]
    cols = ["name", "parameter", "expected_var_post", "expected_variance_reduction", "expected_ci95_width",
            "perfect_information_bound", "per_cost", "mc_se"]
    rows = [[fmt(c.get(k), 3) for k in cols] for c in cands]
    parts = ["<p>Expected effect of one more measurement on the Jv estimate (value of information), "
             "before the measurement is made.</p>",
             _table([c.replace("_", " ") for c in cols], rows, num_cols=set(range(2, len(cols))))]
    for key, label in (("best_pair", "Best pair"), ("best_set", "Best set within the budget")):
        v = res.get(key)
        if v:
            names = v.get("names") or v.get("candidates") or v if isinstance(v, dict) else v
            parts.append(f"<p>{label} (computed jointly): {_e(fmt(names))}</p>")
    return "".join(parts)


def _section_design(res: dict[str, Any]) -> str:
    parts = [f"<p>Subjects per arm for the target power: <strong>{fmt(res.get('n_per_arm'))}</strong>"]
    if res.get("n_per_arm_assurance") is not None:
        parts.append(f"; for the target assurance: <strong>{fmt(res.get('n_per_arm_assurance'))}</strong>")
    parts.append(f". Power {fmt(res.get('power'), 3)}, assurance {fmt(res.get('assurance'), 3)} "
                 "(assurance: the probability of success averaged over the design prior).</p>")
    curve = [c for c in res.get("curve") or [] if isinstance(c, dict)]
    if curve:
        cols = ["n_per_arm", "power", "power_mc_se", "assurance", "assurance_mc_se"]
        parts.append(_table([c.replace("_", " ") for c in cols], [[fmt(c.get(k), 3) for k in cols] for c in curve],
                            num_cols=set(range(len(cols)))))
    return "".join(parts)


def _section_schedule(res: dict[str, Any]) -> str:
    rows = []
    for label in ("optimised", "equal_spacing"):
        d = res.get(label) or {}
        sd = d.get("posterior_sd") or {}
        rows.append([label.replace("_", " "), " ".join(fmt(x, 3) for x in d.get("pressures") or []),
                     " ".join(fmt(x, 3) for x in d.get("times") or []),
                     *[fmt(sd.get(k), 3) for k in ("Kf", "Pvi")]])
    ratio = res.get("sd_ratio") or {}
    return ("<p>Cuff pressures (mmHg per step) and reading times (min) that minimise the expected posterior "
            "sd of Kf and Pvi, against equal spacing; a ratio below 1 is a gain: "
            + _e(", ".join(f"{k} {fmt(v, 3)}" for k, v in ratio.items())) + ".</p>"
            + _table(["schedule", "pressures", "times", "posterior sd Kf", "posterior sd Pvi"], rows,
                     num_cols={3, 4}))


SECTION_HTML = {"propagate": _section_propagate, "sensitivity": _section_sensitivity, "infer": _section_infer,
                "rank": _section_rank, "design": _section_design,
                "schedule": _section_schedule}
TITLES = {"check": "Study check", "propagate": "Uncertainty of Jv", "sensitivity": "Which inputs matter",
          "infer": "Updating from the observations", "rank": "Which measurement to make",
          "design": "Trial design", "schedule": "Cuff measurement schedule"}


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
        out.append(f'<figure><img src="{_figure_uri(p)}" alt="{_e(cap)}" loading="eager">'
                   f"<figcaption>{_e(cap)}</figcaption></figure>")
    return "".join(out)


def _priors(doc: dict[str, Any]) -> str:
    """The priors table: one row of numbers per quantity, then its origin (and note) on a full-width row
    beneath it, so the origin reads whole on a phone and in print instead of in a narrow last column."""
    head = ["symbol", "distribution", "median", "95% interval", "unit", "basis", "between-subject"]
    out = ['<div class="table-wrap"><table class="priors"><thead><tr>']
    out += [f"<th>{_e(h)}</th>" for h in head]
    out.append("</tr></thead><tbody>")
    for r in doc.get("priors", []):
        bs = r.get("between_subject")
        bs_text = ", ".join(f"{k} {fmt(v, 3)}" for k, v in bs.items()) if isinstance(bs, dict) else fmt(bs)
        cells = [r.get("symbol"), r.get("dist"), fmt(r.get("median"), 4), _interval(r.get("ci95"), 4),
                 r.get("unit") or "", r.get("basis") or "", bs_text]
        tds = []
        for i, (h, c) in enumerate(zip(head, cells, strict=True)):
            cls = ' class="num"' if i == 2 else ""
            tds.append(f'<td data-label="{_e(h)}"{cls}>{_e(c)}</td>')
        out.append('<tr class="prior">' + "".join(tds) + "</tr>")
        origin = r.get("origin") or "(no origin given)"
        note = f' <span class="note">Note: {_e(r["note"])}</span>' if r.get("note") else ""
        out.append(f'<tr class="origin-row"><td colspan="{len(head)}"><span class="origin-label">Origin:</span> '
                   f'<span class="origin">{_e(origin)}</span>{note}</td></tr>')
    out.append("</tbody></table></div>")
    if not doc.get("priors"):
        return "<p>No priors recorded.</p>"
    return "".join(out)


def _diag_number(key: str, v: Any) -> str:
    """R-hat with three decimals, effective sample sizes as whole draws."""
    if not isinstance(v, int | float) or isinstance(v, bool) or not math.isfinite(v):
        return fmt(v)
    return f"{v:.3f}" if key == "r_hat" else str(round(v))


def _checks(inf: dict[str, Any]) -> str:
    """The inference checks: prior-data conflict, posterior predictive, prior sensitivity, identifiability."""
    checks = inf.get("checks") or {}
    parts = []
    conflict = [c for c in checks.get("prior_data_conflict") or [] if isinstance(c, dict)]
    if conflict:
        parts.append("<h3>Prior-data conflict</h3><p>Where each observation falls in its prior predictive "
                     "distribution: a two-sided tail probability below 0.01 flags a reading the priors did not "
                     "expect (Evans and Moshonov 2006; the threshold is common practice).</p>")
        parts.append(_table(["observation", "kind", "tail probability", "conflict", "prior predictive 95%"],
                            [[c.get("label") or c.get("observation"), c.get("kind"), fmt(c.get("p_tail"), 3),
                              fmt(c.get("conflict")), _interval((c.get("prior_predictive") or {}).get("ci95"), 3)]
                             for c in conflict], num_cols={2}))
    ppc = checks.get("posterior_predictive") or {}
    labels = {c.get("observation"): c.get("label") for c in conflict if c.get("label")}
    ppc_rows = [[labels.get(v.get("observation")) or v.get("observation") or k, v.get("kind"),
                 fmt(v.get("p_value_mean"), 3), fmt(v.get("coverage95"), 3),
                 fmt(v.get("n"))] for k, v in ppc.items() if isinstance(v, dict)]
    if ppc_rows:
        parts.append("<h3>Posterior predictive check</h3><p>Posterior predictive p-values near 0 or 1, or "
                     "coverage of the 95% predictive interval well below 0.95, mean the fitted model does not "
                     "reproduce the data.</p>")
        parts.append(_table(["observation", "kind", "p-value (mean)", "95% coverage", "readings"], ppc_rows,
                            num_cols={2, 3, 4}))
    sens = checks.get("prior_sensitivity") or {}
    sens_rows = [[q, fmt(v.get("prior"), 3), fmt(v.get("likelihood"), 3), v.get("diagnosis") or ""]
                 for q, v in sens.items() if isinstance(v, dict)]
    if sens_rows:
        parts.append("<h3>Prior sensitivity</h3><p>Power-scaling sensitivity (Kallioinen et al. 2024): how far "
                     "each posterior moves per unit log power when the prior or the likelihood is raised to a "
                     "power near one; above about 0.05 the quantity leans on that part.</p>")
        parts.append(_table(["quantity", "prior", "likelihood", "diagnosis"], sens_rows, num_cols={1, 2}))
    elif isinstance(sens.get("error"), str):
        parts.append(f"<p>Prior sensitivity could not be computed: {_e(sens['error'])}</p>")
    ident = inf.get("identifiability") or {}
    if isinstance(ident, dict) and ident:
        parts.append("<p>Quantities the data barely inform (posterior near the prior): "
                     f"{_e(_value(ident.get('prior_bound') or []))}; confounded pairs: "
                     f"{_e(_value(ident.get('confounded') or []))}.</p>")
    if inf.get("trustworthy") is not None:
        parts.append(f"<p>Inference judged trustworthy by these checks: <strong>{fmt(inf.get('trustworthy'))}"
                     "</strong>.</p>")
    return "".join(parts)


def _diagnostics(doc: dict[str, Any]) -> str:
    rows = []
    for name, rec in doc.get("sections", {}).items():
        rows.append([name, rec.get("status"), "yes" if rec.get("reused") else "no", fmt(rec.get("seconds"), 3),
                     rec.get("message") or ""])
    parts = [_table(["section", "status", "reused", "seconds", "message"], rows, num_cols={3})]
    inf = _result(doc, "infer")
    diag = (inf or {}).get("diagnostics")
    if isinstance(diag, dict):
        parts.append("<h3>Sampler diagnostics</h3><p>r_hat_max should be below about 1.01, ess_bulk_min above "
                     "about 400 and divergences zero (common practice).</p>")
        per = diag.get("per_quantity")
        parts.append(_kv_table({k: v for k, v in diag.items() if k != "per_quantity"}))
        if isinstance(per, dict) and per:
            keys = [k for k in ("r_hat", "ess_bulk", "ess_tail") if any(k in (v or {}) for v in per.values())]
            parts.append(_table(["quantity", *[k.replace("_", " ") for k in keys]],
                                [[q, *[_diag_number(k, (v or {}).get(k)) for k in keys]] for q, v in per.items()],
                                num_cols=set(range(1, len(keys) + 1))))
        parts.append(_checks(inf or {}))
    prop = _result(doc, "propagate")
    if prop:
        if prop.get("tol") is None:  # a fixed sample size: nothing to converge to
            bits = {"stopping": "fixed sample size (no tolerance asked)"}
        else:
            bits = {"converged": prop.get("converged"), "tolerance": prop.get("tol")}
        bits.update({"samples": prop.get("samples"), "independent replicates": prop.get("replicates")})
        nan = prop.get("nan_draws") or {}
        bad = {f"{layer}.{k}": v for layer, d in nan.items() if isinstance(d, dict) for k, v in d.items() if v}
        bits.update({f"non-finite draws {k}": v for k, v in bad.items()})
        parts.append("<h3>Monte Carlo</h3>" + _kv_table(bits))
    warns = [(n, w) for n, rec in doc.get("sections", {}).items() for w in rec.get("warnings", [])]
    if warns:
        parts.append("<h3>Warnings</h3><ul>" + "".join(
            f"<li><strong>{_e(n)}</strong>: {_e(w.splitlines()[0] if w else w)}</li>" for n, w in warns) + "</ul>")
    return "".join(parts)


def _provenance(doc: dict[str, Any]) -> str:
    p = doc.get("provenance", {})
    deps = ", ".join(f"{k} {v}" for k, v in (p.get("dependencies") or {}).items() if v)
    rows = [["package", f"{p.get('package')} {p.get('version')}"], ["python", p.get("python")],
            ["platform", p.get("platform")], ["study file", p.get("study_path")],
            ["study SHA-256", p.get("study_hash")], ["seed", p.get("seed")], ["started", p.get("started")],
            ["finished", p.get("finished")], ["command line", p.get("command_line")], ["dependencies", deps]]
    return _table(["", ""], [[a, fmt(b)] for a, b in rows])


def render(doc: dict[str, Any], root: str | os.PathLike) -> str:
    """The whole report page for a results document; figures are read from ``root`` and embedded."""
    root = Path(root)
    study = doc.get("study", {})
    title = study.get("title") or "fluidshift study"
    gate = doc.get("quality_gate", {})
    body = [f'<header class="top"><h1>{_e(title)}</h1>'
            f'<p class="meta">fluidshift {_e(doc.get("provenance", {}).get("version", ""))} · model '
            f'{_e(study.get("model"))} · tissue {_e(study.get("tissue"))} · seed {_e(study.get("seed"))} · '
            f'{_e(doc.get("provenance", {}).get("finished") or "")}</p></header>']
    body.append('<section class="caution" id="cautions"><strong>Cautions</strong><ul>'
                + "".join(f"<li>{_e(c)}</li>" for c in CAUTIONS) + "</ul></section>")
    if gate.get("failed"):
        body.append('<section class="gate-bad" id="quality-gate"><strong>Quality gate failed.</strong> '
                    + _e("; ".join(f"{n}: {doc['sections'][n].get('message')}" for n in gate["failed"]))
                    + " The numbers of the flagged sections are shown but should not be relied on.</section>")
    if gate.get("errors"):
        body.append('<section class="gate-bad" id="section-errors"><strong>Some sections did not complete.</strong> '
                    + _e("; ".join(f"{n}: {doc['sections'][n].get('message')}" for n in gate["errors"]))
                    + "</section>")
    if not gate.get("failed") and not gate.get("errors"):
        body.append('<p id="quality-gate" class="gate-ok">Every quality gate passed.</p>')
    body.append('<section class="glance" id="summary"><h2>At a glance</h2><ul>'
                + "".join(f"<li>{_e(line)}</li>" for line in doc.get("summary") or summary_lines(doc))
                + "</ul></section>")
    for name, rec in doc.get("sections", {}).items():
        if name == "check":
            continue
        body.append(f'<section id="section-{_e(name)}"><h2>{_e(TITLES.get(name, name))} '
                    f'<span class="status {_e(rec.get("status"))}">({_e(rec.get("status"))})</span></h2>')
        res = rec.get("result")
        if rec.get("message"):
            body.append(f"<p><strong>Note:</strong> {_e(rec['message'])}</p>")
        if isinstance(res, dict):
            try:
                body.append(SECTION_HTML.get(name, _kv_table)(res))
            except Exception:  # noqa: BLE001 - an unexpected result shape still shows as key/value pairs
                body.append(_kv_table(res))
            notes = res.get("notes") or []
            if notes:
                body.append("<ul>" + "".join(f"<li>{_e(n)}</li>" for n in notes) + "</ul>")
        body.append(_figures(name, rec, root))
        body.append("</section>")
    body.append('<section id="priors"><h2>Priors used, with their origin</h2><p>Every quantity the model uses, '
                "after the tissue's prior set, the conditions and the study's overrides, in canonical units.</p>"
                + _priors(doc) + "</section>")
    if doc.get("notes"):
        body.append('<section id="notes"><h2>Notes</h2><ul>' + "".join(f"<li>{_e(n)}</li>" for n in doc["notes"])
                    + "</ul></section>")
    body.append('<section id="diagnostics"><h2>Diagnostics</h2>' + _diagnostics(doc) + "</section>")
    body.append('<section id="provenance"><h2>Provenance</h2>' + _provenance(doc) + "</section>")
    body.append("<footer>Generated by fluidshift, a research tool; not a diagnostic device. The numbers in "
                "results.json are the reference; this page shows them rounded.</footer>")
    template = Template(resources.files("uncertainty.app").joinpath("report_template.html").read_text(encoding="utf-8"))
    return template.substitute(title=_e(title), version=_e(doc.get("provenance", {}).get("version", "")),
                               body="\n".join(body))


def write_report(doc: dict[str, Any], bundle: Bundle) -> FileRecord:
    """Render the report for ``doc`` and write ``report.html`` into the bundle atomically."""
    return bundle.write_text(REPORT, render(doc, bundle.root), "report")
