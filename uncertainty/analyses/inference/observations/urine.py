"""``urine``: cumulative urine volume per subject of a ``whole_body`` study (subject, time, value in mL).

Each reading is the volume passed since time 0 of the timeline (the bladder emptied at 0, when the interventions'
clock starts), the form's time course ``urine_volume`` (``physiology.whole_body``: basal flow plus volume-kinetic
elimination, cumulative from 0). The term fits every reading y_k ~ Normal(urine_volume(t_k), sd_k) of its
subject, the time course solved in PyTensor per subject as for ``haemoglobin`` (Runge-Kutta steps of at most
:data:`~uncertainty.analyses.inference.observations.course.MAX_STEP_MIN`, linear interpolation between the
report times to each reading's time). Readings at time 0 carry no information (the course is 0 there) and are
kept only for the fan chart.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.analyses.inference.model_builder import ObservedTerm
from uncertainty.analyses.inference.observations.base import add_reading, term_name, timed_readings
from uncertainty.analyses.inference.observations.course import at_times, check_timed_rows, course_series
from uncertainty.analyses.inference.problem import Observation, Problem

#: the readings' times are modelled (no "repeated readings of one steady value" note)
TIMED = True
NOTE = ("urine: each subject's cumulative urine volume since time 0, fitted to the whole-body time course of "
        "urine (basal flow plus volume-kinetic elimination).")


def validate(obs: Observation, problem: Problem) -> None:
    """A whole_body study with interventions, a data file with a time for every reading, a normal sd.

    Raises
    ------
    InputError
        Another model form, no data file, a cv error, no sd, a reading without a time or outside the timeline, a
        negative volume.
    """
    check_timed_rows(obs, problem, "a urine", "mL")
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


def add(ctx: Any, obs: Observation) -> None:
    """y ~ Normal(urine_volume(t) of the reading's subject, sd) over the readings after time 0."""
    import pymc as pm

    d = design(obs, ctx.subjects)
    name = term_name(obs)
    if d["value"].size == 0:
        ctx.notes.append(f"{obs.key}: no urine volumes after time 0 to fit")
        return
    times, series = course_series(ctx, "urine_volume")  # (time, subject)
    i = d["subject"]
    pred = at_times(series, times, i, d["time"])
    pm.Deterministic(f"{name}__pred", pred)
    add_reading(name, pred, d["value"], sd=d["sd"])
    ctx.notes.append(f"{obs.key}: {NOTE}")
    ctx.add_term(ObservedTerm(name=name, observation=obs, predicted=f"{name}__pred", subjects=i,
                              label="cumulative urine volume since time 0"))


__all__ = ["NOTE", "TIMED", "add", "design", "validate"]
