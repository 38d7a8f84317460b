"""Study + input values -> outputs: derived quantities, then the study's model form.

``evaluate(study, values, xp)`` is the one forward model every analysis calls. It applies the
study's derivations (oncotic pressure from protein, Pc from Pa/Pv/r or from LAP/PAP), then

- ``classic``: Starling's equation with the six quantities as given (``physiology.starling``);
- ``steady_state``: the coupled steady state of filtration, lymph drainage and protein flux
  (``physiology.balance.steady_state``): Pi and pi_i are solved, not sampled;
- ``revised``: the glycocalyx form (``physiology.balance.revised_steady_state``): pi_g beneath the
  glycocalyx opposes filtration, pi_i is downstream; the force breakdown uses pi_g in the slot of
  the opposing oncotic pressure (``force_pi_i`` is then the pi_g term). For the intestinal mucosa
  (``study.TISSUE_INPUTS``) it is the absorbing steady state of ``physiology.mucosa``: the epithelial
  fluid J_epi washes the interstitium, so absorption (Jv < 0) can be sustained; pi_g = pi_i there and
  ``JL`` = Jv + J_epi.

Only physiology functions compute; the same code runs on numpy arrays and PyTensor tensors
(``xp=pytensor.tensor``), so inference uses this very function.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from uncertainty.forms.catalogue import TISSUE_OUTPUTS
from uncertainty.forms.catalogue import required_inputs as _required_inputs

#: Canonical unit of every output.
OUTPUT_UNITS: dict[str, str] = {
    "Jv": "mL/min/100g",
    "net_pressure": "mmHg",
    "force_Pc": "mmHg",
    "force_Pi": "mmHg",
    "force_pi_c": "mmHg",
    "force_pi_i": "mmHg",
    "Pi": "mmHg",
    "pi_i": "mmHg",
    "pi_g": "mmHg",
    "ratio": "1",
    "JL": "mL/min/100g",
    "oedema_volume": "mL/100g",
    "EVLW": "mL/100g",
    "Jv_mL_per_h": "mL/h",
    "Jv_L_per_day": "L/day",
    "Pc": "mmHg",
    "pi_c": "mmHg",
    "GFR": "mL/min",
    "FF": "1",
    "pi_eff": "mmHg",
    "x_equilibrium": "1",
    "equilibrium": "1",
    "Kf_lower_bound": "mL/min/mmHg/100g",
    "no_filtration": "1",
}


def required_inputs(model_form: str, tissue: str | None = None) -> tuple[str, ...]:
    """Quantities a model form needs (before derivations): classic Kf, Pc, Pi, pi_c, pi_i, sigma;
    steady_state / revised Kf, Pc, sigma, PS, pi_c, L, Pi_L0 (C_tis, PS_large optional); with ``tissue``,
    plus that tissue's own (revised intestinal_mucosa: J_epi, mL/min/100g)."""
    return _required_inputs(model_form, tissue)


def _value(study: Any, values: Mapping[str, Any], symbol: str) -> Any:
    if symbol in values:
        return values[symbol]
    prior = study.priors.get(symbol)
    if prior is None:
        raise KeyError(f"no value for {symbol}")
    return prior.params["value"] if prior.is_fixed else prior.median()


def evaluate(study: Any, values: Mapping[str, Any], xp: Any = np) -> dict[str, Any]:
    """Outputs of the study's model at ``values`` (canonical units; arrays broadcast).

    Args:
        study: a ``Study`` (its ``model``, ``priors``, ``derived``, ``tissue_mass_kg``, ``steady_Cp``).
        values: symbol -> value (numbers, numpy arrays or PyTensor tensors) for the study's priors;
            fixed quantities may be left out.
        xp: ``numpy`` or ``pytensor.tensor``.

    Returns:
        dict with ``Jv`` (mL/min/100g), ``net_pressure`` and ``force_Pc``, ``force_Pi``, ``force_pi_c``,
        ``force_pi_i`` (mmHg, signed contributions to the net pressure); steady forms add ``Pi``,
        ``pi_i`` (mmHg), ``ratio`` (Ci/Cp), ``JL`` (= Jv, lymph balance; Jv + J_epi in the absorbing
        mucosa) and ``oedema_volume``
        (mL/100g above the volume at the tissue's reference Pi, ``Study.Pi_ref``, when the study has
        C_tis); ``revised`` adds ``pi_g``; with a tissue mass,
        ``Jv_mL_per_h`` and ``Jv_L_per_day`` for the whole tissue; derived inputs (``Pc``, ``pi_c``,
        ``pi_i`` in classic) are returned too. Units in :data:`OUTPUT_UNITS`.
    """
    from uncertainty.physiology import balance, starling

    form = study.model
    v: dict[str, Any] = {}
    for s in study.priors:
        v[s] = _value(study, values, s)
    for target, d in study.derived.items():
        v[target] = d.compute(v, xp)
    need = _required_inputs(form, getattr(study, "tissue", None))
    missing = [s for s in need if s not in v]
    if missing:
        raise KeyError(f"the {form} form needs {', '.join(missing)}")
    out: dict[str, Any] = {}
    if form == "glomerular":
        return _glomerular(study, v, xp)
    if form == "classic":
        Pi, pi_o = v["Pi"], v["pi_i"]
        Jv = starling.filtration(v["Kf"], v["Pc"], Pi, v["pi_c"], pi_o, v["sigma"])
    else:
        Cp = v[study.steady_Cp] if getattr(study, "steady_Cp", None) else None
        args = (v["Kf"], v["Pc"], v["sigma"], v["PS"], v["pi_c"], v["L"], v["Pi_L0"])
        if form == "steady_state":
            res = balance.steady_state(*args, Cp=Cp, xp=xp)
            pi_o = res["pi_i"]
        elif "J_epi" in need:  # absorbing mucosa: epithelial fluid washes the interstitium
            from uncertainty.physiology import mucosa

            res = mucosa.absorbing_steady_state(*args, v["J_epi"], Cp=Cp, xp=xp)
            pi_o = res["pi_g"]
            out["pi_g"] = res["pi_g"]
        else:
            res = balance.revised_steady_state(*args, v.get("PS_large", 0.0), Cp=Cp, xp=xp)
            pi_o = res["pi_g"]
            out["pi_g"] = res["pi_g"]
        Jv, Pi = res["Jv"], res["Pi"]
        out["Pi"] = Pi
        out["pi_i"] = res["pi_i"]
        out["ratio"] = res["ratio"]
        out["JL"] = res.get("JL", Jv)  # lymph balance: JL = Jv, or Jv + J_epi in the absorbing mucosa
        if "C_tis" in v and getattr(study, "Pi_ref", None) is not None:
            if "EVLW" in TISSUE_OUTPUTS.get((form, getattr(study, "tissue", "")), ()):
                from uncertainty.physiology import lung

                water = lung.extravascular_water(Pi, study.Pi_ref, v["C_tis"], v.get("EVLW0", 0.0),
                                                 C_high=v.get("C_tis_high"), P_break=v.get("Pi_break"), xp=xp)
                out["oedema_volume"], out["EVLW"] = water["oedema_volume"], water["EVLW"]
            else:
                out["oedema_volume"] = _oedema_volume(Pi, v, study.Pi_ref, xp)
    out["Jv"] = Jv
    out["net_pressure"] = starling.net_pressure(v["Pc"], Pi, v["pi_c"], pi_o, v["sigma"])
    forces = starling.forces(v["Pc"], Pi, v["pi_c"], pi_o, v["sigma"])
    for k in ("Pc", "Pi", "pi_c", "pi_i"):
        out[f"force_{k}"] = forces[k]
    if study.tissue_mass_kg is not None:
        from uncertainty.core.units import basis_factor

        per_organ = basis_factor("100g", "organ", tissue_mass_kg=study.tissue_mass_kg, symbol="Jv")
        out["Jv_mL_per_h"] = Jv * (per_organ * 60.0)
        out["Jv_L_per_day"] = Jv * (per_organ * 1440.0 / 1000.0)
    for target in study.derived:
        out.setdefault(target, v[target])
    return out


def _glomerular(study: Any, v: Mapping[str, Any], xp: Any) -> dict[str, Any]:
    """The ``glomerular`` form: filtration along the capillary (``physiology.glomerulus``).

    Pc is P_GC and Pi Bowman's space pressure (mmHg), Cp the afferent plasma protein (g/dL), RPF the renal
    plasma flow of the whole tissue (mL/min), converted to per 100 g with ``study.tissue_mass_kg`` to match
    Kf (mL/min/mmHg/100g). ``Jv`` is GFR per 100 g; ``net_pressure`` the mean net ultrafiltration pressure;
    ``force_pi_c`` minus the mean oncotic pressure along the capillary (Bowman's space oncotic pressure 0).
    """
    from uncertainty.physiology import glomerulus

    per_100g = 1.0 / (study.tissue_mass_kg * 10.0)  # 100 g units in the tissue
    dP = v["Pc"] - v["Pi"]
    res = glomerulus.glomerular_filtration(v["Kf"], dP, v["RPF"] * per_100g, v["Cp"], xp=xp)
    Jv = res["GFR"]
    mean_net = res["mean_net_pressure"]
    zero = 0.0 * Jv
    out: dict[str, Any] = {
        "Jv": Jv, "net_pressure": mean_net, "force_Pc": v["Pc"] + zero, "force_Pi": -v["Pi"] + zero,
        "force_pi_c": mean_net - dP, "force_pi_i": zero,
        "GFR": Jv / per_100g, "FF": res["FF"], "pi_eff": res["pi_eff"], "x_equilibrium": res["x_equilibrium"],
        "equilibrium": res["equilibrium"], "Kf_lower_bound": res["Kf_lower_bound"],
        "no_filtration": res["no_filtration"],
    }
    out["Jv_mL_per_h"] = out["GFR"] * 60.0
    out["Jv_L_per_day"] = out["GFR"] * (1440.0 / 1000.0)
    for target in study.derived:
        out.setdefault(target, v[target])
    return out


def _oedema_volume(Pi: Any, v: Mapping[str, Any], Pi_ref: float, xp: Any) -> Any:
    """Interstitial volume (mL/100g) at the solved Pi above that at the tissue's reference Pi
    (``physiology.interstitium.oedema_volume``; two-slope compliance when C_tis_high and Pi_break are
    inputs)."""
    from uncertainty.physiology import interstitium

    return interstitium.oedema_volume(Pi, Pi_ref, v["C_tis"], v.get("C_tis_high"), v.get("Pi_break"), xp=xp)


#: Outputs ``output_notes`` reads, per model form (analyses keep these draws even when not reported).
NOTE_OUTPUTS: dict[str, tuple[str, ...]] = {
    "glomerular": ("equilibrium", "x_equilibrium", "Kf_lower_bound", "no_filtration"),
}


def output_notes(model_form: str, outputs: Mapping[str, Any]) -> list[str]:
    """Plain-language notes that a batch of model outputs calls for (numpy arrays, one value per draw).

    ``glomerular``: the "Kf is only bounded below" note of ``physiology.glomerulus.equilibrium_note``
    when more than ``glomerulus.MATERIAL_SHARE`` (5%) of the draws reach filtration equilibrium, or when
    any draw filters nothing (Kf_lower_bound in mL/min/mmHg/100g). Other forms: no notes. Draws of the
    outputs in :data:`NOTE_OUTPUTS` must be present; returns an empty list otherwise.
    """
    need = NOTE_OUTPUTS.get(model_form, ())
    if not need or any(k not in outputs for k in need):
        return []
    from uncertainty.physiology import glomerulus

    note = glomerulus.equilibrium_note({k: np.asarray(outputs[k], dtype=float) for k in need},
                                       OUTPUT_UNITS["Kf_lower_bound"], min_share=glomerulus.MATERIAL_SHARE)
    return [note] if note else []


def outputs_for(study: Any) -> list[str]:
    """Names ``evaluate`` returns for this study (see :func:`uncertainty.study.output_names`)."""
    return study.outputs()
