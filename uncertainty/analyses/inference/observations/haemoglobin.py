"""``haemoglobin``: serial blood haemoglobin per subject of a ``whole_body`` study (subject, time, value).

Haemoglobin concentration falls as the plasma is diluted and rises as it concentrates; the form's time
course ``hb_ratio`` (haemoglobin relative to rest, ``physiology.whole_body``) predicts the ratio of any two
readings of one subject. Each subject's readings are taken relative to its earliest one, so no baseline
haemoglobin is sampled: the term fits y_k = Hb_k / Hb_ref against hb_ratio(t_k) / hb_ratio(t_ref), with the
normal error of the ratio by the delta method, sd_y = sqrt(sd_k^2 + (y_k sd_ref)^2) / Hb_ref (the reference's
error shared by the subject's ratios is neglected as a correlation; a first-order approximation, good while the
reading error is a few per cent of the value).

The time course is the study's ``[[interventions]]`` and ``[timeline]`` solved in PyTensor per subject
(``observations.course.whole_body_course`` with ``xp=pytensor.tensor``), with Runge-Kutta steps of at most
:data:`~uncertainty.analyses.inference.observations.course.MAX_STEP_MIN` and linear interpolation between the
report times to each reading's time.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.analyses.inference.observations.course import add_ratio_term, check_timed_rows, ratios_to_first
from uncertainty.analyses.inference.problem import Observation, Problem

#: the readings' times are modelled (no "repeated readings of one steady value" note)
TIMED = True
NOTE = ("haemoglobin: each subject's readings relative to its earliest one, fitted to the whole-body time "
        "course of haemoglobin relative to rest (no baseline haemoglobin sampled).")
#: The time course the readings follow: the form's haematocrit over its resting value
#: (``physiology.whole_body.TIMELINE_UNITS``; haemoglobin concentration is proportional to it while the mean
#: corpuscular haemoglobin concentration stays constant).
COURSE = "hb_ratio"
#: Quantities whose between-subject spread these readings inform on their own, so each keeps its own spread
#: factor outside the joint one (``model_builder._jointly_spread``). After a crystalloid the readings' recovery
#: is set by the filtration coefficient (Hahn 2010, Anesthesiology 113:470: the distribution clearance), and
#: the fits find each subject's Kf (tests/test_whole_body_recovery.py). Sharing one factor, a cohort whose
#: Kf varies widely widened every other quantity's spread with it: 3 invented subjects put unread venous
#: pressures at -8 to -21 mmHg, where the capillary pressure falls below the zero-lymph pressure and the resting
#: state has its corner (Jv = 0), and the chains diverged there.
OWN_SPREAD = ("Kf",)


def validate(obs: Observation, problem: Problem) -> None:
    """A whole_body study with interventions, a data file with a time for every reading, a normal sd.

    Raises
    ------
    InputError
        Another model form, no data file, a cv error, no sd, a reading without a time or after the timeline's
        end, a non-positive reading.
    """
    check_timed_rows(obs, problem, "a haemoglobin", "g/dL")
    obs.check_values(np.asarray(obs.rows.value, dtype=float) > 0, "a haemoglobin reading must be positive",
                     "file")


def design(obs: Observation, subjects: list[str]) -> dict[str, np.ndarray]:
    """The readings as the term uses them (numpy).

    Parameters
    ----------
    obs : Observation
        A ``haemoglobin`` observation with data-file rows (g/dL, min).
    subjects : list of str
        The model's subject labels (index 0 is the study's individual when a row has none).

    Returns
    -------
    dict
        ``subject`` (index of each reading's subject), ``time`` and ``ref_time`` (min, the reading's and its
        subject's earliest reading's), ``value`` (ratio to the earliest reading, 1), ``sd`` (its normal error,
        1), ``skipped`` (subjects with a single reading).
    """
    return ratios_to_first(obs, subjects)


def add_red_cell_term(ctx: Any, obs: Observation, what: str, note: str) -> None:
    """The likelihood of serial red-cell readings (haemoglobin or haematocrit), each subject's over its first:
    y ~ Normal(hb_ratio(t) / hb_ratio(t_ref) of the reading's subject, sd_y) over all later readings.

    Parameters
    ----------
    ctx : BuildContext
        The model being built.
    obs : Observation
        A ``haemoglobin`` or ``haematocrit`` observation with data-file rows (any one unit; the ratio cancels it).
    what : str
        The quantity read, in the term's label and notes (``haemoglobin``, ``haematocrit``).
    note : str
        The kind's note.
    """
    add_ratio_term(ctx, obs, COURSE, what=what, label=f"{what} relative to the first reading", note=note)


def add(ctx: Any, obs: Observation) -> None:
    """y ~ Normal(hb_ratio(t) / hb_ratio(t_ref) of the reading's subject, sd_y) over all later readings."""
    add_red_cell_term(ctx, obs, "haemoglobin", NOTE)


__all__ = ["COURSE", "NOTE", "TIMED", "add", "add_red_cell_term", "design", "validate"]
