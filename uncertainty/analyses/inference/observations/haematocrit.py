"""``haematocrit``: serial haematocrit per subject of a ``whole_body`` study (subject, time, value).

Readings as a fraction of the blood volume (``unit = "1"``, the default: 0.42) or in per cent (``unit = "%"``: 42),
converted to the fraction by the study. The form's time course ``hb_ratio`` is itself the haematocrit over its
resting value (red-cell volume over red-cell plus plasma volume, ``physiology.whole_body``), so the readings fit it
directly, with the haemoglobin kind's machinery (``observations.haemoglobin.add_red_cell_term``): each subject's
readings over its earliest one, y_k = Hct_k / Hct_ref against hb_ratio(t_k) / hb_ratio(t_ref), with the ratio's
normal error by the delta method (``observations.course.ratios_to_first``). A haemoglobin series proportional to a
haematocrit series (a constant mean corpuscular haemoglobin concentration, as after crystalloid, colloid and a bleed
over hours; common practice) gives the same term.

Why relative to the first reading, as for haemoglobin: the resting haematocrit differs between subjects, and a
venous sample reads higher than the whole body's mean haematocrit (the body-to-venous haematocrit ratio, below 1,
from memory), a factor that cancels in a ratio but not in an absolute reading.

Refused: no data file, a cv (lognormal) error, no sd, a reading without a time or outside the timeline, a reading
outside (0, 1) as a fraction (0 to 100 in per cent).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.analyses.inference.observations.course import check_timed_rows
from uncertainty.analyses.inference.observations.haemoglobin import (
    OWN_SPREAD,  # noqa: F401 - the same dilution signal informs Kf alone
    add_red_cell_term,
    design,  # the same ratios to the first reading
)
from uncertainty.analyses.inference.problem import Observation, Problem

#: the readings' times are modelled (no "repeated readings of one steady value" note)
TIMED = True
NOTE = ("haematocrit: each subject's readings relative to its earliest one, fitted to the whole-body time course of "
        "haematocrit relative to rest (no baseline haematocrit sampled).")


def validate(obs: Observation, problem: Problem) -> None:
    """A whole_body study with interventions, a data file with a time for every reading, a normal sd, readings
    strictly between 0 and 1 as a fraction.

    Parameters
    ----------
    obs : Observation
        A ``haematocrit`` observation (values and sd as a fraction, 1, after the study's conversion of ``%``).
    problem : Problem
        A problem of a ``whole_body`` study.

    Raises
    ------
    InputError
        Another model form, no data file, a cv error, no sd, a reading without a time or outside the timeline, a
        reading outside (0, 1) (outside (0, 100) when read in per cent).
    """
    check_timed_rows(obs, problem, "a haematocrit", "as a fraction or in %")
    v = np.asarray(obs.rows.value, dtype=float)
    obs.check_values((v > 0) & (v < 1), 'a haematocrit reading lies strictly between 0 and 1 as a fraction '
                     '(unit = "1") and between 0 and 100 in per cent (unit = "%")', "file")


def add(ctx: Any, obs: Observation) -> None:
    """y ~ Normal(hb_ratio(t) / hb_ratio(t_ref) of the reading's subject, sd_y) over all later readings."""
    add_red_cell_term(ctx, obs, "haematocrit", NOTE)


__all__ = ["NOTE", "TIMED", "add", "design", "validate"]
