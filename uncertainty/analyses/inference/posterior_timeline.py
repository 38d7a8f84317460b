"""Posterior time courses of a ``whole_body`` study: where the infused (or lost) volume is over time, for each
subject and the typical subject, given the study's readings.

Each course is the numpy time course of the form (``propagate.timeline.courses_at``: the equations the model
fits, on the study's report times) at :data:`COURSE_DRAWS` posterior draws, evenly thinned: a subject's course at
that subject's values, the typical subject's at the typical values; a quantity without a between-subject layer takes
its typical value in every subject. Per report time, the median and the equal-tailed 95 % interval over the draws,
in the units of ``physiology.whole_body.TIMELINE_UNITS``.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.analyses.inference.observations.course import interpolation
from uncertainty.analyses.inference.observations.urine import how_of
from uncertainty.analyses.inference.summaries import flat
from uncertainty.analyses.propagate.timeline import (
    OBSERVED_COURSES,
    balance_as_weight_change,
    band_over_time,
    courses_at,
    interventions_of,
    observed_points,
)
from uncertainty.physiology.whole_body import TIMELINE_UNITS

#: Posterior draws per subject the time courses are simulated at (a numerical choice for a displayed band: the
#: 2.5 % point of 200 draws has a standard error of sqrt(0.025 x 0.975 / 200) = 1.1 percentile points, binomial).
COURSE_DRAWS = 200
#: Seed of the reading errors drawn for the readings' predictive intervals (fixed: the same fit gives the same
#: intervals).
PREDICTIVE_SEED = 0


def reading_intervals(built: Any, idata: Any) -> dict[str, dict[str, Any]]:
    """Each timed reading's 95 % posterior predictive interval on the scale its course's fan chart shows it.

    A reading's predictive draws are its recorded noise-free prediction (``{term}__pred``, every posterior draw) plus
    a normal reading error of the term's sd (the whole-body kinds take an sd), so the interval holds the course's
    uncertainty and the reading's error. Readings relative to each subject's first (haemoglobin, haematocrit,
    plasma protein: ratios; body weight: changes) and cumulative urine volumes are fitted on the chart's scale; a
    charted fluid balance is shown as the weight change it implies (``balance_as_weight_change``); urine read as
    rates is left out (its readings are flows over intervals, the chart shows volumes), as is a term whose reading
    error is itself estimated (none of the whole-body kinds).

    Parameters
    ----------
    built : BuiltModel
        The model the draws come from.
    idata : arviz.InferenceData
        Posterior draws holding each term's ``{term}__pred``.

    Returns
    -------
    dict
        course -> ``subjects`` (labels), ``times_min`` (min), ``ci95`` ([low, high] per reading, the course's unit),
        ``values`` (the readings as fitted, on the same scale) and ``inside`` (whether each lies in its interval).
    """
    from pytensor.graph.traversal import ancestors

    rng = np.random.default_rng(PREDICTIVE_SEED)
    out: dict[str, dict[str, Any]] = {}
    for term in built.terms:
        kind = term.observation.kind
        rv = built.model[term.name]
        if (term.times_min is None or kind not in OBSERVED_COURSES or term.predicted not in idata.posterior
                or rv.owner.op.name != "normal" or (kind == "urine" and how_of(term.observation) == "rate")):
            continue
        sigma = rv.owner.inputs[-1]
        if set(ancestors([sigma])) & set(built.model.free_RVs):   # an estimated reading error: not drawn here
            continue
        pred = flat(idata, term.predicted)
        pred = pred.reshape(pred.shape[0], -1)                               # (draw, reading)
        sd = np.broadcast_to(np.asarray(sigma.eval(), dtype=float).ravel(), pred.shape[1:])
        lo, hi = np.quantile(pred + sd * rng.standard_normal(pred.shape), [0.025, 0.975], axis=0)
        y = np.asarray(built.model[f"{term.name}__data"].get_value(), dtype=float).ravel()
        inside = (y >= lo) & (y <= hi)
        t = np.asarray(term.times_min, dtype=float)
        if kind == "fluid_balance":
            lo, hi, y = (balance_as_weight_change(x, t) for x in (lo, hi, y))
        labels = built.subjects or [""]
        idx = term.subjects if term.subjects is not None else np.zeros(t.size, dtype=int)
        entry = out.setdefault(OBSERVED_COURSES[kind][0],
                               {"subjects": [], "times_min": [], "ci95": [], "values": [], "inside": []})
        entry["subjects"] += [labels[int(i)] for i in idx]
        entry["times_min"] += [float(x) for x in t]
        entry["ci95"] += [[float(a), float(b)] for a, b in zip(lo, hi, strict=True)]
        entry["values"] += [float(v) for v in y]
        entry["inside"] += [bool(v) for v in inside]
    return out


def coverage(predictive: dict[str, dict[str, Any]]) -> tuple[int, int]:
    """(readings inside their 95 % predictive interval, readings) over every course of :func:`reading_intervals`;
    about 95 % inside is what a model that reproduces the readings gives."""
    flags = [f for entry in predictive.values() for f in entry.get("inside", [])]
    return sum(flags), len(flags)


def coverage_line(timeline: dict[str, Any]) -> str:
    """The sentence that counts the readings inside their intervals ("" without predictive intervals)."""
    inside, n = coverage(timeline.get("predictive") or {})
    return (f"Readings inside their 95% posterior predictive intervals: {inside} of {n} (about 95% is what a model "
            "that reproduces them gives)") if n else ""


def _thinned(n: int, k: int) -> np.ndarray:
    """``min(k, n)`` indices spread evenly over ``n`` stacked draws (chains in turn)."""
    return np.unique(np.linspace(0, n - 1, min(k, n)).round().astype(int))


def _as_read(observed: dict[str, Any], by_subject: dict[str, list[np.ndarray]], subjects: list[str],
             times: list[float]) -> dict[str, dict[str, Any]]:
    """Each subject's course on the scale of its readings, for the courses whose readings are shown over or minus each
    subject's first: draw by draw the course over (minus) its value at that subject's first reading (linear between
    the report times, as the model predicts a reading), then the band. course -> subject -> band."""
    out: dict[str, dict[str, Any]] = {}
    for name, obs in observed.items():
        over, minus = bool(obs.get("relative_to_first")), bool(obs.get("change_from_first"))
        if not (over or minus) or name not in by_subject:
            continue
        first: dict[str, float] = {}
        for sid, t in zip(obs["subjects"], obs["times_min"], strict=True):
            first[sid] = min(first.get(sid, t), t)
        series = np.stack(by_subject[name])                       # (time, draw, subject)
        out[name] = {}
        for sid, t_ref in first.items():
            if sid not in subjects:
                continue
            y = series[:, :, subjects.index(sid)]
            lo, hi, w = interpolation(np.array([t_ref]), times)
            ref = (1.0 - w[0]) * y[lo[0]] + w[0] * y[hi[0]]      # per draw
            out[name][sid] = band_over_time(list(y / ref if over else y - ref))
    return out


def posterior_timeline(built: Any, idata: Any, draws: int = COURSE_DRAWS) -> dict[str, Any] | None:
    """The ``timeline`` entry of an inference document for a ``whole_body`` study (None for other forms).

    Parameters
    ----------
    built : BuiltModel
        The model the draws come from (its problem's study has the ``timeline`` plan).
    idata : arviz.InferenceData
        Posterior draws: each quantity's typical value (or the study's individual's) and, with subjects, each
        subject's ``{quantity}__subject``.
    draws : int
        Posterior draws simulated per subject.

    Returns
    -------
    dict or None
        ``times_min`` (list, min), ``units`` (course -> unit), ``draws``, ``interventions`` (as resolved),
        ``observed`` (the readings as points on their courses, ``propagate.timeline.observed_points``),
        ``predictive`` (each reading's 95 % posterior predictive interval, :func:`reading_intervals`), and per
        course ``median`` and ``ci95`` lists: under ``typical`` and ``subjects`` (label -> course -> band) for a
        study with subjects, under ``individual`` for the study's one individual; with subjects also ``as_read``
        (course -> subject -> band: the course over, or minus, its value at the subject's first reading, on the
        scale the readings are shown, for the courses read relative to each subject's first).
    """
    study = getattr(built.problem, "study", None)
    if getattr(study, "model", None) != "whole_body" or getattr(study, "timeline", None) is None:
        return None
    post = idata.posterior
    quantities = [q for q in built.problem.priors if q in post or f"{q}__subject" in post]
    n = int(post.sizes["chain"] * post.sizes["draw"])
    idx = _thinned(n, draws)
    k = idx.size
    s = len(built.subjects) if built.hierarchical else 1
    typical = {q: x[idx] for q in quantities if q in post and (x := flat(idata, q)).ndim == 1}
    each = {}
    for q in quantities:
        x = flat(idata, f"{q}__subject")[idx] if f"{q}__subject" in post else np.repeat(typical[q][:, None], s, 1)
        each[q] = x.reshape(k * s)    # draw-major: draw j, subject i at j * s + i
    plan = study.timeline
    sim = courses_at(study, each, plan.end, plan.report_every)
    out: dict[str, Any] = {"times_min": [float(t) for t in sim["times_min"]], "units": dict(TIMELINE_UNITS),
                           "draws": int(k), "interventions": interventions_of(plan)}
    observed = observed_points(study)
    if observed:
        out["observed"] = observed
        out["predictive"] = reading_intervals(built, idata)
    by_subject = {name: [np.broadcast_to(np.asarray(y, dtype=float), (k * s,)).reshape(k, s) for y in sim[name]]
                  for name in TIMELINE_UNITS}
    if not built.hierarchical:
        out["individual"] = {name: band_over_time([y[:, 0] for y in by_subject[name]]) for name in TIMELINE_UNITS}
        return out
    out["subjects"] = {label: {name: band_over_time([y[:, i] for y in by_subject[name]]) for name in TIMELINE_UNITS}
                       for i, label in enumerate(built.subjects)}
    out["as_read"] = _as_read(observed, by_subject, built.subjects, out["times_min"])
    typ = courses_at(study, typical, plan.end, plan.report_every)
    out["typical"] = {name: band_over_time(typ[name]) for name in TIMELINE_UNITS}
    return out


__all__ = ["COURSE_DRAWS", "PREDICTIVE_SEED", "coverage", "coverage_line", "posterior_timeline",
           "reading_intervals"]
