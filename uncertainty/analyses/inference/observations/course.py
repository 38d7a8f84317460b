"""The whole-body time course the timed observation kinds fit (``haemoglobin``, ``haematocrit``, ``urine``,
``plasma_protein`` and, in a whole_body study, ``body_weight`` and ``fluid_balance``).

One function solves the study's ``[[interventions]]`` and ``[timeline]`` for per-subject inputs
(``physiology.whole_body.simulate``, numpy or PyTensor) and returns the time course a kind names
(a key of ``physiology.whole_body.TIMELINE_UNITS``); :func:`course_series` builds it inside the PyMC model as a
(time, subject) tensor (one solution per model, shared by the kinds) and :func:`interpolation` takes it to each
reading's time (linear between report times).
"""

from __future__ import annotations

import weakref
from typing import Any

import numpy as np

from uncertainty.analyses.inference.model_builder import ObservedTerm
from uncertainty.analyses.inference.observations.base import (
    add_reading,
    check_sds,
    pair_with_first,
    term_name,
    timed_readings,
)
from uncertainty.analyses.inference.problem import Observation, Problem
from uncertainty.analyses.propagate.timeline import bed_ratios
from uncertainty.forms.whole_body import BED_INPUTS, timeline_parameters
from uncertainty.physiology import whole_body as wb

#: Largest Runge-Kutta step of the time course inside the model, min: a numerical choice. The graph is unrolled, one
#: copy of the right-hand side per stage and step, so building and compiling it scale with the number of steps; the
#: numpy solver's default is 0.5 min. At 4 min the fastest rate constants of the state (renal elimination at
#: ln 2 / 38 min, plasma-interstitium exchange at about 0.01-0.05 /min) give h x rate <= 0.2, far inside the
#: classical RK4 stability region; measured against steps of 0.25 min over 512 individual-layer draws of 240 min
#: (crystalloid 25 mL/kg, a 450 mL bleed over 10 min, 100 mL of 20% albumin; report every 15 min, so 3.75-min
#: steps) the largest errors were 3e-4 in hb_ratio, 0.3 mL in urine_volume and 5e-4 in plasma_protein_ratio (the
#: bleed, whose end falls inside a step), one to two orders below the readings' errors
#: (``tests/test_whole_body_weight.py`` keeps the bound). At 5 min the urine course drifts from propagate's
#: 0.5-min timeline by more than ``tests/test_whole_body_endpoints.py`` allows.
MAX_STEP_MIN = 4.0
#: Inputs of the time course besides the per-bed ones (forms.whole_body.timeline_parameters).
BODY_INPUTS = ("pi_c", "Cp", "r", "t_el")


def check_timed_rows(obs: Observation, problem: Problem, what: str, sd_unit: str) -> None:
    """The checks every timed kind shares: a whole_body study, a data file with a time inside the timeline for
    every reading, and a normal error (sd) given on the observation or per row.

    Parameters
    ----------
    obs : Observation
        A timed observation (``haemoglobin``, ``urine``, ``plasma_protein``).
    problem : Problem
        The inference problem it belongs to.
    what : str
        The kind's name in the messages (e.g. ``"a urine"``).
    sd_unit : str
        The unit the messages give for the sd (e.g. ``"mL"``).

    Raises
    ------
    InputError
        Another model form, no data file, a cv error, no sd, a reading without a time or outside the timeline.
    """
    if problem.model_form != "whole_body" or getattr(problem.study, "timeline", None) is None:
        raise obs.error(f"{what} observation needs a whole_body study (its [[interventions]] and [timeline])",
                        "kind", obs.kind)
    if obs.rows is None:
        raise obs.error(f"{what} observation needs a data file (subject, time, value)", "file", None)
    if obs.cv is not None:
        raise obs.error(f"{what} reading takes a normal error (sd, {sd_unit})", "cv", obs.cv)
    sds = obs.sds
    if sds is None:
        raise obs.error("give the reading's error as sd (on the observation or an sd column)", "sd", None)
    check_sds(obs, sds)
    t = np.asarray(obs.rows.time_min, dtype=float)
    obs.check_values(np.isfinite(t), "no time for this reading (a time column is required)", "file")
    end = float(problem.study.timeline.end)
    obs.check_values((t >= 0) & (t <= end), f"a reading's time lies outside the timeline (0 to {end:g} min)",
                     "file")


def ratios_to_first(obs: Observation, subjects: list[str]) -> dict[str, np.ndarray]:
    """Each subject's later readings over its earliest one, with the ratio's normal error (numpy).

    The error by the delta method, sd_y = sqrt(sd_k^2 + (y_k sd_ref)^2) / value_ref (the reference's error shared
    by the subject's ratios is neglected as a correlation; first order, good while the reading error is a few per
    cent of the value). The readings' unit cancels.

    Parameters
    ----------
    obs : Observation
        A timed observation with data-file rows (subject, time in min, value, sd; any one unit).
    subjects : list of str
        The model's subject labels (index 0 is the study's individual when a row has none).

    Returns
    -------
    dict
        ``subject`` (index of each ratio's subject), ``time`` and ``ref_time`` (min, the reading's and its
        subject's earliest reading's), ``value`` (ratio to the earliest reading, 1), ``sd`` (its normal error,
        1), ``skipped`` (subjects with a single reading).
    """
    subj, t, value, sd = timed_readings(obs, subjects)
    k, r, skipped = pair_with_first(subj, t)
    y = value[k] / value[r]
    return {"subject": subj[k], "time": t[k], "ref_time": t[r], "value": y,
            "sd": np.sqrt(sd[k] ** 2 + (y * sd[r]) ** 2) / value[r], "skipped": skipped}


def changes_from_first(obs: Observation, subjects: list[str]) -> dict[str, np.ndarray]:
    """Each subject's later readings minus its earliest one, with the difference's normal error (numpy).

    sd_y = sqrt(sd_k^2 + sd_ref^2) (the reference's error shared by the subject's changes is neglected as a
    correlation, as in :func:`ratios_to_first`). The readings keep their (canonical) unit.

    Parameters
    ----------
    obs : Observation
        A timed observation with data-file rows (subject, time in min, value, sd; one unit).
    subjects : list of str
        The model's subject labels (index 0 is the study's individual when a row has none).

    Returns
    -------
    dict
        ``subject``, ``time`` and ``ref_time`` (min), ``value`` (change from the earliest reading) and ``sd`` (its
        normal error), both in the readings' unit, ``skipped`` (subjects with a single reading).
    """
    subj, t, value, sd = timed_readings(obs, subjects)
    k, r, skipped = pair_with_first(subj, t)
    return {"subject": subj[k], "time": t[k], "ref_time": t[r], "value": value[k] - value[r],
            "sd": np.sqrt(sd[k] ** 2 + sd[r] ** 2), "skipped": skipped}


#: How a reading is taken relative to its subject's first: readings -> (design, predicted from the course at the
#: reading's time and at the reference's, what one such reading is called).
RELATIVE = {"ratio": (ratios_to_first, lambda a, b: a / b, "ratio"),
            "change": (changes_from_first, lambda a, b: a - b, "change")}


def add_relative_term(ctx: Any, obs: Observation, course: str, *, what: str, label: str, note: str,
                      how: str = "ratio", notes_when_fitted: tuple[str, ...] = ()) -> None:
    """Likelihood of readings taken relative to each subject's first one: y ~ Normal(c(t) / c(t_ref), sd_y)
    (``how = "ratio"``, :func:`ratios_to_first`, dimensionless) or y ~ Normal(c(t) - c(t_ref), sd_y) (``"change"``,
    :func:`changes_from_first`, the course's unit) over all later readings, c the whole-body course ``course`` of
    the reading's subject.

    Parameters
    ----------
    ctx : BuildContext
        The model being built.
    obs : Observation
        A timed observation with data-file rows.
    course : str
        The time course the readings follow (a key of ``physiology.whole_body.TIMELINE_UNITS``).
    what, label, note : str
        The quantity in notes ("haemoglobin"), the term's label, and the kind's note.
    how : str
        ``ratio`` or ``change`` (:data:`RELATIVE`).
    notes_when_fitted : tuple of str
        Further notes, added when there are readings to fit.
    """

    design, _, word = RELATIVE[how]
    d = design(obs, ctx.subjects)
    name = term_name(obs)
    if d["skipped"].size:
        ctx.notes.append(f"{obs.key}: {d['skipped'].size} subject(s) with a single reading carry no {word} and are "
                         "skipped")
    if d["value"].size == 0:
        ctx.notes.append(f"{obs.key}: no {what} {word}s to fit (every subject has one reading)")
        return
    ctx.notes.extend(f"{obs.key}: {n}" for n in notes_when_fitted)
    times, series = course_series(ctx, course)  # (time, subject)
    i = d["subject"]
    pred = relative_prediction(series, times, d, how)
    add_reading(name, pred, d["value"], sd=d["sd"])
    ctx.notes.append(f"{obs.key}: {note}")
    ctx.add_term(ObservedTerm(name=name, observation=obs, predicted=f"{name}__pred", subjects=i, label=label,
                              times_min=d["time"]))


def relative_prediction(series: Any, times_min: list[float], d: dict[str, np.ndarray], how: str = "ratio") -> Any:
    """What a term of readings relative to each subject's first predicts: c(t) / c(t_ref) (``how = "ratio"``) or
    c(t) - c(t_ref) (``"change"``), c the course ``series`` of the reading's subject, linear between report times.

    Parameters
    ----------
    series : array or TensorVariable
        The time course, shape (report time, subject), in its unit (numpy or PyTensor).
    times_min : list of float
        The report times, min.
    d : dict
        The readings (:func:`ratios_to_first` or :func:`changes_from_first`): ``subject``, ``time`` and ``ref_time``
        (min).
    how : str
        ``ratio`` or ``change`` (:data:`RELATIVE`).

    Returns
    -------
    array or TensorVariable
        One value per reading: dimensionless (ratio) or in the course's unit (change).
    """
    relate = RELATIVE[how][1]
    i = d["subject"]
    return relate(at_times(series, times_min, i, d["time"]), at_times(series, times_min, i, d["ref_time"]))


def add_ratio_term(ctx: Any, obs: Observation, course: str, *, what: str, label: str, note: str,
                   notes_when_fitted: tuple[str, ...] = ()) -> None:
    """:func:`add_relative_term` with ``how = "ratio"``: y ~ Normal(c(t) / c(t_ref), sd_y) (dimensionless)."""
    add_relative_term(ctx, obs, course, what=what, label=label, note=note, how="ratio",
                      notes_when_fitted=notes_when_fitted)


def interpolation(times: np.ndarray, grid: list[float]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Linear interpolation of ``times`` (min) on the report ``grid`` (min, increasing, from 0).

    Parameters
    ----------
    times : numpy.ndarray
        Reading times, min.
    grid : list of float
        Report times, min.

    Returns
    -------
    lo, hi : numpy.ndarray
        Indices of the grid points either side (int).
    w : numpy.ndarray
        Weight of ``hi`` (1): value = (1 - w) f[lo] + w f[hi].
    """
    g = np.asarray(grid, dtype=float)
    hi = np.clip(np.searchsorted(g, times, side="left"), 1, len(g) - 1)
    lo = hi - 1
    w = np.clip((times - g[lo]) / (g[hi] - g[lo]), 0.0, 1.0)
    return lo, hi, w


def whole_body_course(values: dict[str, Any], study: Any, name: str | None, xp: Any) -> dict[str, Any]:
    """One whole-body time course for the ``values`` given (one per subject), on the study's report times.

    Parameters
    ----------
    values : dict
        Per-subject inputs of the time course (canonical units; ``forms.whole_body.timeline_parameters``).
    study : Study
        A ``whole_body`` study (its ``timeline`` plan and tissue).
    name : str or None
        The time course (a key of ``physiology.whole_body.TIMELINE_UNITS``, e.g. ``hb_ratio``); None: every one.
    xp : module
        numpy or pytensor.tensor.

    Returns
    -------
    dict
        ``times_min`` (list of float, min) and ``name`` (or every course: list over the report times of arrays over
        subjects, in the course's unit). Runge-Kutta steps of at most :data:`MAX_STEP_MIN`.

    Raises
    ------
    KeyError
        ``name`` is not a time course of the form.
    """
    if name is not None and name not in wb.TIMELINE_UNITS:
        raise KeyError(name)
    plan = study.timeline
    body, beds, Cp0 = timeline_parameters(values, plan.body_mass_kg, bed_ratios(study.tissue), xp=xp)
    sim = wb.simulate(body, beds, Cp0, plan.doses, plan.end, plan.report_every,
                      max_step=min(MAX_STEP_MIN, plan.report_every), xp=xp)
    return sim if name is None else {"times_min": sim["times_min"], name: sim[name]}


#: The time courses already built in a model (BuildContext -> ``whole_body_course`` of every course): the kinds of
#: one study share one PyTensor solution instead of each building its own.
_BUILT: weakref.WeakKeyDictionary[Any, dict[str, Any]] = weakref.WeakKeyDictionary()


def course_series(ctx: Any, name: str) -> tuple[list[float], Any]:
    """The time course ``name`` inside the model being built: per-subject inputs from ``ctx``, PyTensor.

    Parameters
    ----------
    ctx : BuildContext
        The model under construction (``ctx.value`` gives each subject's input; inputs it lacks take the form's
        defaults).
    name : str
        The time course (``physiology.whole_body.TIMELINE_UNITS``).

    Returns
    -------
    times : list of float
        Report times, min.
    series : TensorVariable
        Shape (time, subject), the course's unit.
    """
    import pytensor
    import pytensor.tensor as pt

    if name not in wb.TIMELINE_UNITS:
        raise KeyError(name)
    course = _BUILT.get(ctx)
    if course is None:
        values: dict[str, Any] = {}
        for q in (*BED_INPUTS, *BODY_INPUTS):
            try:
                values[q] = ctx.value(q)
            except KeyError:
                continue
        # without a creation traceback on each of the graph's tens of thousands of nodes (pytensor records 8 stack
        # levels per node by default: about a third of the time to build the unrolled steps)
        with pytensor.config.change_flags(traceback__limit=0):
            course = _BUILT[ctx] = whole_body_course(values, ctx.problem.study, None, pt)
    n = len(ctx.subjects)
    series = pt.stack([pt.as_tensor_variable(x) * pt.ones(n) for x in course[name]])
    return course["times_min"], series


def at_times(series: Any, times_min: list[float], subject: np.ndarray, t: np.ndarray) -> Any:
    """``series`` (time, subject) at each reading's time ``t`` (min) for its ``subject`` (index), linearly.

    Parameters
    ----------
    series : array or TensorVariable
        Shape (report time, subject).
    times_min : list of float
        The report times, min.
    subject : numpy.ndarray
        Subject index of each reading (int).
    t : numpy.ndarray
        Each reading's time, min.

    Returns
    -------
    array or TensorVariable
        One value per reading (the course's unit).
    """
    lo, hi, w = interpolation(t, times_min)
    return (1.0 - w) * series[lo, subject] + w * series[hi, subject]


__all__ = ["BODY_INPUTS", "MAX_STEP_MIN", "RELATIVE", "add_ratio_term", "add_relative_term", "at_times",
           "changes_from_first", "check_timed_rows", "course_series", "interpolation", "ratios_to_first",
           "relative_prediction", "whole_body_course"]
