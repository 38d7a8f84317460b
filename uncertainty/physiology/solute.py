"""Protein transport across the capillary wall by convection plus diffusion (Patlak form).

Patlak, Goldstein & Hoffman (1963) solution of the Kedem-Katchalsky (1958) flux equation for a
membrane with reflection coefficient sigma and permeability-surface product PS:

    Pe = Jv (1 - sigma) / PS
    Js = Jv (1 - sigma) (Cp - Ci e^-Pe) / (1 - e^-Pe)
    steady state (Ci equal to the filtrate concentration Js/Jv):
    Ci/Cp = (1 - sigma) / (1 - sigma e^-Pe)

Units: Jv and PS in mL/min per basis (100 g by default), Cp and Ci in g/dL, Js in g/dL * mL/min per
basis (i.e. 10 mg/min per basis); sigma and Pe dimensionless.

All functions take ``xp`` (numpy or pytensor.tensor) and are written so that both the value and the
gradient stay finite at the limits (Pe -> 0, sigma -> 1, Jv <= 0): branches of ``xp.where`` are
fed "safe" arguments, so the unused branch never produces NaN or infinite gradients.
"""

from __future__ import annotations

from typing import Any

import numpy as np

Array = Any

_SMALL = 1e-8  # below this |Pe| the series 1 -/+ Pe/2 is exact to double precision (error Pe^2/12)


def _one_minus_exp_over(q: Array, xp: Any = np) -> Array:
    """E(q) = (1 - e^-q) / q for q >= 0, with E(0) = 1; safe values and gradients at q = 0."""
    small = q < _SMALL
    qs = xp.where(small, 1.0, q)
    return xp.where(small, 1.0 - 0.5 * q, -xp.expm1(-qs) / qs)


def peclet(Jv: Array, sigma: Array, PS: Array) -> Array:
    """Péclet number Pe = Jv (1 - sigma) / PS (dimensionless); Jv and PS in the same flow unit."""
    return Jv * (1.0 - sigma) / PS


def protein_flux(Jv: Array, sigma: Array, PS: Array, Cp: Array, Ci: Array, xp: Any = np) -> Array:
    """Protein flux Js = Jv (1 - sigma)(Cp - Ci e^-Pe)/(1 - e^-Pe) out of the capillary (Patlak 1963).

    Jv, PS in mL/min per basis, Cp, Ci in g/dL; Js in (g/dL)(mL/min) per basis. Valid for either sign
    of Jv: it is written as Js = PS B(|Pe|) (Cp - Ci e^-|Pe|) for Pe >= 0 and
    PS B(|Pe|) (Cp e^-|Pe| - Ci) for Pe < 0, with B(q) = q / (1 - e^-q), which never overflows and
    tends to PS (Cp - Ci) (pure diffusion) as Jv (1 - sigma) -> 0.
    """
    pe = peclet(Jv, sigma, PS)
    q = xp.abs(pe)
    decay = xp.exp(-q)
    bern = 1.0 / _one_minus_exp_over(q, xp)  # B(q) = q / (1 - e^-q) >= 1
    conc = xp.where(pe >= 0, Cp - Ci * decay, Cp * decay - Ci)
    return PS * bern * conc


def ratio_and_slope(Jv: Array, sigma: Array, PS: Array, xp: Any = np) -> tuple[Array, Array]:
    """Ci/Cp and d(Ci/Cp)/dJv (per mL/min per 100 g) together (shared work for the Newton steps of
    ``balance``)."""
    R = steady_state_ratio(Jv, sigma, PS, xp)
    pe = xp.maximum(Jv, 0.0) * (1.0 - sigma) / PS
    # d/dJv [1 + sigma (Jv/PS) E(Pe)] = sigma e^-Pe / PS, so dR/dJv = -R^2 sigma e^-Pe / PS (Jv > 0).
    slope = -R * R * sigma * xp.exp(-pe) / PS
    return R, xp.where(Jv > 0, slope, 0.0 * slope)


def steady_state_ratio(Jv: Array, sigma: Array, PS: Array, xp: Any = np) -> Array:
    """Steady-state interstitial (= filtrate, lymph) to plasma protein ratio Ci/Cp (dimensionless).

    (1 - sigma)/(1 - sigma e^-Pe), rewritten as 1 / (1 + sigma (Jv/PS) E(Pe)) with
    E(Pe) = (1 - e^-Pe)/Pe (expm1), which is exact and stable: sigma -> 1 gives PS/(PS + Jv),
    Jv -> 0 gives 1, sigma = 0 gives 1; for Jv > 0 the ratio lies in (0, 1].

    Jv <= 0 has no steady state (absorption carries no filtrate into the tissue). The function then
    returns 1.0, the diffusion-equilibrium limit reached as Jv -> 0+, so the result is continuous in
    Jv; this is done by evaluating the formula at max(Jv, 0), which keeps values and PyTensor
    gradients finite (the gradient with respect to Jv is 0 there). Jv and PS in the same flow unit.
    """
    J = xp.maximum(Jv, 0.0)
    pe = J * (1.0 - sigma) / PS
    return 1.0 / (1.0 + sigma * (J / PS) * _one_minus_exp_over(pe, xp))


def steady_state_ratio_slope(Jv: Array, sigma: Array, PS: Array, xp: Any = np) -> Array:
    """d(Ci/Cp)/dJv of ``steady_state_ratio`` (per mL/min per basis); 0 for Jv <= 0.

    Closed form: -R^2 sigma e^-Pe / PS, since d/dJv [1 + sigma (Jv/PS) E(Pe)] = sigma e^-Pe / PS.
    Used by the Newton steps of ``balance``.
    """
    return ratio_and_slope(Jv, sigma, PS, xp)[1]
