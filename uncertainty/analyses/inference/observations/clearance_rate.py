"""``clearance_rate``: an isotope removal rate constant k (1/min) from the tissue.

The removal rate is a flow through a distribution volume: k = JL / V_dist with JL = Jv at steady
state, so the prediction is k = Jv / V_dist. A clearance given in flow units (mL/min per basis) is
read as JL = Jv directly. ``volume`` declares the prior of V_dist
(mL/100 g of tissue), e.g. ``volume = { dist = "lognormal", median = 12, gsd = 1.4,
unit = "mL/100g" }``.
"""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.inference.model_builder import ObservedTerm
from uncertainty.analyses.inference.observations.base import (
    add_reading,
    check_positive_value,
    declared_prior,
    prior_rv,
    require_error,
    term_name,
    term_subjects,
)
from uncertainty.analyses.inference.problem import Observation, Problem

NOTE = "clearance_rate: the removal rate constant is read as Jv / V_dist (steady state, JL = Jv)."


def validate(obs: Observation, problem: Problem) -> None:
    """A value with sd or cv, and a ``volume`` declaration (the distribution volume's prior)."""
    require_error(obs)
    check_positive_value(obs)
    if obs.extra.get("as_flow"):
        return
    if "volume" not in obs.extra:
        raise obs.error("a clearance rate needs the distribution volume's prior: "
                        "volume = { dist = ..., unit = \"mL/100g\" }", "volume", None)
    declared_prior(obs.extra["volume"], "V_dist", obs, "volume")


def add(ctx: Any, obs: Observation) -> None:
    """k ~ error(Jv / V_dist), one V_dist per observation."""
    i = ctx.subject_index(obs)
    name = term_name(obs)
    if obs.extra.get("as_flow"):  # a clearance already expressed as a flow: JL = Jv
        pred = ctx.value("Jv")[i]
    else:
        vd = prior_rv(f"{name}__V_dist", declared_prior(obs.extra["volume"], "V_dist", obs, "volume"))
        ctx.extra_params.append(f"{name}__V_dist")
        pred = ctx.value("Jv")[i] / vd
    add_reading(name, pred, obs.values, sd=obs.sds, cv=obs.cv)
    ctx.add_term(ObservedTerm(name=name, observation=obs, predicted=f"{name}__pred",
                              subjects=term_subjects(i), label="clearance rate"))
