"""``urine``: urine output per subject of a ``whole_body`` study (subject, time, value), read as the cumulative volume
(``how = "cumulative"``, the default; mL) or as the mean flow over each collection interval (``how = "rate"``; mL/min,
mL/h or any flow unit).

Cumulative: each reading is the volume passed since time 0 of the timeline (the bladder emptied at 0, when the
interventions' clock starts), the form's time course ``urine_volume`` (``physiology.whole_body``: basal flow plus
volume-kinetic elimination, cumulative from 0). The term fits every reading y_k ~ Normal(U(t_k), sd_k) of its subject.
Readings at time 0 carry no information (the course is 0 there) and are kept only for the fan chart.

Rate: each reading is the mean urine flow since the subject's previous reading, or since time 0 for its first (the
bladder emptied at 0 and at every reading: a timed collection). The term fits
y_k ~ Normal((U(t_k) - U(t_{k-1})) / (t_k - t_{k-1}), sd_k), with t_{k-1} the subject's previous reading time (0 for
its first): the rates of a subject telescope to its cumulative volumes, sum_j y_j (t_j - t_{j-1}) = U(t_k), so a
rate series informs what the matching cumulative series does, with independent errors per interval instead of
errors that accumulate. Refused: a negative rate, a first reading at time 0 or two readings of one subject at one
time (no interval to average over).

Both solve the time course in PyTensor per subject as for ``haemoglobin`` (Runge-Kutta steps of at most
:data:`~uncertainty.analyses.inference.observations.course.MAX_STEP_MIN`, linear interpolation between the report
times to each reading's time, so a rate inside one report interval is that interval's mean slope).
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
RATE_NOTE = ("urine (rate): each subject's mean urine flow since its previous reading (or since time 0), fitted to "
             "the change of the whole-body time course of urine (basal flow plus volume-kinetic elimination) over "
             "that interval.")
#: The ``how`` key's values: what one reading is, and the label of its term.
HOWS = {"cumulative": "cumulative urine volume since time 0",
        "rate": "mean urine flow since the previous reading"}
#: The time course the readings follow (``physiology.whole_body.TIMELINE_UNITS``, mL since 0).
COURSE = "urine_volume"
#: Quantities whose between-subject spread these readings inform on their own (``model_builder._jointly_spread``):
#: the urine is the elimination (Hahn RG 2016 Biol Sex Differ 7:54 defines the half-life from it), so each subject's
#: t_el is read here. Sharing the joint factor, six invented subjects whose urine put the typical half-life at 64 min
#: widened every other spread with t_el's: PS wandered far into its tail (posterior variance 120 times its prior's),
#: 186 divergent transitions, R-hat 1.046 (our measurement, 2026-12-05).
OWN_SPREAD = ("t_el",)


def how_of(obs: Observation) -> str:
    """What each reading is: ``obs.extra["how"]``, ``cumulative`` when not given."""
    return str(obs.extra.get("how") or "cumulative")


def kind_note(obs: Observation, problem: Problem | None = None) -> str:
    """The note printed with the results for this observation (cumulative or rate)."""
    return RATE_NOTE if how_of(obs) == "rate" else NOTE


def previous_times(subject: np.ndarray, time: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Each reading's subject's previous reading time (0 for the subject's first), in time order per subject.

    Parameters
    ----------
    subject : numpy.ndarray
        Subject index of each reading (int).
    time : numpy.ndarray
        Time of each reading, min.

    Returns
    -------
    prev : numpy.ndarray
        The previous reading's time, min (0 for a subject's earliest reading).
    first : numpy.ndarray
        Whether the reading is its subject's earliest (bool; of two at one time, the one earlier in the file).
    """
    prev = np.zeros_like(time, dtype=float)
    first = np.zeros(time.shape, dtype=bool)
    for s in np.unique(subject):
        idx = np.flatnonzero(subject == s)
        order = idx[np.argsort(time[idx], kind="stable")]
        prev[order[1:]] = time[order[:-1]]
        first[order[0]] = True
    return prev, first


def validate(obs: Observation, problem: Problem) -> None:
    """A whole_body study with interventions, a data file with a time for every reading, a normal sd, a known
    ``how``; for rates an interval before every reading.

    Raises
    ------
    InputError
        An unknown ``how``, another model form, no data file, a cv error, no sd, a reading without a time or outside
        the timeline, a negative volume or rate, a rate read at time 0 as a subject's first or two rates of one
        subject at one time.
    """
    how = how_of(obs)
    if how not in HOWS:
        raise obs.error(f"how is one of {', '.join(HOWS)}", "how", how)
    check_timed_rows(obs, problem, "a urine", "mL" if how == "cumulative" else "mL/min")
    value = np.asarray(obs.rows.value, dtype=float)
    if how == "cumulative":
        obs.check_values(value >= 0, "a cumulative urine volume cannot be negative", "file")
        return
    obs.check_values(value >= 0, "a urine flow (how = \"rate\") cannot be negative", "file")
    subj = np.array([str(s) for s in obs.rows.subject])
    t = np.asarray(obs.rows.time_min, dtype=float)
    prev, first = previous_times(np.unique(subj, return_inverse=True)[1], t)
    obs.check_values(~first | (t > 0), "a urine flow (how = \"rate\") is the mean since the previous reading or "
                     "since time 0: a subject's first reading at time 0 has no interval", "file")
    obs.check_values(first | (t > prev), "two urine flows (how = \"rate\") of one subject at one time: each is the "
                     "mean since the subject's previous reading, which needs an interval", "file")


def design(obs: Observation, subjects: list[str]) -> dict[str, np.ndarray]:
    """The readings as the term uses them (numpy).

    Parameters
    ----------
    obs : Observation
        A ``urine`` observation with data-file rows (mL or mL/min, min).
    subjects : list of str
        The model's subject labels (index 0 is the study's individual when a row has none).

    Returns
    -------
    dict
        ``subject`` (index of each reading's subject), ``time`` (min), ``value`` and ``sd`` (mL since 0, or mL/min
        with ``how = "rate"``); with ``how = "rate"`` also ``prev_time`` (min: the subject's previous reading, 0 for
        its first). Cumulative readings at time 0 are left out (the course is 0 there).
    """
    subj, t, value, sd = timed_readings(obs, subjects)
    if how_of(obs) == "rate":
        prev, _ = previous_times(subj, t)
        return {"subject": subj, "time": t, "prev_time": prev, "value": value, "sd": sd}
    keep = t > 0
    return {"subject": subj[keep], "time": t[keep], "value": value[keep], "sd": sd[keep]}


def predicted(series: Any, times_min: list[float], d: dict[str, np.ndarray]) -> Any:
    """What the readings ``d`` (:func:`design`) predict from the urine course ``series`` (numpy or PyTensor).

    Parameters
    ----------
    series : array or TensorVariable
        ``urine_volume``, mL since 0, shape (report time, subject).
    times_min : list of float
        The report times, min.
    d : dict
        The readings (:func:`design`); with ``prev_time`` they are rates.

    Returns
    -------
    array or TensorVariable
        U(t_k), mL (cumulative), or (U(t_k) - U(t_{k-1})) / (t_k - t_{k-1}), mL/min (rate), one per reading.
    """
    i = d["subject"]
    at = at_times(series, times_min, i, d["time"])
    if "prev_time" not in d:
        return at
    return (at - at_times(series, times_min, i, d["prev_time"])) / (d["time"] - d["prev_time"])


def add(ctx: Any, obs: Observation) -> None:
    """y ~ Normal(U(t) of the reading's subject, sd) over the readings after time 0 (cumulative), or
    y ~ Normal((U(t) - U(t_prev)) / (t - t_prev), sd) over every reading (rate)."""

    how = how_of(obs)
    d = design(obs, ctx.subjects)
    name = term_name(obs)
    if d["value"].size == 0:
        ctx.notes.append(f"{obs.key}: no urine volumes after time 0 to fit")
        return
    times, series = course_series(ctx, COURSE)  # (time, subject)
    pred = predicted(series, times, d)
    add_reading(name, pred, d["value"], sd=d["sd"])
    ctx.notes.append(f"{obs.key}: {kind_note(obs)}")
    ctx.add_term(ObservedTerm(name=name, observation=obs, predicted=f"{name}__pred", subjects=d["subject"],
                              label=HOWS[how], times_min=d["time"]))


__all__ = ["COURSE", "HOWS", "NOTE", "RATE_NOTE", "TIMED", "add", "design", "how_of", "kind_note", "predicted",
           "previous_times", "validate"]
