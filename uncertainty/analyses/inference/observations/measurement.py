"""``measurement``: a direct, noisy reading of one quantity.

reading ~ Normal(q + bias, sd) for an sd error, LogNormal(log(q + bias), sqrt(log(1 + cv^2))) for a
cv error. With ``instrument = "<name>"`` the noise (sd or cv) and the bias prior come from
priors/instruments.toml unless the observation states its own sd or cv; one bias variable is
shared by every reading taken with the same instrument (a systematic method error). q is then what
the instrument reads (:meth:`uncertainty.priors.Instrument.true_reading`): scale x (measures - minus),
e.g. pi_i - Pi for the implanted colloid osmometer, or the whole-body escape rate TER (%/h) from PS;
the readings, their sd and the bias are in the unit of that reading.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty import priors as priors_mod
from uncertainty.analyses.inference.model_builder import ObservedTerm
from uncertainty.analyses.inference.observations.base import (
    add_reading,
    check_positive_value,
    check_sds,
    output_names,
    prior_rv,
    term_name,
    term_subjects,
)
from uncertainty.analyses.inference.problem import Observation, Problem

NOTE = ""


def _instrument(obs: Observation) -> Any:
    table = priors_mod.load_instruments()
    inst = table.get(obs.instrument)
    if inst is None:
        raise obs.error(f"unknown instrument (known: {', '.join(sorted(table))})", "instrument",
                        obs.instrument)
    return inst


def _noise(obs: Observation, problem: Problem) -> tuple[Any, float | None]:
    """(sd, cv) of the readings: the observation's own, else its instrument's; a data file's sd column
    overrides sd row by row (an array over the rows then)."""
    if obs.sd is not None or obs.cv is not None or obs.instrument is None:
        sd, cv = obs.sd, obs.cv
    else:
        inst = _instrument(obs)
        cv = getattr(inst, "cv", None)
        sd = getattr(inst, "sd", None)
        # instruments.toml values are read into canonical units
        sd, cv = (float(sd), None) if sd is not None else (None, None if cv is None else float(cv))
    rows = obs.rows
    if rows is not None and np.any(np.isfinite(rows.sd)):
        if cv is not None:
            raise obs.error("the data file gives an sd per row but the error is a cv; give sd", "cv", cv)
        sd = np.where(np.isfinite(rows.sd), rows.sd, np.nan if sd is None else sd)
    return sd, cv


def validate(obs: Observation, problem: Problem) -> None:
    """Check the parameter is an uncertain quantity (or an output) and the error is stated."""
    if not obs.parameter:
        raise obs.error("a measurement names the quantity it reads", "parameter", None)
    if obs.value is None and obs.rows is None:
        raise obs.error("a value is required", "value", None)
    name = obs.parameter
    if name in problem.fixed:
        raise obs.error("this quantity is fixed in the study, so a reading of it informs nothing; "
                        "give it a prior in [parameters]", "parameter", name)
    if name not in problem.priors and name not in output_names(problem):
        raise obs.error("unknown quantity (not an uncertain input or an output of the model)",
                        "parameter", name)
    if obs.sd is not None and obs.cv is not None:
        raise obs.error("give one of sd or cv, not both", "cv", obs.cv)
    if obs.instrument is not None:
        inst = _instrument(obs)
        measures = getattr(inst, "measures", None)
        if measures and measures != name:
            raise obs.error(f"instrument {obs.instrument!r} measures {measures}, not {name}",
                            "instrument", obs.instrument)
        minus = getattr(inst, "minus", None)
        if minus is not None and (minus not in problem.priors and minus not in output_names(problem)):
            why = "it is fixed in this study: give it a prior in [parameters]" if minus in problem.fixed else \
                "the study has no such quantity"
            raise obs.error(f"instrument {obs.instrument!r} reads {name} - {minus}, so {minus} must be an uncertain "
                            f"quantity or an output of the model ({why})", "instrument", obs.instrument)
    sd, cv = _noise(obs, problem)
    if sd is None and cv is None:
        raise obs.error("give sd (normal error), cv (lognormal error) or an instrument", "sd", None)
    check_sds(obs, sd)
    if cv is not None:
        obs.check_values(obs.values > 0, "a cv (lognormal) error needs a positive value")
    check_positive_value(obs)


def add(ctx: Any, obs: Observation) -> None:
    """Add the reading's likelihood for its subject (or the study's individual)."""

    i = ctx.subject_index(obs)
    pred = ctx.value(obs.parameter)[i]
    label = f"{obs.parameter} reading"
    if obs.instrument is not None:
        inst = _instrument(obs)
        pred = inst.true_reading(lambda q: ctx.value(q)[i])
        label = f"{obs.parameter} reading ({inst.describe()})" if inst.minus or inst.reads else label
        bias_prior = getattr(inst, "bias", None)
        if bias_prior is not None:
            key = obs.instrument
            if key not in ctx.instrument_bias:
                rv_name = f"{key}__bias"
                ctx.instrument_bias[key] = prior_rv(rv_name, bias_prior)
                ctx.extra_params.append(rv_name)
                ctx.extra_priors[rv_name] = bias_prior
            pred = pred + ctx.instrument_bias[key]
    sd, cv = _noise(obs, ctx.problem)
    name = term_name(obs)
    add_reading(name, pred, obs.values, sd=sd, cv=cv)
    ctx.add_term(ObservedTerm(name=name, observation=obs, predicted=f"{name}__pred",
                              subjects=term_subjects(i), label=label))
