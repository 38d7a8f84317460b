"""``plasma_protein``: serial plasma total protein or albumin per subject of a ``whole_body`` study (subject, time,
value; ``protein = "total"`` (default) or ``"albumin"``).

The form carries the plasma protein mass Qp and the plasma volume Vp, so its time course ``plasma_protein_ratio``
is the concentration 100 Qp / Vp relative to rest (``physiology.whole_body``). Protein is diluted in the plasma
only, haemoglobin in the whole blood: over a short time, with the protein mass nearly conserved, C/C0 = Vp0/Vp,
the relation by which a change of plasma volume is read from a rise of plasma protein (Dill DB, Costill DL 1974
J Appl Physiol 37:247, abstract, read through the search tool), and a crystalloid lowers plasma albumin more
than haemoglobin (2 L of 0.9% saline over 1 h in ten men: serum albumin -20%, more than dilution alone explained,
Hb and Hct -7.5%; Lobo DN et al. 2001 Clin Sci 101:173, abstract, read through the search tool).

Why each subject's readings are taken relative to its earliest one (as ``haemoglobin``), not as absolute g/dL:
the resting concentration differs between subjects, with posture and between assays (albumin by bromocresol
green and by bromocresol purple differ by a few g/L, from memory), by amounts as large as the dilution to be
fitted, and the form's resting Cp is the total protein that sets the oncotic pressure (a prior), not the
subject's assay value; a ratio cancels the baseline, the assay's calibration and the unit. The term fits
y_k = C_k / C_ref against plasma_protein_ratio(t_k) / plasma_protein_ratio(t_ref), with the ratio's normal error
by the delta method (``observations.course.ratios_to_first``).

Albumin readings take the same ratio: the form has one plasma protein pool, and albumin (about 60% of plasma
protein, common practice) is diluted and concentrated with it, so its ratio equals the total protein's while its
share stays constant, as it does after crystalloids and bleeding. Infused albumin raises that share (the form
counts it at its oncotic total-protein equivalent, ``physiology.whole_body.Dose.protein_equivalent``), so albumin
readings are refused in a study that infuses a protein-containing fluid; total protein there is fitted with a
note that the predicted rise counts the equivalent, not the labelled, grams.

The time course is solved in PyTensor per subject (``observations.course.whole_body_course``, Runge-Kutta steps
of at most :data:`~uncertainty.analyses.inference.observations.course.MAX_STEP_MIN`, linear interpolation between
the report times to each reading's time).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.analyses.inference.observations.course import add_ratio_term, check_timed_rows, ratios_to_first
from uncertainty.analyses.inference.problem import Observation, Problem

#: the readings' times are modelled (no "repeated readings of one steady value" note)
TIMED = True
NOTE = ("plasma_protein: each subject's plasma protein readings relative to its earliest one, fitted to the "
        "whole-body time course of plasma total-protein concentration (protein mass over plasma volume) relative to "
        "rest (no baseline concentration sampled).")
#: The ``protein`` key's values and what each names in the term's label.
PROTEINS = {"total": "total protein", "albumin": "albumin"}
#: The time course the readings follow (``physiology.whole_body.TIMELINE_UNITS``: plasma total protein over rest).
COURSE = "plasma_protein_ratio"


def protein_of(obs: Observation) -> str:
    """The protein the readings measure: ``obs.extra["protein"]``, ``total`` when not given."""
    return str(obs.extra.get("protein") or "total")


def _protein_infused(problem: Problem) -> bool:
    return any(getattr(d, "protein", 0.0) > 0 for d in problem.study.timeline.doses)


def validate(obs: Observation, problem: Problem) -> None:
    """A whole_body study with interventions, a data file with a time for every reading, a normal sd.

    Raises
    ------
    InputError
        Another model form, no data file, a cv error, no sd, a reading without a time or outside the timeline, a
        non-positive reading, an unknown protein, albumin readings in a study that infuses protein.
    """
    check_timed_rows(obs, problem, "a plasma_protein", "g/dL")
    protein = protein_of(obs)
    if protein not in PROTEINS:
        raise obs.error(f"protein is one of {', '.join(PROTEINS)}", "protein", protein)
    if protein == "albumin" and _protein_infused(problem):
        raise obs.error("albumin readings cannot be fitted when albumin is infused: the form has one plasma "
                        "protein pool and infused albumin changes albumin's share of it (give total protein)",
                        "protein", protein)
    obs.check_values(np.asarray(obs.rows.value, dtype=float) > 0, "a plasma protein reading must be positive",
                     "file")


def design(obs: Observation, subjects: list[str]) -> dict[str, np.ndarray]:
    """The readings as the term uses them (numpy): ratios to each subject's earliest reading.

    Parameters
    ----------
    obs : Observation
        A ``plasma_protein`` observation with data-file rows (g/dL or any concentration unit, min).
    subjects : list of str
        The model's subject labels (index 0 is the study's individual when a row has none).

    Returns
    -------
    dict
        As ``observations.course.ratios_to_first``: ``subject``, ``time`` and ``ref_time`` (min), ``value`` and
        ``sd`` (1), ``skipped``.
    """
    return ratios_to_first(obs, subjects)


def add(ctx: Any, obs: Observation) -> None:
    """y ~ Normal(plasma_protein_ratio(t) / plasma_protein_ratio(t_ref) of the reading's subject, sd_y)."""
    protein = PROTEINS[protein_of(obs)]
    infused = ("the study infuses albumin, which the form counts at its oncotic total-protein equivalent (more "
               "grams than labelled), so the predicted rise of total protein is too large by that factor",)
    add_ratio_term(ctx, obs, COURSE, what=f"plasma {protein}",
                   label=f"plasma {protein} relative to the first reading", note=NOTE,
                   notes_when_fitted=infused if _protein_infused(ctx.problem) else ())


__all__ = ["COURSE", "NOTE", "TIMED", "PROTEINS", "add", "design", "protein_of", "validate"]
