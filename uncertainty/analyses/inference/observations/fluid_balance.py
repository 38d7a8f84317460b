"""``body_weight`` and ``fluid_balance``: what the ward measures, tied to the organ's filtration.

A data file gives, per subject, readings over time (``subject``, a time column, ``value``; optional
per-row ``sd``): body weights (kg, any mass unit) or the charted cumulative fluid balance, intake minus
measured output (L, any volume unit). The organ-level flow comes from the study's whole-tissue output
``Jv_L_per_day`` (Jv times ``[study] tissue_mass``), so the study needs a tissue mass.

Assumptions (each stated in the notes of a result):

1. Over the period observed (hours to a few days) each subject's organ filtration is constant: the
   study's quantities describe a steady state over that period.
2. The organ's net filtration over t days, ``Jv_L_per_day * t`` (L), is the fraction ``share`` of the body's
   net fluid gain over the same time. ``share`` is a prior quantity declared on the observation
   (``share = { dist = "beta", mean = .., sd = .. }``, dimensionless, 0..1 for a gain all in tissues; it
   may exceed 1 when other beds lose fluid); it carries everything the model leaves out: the other
   tissues, the part of the filtrate that lymph returns, changes of plasma volume and of body mass
   other than water.
3. ``fluid_balance``: the charted cumulative balance since the start of the subject's period (time 0,
   balance 0) is the body's net fluid gain; insensible losses (skin and breath) are not charted, so the
   chart overstates the gain. Charted balances agree poorly with weighed changes: in 147 ICU patients the
   Bland-Altman difference between weight change and net cumulative balance was -1.26 +/- 5.41 kg, and
   the sd of the average daily difference was above 1 L (Perren et al. 2011, Minerva Anestesiol
   77:802-811, abstract); declare the reading's sd accordingly.
4. ``body_weight``: a weight change over a short period is net fluid gained or lost, 1 kg for 1 L (the
   density of water and near-isotonic body fluids is about 1.0 kg/L; common practice at the bedside and
   from memory). Each subject's earliest reading is the reference; later readings enter as changes from
   it, with the reference's error added in quadrature to each. The correlation the shared reference
   gives those changes is not modelled, so a subject with many readings counts a little more than it
   should; a subject with one reading carries no information and is skipped (with a note).

Errors: a normal sd (on the observation or per row); a cv is refused, since a balance or a weight change
can be zero or negative.

In a ``whole_body`` study both kinds take no share (and no tissue mass) and follow the body's own balance over
time instead (body_weight: infused - bled - urine - insensible loss; fluid_balance: the same without the insensible
loss a chart does not record; ``observations.weight_course``, to which :func:`validate` and :func:`add` hand them).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.analyses.inference.model_builder import ObservedTerm
from uncertainty.analyses.inference.observations import weight_course
from uncertainty.analyses.inference.observations.base import (
    add_reading,
    check_sds,
    declared_prior,
    output_names,
    pair_with_first,
    prior_rv,
    term_name,
    timed_readings,
)
from uncertainty.analyses.inference.problem import Observation, Problem
from uncertainty.physiology import whole_body as wb

#: kg of body weight per L of fluid gained (``physiology.whole_body.KG_PER_L``: 1 kg for 1 L, common practice)
KG_PER_L = wb.KG_PER_L
MIN_PER_DAY = 1440.0
#: the readings' times are modelled (no "repeated readings of one steady value" note)
TIMED = True

NOTE = ("body_weight / fluid_balance: the organ's filtration Jv x tissue mass over the period is the "
        "declared share of the body's net fluid gain (1 kg = 1 L for weights; charted balances omit insensible "
        "losses); filtration is taken as constant over the period.")


def _whole_body(obs: Observation, problem: Problem | None) -> bool:
    """An observation of a ``whole_body`` study (handed to ``observations.weight_course``)."""
    return getattr(problem, "model_form", None) == "whole_body"


def kind_note(obs: Observation, problem: Problem | None = None) -> str:
    """The note printed with the results: the steady one, or ``observations.weight_course``'s in a whole_body
    study."""
    return weight_course.kind_note(obs, problem) if _whole_body(obs, problem) else NOTE


def validate(obs: Observation, problem: Problem) -> None:
    """A data file with a time for every reading, a normal sd, a share prior and a study tissue mass (in a
    ``whole_body`` study: ``observations.weight_course.validate``).

    Raises
    ------
    InputError
        No data file, a cv error, no sd, a reading without a time, no or a non-positive share, no tissue mass.
    """
    if _whole_body(obs, problem):
        weight_course.validate(obs, problem)
        return
    if obs.rows is None:
        raise obs.error(f"a {obs.kind} observation needs a data file (subject, time, value)", "file", None)
    if obs.cv is not None:
        raise obs.error(f"a {obs.kind} reading takes a normal error (sd): a change can be zero or negative",
                        "cv", obs.cv)
    sds = obs.sds
    if sds is None:
        raise obs.error("give the reading's error as sd (on the observation or an sd column)", "sd", None)
    check_sds(obs, sds)
    obs.check_values(np.isfinite(obs.rows.time_min), "no time for this reading (a time column is required)", "file")
    if "share" not in obs.extra:
        raise obs.error("give share = { <prior of the organ's share of the body's net fluid gain> }", "share", None)
    share = declared_prior(obs.extra["share"], "organ_share", obs, "share")
    if not share.distribution.is_fixed and float(share.frozen().cdf(0.0)) > 1e-6:
        raise obs.error("the share prior must be positive (e.g. beta or lognormal)", "share", obs.extra["share"])
    if "Jv_L_per_day" not in output_names(problem):
        raise obs.error(f"a {obs.kind} observation needs the organ's flow: set [study] tissue_mass", "kind",
                        obs.kind)


def typical_output(obs: Observation, problem: Problem) -> tuple[str, bool] | None:
    """The output a cohort's weights or balances pin at the typical subject: Jv (over the share), on the natural
    scale (the model builder reflects the typical scores along its direction; the direction is the same on
    either scale). None in a whole_body study, where the readings follow the time course, not the resting Jv."""
    if _whole_body(obs, problem):
        return None
    return "Jv", False


def design(obs: Observation, subjects: list[str]) -> dict[str, np.ndarray]:
    """The readings as the term uses them (numpy; canonical units: kg or L, days).

    Parameters
    ----------
    obs : Observation
        A ``body_weight`` or ``fluid_balance`` observation with data-file rows.
    subjects : list of str
        The model's subject labels (index 0 is the study's individual when a row has none).

    Returns
    -------
    dict
        ``subject`` (index of each reading's subject), ``days`` (time since the subject's reference: its
        earliest reading for body weight, time 0 for fluid balance), ``value`` (change since the reference,
        kg or L), ``sd`` (its normal error) and ``skipped`` (subjects with a single weight, no change).
    """
    subj, t_min, value, sd = timed_readings(obs, subjects)
    days = t_min / MIN_PER_DAY
    if obs.kind == "fluid_balance":
        return {"subject": subj, "days": days, "value": value, "sd": sd, "skipped": np.array([], dtype=int)}
    k, r, skipped = pair_with_first(subj, days)
    return {"subject": subj[k], "days": days[k] - days[r], "value": value[k] - value[r],
            "sd": np.sqrt(sd[k] ** 2 + sd[r] ** 2), "skipped": skipped}


def predicted(flow_L_per_day: Any, days: Any, share: Any, kind: str) -> Any:
    """The body's net fluid gain the organ's flow implies: flow x days / share, in L (fluid_balance) or kg
    (body_weight, at :data:`KG_PER_L`).

    Parameters
    ----------
    flow_L_per_day : array or tensor
        The organ's net filtration, L/day (``Jv_L_per_day``), one per reading.
    days : array
        Time since the reference, days.
    share : float or tensor
        The organ's share of the body's net fluid gain (dimensionless).
    kind : str
        ``body_weight`` or ``fluid_balance``.

    Returns
    -------
    array or tensor
        The predicted change, kg or L.
    """
    gain = flow_L_per_day * days / share
    return gain * KG_PER_L if kind == "body_weight" else gain


def add(ctx: Any, obs: Observation) -> None:
    """change ~ Normal(Jv_L_per_day[subject] x days / share (x 1 kg/L for weights), sd) over all rows (in a
    ``whole_body`` study: ``observations.weight_course.add``)."""

    if _whole_body(obs, ctx.problem):
        weight_course.add(ctx, obs)
        return
    d = design(obs, ctx.subjects)
    name = term_name(obs)
    if d["skipped"].size:
        ctx.notes.append(f"{obs.key}: {d['skipped'].size} subject(s) with a single weight carry no change and are "
                         "skipped")
    if d["value"].size == 0:
        ctx.notes.append(f"{obs.key}: no weight changes to fit (every subject has one reading)")
        return
    share = prior_rv(f"{name}__share", declared_prior(obs.extra["share"], "organ_share", obs, "share"))
    ctx.extra_params.append(f"{name}__share")
    i = d["subject"]
    pred = predicted(ctx.value("Jv_L_per_day")[i], d["days"], share, obs.kind)
    add_reading(name, pred, d["value"], sd=d["sd"])
    ctx.notes.append(f"{obs.key}: {NOTE}")
    ctx.add_term(ObservedTerm(name=name, observation=obs, predicted=f"{name}__pred", subjects=i,
                              label="body weight change" if obs.kind == "body_weight" else "fluid balance"))
