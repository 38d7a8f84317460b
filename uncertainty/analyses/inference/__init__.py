"""Bayesian updating of the Starling priors from observations (PyMC; nutpie by default).

Layout: ``problem`` (what a model is built from), ``model_builder`` (the PyMC declaration:
typical subject, individuals, groups), ``observations/<kind>.py`` (one module per observation
kind), ``samplers`` (nutpie or PyMC NUTS), ``diagnostics`` (R-hat, ESS, divergences, BFMI and the
quality gate), ``checks`` (prior predictive, prior-data conflict, power-scaling sensitivity,
posterior predictive), ``compare`` (PSIS-LOO between model forms), ``result`` and ``api``
(:func:`infer`, :func:`fit`).

Importing this package is light; pymc, pytensor and arviz load when a model is built.
"""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.inference import api
from uncertainty.analyses.inference.diagnostics import Gate
from uncertainty.analyses.inference.model_builder import build_model
from uncertainty.analyses.inference.problem import problem_from_study
from uncertainty.analyses.inference.result import InferenceResult

__all__ = ["infer", "fit", "Session", "build_model", "problem_from_study", "Gate", "InferenceResult"]


def __getattr__(name: str) -> Any:
    if name in ("infer", "fit", "Session"):
        return getattr(api, name)
    if name == "build_model":
        return build_model
    if name == "problem_from_study":
        return problem_from_study
    if name == "Gate":
        return Gate
    if name == "InferenceResult":
        return InferenceResult
    raise AttributeError(name)
