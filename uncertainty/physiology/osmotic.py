"""Crystalloid (small-solute) osmotic pressure across a barrier that reflects small solutes: the brain.

At the blood-brain barrier the tight endothelium reflects small solutes (Na+, Cl-, glucose, mannitol)
as well as protein, so a difference in their osmolality drives water too. Each solute j adds
sigma_j * dOsm_j * R T beside the protein (oncotic) term of Starling's equation (Kedem & Katchalsky
1958 form with several solutes):

    net = (Pc - Pi) - sigma (pi_c - pi_i) - sum_j sigma_j R T (Osm_c,j - Osm_i,j)

R T at 37 degC is about 19.3 mmHg per mOsm/kg (common practice: van 't Hoff, taking 1 mOsm/kg water
as 1 mol/m^3). A plasma osmolality step of 10 mOsm/kg is thus worth about 193 mmHg times sigma_j:
even a small reflection coefficient outweighs the oncotic term, which is why osmotherapy dehydrates the
brain while leaving other tissues almost untouched.

Units: osmolality in mOsm/kg water, pressures in mmHg, sigma dimensionless (0..1), T in kelvin,
Kf and Jv as in ``starling``. Sign: a higher plasma than interstitial osmolality draws water into the
blood (opposes filtration), exactly like the plasma oncotic pressure. Plain arithmetic throughout.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from uncertainty.physiology.oncotic import BODY_TEMPERATURE_K, GAS_CONSTANT, PA_PER_MMHG
from uncertainty.physiology.starling import forces, net_pressure

Array = Any


def mmhg_per_mosm(T: Array = BODY_TEMPERATURE_K) -> Array:
    """Osmotic pressure (mmHg) of 1 mOsm/kg water at temperature T (K): R T / 133.322 (about 19.34 at 37 C)."""
    return GAS_CONSTANT * T / PA_PER_MMHG


#: R T at 37 degC in mmHg per mOsm/kg (common practice; about 19.3).
MMHG_PER_MOSM = mmhg_per_mosm()


def crystalloid_pressure(sigma_s: Array, osm_c: Array, osm_i: Array, T: Array = BODY_TEMPERATURE_K) -> Array:
    """Effective crystalloid osmotic pressure difference sigma_s R T (osm_c - osm_i), mmHg.

    sigma_s: reflection coefficient of the barrier to the solute (1); osm_c, osm_i: plasma and
    interstitial osmolality of that solute (mOsm/kg water); T in K (default 37 degC).
    Positive when plasma is the more concentrated side (draws water into the capillary).
    """
    return sigma_s * (osm_c - osm_i) * mmhg_per_mosm(T)


def crystalloid_sum(solutes: Sequence[tuple[Array, Array, Array]], T: Array = BODY_TEMPERATURE_K) -> Array:
    """Sum over solutes of ``crystalloid_pressure``: each entry is (sigma_j, osm_c_j, osm_i_j); mmHg."""
    total: Array = 0.0
    for sigma_j, osm_c_j, osm_i_j in solutes:
        total = total + crystalloid_pressure(sigma_j, osm_c_j, osm_i_j, T)
    return total


def brain_net_pressure(Pc: Array, Pi: Array, pi_c: Array, pi_i: Array, sigma: Array, sigma_s: Array,
                       osm_c: Array, osm_i: Array, T: Array = BODY_TEMPERATURE_K) -> Array:
    """Net driving pressure (mmHg) across the blood-brain barrier with one lumped crystalloid term.

    ``starling.net_pressure`` (protein term, mmHg) minus ``crystalloid_pressure(sigma_s, osm_c, osm_i)``
    (osmolality in mOsm/kg water). Positive drives water from blood into the brain.
    """
    return net_pressure(Pc, Pi, pi_c, pi_i, sigma) - crystalloid_pressure(sigma_s, osm_c, osm_i, T)


def brain_filtration(Kf: Array, Pc: Array, Pi: Array, pi_c: Array, pi_i: Array, sigma: Array, sigma_s: Array,
                     osm_c: Array, osm_i: Array, T: Array = BODY_TEMPERATURE_K) -> Array:
    """Net fluid flux Jv = Kf * ``brain_net_pressure`` (Kf in mL/min/mmHg per basis, Jv in mL/min per basis)."""
    return Kf * brain_net_pressure(Pc, Pi, pi_c, pi_i, sigma, sigma_s, osm_c, osm_i, T)


def brain_forces(Pc: Array, Pi: Array, pi_c: Array, pi_i: Array, sigma: Array, sigma_s: Array,
                 osm_c: Array, osm_i: Array, T: Array = BODY_TEMPERATURE_K) -> dict[str, Array]:
    """Signed contributions (mmHg) to the brain net pressure: ``starling.forces`` keys plus ``osm``.

    ``osm`` is -sigma_s R T (osm_c - osm_i); the five entries sum to ``brain_net_pressure``.
    """
    out = forces(Pc, Pi, pi_c, pi_i, sigma)
    zero = 0.0 * out["Pc"]
    out["osm"] = -crystalloid_pressure(sigma_s, osm_c, osm_i, T) + zero
    return out
