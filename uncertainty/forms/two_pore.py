"""Evaluate function of the ``two_pore`` form: small and large pores in parallel at steady state with the
interstitium and lymph (``physiology.two_pore``, after Rippe & Haraldsson 1994 Physiol Rev 74:163).

Inputs: Kf, Pc, pi_c, L, Pi_L0 as the steady forms, the large pores' share of the hydraulic conductance
``alpha_L`` and the pore radii ``r_S``, ``r_L`` (nm), from which pore theory gives each pore's reflection
coefficient and PS; the safety factors (C_tis, C_tis_high, Pi_break, JL_max) as ``steady_state``. The force
breakdown uses the conductance-weighted reflection coefficient ``sigma_eff`` in the slot of sigma. The safety
margin has the steady forms' definition (the rise of Pc before the steady Pi reaches Pi_break); the burns
shift of the pressure-volume relation (P_imb) acts inside the solve as it does there.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from uncertainty.forms.general import early_pressure, oedema
from uncertainty.forms.spec import Array, FormContext, FormResult, Starling
from uncertainty.physiology import two_pore

#: The inputs of the pores (alpha_L: 1; r_S, r_L: nm).
PORE_INPUTS = ("alpha_L", "r_S", "r_L")


def evaluate(v: Mapping[str, Array], ctx: FormContext, xp: object) -> FormResult:
    """Two-pore steady state (``physiology.two_pore.two_pore_steady_state``).

    Parameters
    ----------
    v : mapping
        Kf (mL/min/mmHg/100g), Pc, pi_c, Pi_L0 (mmHg), L (mL/min/mmHg/100g), alpha_L (1), r_S, r_L (nm); optional
        C_tis, C_tis_high (mL/mmHg/100g), Pi_break (mmHg), JL_max (mL/min/100g).
    ctx : FormContext
        The study's constants (``steady_Cp``: the plasma-protein input for the oncotic cubic; ``Pi_ref``).
    xp : module
        numpy or pytensor.tensor.

    Returns
    -------
    FormResult
        ``Jv`` (mL/min/100g), ``Pi``, ``pi_i`` (mmHg), ``ratio`` (1), ``JL`` (mL/min/100g), ``oedema_volume``
        (mL/100g, with C_tis and a reference Pi), ``safety_margin`` (mmHg, with Pi_break), ``Pi_early`` (mmHg, with
        P_imb), ``Jv_large`` (mL/min/100g), ``sigma_eff`` (1). P_imb (mmHg, burns) shifts the interstitial
        pressure-volume relation inside the solve.
    """
    tissue: dict[str, Any] = dict(C_tis=v.get("C_tis"), C_high=v.get("C_tis_high"), P_break=v.get("Pi_break"),
                                  JL_max=v.get("JL_max"), Cp=v[ctx.steady_Cp] if ctx.steady_Cp else None,
                                  P_imb=v.get("P_imb"))
    args = (v["Kf"], v["Pc"], v["pi_c"], v["L"], v["Pi_L0"], v["alpha_L"], v["r_S"], v["r_L"])
    res = two_pore.two_pore_steady_state(*args, **tissue, xp=xp)
    out: dict[str, Array] = {"Jv": res["Jv"], "Pi": res["Pi"], "pi_i": res["pi_i"], "ratio": res["ratio"],
                             "JL": res["JL"]}
    out.update(oedema(res.get("Pi_volume", res["Pi"]), v, ctx, xp))
    if "Pi_break" in v:  # the definition of the steady forms' safety_margin (general.margin)
        out["safety_margin"] = two_pore.two_pore_safety_margin(*args, v["Pi_break"], **tissue, xp=xp)
    out.update(early_pressure(v, ctx))
    out["Jv_large"] = res["Jv_large"]
    out["sigma_eff"] = res["sigma_eff"]
    return FormResult(out, Starling(v["Pc"], res["Pi"], v["pi_c"], res["pi_i"], res["sigma_eff"]))
