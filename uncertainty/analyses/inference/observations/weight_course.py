"""``body_weight`` and ``fluid_balance`` in a ``whole_body`` study: serial body weights and charted balances per
subject against the body's own fluid balance.

In the steady forms a weight change is tied to one organ's filtration through a declared share
(``observations.fluid_balance``). The whole-body form carries every volume that enters and leaves the body, so a
weight change needs no share: since time 0 the body has gained what was infused and lost the whole blood bled, the
urine passed and its insensible loss, at 1 kg per L (the time course ``body_weight_change``,
``physiology.whole_body.weight_change``: every urine counted, the basal flow included; nothing taken by mouth;
insensible loss at the constant adult rate ``physiology.whole_body.INSENSIBLE_LOSS_ML_MIN``, 0.52 mL/min, Institute
of Medicine 2005; no sweating, stool or vomiting).

Each subject's readings are taken relative to its earliest one (as ``haemoglobin``), so no baseline weight is
sampled: the term fits y_k = W_k - W_ref against body_weight_change(t_k) - body_weight_change(t_ref) in kg, with the
normal error sd_y = sqrt(sd_k^2 + sd_ref^2) (``observations.course.changes_from_first``; the reference's error
shared by the subject's changes is neglected as a correlation). Readings in any mass unit (canonical kg); a normal
sd only (a change can be zero or negative); a subject with one reading carries no change and is skipped (a note).

What the readings inform: the parameters enter only through the urine (volume-kinetic elimination of the plasma
volume expansion, which the exchange parameters shape), so a weight series informs what a cumulative urine series
does, less precisely (a ward scale reads to about 0.1 kg, from memory, against urine measured to a few mL).
The time course is solved in PyTensor per subject, one solution shared with the other timed kinds
(``observations.course.course_series``).

``fluid_balance`` in a ``whole_body`` study: the charted cumulative balance since time 0 (intake minus measured
output, L; the steady kind's reading, ``observations.fluid_balance``) follows the same course without the loss the
chart does not record: infused - whole blood bled - all urine, i.e. body_weight_change / (1 kg/L) plus the
insensible loss since 0 (0.52 mL/min, as above; a chart omits skin and breath, the steady kind's assumption 3). The
chart is taken to record the study's interventions as given (infusions in, bleeds out as estimated blood loss) and
every urine, nothing by mouth. The term fits every reading as charted, y_k ~ Normal(balance(t_k), sd_k) in L (0 at
time 0, where the chart starts), no share and no tissue mass. Charted balances drift from weighed ones by more than a
litre a day in intensive care (Perren et al. 2011, Minerva Anestesiol 77:802, abstract; the steady kind's
docstring), so the sd should say so; over a few hours of a timeline the chart is the infusion and urine record.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.analyses.inference.model_builder import ObservedTerm
from uncertainty.analyses.inference.observations.base import add_reading, term_name, timed_readings
from uncertainty.analyses.inference.observations.course import (
    add_relative_term,
    at_times,
    changes_from_first,
    check_timed_rows,
    course_series,
)
from uncertainty.analyses.inference.problem import Observation, Problem
from uncertainty.physiology import whole_body as wb

#: As ``observations.urine.OWN_SPREAD``: the weights follow the urine, so they read each subject's t_el alone.
OWN_SPREAD = ("t_el",)

#: The time course the readings follow (``physiology.whole_body.TIMELINE_UNITS``, kg).
COURSE = "body_weight_change"

NOTE = ("body_weight (whole_body): each subject's weight change from its earliest reading, fitted to the body's "
        "balance since time 0 (infused - bled - all urine - insensible loss 0.52 mL/min, 1 kg per L; nothing taken by "
        "mouth; no sweating).")


BALANCE_NOTE = ("fluid_balance (whole_body): each subject's charted balance since time 0, fitted to the body's "
                "balance over the same time without the insensible loss a chart does not record (infused - bled - all "
                "urine, L; nothing taken by mouth).")


def kind_note(obs: Observation, problem: Problem | None = None) -> str:
    """The note printed with the results (``body_weight`` or ``fluid_balance`` of a whole_body study)."""
    return BALANCE_NOTE if obs.kind == "fluid_balance" else NOTE


def validate(obs: Observation, problem: Problem) -> None:
    """A whole_body study with interventions, a data file with a time for every reading, a normal sd, positive
    weights (body_weight), no share.

    Parameters
    ----------
    obs : Observation
        A ``body_weight`` observation (kg or any mass unit, converted to kg by the study).
    problem : Problem
        A problem of a ``whole_body`` study.

    Raises
    ------
    InputError
        Another model form, no data file, a cv error, no sd, a reading without a time or outside the timeline, a
        non-positive weight, a ``share`` (the whole-body form needs none).
    """
    check_timed_rows(obs, problem, f"a {obs.kind}", "L" if obs.kind == "fluid_balance" else "kg")
    if obs.extra.get("share") is not None:
        raise obs.error(f"a {obs.kind} observation of a whole_body study takes no share: the form balances the "
                        "whole body's intake and output itself", "share", obs.extra["share"])
    if obs.kind == "body_weight":
        obs.check_values(np.asarray(obs.rows.value, dtype=float) > 0, "a body weight must be positive", "file")


def design(obs: Observation, subjects: list[str]) -> dict[str, np.ndarray]:
    """The readings as the term uses them (numpy): changes from each subject's earliest reading, kg.

    Parameters
    ----------
    obs : Observation
        A ``body_weight`` observation with data-file rows (kg, min).
    subjects : list of str
        The model's subject labels (index 0 is the study's individual when a row has none).

    Returns
    -------
    dict
        As ``observations.course.changes_from_first``: ``subject``, ``time`` and ``ref_time`` (min), ``value`` and
        ``sd`` (kg), ``skipped``.
    """
    return changes_from_first(obs, subjects)


def balance_design(obs: Observation, subjects: list[str]) -> dict[str, np.ndarray]:
    """A ``fluid_balance`` observation's readings as the term uses them (numpy): as charted, L since time 0.

    Parameters
    ----------
    obs : Observation
        A ``fluid_balance`` observation with data-file rows (L or any volume unit, converted to L by the study; min).
    subjects : list of str
        The model's subject labels (index 0 is the study's individual when a row has none).

    Returns
    -------
    dict
        ``subject`` (index), ``time`` (min), ``value`` and ``sd`` (L), one per row.
    """
    subj, t, value, sd = timed_readings(obs, subjects)
    return {"subject": subj, "time": t, "value": value, "sd": sd}


def charted_balance(weight_change_kg: Any, t_min: Any) -> Any:
    """The balance a chart records since time 0 (L): the body's weight change at 1 kg/L plus the insensible loss
    the chart omits, i.e. infused - whole blood bled - urine.

    Parameters
    ----------
    weight_change_kg : array or TensorVariable
        ``body_weight_change`` at ``t_min``, kg (``physiology.whole_body.weight_change``).
    t_min : array
        Time since 0, min.

    Returns
    -------
    array or TensorVariable
        L.
    """
    return weight_change_kg / wb.KG_PER_L + wb.INSENSIBLE_LOSS_ML_MIN * np.asarray(t_min, dtype=float) / 1000.0


def balance_predicted(series: Any, times_min: list[float], d: dict[str, np.ndarray]) -> Any:
    """What charted balances ``d`` (:func:`balance_design`) predict from the weight course ``series``.

    Parameters
    ----------
    series : array or TensorVariable
        ``body_weight_change``, kg, shape (report time, subject) (numpy or PyTensor).
    times_min : list of float
        The report times, min.
    d : dict
        The readings: ``subject``, ``time`` (min).

    Returns
    -------
    array or TensorVariable
        The charted balance at each reading's time, L (:func:`charted_balance`; the insensible loss is linear in
        time, so interpolating the weight course and adding it is interpolating the balance).
    """
    return charted_balance(at_times(series, times_min, d["subject"], d["time"]), d["time"])


def add(ctx: Any, obs: Observation) -> None:
    """body_weight: y ~ Normal(body_weight_change(t) - body_weight_change(t_ref) of the reading's subject, sd_y), kg;
    fluid_balance: y ~ Normal(charted_balance(t) of the reading's subject, sd), L."""

    if obs.kind == "body_weight":
        add_relative_term(ctx, obs, COURSE, what="body weight", label="body weight change from the first reading",
                          note=NOTE, how="change")
        return
    d = balance_design(obs, ctx.subjects)
    name = term_name(obs)
    times, series = course_series(ctx, COURSE)  # (time, subject), kg
    pred = balance_predicted(series, times, d)
    add_reading(name, pred, d["value"], sd=d["sd"])
    ctx.notes.append(f"{obs.key}: {BALANCE_NOTE}")
    ctx.add_term(ObservedTerm(name=name, observation=obs, predicted=f"{name}__pred", subjects=d["subject"],
                              label="charted fluid balance since time 0", times_min=d["time"]))


__all__ = ["BALANCE_NOTE", "COURSE", "NOTE", "add", "balance_design", "balance_predicted", "charted_balance",
           "design", "kind_note", "validate"]
