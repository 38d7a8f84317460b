"""``protein_ratio``: lymph-to-plasma protein concentration ratio (Ci/Cp, dimensionless).

Tied to sigma, PS and Jv through the Patlak steady state,
``physiology.solute.steady_state_ratio(Jv, sigma, PS)`` (Patlak et al. 1963).
"""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.inference.model_builder import ObservedTerm
from uncertainty.analyses.inference.observations.base import (
    add_reading,
    check_positive_value,
    require_error,
    require_quantity,
    term_name,
    term_subjects,
)
from uncertainty.analyses.inference.problem import Observation, Problem
from uncertainty.physiology import solute

NOTE = "protein_ratio: lymph/plasma protein ratio from the Patlak steady state (sigma, PS, Jv)."


def validate(obs: Observation, problem: Problem) -> None:
    """A value in (0, 1] with sd or cv; sigma and PS must be quantities of the study."""
    require_error(obs)
    check_positive_value(obs)
    obs.check_values((obs.values > 0) & (obs.values <= 1.5), "a lymph/plasma protein ratio lies between 0 and "
                     "about 1")
    require_quantity(obs, problem, "sigma", "reflection coefficient")
    require_quantity(obs, problem, "PS", "protein permeability-surface product")


def add(ctx: Any, obs: Observation) -> None:
    """ratio ~ error(steady_state_ratio(Jv, sigma, PS)) for the observation's subject."""
    import pytensor.tensor as pt


    i = ctx.subject_index(obs)
    name = term_name(obs)
    pred = solute.steady_state_ratio(ctx.value("Jv")[i], ctx.value("sigma")[i], ctx.value("PS")[i],
                                     xp=pt)
    add_reading(name, pred, obs.values, sd=obs.sds, cv=obs.cv)
    ctx.add_term(ObservedTerm(name=name, observation=obs, predicted=f"{name}__pred",
                              subjects=term_subjects(i), label="lymph/plasma protein ratio"))
