"""``lymph_flow``: pre-nodal lymph flow, equal to Jv at steady state (JL = Jv), or to the model's JL
output where the form has one (in the absorbing intestinal mucosa JL = Jv + J_epi, the epithelial
fluid leaving through the lymph).

sd: normal error in the value's unit; cv: lognormal error. Lymph collected after a lymph node
understates Jv, because nodes take up part of the fluid (Levick & Michel 2010, Cardiovasc Res
87:198-210: about half of filtered fluid returns to the blood in nodes; value from memory).
"""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.inference.model_builder import ObservedTerm
from uncertainty.analyses.inference.observations.base import (
    add_reading,
    check_positive_value,
    output_names,
    require_error,
    term_name,
    term_subjects,
)
from uncertainty.analyses.inference.problem import Observation, Problem

NOTE = ("lymph_flow is read as pre-nodal lymph (JL = Jv at steady state); post-nodal lymph "
        "understates Jv because lymph nodes absorb part of the fluid.")


def validate(obs: Observation, problem: Problem) -> None:
    """A value and one of sd or cv; a cv error needs a positive value."""
    require_error(obs)
    check_positive_value(obs)
    site = obs.extra.get("site")
    if site is not None and site not in ("pre_nodal", "post_nodal"):
        raise obs.error("site is pre_nodal or post_nodal", "site", site)


def pinned_output(obs: Observation, problem: Problem) -> tuple[str, bool]:
    """The output a reading pins (JL where the form has one, else Jv) and whether its error is on the
    log scale (cv): the model builder samples the subject's between-subject scores centred along it."""

    return ("JL" if "JL" in output_names(problem) else "Jv"), obs.cv is not None


def add(ctx: Any, obs: Observation) -> None:
    """reading ~ error(lymph flow of the observation's subject): the model's JL output where the form
    has one (steady forms; JL = Jv + J_epi in the absorbing mucosa), else Jv (lymph = Jv)."""
    i = ctx.subject_index(obs)
    pred = ctx.value("JL" if "JL" in ctx.outputs() else "Jv")[i]
    name = term_name(obs)
    add_reading(name, pred, obs.values, sd=obs.sds, cv=obs.cv)
    if obs.extra.get("site") == "post_nodal":
        ctx.notes.append(f"{obs.key}: post-nodal lymph is fitted as if it were pre-nodal; the Jv "
                         "posterior is then biased low")
    ctx.add_term(ObservedTerm(name=name, observation=obs, predicted=f"{name}__pred",
                              subjects=term_subjects(i), label="lymph flow"))
