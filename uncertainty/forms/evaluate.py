"""Study + input values -> outputs: the one forward model every analysis calls.

``evaluate(study, values, xp)`` applies the study's derivations (oncotic pressure from protein, Pc
from Pa/Pv/r or from LAP/PAP), calls the evaluate function the catalogue names for the study's form
and tissue (:mod:`uncertainty.forms.catalogue`), then adds what every form shares: the Starling force
breakdown (``net_pressure``, ``force_*``), the whole-tissue flows with a tissue mass and the derived
quantities. Only physiology functions compute; the same code runs on numpy arrays and PyTensor
tensors (``xp=pytensor.tensor``), so inference uses this very function.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from uncertainty.core.units import basis_factor
from uncertainty.forms.catalogue import (
    NOTE_OUTPUTS,
    OUTPUT_UNITS,
    form,
    output_notes,
    required_inputs,
    study_outputs,
)
from uncertainty.forms.spec import Array, FormContext
from uncertainty.forms.study_like import StudyLike
from uncertainty.physiology import starling

__all__ = ["NOTE_OUTPUTS", "OUTPUT_UNITS", "evaluate", "input_values", "output_notes", "outputs_for",
           "required_inputs"]


def _value(study: StudyLike, values: Mapping[str, Array], symbol: str) -> Array:
    if symbol in values:
        return values[symbol]
    prior = study.priors.get(symbol)
    if prior is None:
        raise KeyError(f"no value for {symbol}")
    return prior.params["value"] if prior.is_fixed else prior.median()


def input_values(study: StudyLike, values: Mapping[str, Array], xp: Any = np) -> dict[str, Array]:
    """Every input of the study at ``values``: the priors (fixed ones and missing ones at their value
    or median) and the derived quantities (canonical units).

    Parameters
    ----------
    study : StudyLike
        The study (``priors``, ``derived``).
    values : mapping
        symbol -> value (numbers, numpy arrays or PyTensor tensors).
    xp : module
        ``numpy`` or ``pytensor.tensor``.

    Returns
    -------
    dict
        symbol -> value.

    Raises
    ------
    KeyError
        When a prior has no value.
    """
    v: dict[str, Array] = {s: _value(study, values, s) for s in study.priors}
    derived: Mapping[str, Any] = getattr(study, "derived", None) or {}
    for target, d in derived.items():  # in computation order (PAP before the Pc that reads it)
        v[target] = d.compute(v, xp)
    return v


def evaluate(study: StudyLike, values: Mapping[str, Array], xp: Any = np) -> dict[str, Array]:
    """Outputs of the study's model at ``values`` (canonical units; arrays broadcast).

    Parameters
    ----------
    study : StudyLike
        A ``Study`` (its ``model``, ``priors``, ``derived``, ``tissue``, ``tissue_mass_kg``, ``Pi_ref``,
        ``steady_Cp``).
    values : mapping
        symbol -> value (numbers, numpy arrays or PyTensor tensors) for the study's priors; fixed
        quantities may be left out.
    xp : module
        ``numpy`` or ``pytensor.tensor``.

    Returns
    -------
    dict
        The outputs :func:`uncertainty.forms.catalogue.study_outputs` names, in that order: ``Jv``
        (mL/min/100g), ``net_pressure`` and ``force_Pc``, ``force_Pi``, ``force_pi_c``, ``force_pi_i``
        (mmHg, signed contributions to the net pressure), the form's own (steady forms: ``Pi``,
        ``pi_i``, ``ratio``, ``JL``, ``oedema_volume`` with C_tis; ``revised`` adds ``pi_g``), with a
        tissue mass ``Jv_mL_per_h`` and ``Jv_L_per_day`` for the whole tissue, then the derived
        inputs (e.g. ``Pc``, ``pi_c``). Units in :data:`OUTPUT_UNITS`.

    Raises
    ------
    KeyError
        When an input the form needs has no value.
    StudyError
        For an unknown form.
    """
    spec = form(study.model)
    tissue: str | None = getattr(study, "tissue", None)
    v = input_values(study, values, xp)
    missing = [s for s in required_inputs(spec.name, tissue) if s not in v]
    if missing:
        raise KeyError(f"the {spec.name} form needs {', '.join(missing)}")
    mass: float | None = getattr(study, "tissue_mass_kg", None)
    ctx = FormContext(tissue=tissue, tissue_mass_kg=mass, Pi_ref=getattr(study, "Pi_ref", None),
                      steady_Cp=getattr(study, "steady_Cp", None))
    res = spec.function(tissue)(v, ctx, xp)
    Jv = res.outputs["Jv"]
    out: dict[str, Array] = {"Jv": Jv}
    if res.starling is not None:
        p = res.starling
        out["net_pressure"] = starling.net_pressure(p.Pc, p.Pi, p.pi_c, p.pi_o, p.sigma)
        forces = starling.forces(p.Pc, p.Pi, p.pi_c, p.pi_o, p.sigma)
        for k in ("Pc", "Pi", "pi_c", "pi_i"):
            out[f"force_{k}"] = forces[k]
    out.update(res.outputs)
    if mass is not None:
        if res.organ_flow is not None:
            out["Jv_mL_per_h"] = res.organ_flow * 60.0
            out["Jv_L_per_day"] = res.organ_flow * (1440.0 / 1000.0)
        else:
            per_organ = basis_factor("100g", "organ", tissue_mass_kg=mass, symbol="Jv")
            out["Jv_mL_per_h"] = Jv * (per_organ * 60.0)
            out["Jv_L_per_day"] = Jv * (per_organ * 1440.0 / 1000.0)
    for target in getattr(study, "derived", None) or {}:
        out.setdefault(target, v[target])
    return out


def outputs_for(study: StudyLike) -> list[str]:
    """Names ``evaluate`` returns for this study, in order (:func:`catalogue.study_outputs`).

    Raises
    ------
    StudyError
        For an unknown form.
    """
    return study_outputs(study)
