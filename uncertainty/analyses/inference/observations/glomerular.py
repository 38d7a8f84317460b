"""``GFR``, ``RPF``, ``filtration_fraction``: whole-kidney readings predicted by the glomerular form.

GFR (mL/min, e.g. inulin or iohexol clearance) and the filtration fraction are outputs of
``physiology.glomerulus`` (through ``model.evaluate``); RPF (mL/min, e.g. PAH clearance) is an input
of the form, read directly. sd: normal error in the value's unit; cv: lognormal error. Where filtration
equilibrium is reached, GFR does not depend on Kf, so these readings bound Kf only from below.
"""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.inference.model_builder import ObservedTerm
from uncertainty.analyses.inference.observations.base import (
    add_reading,
    check_positive_value,
    require_error,
    term_name,
    term_subjects,
)
from uncertainty.analyses.inference.problem import Observation, Problem
from uncertainty.forms.catalogue import forms_predicting

NOTE = ("GFR, RPF and filtration-fraction readings are fitted with the glomerular form; where filtration "
        "equilibrium is reached before the efferent end, GFR does not depend on Kf, so Kf is only bounded "
        "below there.")

#: observation kind -> the model quantity it reads
QUANTITY = {"GFR": "GFR", "RPF": "RPF", "filtration_fraction": "FF"}
LABEL = {"GFR": "glomerular filtration rate", "RPF": "renal plasma flow", "filtration_fraction":
         "filtration fraction"}


def validate(obs: Observation, problem: Problem) -> None:
    """A value with sd or cv; a form that predicts the kind (the catalogue's ``forms_predicting``); a
    filtration fraction strictly between 0 and 1."""
    require_error(obs)
    check_positive_value(obs)
    form = getattr(problem, "model_form", None)
    predicting = forms_predicting(obs.kind)
    if form is not None and predicting and form not in predicting:
        wanted = " or ".join(f"model = \"{m}\"" for m in predicting)
        raise obs.error(f"a {obs.kind} observation needs {wanted}", "kind", obs.kind)
    if obs.kind == "filtration_fraction":
        obs.check_values((obs.values > 0) & (obs.values < 1), "a filtration fraction lies strictly between 0 and 1")


def add(ctx: Any, obs: Observation) -> None:
    """reading ~ error(GFR, RPF or FF of the observation's subject)."""
    i = ctx.subject_index(obs)
    pred = ctx.value(QUANTITY[obs.kind])[i]
    name = term_name(obs)
    add_reading(name, pred, obs.values, sd=obs.sds, cv=obs.cv)
    ctx.add_term(ObservedTerm(name=name, observation=obs, predicted=f"{name}__pred",
                              subjects=term_subjects(i), label=LABEL[obs.kind]))
