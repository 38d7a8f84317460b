"""``swelling_rate``: the rate of tissue volume gain, dV/dt = Jv - JL (mL/min per basis).

JL comes from ``lymph = { <declaration> }`` on the observation when given, otherwise from the
study's lymph relation through ``physiology.interstitium.lymph_flow(Pi, L, Pi_L0)``.
"""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.inference.model_builder import ObservedTerm
from uncertainty.analyses.inference.observations.base import (
    add_reading,
    declared_prior,
    prior_rv,
    require_error,
    require_quantity,
    term_name,
    term_subjects,
)
from uncertainty.analyses.inference.problem import Observation, Problem
from uncertainty.physiology import interstitium
from uncertainty.study import OBS_NEEDS

NOTE = "swelling_rate: dV/dt = Jv - JL, with JL from the lymph relation or the declared lymph prior."


def validate(obs: Observation, problem: Problem) -> None:
    """A value with sd or cv, and either a lymph declaration or the study's lymph relation."""
    require_error(obs)
    if obs.cv is not None:
        obs.check_values(obs.values > 0, "a cv (lognormal) error needs a positive swelling rate")
    if "lymph" in obs.extra:
        declared_prior(obs.extra["lymph"], "JL", obs, "lymph")
        return
    for q in OBS_NEEDS["swelling_rate"]:
        require_quantity(obs, problem, q, "for the lymph flow JL(Pi); or give lymph = {...}")


def add(ctx: Any, obs: Observation) -> None:
    """rate ~ error(Jv - JL) for the observation's subject."""
    import pytensor.tensor as pt


    i = ctx.subject_index(obs)
    name = term_name(obs)
    if "lymph" in obs.extra:
        JL = prior_rv(f"{name}__JL", declared_prior(obs.extra["lymph"], "JL", obs, "lymph"))
        ctx.extra_params.append(f"{name}__JL")
    else:
        JL = interstitium.lymph_flow(ctx.value("Pi")[i], ctx.value("L")[i], ctx.value("Pi_L0")[i],
                                     xp=pt)
    pred = ctx.value("Jv")[i] - JL
    add_reading(name, pred, obs.values, sd=obs.sds, cv=obs.cv)
    ctx.add_term(ObservedTerm(name=name, observation=obs, predicted=f"{name}__pred",
                              subjects=term_subjects(i), label="swelling rate"))
