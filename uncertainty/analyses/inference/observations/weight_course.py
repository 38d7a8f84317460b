"""``body_weight`` in a ``whole_body`` study: serial body weights per subject against the body's own fluid balance.

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
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.analyses.inference.observations.course import add_relative_term, changes_from_first, check_timed_rows
from uncertainty.analyses.inference.problem import Observation, Problem

#: The time course the readings follow (``physiology.whole_body.TIMELINE_UNITS``, kg).
COURSE = "body_weight_change"

NOTE = ("body_weight (whole_body): each subject's weight change from its earliest reading, fitted to the body's "
        "balance since time 0 (infused - bled - all urine - insensible loss 0.52 mL/min, 1 kg per L; nothing taken by "
        "mouth; no sweating).")


def validate(obs: Observation, problem: Problem) -> None:
    """A whole_body study with interventions, a data file with a time for every reading, a normal sd, positive
    weights, no share.

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
    check_timed_rows(obs, problem, "a body_weight", "kg")
    if obs.extra.get("share") is not None:
        raise obs.error("a body_weight observation of a whole_body study takes no share: the form balances the "
                        "whole body's intake and output itself", "share", obs.extra["share"])
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


def add(ctx: Any, obs: Observation) -> None:
    """y ~ Normal(body_weight_change(t) - body_weight_change(t_ref) of the reading's subject, sd_y), kg."""
    add_relative_term(ctx, obs, COURSE, what="body weight", label="body weight change from the first reading",
                      note=NOTE, how="change")


__all__ = ["COURSE", "NOTE", "add", "design", "validate"]
