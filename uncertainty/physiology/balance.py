"""Coupled steady state of filtration, lymph drainage and interstitial protein (model forms
``steady_state`` and ``revised`` of DESIGN.md).

Classic steady state (one exchange pathway, sigma and PS):
    Jv   = Kf [(Pc - Pi) - sigma (pi_c - pi_i)]            (Starling)
    JL   = L (Pi - Pi_L0) = Jv                              (lymph balance, linear lymph relation)
    Ci/Cp = R(Jv) = (1 - sigma)/(1 - sigma e^-Pe)           (Patlak steady state, ``solute``)
    pi_i = pi_c R                                           (proportional scaling, see below)

Eliminating Pi = Pi_L0 + Jv/L leaves one equation in Jv,
    F(Jv) = Kf [(Pc - Pi_L0 - Jv/L) - sigma (pi_c - pi_i(Jv))] - Jv = 0,
whose slope F' <= -(1 + Kf/L) < 0 (pi_i falls as Jv rises), so the root is unique and lies at or
below hi = Kf (Pc - Pi_L0)/(1 + Kf/L) (the root if pi_i stayed at pi_c). Because R = 1 for
Jv <= 0 (no steady state of absorption), F(Jv) = Kf (Pc - Pi_L0 - Jv/L) - Jv > 0 for all Jv <= 0 when
Pc > Pi_L0: **filtration stays positive at steady state** whenever capillary pressure exceeds the
pressure at which lymph flow stops, whatever the oncotic pressures (Levick & Michel 2010,
Cardiovasc Res 87:198). When Pc <= Pi_L0 lymph cannot flow backwards (one-way valves): the steady
state is then Jv = JL = 0 with Pi = Pc and pi_i = pi_c (no filtration, no lymph), which joins the
filtering branch continuously at Pc = Pi_L0 (there Jv = 0 and Pi_L0 + Jv/L = Pc).

The root is found with a fixed number of Newton steps started at a point left of the root (F is
convex for Jv > 0, so the steps rise monotonically to the root; see ``_solve_jv``), the derivative in
closed form in the same arithmetic. No data-dependent loop: the same code runs on numpy and traces and
differentiates in PyTensor. The last step is differentiated with its incoming iterate held fixed, so
the PyTensor gradient is the implicit-function gradient -F_theta/F_Jv at the solution and its graph is
one step long.

Oncotic pressure versus concentration: by default pi_i = pi_c Ci/Cp, an approximation (oncotic
pressure rises more steeply than linearly with concentration, so this overstates pi_i). Passing the
plasma protein concentration ``Cp`` (g/dL) instead scales through the Landis-Pappenheimer total-protein
polynomial: pi_i = pi_c * pi_tp(R Cp)/pi_tp(Cp).

Revised form (glycocalyx as the filter; Levick & Michel 2010; Michel 1997 Exp Physiol 82:1):
the Starling forces act across the endothelial glycocalyx, so the oncotic pressure opposing filtration
is pi_g beneath the glycocalyx, not pi_i. The space beneath the glycocalyx is taken as washed by the
filtrate (no back-diffusion from the interstitium through the cleft exit; the limit of the 1-D model
at ordinary filtration rates), so Cg/Cp = R(Jv) across the glycocalyx. Jv therefore solves the same
equation as above with pi_g in place of pi_i, and does not depend on pi_i. The interstitium receives
protein from the filtrate and, optionally, by diffusion through a separate large-pore pathway
(PS_large; its fluid flow neglected): Jv Ci = Jv Cg + PS_large (Cp - Ci), so Ci >= Cg.

Units: Kf and L in mL/min/mmHg per basis; Jv, PS, PS_large in mL/min per basis; pressures in mmHg;
Cp in g/dL; ratios dimensionless.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.physiology.oncotic import pi_cubic, pi_cubic_slope
from uncertainty.physiology.solute import ratio_and_slope, steady_state_ratio

Array = Any

DEFAULT_STEPS = 12  # Newton steps: machine precision over wide ranges (ordinary tissues need about 6)


def oncotic_from_ratio(R: Array, pi_c: Array, Cp: Array | None) -> tuple[Array, Array]:
    """Oncotic pressure (mmHg) at concentration ratio R = C/Cp (1), and d pi / dR (mmHg).

    Proportional scaling pi = pi_c R when ``Cp`` is None; otherwise through the Landis-Pappenheimer
    total-protein cubic, pi = pi_c pi_tp(R Cp)/pi_tp(Cp), with Cp the plasma protein in g/dL.
    pi_c in mmHg. Plain arithmetic (numpy arrays or PyTensor tensors).
    """
    if Cp is None:
        return pi_c * R, pi_c + 0.0 * R
    scale = pi_c / pi_cubic(Cp, "total")
    return scale * pi_cubic(R * Cp, "total"), scale * Cp * pi_cubic_slope(R * Cp, "total")


def _stop_gradient(x: Array, xp: Any) -> Array:
    """x itself, cut from differentiation on PyTensor (identity on numpy)."""
    if getattr(xp, "__name__", "").startswith("pytensor"):
        from pytensor.gradient import disconnected_grad

        return disconnected_grad(x)
    return x


def _residual(x: Array, Kf: Array, Pc: Array, sigma: Array, PS: Array, pi_c: Array, L: Array,
              Pi_L0: Array, Cp: Array | None, xp: Any) -> tuple[Array, Array]:
    """F(Jv) of the module docstring and its derivative dF/dJv, in the same arithmetic."""
    R, dR = ratio_and_slope(x, sigma, PS, xp)
    pi_o, dpi_dR = oncotic_from_ratio(R, pi_c, Cp)
    f = Kf * ((Pc - Pi_L0 - x / L) - sigma * (pi_c - pi_o)) - x
    d = -(1.0 + Kf / L) + Kf * sigma * dpi_dR * dR
    return f, d


def _solve_jv(Kf: Array, Pc: Array, sigma: Array, PS: Array, pi_c: Array, L: Array, Pi_L0: Array,
              Cp: Array | None, xp: Any, n_steps: int) -> Array:
    """Root of F(Jv) (module docstring) by a fixed number of Newton steps started left of the root.

    For Jv > 0, F is decreasing and convex (Ci/Cp is convex in Jv, and so is the oncotic cubic), so
    a Newton step from any point lands at or left of the root, and Newton steps from the left rise
    monotonically to it (no overshoot, no safeguard needed). The start is the larger of two such
    points: the Newton step from the upper bound hi, and the Newton step from 0+ (slope F'(0+)).
    When Pc <= Pi_L0 there is no filtering steady state; 0 is returned by a final ``where`` (the
    no-lymph state, module docstring).
    n_steps >= 2 evaluations of F are made (the start counts as one).
    """
    n_steps = max(int(n_steps), 2)
    gain = 1.0 + Kf / L
    drive = Kf * (Pc - Pi_L0)  # F(0): R = 1 and pi_o = pi_c at Jv = 0
    hi = drive / gain
    _, dpi_dR_1 = oncotic_from_ratio(1.0 + 0.0 * hi, pi_c, Cp)
    d0 = -gain - Kf * sigma * sigma * dpi_dR_1 / PS  # F'(0+)
    f_hi, d_hi = _residual(hi, Kf, Pc, sigma, PS, pi_c, L, Pi_L0, Cp, xp)
    x = xp.maximum(hi - f_hi / d_hi, -drive / d0)
    for _ in range(n_steps - 2):
        f, d = _residual(x, Kf, Pc, sigma, PS, pi_c, L, Pi_L0, Cp, xp)
        x = x - f / d
    # Last step with the incoming iterate held constant for differentiation: at convergence its
    # gradient is the implicit-function gradient -F_theta / F_Jv, and the gradient graph stays the size
    # of one step instead of n_steps.
    x = _stop_gradient(x, xp)
    f, d = _residual(x, Kf, Pc, sigma, PS, pi_c, L, Pi_L0, Cp, xp)
    x = x - f / d
    return xp.where(hi > 0, x, 0.0 * hi)


def steady_state(Kf: Array, Pc: Array, sigma: Array, PS: Array, pi_c: Array, L: Array, Pi_L0: Array,
                 *, Cp: Array | None = None, xp: Any = np, n_steps: int = DEFAULT_STEPS) -> dict[str, Array]:
    """Classic coupled steady state: returns dict ``Jv``, ``Pi``, ``pi_i``, ``ratio`` (Ci/Cp).

    Kf (mL/min/mmHg per basis), Pc (mmHg), sigma (1), PS (mL/min per basis), pi_c (mmHg),
    L (lymph conductance, mL/min/mmHg per basis), Pi_L0 (Pi at which lymph flow is zero, mmHg);
    optional Cp (g/dL) switches pi_i from proportional scaling to the Landis-Pappenheimer polynomial.
    Jv in mL/min per basis, Pi and pi_i in mmHg. At the solution Jv = L (Pi - Pi_L0) (fluid) and the
    Patlak flux equals Jv Ci (protein). Arrays broadcast; ``xp`` is numpy or pytensor.tensor.
    """
    Jv = _solve_jv(Kf, Pc, sigma, PS, pi_c, L, Pi_L0, Cp, xp, n_steps)
    R = steady_state_ratio(Jv, sigma, PS, xp)
    pi_i, _ = oncotic_from_ratio(R, pi_c, Cp)
    return {"Jv": Jv, "Pi": _steady_pi(Jv, Pc, L, Pi_L0, xp), "pi_i": pi_i, "ratio": R}


def _steady_pi(Jv: Array, Pc: Array, L: Array, Pi_L0: Array, xp: Any) -> Array:
    """Pi at steady state (mmHg): Pi_L0 + Jv/L while lymph flows; Pc in the no-lymph state (Pc <= Pi_L0)."""
    zero = 0.0 * Jv  # broadcasts plain-number pressures to Jv's type (a PyTensor condition needs a tensor)
    return xp.where(Pc - Pi_L0 + zero > 0, Pi_L0 + Jv / L, Pc + zero)


def revised_steady_state(Kf: Array, Pc: Array, sigma: Array, PS: Array, pi_c: Array, L: Array,
                         Pi_L0: Array, PS_large: Array = 0.0, *, Cp: Array | None = None, xp: Any = np,
                         n_steps: int = DEFAULT_STEPS) -> dict[str, Array]:
    """Revised (glycocalyx) steady state: dict ``Jv``, ``Pi``, ``pi_i``, ``pi_g``, ``ratio``, ``ratio_g``.

    Arguments and units as ``steady_state``; sigma and PS describe the glycocalyx filter, PS_large
    (mL/min per basis, default 0) a separate diffusive large-pore route to the interstitium.
    ``ratio`` is Ci/Cp (interstitial), ``ratio_g`` Cg/Cp (beneath the glycocalyx); pi_g is the
    oncotic pressure beneath the glycocalyx, pi_i the interstitial one (which does not affect Jv).
    With PS_large = 0 every number equals ``steady_state`` with pi_g = pi_i.
    """
    Jv = _solve_jv(Kf, Pc, sigma, PS, pi_c, L, Pi_L0, Cp, xp, n_steps)
    Rg = steady_state_ratio(Jv, sigma, PS, xp)
    J = xp.maximum(Jv, 0.0)
    den = J + PS_large
    safe = xp.where(den > 0, den, 1.0)
    Ri = 1.0 - J * (1.0 - Rg) / safe  # Jv Ci = Jv Cg + PS_large (Cp - Ci), solved for Ci/Cp
    pi_g, _ = oncotic_from_ratio(Rg, pi_c, Cp)
    pi_i, _ = oncotic_from_ratio(Ri, pi_c, Cp)
    return {"Jv": Jv, "Pi": _steady_pi(Jv, Pc, L, Pi_L0, xp), "pi_i": pi_i, "pi_g": pi_g, "ratio": Ri,
            "ratio_g": Rg}
