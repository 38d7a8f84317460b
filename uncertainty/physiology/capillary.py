"""Capillary hydrostatic pressure: two-resistance mean, posture, lung, and the axial profile.

- Mean capillary pressure between a pre-capillary resistance Ra (arterial pressure Pa upstream) and a
  post-capillary resistance Rv (venous pressure Pv downstream): Pc = (r Pa + Pv) / (1 + r), r = Rv/Ra
  (Pappenheimer & Soto-Rivera 1948, Am J Physiol 152:471).
- Hydrostatic offset below the heart: rho g h; 1 cmH2O = 0.7356 mmHg and blood density about
  1.05 g/mL give about 0.77 mmHg per cm (common practice).
- Lung: Pc = LAP + 0.4 (PAP - LAP) (Gaar et al. 1967, Am J Physiol 213:910).
- A linear fall of pressure along the capillary from Pc_art to Pc_ven; the length-averaged filtration
  then equals Starling's equation at the mean pressure, and the fraction of the length whose local
  net pressure is negative ("absorbing length") is a snapshot-only, transient figure: absorption
  concentrates interstitial protein and lowers Pi until it stops, so it persists only where a
  separate fluid supply washes the interstitium (Levick & Michel 2010, Cardiovasc Res 87:198).

Units: pressures in mmHg, height in cm, density in g/mL, x as a fraction of capillary length (0..1),
Kf and Jv as in ``starling``. Plain arithmetic plus ``xp`` where a branch is needed.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.physiology.starling import filtration, net_pressure

Array = Any

MMHG_PER_CMH2O = 0.73556  # 98.0665 Pa / 133.322 Pa, common practice
BLOOD_DENSITY = 1.05  # g/mL relative to water, common practice


def mean_capillary_pressure(Pa: Array, Pv: Array, r: Array) -> Array:
    """Mean capillary pressure (mmHg) Pc = (r Pa + Pv) / (1 + r), r = Rv/Ra (dimensionless).

    Pa and Pv are the pressures outside the pre- and post-capillary resistances (mmHg)
    (Pappenheimer & Soto-Rivera 1948).
    """
    return (r * Pa + Pv) / (1.0 + r)


def hydrostatic_offset(height_cm: Array, density: Array = BLOOD_DENSITY) -> Array:
    """Hydrostatic pressure added (mmHg) at ``height_cm`` below the heart (negative: above it).

    density in g/mL (blood about 1.05, common practice); 1 cmH2O = 0.73556 mmHg, so about
    0.77 mmHg per cm of blood.
    """
    return height_cm * density * MMHG_PER_CMH2O


def pulmonary_capillary_pressure(LAP: Array, PAP: Array, fraction: Array = 0.4) -> Array:
    """Pulmonary capillary pressure (mmHg) Pc = LAP + fraction (PAP - LAP) (Gaar et al. 1967).

    LAP left atrial, PAP mean pulmonary arterial pressure, both mmHg; fraction 0.4 by default.
    """
    return LAP + fraction * (PAP - LAP)


def axial_pressure(x: Array, Pc_art: Array, Pc_ven: Array) -> Array:
    """Capillary pressure (mmHg) at fractional distance x (0 arterial end .. 1 venous end), linear fall."""
    return Pc_art + (Pc_ven - Pc_art) * x


def axial_filtration(x: Array, Kf: Array, Pc_art: Array, Pc_ven: Array, Pi: Array, pi_c: Array,
                     pi_i: Array, sigma: Array) -> Array:
    """Local filtration per unit fractional length at x (Kf spread evenly along the length).

    Units as ``starling.filtration``; integrating over x in 0..1 gives ``mean_axial_filtration``.
    """
    return filtration(Kf, axial_pressure(x, Pc_art, Pc_ven), Pi, pi_c, pi_i, sigma)


def mean_axial_filtration(Kf: Array, Pc_art: Array, Pc_ven: Array, Pi: Array, pi_c: Array,
                          pi_i: Array, sigma: Array) -> Array:
    """Length-averaged filtration for a linear pressure profile (mL/min per basis).

    Exact for the linear profile: Starling's equation at the mean pressure (Pc_art + Pc_ven) / 2.
    """
    return filtration(Kf, 0.5 * (Pc_art + Pc_ven), Pi, pi_c, pi_i, sigma)


def absorbing_fraction(Pc_art: Array, Pc_ven: Array, Pi: Array, pi_c: Array, pi_i: Array,
                       sigma: Array, xp: Any = np) -> Array:
    """Fraction (0..1) of the capillary length whose local net pressure is negative (absorbing).

    Linear profile from Pc_art to Pc_ven (mmHg), other forces uniform along the length.
    Transient, snapshot-only figure: it describes the forces at one instant; in most tissues
    absorption fades within minutes as pi_i rises and Pi falls (Levick & Michel 2010), so it is not a
    steady-state share of the length. A flat profile (Pc_art == Pc_ven) gives 1 when the whole length
    absorbs, else 0. If pressure rises along the length the absorbing part is at the arterial end.
    """
    n_art = net_pressure(Pc_art, Pi, pi_c, pi_i, sigma)
    n_ven = net_pressure(Pc_ven, Pi, pi_c, pi_i, sigma)
    drop = n_art - n_ven  # = Pc_art - Pc_ven
    flat = xp.abs(drop) < 1e-300
    safe = xp.where(flat, 1.0, drop)
    x0 = xp.minimum(xp.maximum(n_art / safe, 0.0), 1.0)  # where the local net pressure crosses zero
    falling = 1.0 - x0  # net pressure falls along x: absorbing beyond x0
    rising = x0  # net pressure rises along x: absorbing before x0
    sloped = xp.where(drop > 0, falling, rising)
    return xp.where(flat, xp.where(n_art < 0, 1.0, 0.0), sloped)
