"""Two-pore exchange: fluid and protein through small and large pores in parallel, and the coupled
steady state with the interstitium and lymph (model form ``two_pore``).

The capillary wall is two populations of water-filled cylindrical pores in parallel (Rippe B,
Haraldsson B 1994 Physiol Rev 74:163; the two-pore equations of Rippe B, Haraldsson B 1987 Acta
Physiol Scand 131:411, abstract): small pores of radius r_S (about 4.5 nm) carry most of the
hydraulic conductance and nearly reflect plasma protein; large pores of radius r_L (about 23 nm)
carry a fraction alpha_L of it (0.056 in rat muscle, 0.097 in dog paw) and let protein through
nearly unreflected. Per pore k (k = S, L):

    J_k  = a_k Kf [(Pc - Pi) - sigma_k (pi_c - pi_i)],     a_S = 1 - alpha_L, a_L = alpha_L
    Js_k = Patlak flux of ``solute.protein_flux`` with (J_k, sigma_k, PS_k)   (convection + diffusion)

With the small pores absorbing and the large pores filtering the two flows can have opposite signs
(volume recirculation, Rippe & Haraldsson 1994); Patlak's flux is valid for either sign.

Pore theory gives each pore's reflection coefficient and permeability-surface product from its
radius and the protein's Stokes-Einstein radius a (albumin, 3.55 nm, from memory), lambda = a / r:

    diffusive hindrance   H(lambda) = (1 - lambda)^2 (1 - 2.104 lambda + 2.09 lambda^3 - 0.95 lambda^5)
                          (Renkin EM 1954 J Gen Physiol 38:225, from memory)
    reflection            1 - sigma = (1 - lambda)^2 [2 - (1 - lambda)^2] (1 - 2 lambda^2/3 - 0.163 lambda^3)
                          (steric partition of Ferry 1936 with the centre-line drag of Anderson JL,
                          Quinn JA 1974 Biophys J 14:130, from memory)
    pore area / length    A_k / dx = 8 eta a_k Kf / r_k^2                  (Poiseuille)
    PS_k                  = D A_k/dx H(lambda_k),  D = k T / (6 pi eta a)   (Stokes-Einstein)

so PS_k = 4 k T a_k Kf H(lambda_k) / (3 pi a r_k^2) and the viscosity cancels. Nothing here is set
from a measured interstitial protein ratio.

Steady state (unknowns Pi and the interstitial protein ratio R = Ci/Cp): the filtrate leaves by the
lymph, J_S + J_L = JL(Pi) (``interstitium.volume_lymph_flow``: compliance rising past a break,
saturation at JL_max, the safety factors of ``balance.safety_steady_state``), and so does its protein,
Js_S + Js_L = JL(Pi) R Cp. For a trial Pi the fluid balance is linear in pi_i,
pi_i(Pi) = pi_c - [(Pc - Pi) - JL(Pi)/Kf] / sigma_eff with sigma_eff = a_S sigma_S + a_L sigma_L, which
gives R(Pi) (clipped to [0, 1]); the protein residual G(Pi) = Js_S + Js_L - JL R is then positive at
the low end of [Pi_L0, Pc] whenever R is clipped at 0 there (protein enters an interstitium without
protein) and negative at Pc (R clipped at 1: G = -sigma_eff JL). The root is bracketed by fixed
bisection halvings and finished with one secant (regula falsi) step through the final bracket, whose
ends are cut from differentiation: on PyTensor the gradient is then the implicit-function gradient
-G_theta / G_Pi (to the bracket width). When Pc <= Pi_L0 no lymph flows: Jv = 0, Pi = Pc, pi_i = pi_c.
If G is already negative at Pi_L0 (the zero-lymph-flow recirculation state holds less protein than the
fluid balance there demands) the state returned is the lymph-free one at Pi_L0 (Jv near 0).

With alpha_L = 0 the form is the single-pore safety steady state of ``balance.safety_steady_state`` with
(sigma_S, PS_S).

Units: Kf and L in mL/min/mmHg per basis; flows and PS in mL/min per basis; pressures in mmHg;
radii in nm; Cp in g/dL; sigma, alpha_L and ratios dimensionless.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from uncertainty.physiology.balance import oncotic_from_ratio, shifted_state
from uncertainty.physiology.interstitium import volume_lymph_flow
from uncertainty.physiology.iteration import fixed_steps, stop_gradient
from uncertainty.physiology.oncotic import COEFFICIENTS, pi_cubic, pi_cubic_slope
from uncertainty.physiology.solute import protein_flux

Array = Any

#: Stokes-Einstein radius of albumin (nm), the representative plasma protein (from memory: 3.5-3.6 nm,
#: the value used by Rippe & Haraldsson 1994 Physiol Rev 74:163).
ALBUMIN_RADIUS_NM = 3.55
BOLTZMANN = 1.380649e-23  # J/K, CODATA 2018 exact value
BODY_TEMPERATURE_K = 310.15  # 37 degC, common practice
DYN_CM2_PER_MMHG = 1333.22387415  # common practice (conventional mmHg)
#: PS_k / (a_k Kf H) for r in nm: 4 k T / (3 pi a r^2) in mmHg (k T in erg, lengths in cm, mmHg in dyn/cm^2).
_PS_FACTOR = 4.0 * (BOLTZMANN * 1e7 * BODY_TEMPERATURE_K) / (3.0 * math.pi * DYN_CM2_PER_MMHG * 1e-21)

BISECTION_STEPS = 34  # halvings of [Pi_L0, Pc]: a bracket of about 1e-8 mmHg, then the secant step
INVERSE_STEPS = 8  # Newton steps of the oncotic-cubic inverse (from the right: monotone, machine precision)
_PS_FLOOR = 1e-30  # mL/min per basis: a pore population with no area (alpha_L = 0) carries no diffusion


def diffusive_hindrance(r: Array, a: Array = ALBUMIN_RADIUS_NM, xp: Any = np) -> Array:
    """Restricted diffusion area factor A/A0 of a cylindrical pore (Renkin 1954, from memory).

    Parameters
    ----------
    r : array
        Pore radius (nm).
    a : array
        Solute radius (nm), default albumin 3.55 nm.
    xp : module
        numpy or pytensor.tensor.

    Returns
    -------
    array
        (1 - lambda)^2 (1 - 2.104 lambda + 2.09 lambda^3 - 0.95 lambda^5), lambda = min(a/r, 1) (1); 0 for a
        solute as large as the pore.
    """
    lam = xp.minimum(a / r, 1.0)
    return (1.0 - lam) ** 2 * (1.0 - 2.104 * lam + 2.09 * lam ** 3 - 0.95 * lam ** 5)


def pore_reflection(r: Array, a: Array = ALBUMIN_RADIUS_NM, xp: Any = np) -> Array:
    """Reflection coefficient of a cylindrical pore to a spherical solute (Ferry's steric partition with the
    centre-line drag of Anderson & Quinn 1974, from memory).

    Parameters
    ----------
    r : array
        Pore radius (nm).
    a : array
        Solute radius (nm), default albumin 3.55 nm.
    xp : module
        numpy or pytensor.tensor.

    Returns
    -------
    array
        sigma = 1 - (1 - lambda)^2 [2 - (1 - lambda)^2] (1 - 2 lambda^2/3 - 0.163 lambda^3) (1), lambda = min(a/r, 1);
        1 for a solute as large as the pore, 0 for a point solute.
    """
    lam = xp.minimum(a / r, 1.0)
    q = (1.0 - lam) ** 2
    return 1.0 - q * (2.0 - q) * (1.0 - 2.0 * lam ** 2 / 3.0 - 0.163 * lam ** 3)


def pore_permeability(Kf_pore: Array, r: Array, a: Array = ALBUMIN_RADIUS_NM, xp: Any = np) -> Array:
    """Protein permeability-surface product of a pore population (Poiseuille area, Stokes-Einstein diffusion).

    Parameters
    ----------
    Kf_pore : array
        The population's share of the filtration coefficient, a_k Kf (mL/min/mmHg per basis).
    r : array
        Pore radius (nm).
    a : array
        Solute radius (nm), default albumin 3.55 nm.
    xp : module
        numpy or pytensor.tensor.

    Returns
    -------
    array
        PS = 4 k T Kf_pore H(a/r) / (3 pi a r^2) (mL/min per basis) at 37 degC; the viscosity cancels between
        Poiseuille's pore area and the Stokes-Einstein diffusion coefficient.
    """
    return _PS_FACTOR * Kf_pore * diffusive_hindrance(r, a, xp) / (a * r * r)


def pore_properties(Kf: Array, alpha_L: Array, r_S: Array, r_L: Array, a: Array = ALBUMIN_RADIUS_NM,
                    xp: Any = np) -> dict[str, Array]:
    """Reflection coefficients and PS of the small and large pores from their radii.

    Parameters
    ----------
    Kf : array
        Total filtration coefficient (mL/min/mmHg per basis).
    alpha_L : array
        Large pores' fraction of the hydraulic conductance (1).
    r_S, r_L : array
        Small- and large-pore radii (nm).
    a : array
        Solute radius (nm), default albumin.
    xp : module
        numpy or pytensor.tensor.

    Returns
    -------
    dict
        ``sigma_S``, ``sigma_L`` (1), ``PS_S``, ``PS_L`` (mL/min per basis).
    """
    return {"sigma_S": pore_reflection(r_S, a, xp), "sigma_L": pore_reflection(r_L, a, xp),
            "PS_S": pore_permeability((1.0 - alpha_L) * Kf, r_S, a, xp),
            "PS_L": pore_permeability(alpha_L * Kf, r_L, a, xp)}


def pore_flows(Kf: Array, alpha_L: Array, sigma_S: Array, sigma_L: Array, Pc: Array, Pi: Array, pi_c: Array,
               pi_i: Array) -> tuple[Array, Array]:
    """Fluid flow through the small and the large pores (Starling per pore).

    Parameters
    ----------
    Kf : array
        Total filtration coefficient (mL/min/mmHg per basis).
    alpha_L : array
        Large pores' fraction of Kf (1).
    sigma_S, sigma_L : array
        Reflection coefficients of the two pores (1).
    Pc, Pi, pi_c, pi_i : array
        Capillary and interstitial hydrostatic and oncotic pressures (mmHg).

    Returns
    -------
    tuple of array
        (J_S, J_L) in mL/min per basis; positive out of the capillary.
    """
    dP = Pc - Pi
    dpi = pi_c - pi_i
    return (1.0 - alpha_L) * Kf * (dP - sigma_S * dpi), alpha_L * Kf * (dP - sigma_L * dpi)


def two_pore_protein_flux(J_S: Array, J_L: Array, sigma_S: Array, sigma_L: Array, PS_S: Array, PS_L: Array,
                          Cp: Array, Ci: Array, xp: Any = np) -> Array:
    """Protein flux out of the capillary through both pores, Patlak's convection + diffusion per pore.

    Parameters
    ----------
    J_S, J_L : array
        Fluid flows through the small and large pores (mL/min per basis).
    sigma_S, sigma_L : array
        Their reflection coefficients (1).
    PS_S, PS_L : array
        Their permeability-surface products (mL/min per basis).
    Cp, Ci : array
        Plasma and interstitial protein (g/dL).
    xp : module
        numpy or pytensor.tensor.

    Returns
    -------
    array
        Js_S + Js_L in (g/dL)(mL/min) per basis. With J_S = J_L = 0 it is pure diffusion,
        (PS_S + PS_L)(Cp - Ci).
    """
    return (protein_flux(J_S, sigma_S, xp.maximum(PS_S, _PS_FLOOR), Cp, Ci, xp)
            + protein_flux(J_L, sigma_L, xp.maximum(PS_L, _PS_FLOOR), Cp, Ci, xp))


def ratio_from_oncotic(pi: Array, pi_c: Array, Cp: Array | None, xp: Any = np,
                       n_steps: int = INVERSE_STEPS) -> Array:
    """Concentration ratio R = C/Cp (1) at oncotic pressure pi (mmHg): the inverse of
    ``balance.oncotic_from_ratio``.

    Parameters
    ----------
    pi, pi_c : array
        Oncotic pressure and plasma oncotic pressure (mmHg).
    Cp : array or None
        Plasma total protein (g/dL) for the Landis-Pappenheimer cubic; None: proportional, R = pi / pi_c.
    xp : module
        numpy or pytensor.tensor.
    n_steps : int
        Newton steps on the cubic, started right of the root (the cubic lies above its linear term), where
        its convexity makes them fall monotonically to the root; on PyTensor only the last is differentiated.

    Returns
    -------
    array
        R (1); 0 for pi <= 0.
    """
    if Cp is None:
        return pi / pi_c
    t = xp.maximum(pi * pi_cubic(Cp, "total") / pi_c, 0.0)  # the cubic's value at C = R Cp
    c = t / COEFFICIENTS["total"][0]
    for _ in range(max(int(n_steps), 1) - 1):
        c = c - (pi_cubic(c, "total") - t) / pi_cubic_slope(c, "total")
    # the last step from an iterate cut from differentiation: the implicit-function gradient, one step long
    c = stop_gradient(c, xp)
    c = c - (pi_cubic(c, "total") - t) / pi_cubic_slope(c, "total")
    return c / Cp


def _residual(Pi: Array, p: dict[str, Any], xp: Any) -> tuple[Array, dict[str, Array]]:
    """G(Pi) of the module docstring (protein in minus protein out, per unit Cp) and the state at Pi."""
    J, _ = volume_lymph_flow(Pi, p["L"], p["Pi_L0"], p["C_tis"], p["C_high"], p["P_break"], p["JL_max"], xp=xp)
    aL = p["alpha_L"]
    s_eff = (1.0 - aL) * p["sigma_S"] + aL * p["sigma_L"]
    pi_fluid = p["pi_c"] - ((p["Pc"] - Pi) - J / p["Kf"]) / s_eff
    R = xp.clip(ratio_from_oncotic(pi_fluid, p["pi_c"], p["Cp"], xp), 0.0, 1.0)
    pi_i, _ = oncotic_from_ratio(R, p["pi_c"], p["Cp"])
    J_S, J_L = pore_flows(p["Kf"], aL, p["sigma_S"], p["sigma_L"], p["Pc"], Pi, p["pi_c"], pi_i)
    js = two_pore_protein_flux(J_S, J_L, p["sigma_S"], p["sigma_L"], p["PS_S"], p["PS_L"], 1.0, R, xp)
    return js - J * R, {"JL": J, "ratio": R, "pi_i": pi_i, "J_S": J_S, "J_L": J_L, "sigma_eff": s_eff}


_NAMES = ("Kf", "Pc", "pi_c", "L", "Pi_L0", "alpha_L", "sigma_S", "sigma_L", "PS_S", "PS_L",
          "C_tis", "C_high", "P_break", "JL_max", "Cp")


def pore_steady_state(Kf: Array, Pc: Array, pi_c: Array, L: Array, Pi_L0: Array, alpha_L: Array,
                      sigma_S: Array, sigma_L: Array, PS_S: Array, PS_L: Array, *, C_tis: Array | None = None,
                      C_high: Array | None = None, P_break: Array | None = None, JL_max: Array | None = None,
                      Cp: Array | None = None, P_imb: Array | None = None, xp: Any = np,
                      n_steps: int = BISECTION_STEPS) -> dict[str, Array]:
    """Two-pore steady state from each pore's sigma and PS (module docstring).

    Parameters
    ----------
    Kf, L : array
        Filtration coefficient and lymph conductance (mL/min/mmHg per basis).
    Pc, pi_c, Pi_L0 : array
        Capillary pressure, plasma oncotic pressure, zero-lymph pressure (mmHg).
    alpha_L : array
        Large pores' fraction of Kf (1).
    sigma_S, sigma_L : array
        Reflection coefficients of the small and large pores (1).
    PS_S, PS_L : array
        Their permeability-surface products (mL/min per basis).
    C_tis, C_high, P_break : array, optional
        Pressure-volume curve: compliances (mL/mmHg per basis) below and above the break P_break (mmHg).
    JL_max : array, optional
        Maximal lymph flow (mL/min per basis).
    Cp : array, optional
        Plasma total protein (g/dL) for the Landis-Pappenheimer scaling of pi_i; None: proportional.
    P_imb : array, optional
        Shift of the interstitial pressure-volume relation of an injured matrix (mmHg, negative), as in
        ``balance.safety_steady_state``: the state of the intact tissue at Pc - P_imb with Pi lowered by P_imb
        (``balance.shifted_state``; both pores' flows depend on Pi only through Pc - Pi).
    xp : module
        numpy or pytensor.tensor.
    n_steps : int
        Bisection halvings before the secant step.

    Returns
    -------
    dict
        ``Jv`` (= ``JL``, mL/min per basis), ``Pi``, ``pi_i`` (mmHg), ``ratio`` (Ci/Cp), ``JL``, ``Jv_small``,
        ``Jv_large`` (mL/min per basis) and ``sigma_eff`` (1, the conductance-weighted reflection); with P_imb
        also ``Pi_volume`` (mmHg, the intact curve's pressure at the same volume).
    """
    if P_imb is not None:
        return shifted_state(lambda Pc_v: pore_steady_state(
            Kf, Pc_v, pi_c, L, Pi_L0, alpha_L, sigma_S, sigma_L, PS_S, PS_L, C_tis=C_tis, C_high=C_high,
            P_break=P_break, JL_max=JL_max, Cp=Cp, xp=xp, n_steps=n_steps), Pc, P_imb)
    given = dict(zip(_NAMES, (Kf, Pc, pi_c, L, Pi_L0, alpha_L, sigma_S, sigma_L, PS_S, PS_L,
                              C_tis, C_high, P_break, JL_max, Cp), strict=True))
    present = [k for k in _NAMES if given[k] is not None]
    full = 0.0 * (Kf + Pc + pi_c + L + Pi_L0 + alpha_L + sigma_S + sigma_L + PS_S + PS_L)
    lo0 = Pi_L0 + full
    hi0 = xp.maximum(Pc + full, lo0)

    def params(vals: tuple[Array, ...]) -> dict[str, Any]:
        p: dict[str, Any] = dict.fromkeys(_NAMES)
        p.update(zip(present, vals, strict=True))
        return p

    def step(_i: Array, lo: Array, hi: Array, *vals: Array) -> tuple[Array, Array]:
        mid = 0.5 * (lo + hi)
        g, _ = _residual(mid, params(vals), xp)
        pos = g > 0
        return xp.where(pos, mid, lo), xp.where(pos, hi, mid)

    lo, hi = fixed_steps(step, (lo0, hi0), n_steps, 1.0, xp, params=tuple(given[k] + full for k in present))
    lo = stop_gradient(lo, xp)
    hi = stop_gradient(hi, xp)
    p = params(tuple(given[k] for k in present))
    g_lo, _ = _residual(lo, p, xp)
    g_hi, _ = _residual(hi, p, xp)
    den = g_lo - g_hi
    bracketed = (g_lo > 0) & (g_hi < 0) & (den > 0)
    secant = lo + g_lo * (hi - lo) / xp.where(bracketed, den, 1.0)
    x = xp.where(bracketed, secant, 0.5 * (lo + hi))
    flowing = Pc - Pi_L0 + full > 0
    Pi = xp.where(flowing, x, Pc + full)
    _, st = _residual(Pi, p, xp)
    R = xp.where(flowing, st["ratio"], 1.0 + full)
    pi_i = xp.where(flowing, st["pi_i"], pi_c + full)
    JL = xp.where(flowing, st["JL"], full)
    return {"Jv": JL, "Pi": Pi, "pi_i": pi_i, "ratio": R, "JL": JL,
            "Jv_small": xp.where(flowing, st["J_S"], full), "Jv_large": xp.where(flowing, st["J_L"], full),
            "sigma_eff": st["sigma_eff"] + full}


def two_pore_steady_state(Kf: Array, Pc: Array, pi_c: Array, L: Array, Pi_L0: Array, alpha_L: Array, r_S: Array,
                          r_L: Array, *, C_tis: Array | None = None, C_high: Array | None = None,
                          P_break: Array | None = None, JL_max: Array | None = None, Cp: Array | None = None,
                          P_imb: Array | None = None, xp: Any = np, n_steps: int = BISECTION_STEPS
                          ) -> dict[str, Array]:
    """Two-pore steady state from the pore radii (pore theory, module docstring): the form ``two_pore``.

    Parameters
    ----------
    Kf, L : array
        Filtration coefficient and lymph conductance (mL/min/mmHg per basis).
    Pc, pi_c, Pi_L0 : array
        Capillary pressure, plasma oncotic pressure, zero-lymph pressure (mmHg).
    alpha_L : array
        Large pores' fraction of Kf (1).
    r_S, r_L : array
        Small- and large-pore radii (nm).
    C_tis, C_high, P_break, JL_max, Cp, P_imb : array, optional
        As ``pore_steady_state``.
    xp : module
        numpy or pytensor.tensor.
    n_steps : int
        Bisection halvings.

    Returns
    -------
    dict
        ``pore_steady_state``'s outputs plus ``sigma_S``, ``sigma_L`` (1), ``PS_S``, ``PS_L`` (mL/min per basis).
    """
    pores = pore_properties(Kf, alpha_L, r_S, r_L, xp=xp)
    out = pore_steady_state(Kf, Pc, pi_c, L, Pi_L0, alpha_L, pores["sigma_S"], pores["sigma_L"], pores["PS_S"],
                            pores["PS_L"], C_tis=C_tis, C_high=C_high, P_break=P_break, JL_max=JL_max, Cp=Cp,
                            P_imb=P_imb, xp=xp, n_steps=n_steps)
    out.update(pores)
    return out


MARGIN_STEPS = 40  # halvings of the ratio bracket [0, 1] before the secant step: about 1e-12 wide


def _margin_residual(R: Array, p: dict[str, Any], xp: Any) -> tuple[Array, Array]:
    """H(R) of ``pore_safety_margin`` (protein in minus protein out, per unit Cp, at Pi = P_accel) and Pc*."""
    aL = p["alpha_L"]
    s_eff = (1.0 - aL) * p["sigma_S"] + aL * p["sigma_L"]
    pi_i, _ = oncotic_from_ratio(R, p["pi_c"], p["Cp"])
    Pc_star = p["P_accel"] + s_eff * (p["pi_c"] - pi_i) + p["J"] / p["Kf"]
    J_S, J_L = pore_flows(p["Kf"], aL, p["sigma_S"], p["sigma_L"], Pc_star, p["P_accel"], p["pi_c"], pi_i)
    js = two_pore_protein_flux(J_S, J_L, p["sigma_S"], p["sigma_L"], p["PS_S"], p["PS_L"], 1.0, R, xp)
    return js - p["J"] * R, Pc_star


_MARGIN_NAMES = ("Kf", "pi_c", "alpha_L", "sigma_S", "sigma_L", "PS_S", "PS_L", "P_accel", "J", "Cp")


def pore_safety_margin(Kf: Array, Pc: Array, pi_c: Array, L: Array, Pi_L0: Array, alpha_L: Array, sigma_S: Array,
                       sigma_L: Array, PS_S: Array, PS_L: Array, P_accel: Array, *, C_tis: Array | None = None,
                       C_high: Array | None = None, P_break: Array | None = None, JL_max: Array | None = None,
                       Cp: Array | None = None, P_imb: Array | None = None, xp: Any = np,
                       n_steps: int = MARGIN_STEPS) -> Array:
    """Safety margin of the two-pore steady state (mmHg): the rise of Pc before the steady Pi reaches P_accel,
    the definition of ``balance.safety_margin``.

    At Pi = P_accel the outflow J* = JL(P_accel) (``interstitium.volume_lymph_flow``) is known. For a trial
    ratio R = Ci/Cp the fluid balance gives the capillary pressure Pc*(R) = P_accel + sigma_eff (pi_c - pi_i(R)) +
    J*/Kf, and the protein residual H(R) = Js_S + Js_L - J* R is positive at R = 0 (protein enters an
    interstitium without protein) and -(a_S sigma_S + a_L sigma_L) J* <= 0 at R = 1; its root is bracketed by
    fixed bisection halvings and finished by one secant step cut from differentiation (as ``pore_steady_state``).
    The margin is Pc*(R) - Pc (negative: already past it). When J* <= 0 (P_accel at or below the zero-lymph
    pressure) the steady state at P_accel is the lymph-free one, Pc* = P_accel. With ``P_imb`` the margin is the
    intact tissue's at Pc - P_imb (``balance.safety_margin``).

    Parameters
    ----------
    Kf, L : array
        Filtration coefficient and lymph conductance (mL/min/mmHg per basis).
    Pc, pi_c, Pi_L0, P_accel : array
        Capillary, plasma oncotic, zero-lymph pressures and the pressure at which oedema accelerates (mmHg).
    alpha_L : array
        Large pores' fraction of Kf (1).
    sigma_S, sigma_L, PS_S, PS_L : array
        Reflection coefficients (1) and PS (mL/min per basis) of the two pores.
    C_tis, C_high, P_break, JL_max, Cp, P_imb : array, optional
        As ``pore_steady_state``.
    xp : module
        numpy or pytensor.tensor.
    n_steps : int
        Bisection halvings of [0, 1].

    Returns
    -------
    array
        Pc* - Pc (mmHg).
    """
    J, _ = volume_lymph_flow(P_accel, L, Pi_L0, C_tis, C_high, P_break, JL_max, xp=xp)
    full = 0.0 * (Kf + Pc + pi_c + alpha_L + sigma_S + sigma_L + PS_S + PS_L + P_accel + J)
    flowing = J + full > 0
    Jpos = xp.where(flowing, J + full, 1.0 + full)  # a placeholder flow where none flows (result replaced below)
    given = dict(zip(_MARGIN_NAMES, (Kf, pi_c, alpha_L, sigma_S, sigma_L, PS_S, PS_L, P_accel, Jpos, Cp),
                     strict=True))
    present = [k for k in _MARGIN_NAMES if given[k] is not None]

    def params(vals: tuple[Array, ...]) -> dict[str, Any]:
        p: dict[str, Any] = dict.fromkeys(_MARGIN_NAMES)
        p.update(zip(present, vals, strict=True))
        return p

    def step(_i: Array, lo: Array, hi: Array, *vals: Array) -> tuple[Array, Array]:
        mid = 0.5 * (lo + hi)
        h, _ = _margin_residual(mid, params(vals), xp)
        pos = h > 0
        return xp.where(pos, mid, lo), xp.where(pos, hi, mid)

    lo, hi = fixed_steps(step, (full, 1.0 + full), n_steps, 1.0, xp, params=tuple(given[k] + full for k in present))
    lo = stop_gradient(lo, xp)
    hi = stop_gradient(hi, xp)
    p = params(tuple(given[k] for k in present))
    h_lo, _ = _margin_residual(lo, p, xp)
    h_hi, _ = _margin_residual(hi, p, xp)
    den = h_lo - h_hi
    bracketed = (h_lo > 0) & (h_hi < 0) & (den > 0)
    R = xp.where(bracketed, lo + h_lo * (hi - lo) / xp.where(bracketed, den, 1.0), 0.5 * (lo + hi))
    _, Pc_star = _margin_residual(R, p, xp)
    shift = 0.0 if P_imb is None else P_imb
    return xp.where(flowing, Pc_star, P_accel + full) - (Pc - shift)


def two_pore_safety_margin(Kf: Array, Pc: Array, pi_c: Array, L: Array, Pi_L0: Array, alpha_L: Array, r_S: Array,
                           r_L: Array, P_accel: Array, *, C_tis: Array | None = None, C_high: Array | None = None,
                           P_break: Array | None = None, JL_max: Array | None = None, Cp: Array | None = None,
                           P_imb: Array | None = None, xp: Any = np, n_steps: int = MARGIN_STEPS) -> Array:
    """``pore_safety_margin`` with each pore's sigma and PS from its radius (``pore_properties``): the
    ``safety_margin`` output of the form ``two_pore``.

    Parameters
    ----------
    Kf, Pc, pi_c, L, Pi_L0, alpha_L, P_accel : array
        As ``pore_safety_margin`` (mL/min/mmHg per basis, mmHg, 1).
    r_S, r_L : array
        Small- and large-pore radii (nm).
    C_tis, C_high, P_break, JL_max, Cp, P_imb : array, optional
        As ``pore_steady_state``.
    xp : module
        numpy or pytensor.tensor.
    n_steps : int
        Bisection halvings.

    Returns
    -------
    array
        The safety margin (mmHg).
    """
    pores = pore_properties(Kf, alpha_L, r_S, r_L, xp=xp)
    return pore_safety_margin(Kf, Pc, pi_c, L, Pi_L0, alpha_L, pores["sigma_S"], pores["sigma_L"], pores["PS_S"],
                              pores["PS_L"], P_accel, C_tis=C_tis, C_high=C_high, P_break=P_break, JL_max=JL_max,
                              Cp=Cp, P_imb=P_imb, xp=xp, n_steps=n_steps)
