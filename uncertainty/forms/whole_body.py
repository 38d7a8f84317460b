"""The ``whole_body`` form: resting state of the study's tissue bed, and the parameters of the whole-body
time course (``physiology.whole_body``).

The form's scalar outputs are the resting (steady) state of the bed whose prior set the study names, the same
quantities as the ``steady_state`` form (``general.steady_state``); the time courses after infusions and bleeds
are computed by the propagate analysis from :func:`timeline_parameters`.

Two beds: the study's tissue (skeletal muscle) takes the sampled values; the skin-and-subcutis bed takes the
same draws multiplied by ``bed_ratios`` (the ratio of the skin prior set's median to the study tissue's median for
each quantity, supplied by the caller from ``priors/``), i.e. a subject whose muscle Kf lies high has a skin Kf
that lies equally high (full between-bed correlation, an assumption of this first version).

Bed masses scale with body mass (ICRP Publication 89, 2002, reference adult male, 73 kg; read through the
search tool as a reproduced table): skeletal muscle 29 kg (0.40 of body mass); skin 3.3 kg plus subcutaneous
adipose tissue, taken as 0.8 of the 18.2 kg of adipose tissue (the share from memory), 17.9 kg (0.245).
"""

from __future__ import annotations

import math
from collections.abc import Mapping

import numpy as np

from uncertainty.forms import general
from uncertainty.forms.spec import Array, FormContext, FormResult
from uncertainty.physiology import whole_body as wb

#: Bed mass as a fraction of body mass (ICRP Publication 89 2002 reference male, see the module docstring).
BED_MASS_FRACTION = {"muscle": 29.0 / 73.0, "skin": (3.3 + 0.8 * 18.2) / 73.0}
#: Resting interstitial fluid volume, mL per 100 g of bed: muscle 10 mL/100 g wet tissue (Wiig H, Reed RK 1981
#: Acta Physiol Scand 113:297, abstract, rat hindlimb muscle); skin and subcutis 20 mL/100 g, the mass-weighted
#: mean of skin (0.33 of tissue volume) and adipose tissue (0.17) of the physiologically based model of Shah DK,
#: Betts AM 2012 J Pharmacokinet Pharmacodyn 39:67 (table reproduced in PMC4429683, read through the search tool).
INTERSTITIAL_ML_PER_100G = {"muscle": 10.0, "skin": (3.3 * 33.0 + 14.6 * 17.0) / 17.9}

#: Per-bed inputs of the time course (besides the required steady-form inputs).
BED_INPUTS = ("Kf", "Pc", "sigma", "PS", "L", "Pi_L0", "C_tis", "C_tis_high", "Pi_break", "JL_max")


def evaluate(v: Mapping[str, Array], ctx: FormContext, xp: object) -> FormResult:
    """Resting state of the study's bed: Jv, Pi, pi_i, ratio, JL (as ``general.steady_state``; units there)."""
    return general.steady_state(v, ctx, xp)


def timeline_parameters(v: Mapping[str, Array], body_mass_kg: float, bed_ratios: Mapping[str, float],
                        xp: object = None) -> tuple[dict[str, Array], dict[str, dict[str, Array]], Array]:
    """Body, bed and plasma-protein arguments of ``physiology.whole_body.simulate`` from the study's inputs.

    Parameters
    ----------
    v : mapping
        Every input (``forms.evaluate.input_values``): Kf, Pc, sigma, PS, pi_c (mmHg), L, Pi_L0, C_tis and
        optionally C_tis_high, Pi_break, JL_max, r, Cp (g/dL) and t_el (the elimination half-life of infused
        crystalloid, min; default ``physiology.whole_body.ELIMINATION_HALF_LIFE_MIN``), canonical units.
    body_mass_kg : float
        Body mass, kg.
    bed_ratios : mapping
        symbol -> skin-bed value over the study bed's value (1 when missing).
    xp : module, optional
        numpy (default) or pytensor.tensor.

    Returns
    -------
    body : dict
        ``physiology.whole_body.body_parameters`` plus ``r``.
    beds : dict
        ``muscle`` and ``skin`` parameter dicts (mass ``m`` in 100 g, ``Vi0`` mL).
    Cp0 : array
        Resting plasma total protein, g/dL (``Cp`` when given, else from pi_c by the inverse cubic).
    """
    xp = np if xp is None else xp
    body = wb.body_parameters(body_mass_kg)
    if "t_el" in v:  # the crystalloid's clearance constant from the subject's elimination half-life
        body["k_r"] = math.log(2.0) / v["t_el"] * body["Vp0"]
    body["r"] = v.get("r", 0.12)  # from memory: Rv/Ra about 0.1-0.3 (Pappenheimer & Soto-Rivera 1948)
    Cp0 = v["Cp"] if "Cp" in v else wb.protein_from_oncotic(v["pi_c"], xp)
    beds: dict[str, dict[str, Array]] = {}
    for bed in wb.BEDS:
        mass_100g = BED_MASS_FRACTION[bed] * body_mass_kg * 10.0
        p: dict[str, Array] = {"m": mass_100g, "Vi0": INTERSTITIAL_ML_PER_100G[bed] * mass_100g}
        for s in BED_INPUTS:
            if s in v:
                ratio = 1.0 if bed == "muscle" else bed_ratios.get(s, 1.0)
                if s in ("Pc", "Pi_L0", "Pi_break"):  # pressures: shifted, not scaled
                    p[s] = v[s] + (0.0 if bed == "muscle" else bed_ratios.get(s + "_shift", 0.0))
                else:
                    p[s] = v[s] * ratio
        beds[bed] = p
    return body, beds, Cp0
