"""Evaluate function and notes of the ``glomerular`` form: filtration along the glomerular capillary
(``physiology.glomerulus``, Deen, Robertson & Brenner 1972).

Pc is P_GC and Pi Bowman's space pressure (mmHg), Cp the afferent plasma protein (g/dL), RPF the renal
plasma flow of the whole tissue (mL/min), converted to per 100 g with the tissue mass to match Kf
(mL/min/mmHg/100g). ``Jv`` is GFR per 100 g; ``net_pressure`` the mean net ultrafiltration pressure;
``force_pi_c`` minus the mean oncotic pressure along the capillary (Bowman's space oncotic pressure 0).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np

from uncertainty.forms.spec import Array, FormContext, FormResult
from uncertainty.physiology import glomerulus

#: Unit of ``Kf_lower_bound`` in the note (the catalogue's unit of that output).
KF_UNIT = "mL/min/mmHg/100g"

#: Outputs the note reads.
NOTE_OUTPUTS = ("equilibrium", "x_equilibrium", "Kf_lower_bound", "no_filtration")


def evaluate(v: Mapping[str, Array], ctx: FormContext, xp: Any) -> FormResult:
    """GFR along the capillary from Kf (mL/min/mmHg/100g), Pc, Pi (mmHg), Cp (g/dL) and RPF (mL/min,
    whole tissue; needs ``ctx.tissue_mass_kg``, kg).

    Returns ``Jv`` (GFR per 100 g, mL/min/100g), ``net_pressure`` and the ``force_*`` entries (mmHg),
    ``GFR`` (mL/min), ``FF``, ``pi_eff`` (mmHg), ``x_equilibrium``, ``equilibrium``, ``Kf_lower_bound``
    (mL/min/mmHg/100g) and ``no_filtration``; the whole-tissue flow is GFR.

    Raises
    ------
    ValueError
        Without a tissue mass.
    """
    if ctx.tissue_mass_kg is None:
        raise ValueError("the glomerular form needs the tissue mass")
    per_100g = 1.0 / (ctx.tissue_mass_kg * 10.0)  # 100 g units in the tissue
    dP = v["Pc"] - v["Pi"]
    res = glomerulus.glomerular_filtration(v["Kf"], dP, v["RPF"] * per_100g, v["Cp"], xp=xp)
    Jv = res["GFR"]
    mean_net = res["mean_net_pressure"]
    zero = 0.0 * Jv
    gfr = Jv / per_100g
    out: dict[str, Array] = {
        "Jv": Jv, "net_pressure": mean_net, "force_Pc": v["Pc"] + zero, "force_Pi": -v["Pi"] + zero,
        "force_pi_c": mean_net - dP, "force_pi_i": zero,
        "GFR": gfr, "FF": res["FF"], "pi_eff": res["pi_eff"], "x_equilibrium": res["x_equilibrium"],
        "equilibrium": res["equilibrium"], "Kf_lower_bound": res["Kf_lower_bound"],
        "no_filtration": res["no_filtration"],
    }
    return FormResult(out, organ_flow=gfr)


def notes(draws: Mapping[str, Any]) -> list[str]:
    """The "Kf is only bounded below" note of ``glomerulus.equilibrium_note`` when more than
    ``glomerulus.MATERIAL_SHARE`` (5%) of the draws reach filtration equilibrium, or when any draw
    filters nothing (Kf_lower_bound in mL/min/mmHg/100g); ``draws`` holds :data:`NOTE_OUTPUTS`."""
    note = glomerulus.equilibrium_note({k: np.asarray(draws[k], dtype=float) for k in NOTE_OUTPUTS}, KF_UNIT,
                                       min_share=glomerulus.MATERIAL_SHARE)
    return [note] if note else []
