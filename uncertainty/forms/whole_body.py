"""The ``whole_body`` form: resting state of the study's tissue bed, and the parameters of the whole-body
time course (``physiology.whole_body``).

The form's scalar outputs are the resting (steady) state of the bed whose prior set the study names, the same
quantities as the ``steady_state`` form (``general.steady_state``); the time courses after infusions and bleeds
are computed by the propagate analysis from :func:`timeline_parameters`.

Three beds: the study's tissue (skeletal muscle) takes the sampled values; each other bed (skin and subcutis; the
gut wall) takes the same draws multiplied by ``bed_ratios`` (the ratio of the bed's prior set's median,
:data:`BED_SETS`, to the study tissue's median for each quantity, supplied by the caller from ``priors/``), i.e. a
subject whose muscle Kf lies high has a skin and a gut Kf that lie equally high (full between-bed correlation, an
assumption of this version). A quantity the bed's prior set does not name is left out of that bed (the gut set has
no compliance break: its pressure-volume curve is one line of slope C_tis).

Bed masses scale with body mass. Skeletal muscle and skin: ICRP Publication 89, 2002, reference adult male, 73 kg
(read through the search tool as a reproduced table): muscle 29 kg (0.40 of body mass); skin 3.3 kg plus
subcutaneous adipose tissue, taken as 0.8 of the 18.2 kg of adipose tissue (the share from memory), 17.9 kg
(0.245). Gut: 1.4 % of body mass in humans (Brown RP, Delp MD, Lindstedt SL, Rhomberg LR, Beliles RP 1997 Toxicol
Ind Health 13:407, physiological parameter values for PBPK models; read through the search tool as a table of
another paper citing it).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from uncertainty.forms import general
from uncertainty.forms.spec import Array, FormContext, FormResult
from uncertainty.physiology import whole_body as wb

#: Bed mass as a fraction of body mass (ICRP Publication 89 2002 reference male, see the module docstring).
BED_MASS_FRACTION = {"muscle": 29.0 / 73.0, "skin": (3.3 + 0.8 * 18.2) / 73.0, "gut": 0.014}
#: Resting interstitial fluid volume, mL per 100 g of bed: muscle 10 mL/100 g wet tissue (Wiig H, Reed RK 1981
#: Acta Physiol Scand 113:297, abstract, rat hindlimb muscle); skin and subcutis 20 mL/100 g, the mass-weighted
#: mean of skin (0.33 of tissue volume) and adipose tissue (0.17) of the physiologically based model of Shah DK,
#: Betts AM 2012 J Pharmacokinet Pharmacodyn 39:67 (table reproduced in PMC4429683, read through the search tool);
#: gut 16.6 mL/100 g, the human small- and large-intestine interstitial volumes of the same model, 67.1 + 95.3 mL
#: (table reproduced in a parameter guide, read through the search tool), over a gut of 1.4 % of a 70 kg body
#: (the mass fraction above; the model's reference body of 70 kg from memory).
INTERSTITIAL_ML_PER_100G = {"muscle": 10.0, "skin": (3.3 * 33.0 + 14.6 * 17.0) / 17.9,
                            "gut": (67.1 + 95.3) / (0.014 * 70.0 * 10.0)}
#: The prior set of each bed other than the study's (the study tissue's bed is ``muscle``): the resting skin and
#: subcutis, and the resting (not absorbing) small-intestinal mucosa for the gut wall (its Kf is a whole-segment
#: gravimetric value per 100 g of intestine, see ``priors/intestinal_mucosa.toml``).
BED_SETS = {"skin": "skin_subcutis", "gut": "intestinal_mucosa"}

#: Per-bed inputs of the time course (besides the required steady-form inputs).
BED_INPUTS = ("Kf", "Pc", "sigma", "PS", "L", "Pi_L0", "C_tis", "C_tis_high", "Pi_break", "JL_max")
#: Of those, the pressures (mmHg): another bed takes the study bed's value shifted by the difference of the medians,
#: the others scaled by their ratio.
SHIFTED = ("Pc", "Pi_L0", "Pi_break")


def evaluate(v: Mapping[str, Array], ctx: FormContext, xp: object) -> FormResult:
    """Resting state of the study's bed: Jv, Pi, pi_i, ratio, JL (as ``general.steady_state``; units there)."""
    return general.steady_state(v, ctx, xp)


def timeline_parameters(v: Mapping[str, Array], body_mass_kg: float,
                        bed_ratios: Mapping[str, Mapping[str, float]], xp: object = None
                        ) -> tuple[dict[str, Array], dict[str, dict[str, Array]], Array]:
    """Body, bed and plasma-protein arguments of ``physiology.whole_body.simulate`` from the study's inputs.

    Parameters
    ----------
    v : mapping
        Every input (``forms.evaluate.input_values``): Kf, Pc, sigma, PS, pi_c (mmHg), L, Pi_L0, C_tis and
        optionally C_tis_high, Pi_break, JL_max, r, Cp (g/dL), canonical units.
    body_mass_kg : float
        Body mass, kg.
    bed_ratios : mapping
        bed (a key of :data:`BED_SETS`) -> {symbol: the bed's value over the study bed's value, and
        ``<symbol>_shift``: the bed's pressure minus the study bed's, mmHg}; a symbol missing there is left out of
        that bed.
    xp : module, optional
        numpy (default) or pytensor.tensor.

    Returns
    -------
    body : dict
        ``physiology.whole_body.body_parameters`` plus ``r``.
    beds : dict
        ``muscle``, ``skin`` and ``gut`` parameter dicts (mass ``m`` in 100 g, ``Vi0`` mL).
    Cp0 : array
        Resting plasma total protein, g/dL (``Cp`` when given, else from pi_c by the inverse cubic).
    """
    xp = np if xp is None else xp
    body = wb.body_parameters(body_mass_kg)
    body["r"] = v.get("r", 0.12)  # from memory: Rv/Ra about 0.1-0.3 (Pappenheimer & Soto-Rivera 1948)
    Cp0 = v["Cp"] if "Cp" in v else wb.protein_from_oncotic(v["pi_c"], xp)
    beds: dict[str, dict[str, Array]] = {}
    for bed in wb.BEDS:
        mass_100g = BED_MASS_FRACTION[bed] * body_mass_kg * 10.0
        p: dict[str, Array] = {"m": mass_100g, "Vi0": INTERSTITIAL_ML_PER_100G[bed] * mass_100g}
        own = bed_ratios.get(bed, {})
        for s in BED_INPUTS:
            if s not in v:
                continue
            if bed == "muscle":
                p[s] = v[s]
            elif s in SHIFTED:  # pressures: shifted, not scaled
                if s + "_shift" in own:
                    p[s] = v[s] + own[s + "_shift"]
            elif s in own:
                p[s] = v[s] * own[s]
        beds[bed] = p
    return body, beds, Cp0
