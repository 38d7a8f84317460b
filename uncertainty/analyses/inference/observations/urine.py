"""``urine``: cumulative urine volume per subject of a ``whole_body`` study (subject, time, value in mL).

Each reading is the volume passed since time 0 of the timeline (the bladder emptied at 0, when the interventions'
clock starts), the form's time course ``urine_volume`` (``physiology.whole_body``: basal flow plus volume-kinetic
elimination, cumulative from 0). The term fits every reading y_k ~ Normal(urine_volume(t_k), sd_k) of its
subject, the time course solved in PyTensor per subject as for ``haemoglobin`` (Runge-Kutta steps of at most
:data:`~uncertainty.analyses.inference.observations.haemoglobin.MAX_STEP_MIN`, linear interpolation between the
report times to each reading's time). Readings at time 0 carry no information (the course is 0 there) and are
kept only for the fan chart.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.analyses.inference.model_builder import ObservedTerm
from uncertainty.analyses.inference.observations.base import add_reading, check_sds, term_name, timed_readings
from uncertainty.analyses.inference.observations.haemoglobin import MAX_STEP_MIN, interpolation
from uncertainty.analyses.inference.problem import Observation, Problem
from uncertainty.analyses.propagate.timeline import bed_ratios
from uncertainty.forms.whole_body import BED_INPUTS, timeline_parameters
from uncertainty.physiology import whole_body as wb

NOTE = ("urine: each subject's cumulative urine volume since time 0, fitted to the whole-body time course of "
        "urine (basal flow plus volume-kinetic elimination).")
#: Inputs of the time course besides the per-bed ones (forms.whole_body.timeline_parameters).
BODY_INPUTS = ("pi_c", "Cp", "r")


def validate(obs: Observation, problem: Problem) -> None:
    """A whole_body study with interventions, a data file with a time for every reading, a normal sd.

    Raises
    ------
    InputError
        Another model form, no data file, a cv error, no sd, a reading without a time or outside the timeline, a
        negative volume.
    """
    if problem.model_form != "whole_body" or getattr(problem.study, "timeline", None) is None:
        raise obs.error("a urine observation needs a whole_body study (its [[interventions]] and [timeline])",
                        "kind", obs.kind)
    if obs.rows is None:
        raise obs.error("a urine observation needs a data file (subject, time, value)", "file", None)
    if obs.cv is not None:
        raise obs.error("a urine reading takes a normal error (sd, mL)", "cv", obs.cv)
    sds = obs.sds
    if sds is None:
        raise obs.error("give the reading's error as sd (on the observation or an sd column)", "sd", None)
    check_sds(obs, sds)
    t = np.asarray(obs.rows.time_min, dtype=float)
    obs.check_values(np.isfinite(t), "no time for this reading (a time column is required)", "file")
    end = float(problem.study.timeline.end)
    obs.check_values((t >= 0) & (t <= end), f"a reading's time lies outside the timeline (0 to {end:g} min)",
                     "file")
    obs.check_values(np.asarray(obs.rows.value, dtype=float) >= 0, "a cumulative urine volume cannot be negative",
                     "file")


def design(obs: Observation, subjects: list[str]) -> dict[str, np.ndarray]:
    """The readings as the term uses them (numpy): those after time 0.

    Parameters
    ----------
    obs : Observation
        A ``urine`` observation with data-file rows (mL, min).
    subjects : list of str
        The model's subject labels (index 0 is the study's individual when a row has none).

    Returns
    -------
    dict
        ``subject`` (index of each reading's subject), ``time`` (min), ``value`` (mL since 0), ``sd`` (mL).
    """
    subj, t, value, sd = timed_readings(obs, subjects)
    keep = t > 0
    return {"subject": subj[keep], "time": t[keep], "value": value[keep], "sd": sd[keep]}


def urine_course(values: dict[str, Any], study: Any, xp: Any) -> dict[str, Any]:
    """The whole-body time course of cumulative urine for the ``values`` given (one per subject).

    Parameters
    ----------
    values : dict
        Per-subject inputs of the time course (canonical units; ``forms.whole_body.timeline_parameters``).
    study : Study
        A ``whole_body`` study (its ``timeline`` plan and tissue).
    xp : module
        numpy or pytensor.tensor.

    Returns
    -------
    dict
        ``times_min`` (list of float) and ``urine_volume`` (list over the report times of arrays over subjects, mL).
    """
    plan = study.timeline
    body, beds, Cp0 = timeline_parameters(values, plan.body_mass_kg, bed_ratios(study.tissue), xp=xp)
    sim = wb.simulate(body, beds, Cp0, plan.doses, plan.end, plan.report_every,
                      max_step=min(MAX_STEP_MIN, plan.report_every), xp=xp)
    return {"times_min": sim["times_min"], "urine_volume": sim["urine_volume"]}


def add(ctx: Any, obs: Observation) -> None:
    """y ~ Normal(urine_volume(t) of the reading's subject, sd) over the readings after time 0."""
    import pymc as pm
    import pytensor.tensor as pt

    d = design(obs, ctx.subjects)
    name = term_name(obs)
    if d["value"].size == 0:
        ctx.notes.append(f"{obs.key}: no urine volumes after time 0 to fit")
        return
    values: dict[str, Any] = {}
    for q in (*BED_INPUTS, *BODY_INPUTS):
        try:
            values[q] = ctx.value(q)
        except KeyError:
            continue
    course = urine_course(values, ctx.problem.study, pt)
    n = len(ctx.subjects)
    series = pt.stack([pt.as_tensor_variable(x) * pt.ones(n) for x in course["urine_volume"]])  # (time, subject)
    i = d["subject"]
    lo, hi, w = interpolation(d["time"], course["times_min"])
    pred = (1.0 - w) * series[lo, i] + w * series[hi, i]
    pm.Deterministic(f"{name}__pred", pred)
    add_reading(name, pred, d["value"], sd=d["sd"])
    ctx.notes.append(f"{obs.key}: {NOTE}")
    ctx.add_term(ObservedTerm(name=name, observation=obs, predicted=f"{name}__pred", subjects=i,
                              label="cumulative urine volume since time 0"))


__all__ = ["BODY_INPUTS", "NOTE", "add", "design", "urine_course", "validate"]
