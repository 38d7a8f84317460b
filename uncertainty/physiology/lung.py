"""Lung: capillary pressure from left atrial and pulmonary arterial pressure, and extravascular lung water.

Pc = LAP + 0.4 (PAP - LAP) (Gaar et al. 1967, Am J Physiol 213:910; ``capillary.pulmonary_capillary_pressure``).
Mean pulmonary arterial pressure is the left atrial pressure plus the transpulmonary gradient,
PAP = LAP + TPG (``pulmonary_arterial_pressure``): with TPG > 0 (lognormal in the prior set) no subject has
PAP below LAP, which independent LAP and PAP draws allowed. Left-sided heart failure acts through LAP: a raised
LAP raises Pc, filtration, Pi and lymph flow.

Extravascular lung water at steady state: the coupled balance of filtration, lymph and interstitial
protein (``balance.steady_state``, or ``balance.revised_steady_state`` with ``revised=True``) gives Pi; the
interstitial pressure-volume relation (``interstitium.oedema_volume``, linear or two-slope) turns the rise
of Pi above its reference into excess interstitial water, added to the baseline EVLW. The approach to a
new steady state after a step in Pc is exponential with time constant C_tis/(Kf + L) in the linear model
(the interstitial part of ``interstitium.volume_time_course``), returned as ``tau``.

Units: pressures mmHg; Kf and L mL/min/mmHg per basis; PS, Jv, JL mL/min per basis; C_tis (and C_high)
mL/mmHg per basis; EVLW and EVLW0 mL per basis; tau in min. Plain arithmetic plus ``xp``.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.physiology.balance import revised_steady_state, safety_steady_state, steady_state
from uncertainty.physiology.capillary import pulmonary_capillary_pressure
from uncertainty.physiology.interstitium import oedema_beyond_break, oedema_volume

Array = Any


def pulmonary_arterial_pressure(LAP: Array, TPG: Array) -> Array:
    """Mean pulmonary arterial pressure (mmHg) from left atrial pressure and the transpulmonary gradient.

    Parameters
    ----------
    LAP : array
        Left atrial (pulmonary artery wedge) pressure (mmHg).
    TPG : array
        Transpulmonary gradient, mean PAP - LAP (mmHg; positive: blood flows from the pulmonary artery to the
        left atrium).

    Returns
    -------
    array
        PAP = LAP + TPG (mmHg), the definition of the gradient (Naeije R et al. 2013 Eur Respir J 41:217,
        abstract). Plain arithmetic (numpy arrays or PyTensor tensors).
    """
    return LAP + TPG


def alveolar_water(flooding: Array, k_AFC: Array) -> Array:
    """Alveolar water (mL per basis) held at steady state when the alveoli flood and the epithelium clears them.

    Parameters
    ----------
    flooding : array
        Flow of filtrate into the air spaces (mL/min per basis; ``interstitium.overflow``).
    k_AFC : array
        Alveolar fluid clearance as a first-order rate (1/min): the fraction of the alveolar fluid the epithelium's
        active sodium transport returns per minute (mean 13 %/h in hydrostatic pulmonary oedema, 6 %/h in acute
        lung injury: Ware LB, Matthay MA 2001 Am J Respir Crit Care Med 163:1376, abstract, citing Verghese GM et
        al. 1999 J Appl Physiol 87:1301).

    Returns
    -------
    array
        flooding / k_AFC (mL per basis): the volume at which clearance equals inflow. The cleared fluid is taken to
        leave the lung (its return through the interstitium is small beside the lymph flow). Plain arithmetic.
    """
    return flooding / k_AFC


def extravascular_water(Pi: Array, Pi_ref: Array, C_tis: Array, EVLW0: Array = 0.0, *, C_high: Array | None = None,
                        P_break: Array | None = None, flooding: Array | None = None, k_AFC: Array | None = None,
                        xp: Any = np) -> dict[str, Array]:
    """Extravascular lung water (mL per basis) at a steady-state interstitial pressure Pi (mmHg).

    ``oedema_volume``: with the break of the pressure-volume curve (C_high above P_break) the water held beyond
    the break (``interstitium.oedema_beyond_break``, each subject's own curve); without it the interstitial water
    above that at the reference Pi_ref (``interstitium.oedema_volume``, linear). C_tis and C_high in mL/mmHg per
    basis, pressures mmHg. ``EVLW`` = EVLW0 (the water of the normally hydrated lung, mL per basis) + oedema_volume,
    + with ``flooding`` (mL/min per basis) and ``k_AFC`` (1/min) the alveolar water of ``alveolar_water``.
    """
    if C_high is not None and P_break is not None:
        extra = oedema_beyond_break(Pi, C_tis, C_high, P_break, xp=xp)
    else:
        extra = oedema_volume(Pi, Pi_ref, C_tis, C_high, P_break, xp=xp)
    EVLW = EVLW0 + extra
    if flooding is not None and k_AFC is not None:
        EVLW = EVLW + alveolar_water(flooding, k_AFC)
    return {"oedema_volume": extra, "EVLW": EVLW}


def evlw_index(EVLW: Array, M_lung: Array) -> Array:
    """Extravascular lung water index EVLWI (mL per kg predicted body weight).

    Parameters
    ----------
    EVLW : array
        Extravascular lung water (mL per 100 g of blood-free lung tissue).
    M_lung : array
        Blood-free lung tissue mass per kg of predicted body weight (g/kg).

    Returns
    -------
    array
        EVLW M_lung / 100 (mL/kg): the quantity transpulmonary thermodilution reports (indexed to predicted
        body weight; Tagami T et al. 2010 Crit Care 14:R162, abstract: normal about 7.4 +/- 3.3 mL/kg).
        Plain arithmetic (numpy arrays or PyTensor tensors).
    """
    return EVLW * M_lung / 100.0


def lung_water(Kf: Array, LAP: Array, PAP: Array, sigma: Array, PS: Array, pi_c: Array, L: Array, Pi_L0: Array,
               C_tis: Array, Pi_ref: Array, EVLW0: Array = 0.0, *, fraction: Array = 0.4,
               C_high: Array | None = None, P_break: Array | None = None, JL_max: Array | None = None,
               G_flood: Array | None = None, P_flood: Array | None = None, Cp: Array | None = None,
               k_AFC: Array | None = None, revised: bool = False, xp: Any = np) -> dict[str, Array]:
    """Steady-state pulmonary exchange and extravascular lung water (EVLW).

    LAP, PAP: left atrial and mean pulmonary arterial pressure (mmHg); fraction: Gaar's 0.4 (1);
    Kf, sigma, PS, pi_c, L, Pi_L0 (and optional Cp) as ``balance.steady_state``; C_tis (mL/mmHg per
    basis) with optional two-slope C_high and P_break, and Pi_ref (mmHg, normally hydrated reference) as
    ``extravascular_water``; EVLW0 (mL per basis) the water of the normally hydrated lung. With any of
    C_high/P_break, JL_max (mL/min per basis), G_flood (mL/min/mmHg per basis) and P_flood (mmHg) the steady
    state has the safety factors and alveolar flooding (``balance.safety_steady_state``); with k_AFC (1/min) the
    EVLW includes the alveolar water the epithelium's clearance holds (``alveolar_water``).
    Returns dict ``Pc``, ``Jv``, ``Pi``, ``pi_i``, ``ratio``, ``JL`` (lymph), ``flooding`` (mL/min per basis into
    the alveoli; 0 without the overflow), ``oedema_volume``, ``EVLW``, ``tau`` (min, C_tis/(Kf + L), linear
    model), and ``pi_g`` when ``revised``.
    """
    Pc = pulmonary_capillary_pressure(LAP, PAP, fraction)
    if any(a is not None for a in (C_high, P_break, JL_max, G_flood, P_flood)):
        out = dict(safety_steady_state(Kf, Pc, sigma, PS, pi_c, L, Pi_L0, C_tis=C_tis, C_high=C_high,
                                       P_break=P_break, JL_max=JL_max, G_flood=G_flood, P_flood=P_flood,
                                       revised=revised, Cp=Cp, xp=xp))
    else:
        solve = revised_steady_state if revised else steady_state
        out = dict(solve(Kf, Pc, sigma, PS, pi_c, L, Pi_L0, Cp=Cp, xp=xp))
        out.update({"JL": out["Jv"], "flooding": 0.0 * out["Jv"]})
    out.update(extravascular_water(out["Pi"], Pi_ref, C_tis, EVLW0, C_high=C_high, P_break=P_break,
                                   flooding=out["flooding"], k_AFC=k_AFC, xp=xp))
    out.update({"Pc": Pc, "tau": C_tis / (Kf + L)})
    return out
