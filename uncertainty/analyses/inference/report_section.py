"""Inference's part of report.html (its section and its sampler diagnostics and checks) and of the
one-screen summary, from its stored document; every function reads the document defensively."""

from __future__ import annotations

import math
from typing import Any

from uncertainty.analyses.inference import answers_table, posterior_sensitivity
from uncertainty.analyses.inference.diagnostics import describe
from uncertainty.analyses.inference.posterior_timeline import coverage_line
from uncertainty.analyses.inference.table import TIMELINE_HEAD, TIMELINE_NOTE, TIMELINE_PRINTED, timeline_rows
from uncertainty.analyses.propagate.report_section import timeline_summary
from uncertainty.analyses.result import Caption
from uncertainty.core.formatting import cell, fmt, interval
from uncertainty.core.html import escape, kv_table, table

CAPTIONS: tuple[Caption, ...] = (
    ("timeline_subjects", "", "Each subject's posterior time course (median line, 95% band, without the reading "
                              "error) with that subject's readings as points, on the scale they are fitted "
                              "(haemoglobin, for one, over the subject's first reading), and grey bars giving each "
                              "reading's 95% posterior predictive interval (course and reading error together): a "
                              "point outside its bar is a reading the model does not reproduce."),
    ("timeline", "", "Posterior time courses of the typical subject: where the infused volume is over time "
                     "(plasma, each tissue bed's interstitium, urine), median and 95% band, with every subject's "
                     "readings on their course; shaded: the interventions."),
    ("curves", "", "Observed limb-volume readings (dots) against the posterior predictive median and 95% "
                   "band for each subject: readings inside the band mean the model reproduces what was "
                   "seen."),
    ("jv_subjects", "", "Posterior mean and 95% credible interval of Jv for the study's individual or each "
                        "subject, the typical subject and a new subject from the population; left of the "
                        "dotted zero line is absorption."),
    ("", "", "Prior (grey) beside posterior (blue) for each updated quantity, with the contraction in "
             "the title: the narrower the posterior than the prior, the more the observations taught "
             "about that quantity."),
)


def section_html(res: dict[str, Any]) -> str:
    """The report section: Jv after the observations, a new subject, updated quantities, subjects.

    Parameters
    ----------
    res : dict
        The stored ``InferenceResult.to_dict()`` (canonical units).

    Returns
    -------
    str
        HTML paragraphs and tables.
    """
    parts = []
    jv = res.get("Jv")
    if isinstance(jv, dict):
        parts.append(f"<p><strong>Jv after the observations</strong>: mean {fmt(jv.get('mean'))}, sd "
                     f"{fmt(jv.get('sd'))}, 95% credible interval {escape(interval(jv.get('ci95'), 4))}, "
                     f"95% HDI {escape(interval(jv.get('hdi95'), 4))}.</p>")
    new = (res.get("new_subject") or {}).get("Jv") if isinstance(res.get("new_subject"), dict) else None
    if isinstance(new, dict):
        parts.append(f"<p>A new subject from the population: Jv 95% interval {escape(interval(new.get('ci95'), 4))}."
                     "</p>")
    params = res.get("parameters") or {}
    if params:
        rows = [[p, fmt(v.get("mean")), fmt(v.get("sd")), interval(v.get("ci95"), 4), fmt(v.get("contraction"), 3)]
                for p, v in params.items() if isinstance(v, dict)]
        parts.append("<h3>Updated quantities</h3><p>Contraction is 1 - posterior variance / prior variance: "
                     "near 1 the data determined the quantity, near 0 they said little about it.</p>")
        parts.append(table(["quantity", "mean", "sd", "95% credible interval", "contraction"], rows,
                           num_cols={1, 2, 4}))
    parts.append(posterior_sensitivity.html(res))
    for name, unit, heads, rows in timeline_rows(res):
        if name == TIMELINE_PRINTED[0]:
            parts.append(f"<h3>{escape(TIMELINE_HEAD.capitalize())}</h3><p>{escape(TIMELINE_NOTE.capitalize())}.</p>")
        parts.append(f"<p>{escape(name + (f' ({unit})' if unit and unit != '1' else ''))}</p>"
                     + table(["", *heads], [[label, *cells] for label, cells in rows]))
    answers = answers_table.html(res)
    subjects = res.get("subjects") or {}
    if answers:
        parts.append(answers)
    elif isinstance(subjects, dict) and subjects:
        rows = [[s, interval((v.get("Jv") or {}).get("ci95"), 4)] for s, v in subjects.items() if isinstance(v, dict)]
        parts.append("<h3>Subjects</h3>" + table(["subject", "Jv 95% credible interval"], rows))
    return "".join(parts)


def summary(inf: dict[str, Any]) -> list[str]:
    """One-screen summary lines: Jv after the observations and whether the diagnostics passed; for a whole-body
    study where the volume is over time (``propagate.report_section.timeline_summary`` on the posterior courses).

    Parameters
    ----------
    inf : dict
        The stored ``InferenceResult.to_dict()`` (Jv in its canonical unit, printed beside it).

    Returns
    -------
    list of str
        Jv's line (and the time courses' two), or none without a Jv block.
    """
    if not isinstance(inf.get("Jv"), dict):
        return []
    jv = inf["Jv"]
    diag = inf.get("diagnostics") or {}
    unit = (inf.get("units") or {}).get("Jv", "")
    level = f" ({inf['level']})" if inf.get("level") else ""
    lines = [f"Jv after the observations{level}: mean {fmt(jv.get('mean'), 3)}, 95% credible interval "
             f"{interval(jv.get('ci95'))} {unit}".rstrip()
             + (f"  (diagnostics {'passed' if diag.get('passed') else 'FAILED'})" if diag else "")]
    if isinstance(inf.get("timeline"), dict):   # a whole-body study: where the volume is (typical or individual)
        lines += timeline_summary(inf["timeline"], posterior=True)
        counted = coverage_line(inf["timeline"])
        if counted:
            lines.append(counted)
    return lines


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
                     "distribution (Evans and Moshonov 2006): a reading the priors did not expect has a small "
                     "two-sided tail probability; allowing for the number of readings (single-step max-T, "
                     "Westfall and Young 1993), an adjusted probability below 0.01 flags a conflict "
                     "(the threshold is common practice).</p>")
        parts.append(table(["observation", "kind", "tail probability", "adjusted", "conflict",
                            "prior predictive 95%"],
                           [[c.get("label") or c.get("observation"), c.get("kind"), fmt(c.get("p_tail"), 3),
                             fmt(c.get("p_adjusted"), 3), fmt(c.get("conflict")),
                             interval((c.get("prior_predictive") or {}).get("ci95"), 3)]
                            for c in conflict], num_cols={2, 3}))
    ppc = checks.get("posterior_predictive") or {}
    labels = {c.get("observation"): c.get("label") for c in conflict if c.get("label")}
    ppc_rows = [[labels.get(v.get("observation")) or v.get("observation") or k, v.get("kind"),
                 fmt(v.get("p_value_mean"), 3), fmt(v.get("coverage95"), 3),
                 fmt(v.get("n"))] for k, v in ppc.items() if isinstance(v, dict)]
    if ppc_rows:
        parts.append("<h3>Posterior predictive check</h3><p>Posterior predictive p-values near 0 or 1, or "
                     "coverage of the 95% predictive interval well below 0.95, mean the fitted model does not "
                     "reproduce the data.</p>")
        parts.append(table(["observation", "kind", "p-value (mean)", "95% coverage", "readings"], ppc_rows,
                           num_cols={2, 3, 4}))
    sens = checks.get("prior_sensitivity") or {}
    sentences = [v.get("sentence") or f"{q}: {v.get('diagnosis')}" for q, v in sens.items() if isinstance(v, dict)]
    if sentences:
        parts.append("<h3>Prior sensitivity: how much each answer leans on its prior</h3>"
                     "<p>Each posterior is reweighted as if the prior, or the readings, counted a little "
                     "more or less (power scaling, Kallioinen et al. "
                     "2024); the figures are how far it shifts per unit log weight.</p>")
        parts.append("<ul>" + "".join(f"<li>{escape(t)}</li>" for t in sentences) + "</ul>")
    elif isinstance(sens.get("error"), str):
        parts.append(f"<p>Prior sensitivity could not be computed: {escape(sens['error'])}</p>")
    ident = inf.get("identifiability") or {}
    if isinstance(ident, dict) and ident:
        parts.append("<p>Quantities the data barely inform (posterior near the prior): "
                     f"{escape(cell(ident.get('prior_bound') or []))}; confounded pairs: "
                     f"{escape(cell(ident.get('confounded') or []))}.</p>")
    if inf.get("trustworthy") is not None:
        parts.append(f"<p>Inference judged trustworthy by these checks: <strong>{fmt(inf.get('trustworthy'))}"
                     "</strong>.</p>")
    return "".join(parts)


def diagnostics(inf: dict[str, Any]) -> str:
    """The sampler part of the report's Diagnostics: R-hat, ESS, divergences per quantity, then the checks.

    Parameters
    ----------
    inf : dict
        The stored ``InferenceResult.to_dict()``.

    Returns
    -------
    str
        Headings, tables and paragraphs; "" without a diagnostics block.
    """
    diag = inf.get("diagnostics")
    if not isinstance(diag, dict):
        return ""
    parts = ["<h3>Sampler diagnostics</h3><ul>" + "".join(f"<li>{escape(t)}</li>" for t in describe(diag))
             + "</ul>"]
    per = diag.get("per_quantity")
    parts.append(kv_table({k: v for k, v in diag.items()
                           if k not in ("per_quantity", "gate", "failed_quantities")}))
    if isinstance(per, dict) and per:
        keys = [k for k in ("r_hat", "ess_bulk", "ess_tail") if any(k in (v or {}) for v in per.values())]
        parts.append(table(["quantity", *[k.replace("_", " ") for k in keys]],
                           [[q, *[_diag_number(k, (v or {}).get(k)) for k in keys]] for q, v in per.items()],
                           num_cols=set(range(1, len(keys) + 1))))
    parts.append(_checks(inf))
    return "".join(parts)
