"""Absorbing intestinal mucosa: epithelial fluid washes the interstitium, so capillaries can absorb for good.

In most tissues absorption is transient: fluid drawn into the capillaries leaves the interstitial
protein behind, pi_i rises and Pi falls until absorption stops; at steady state filtration persists
whenever Pc exceeds the pressure at which lymph flow stops (``balance``; Levick & Michel 2010,
Cardiovasc Res 87:198). In the absorbing intestinal mucosa the epithelium delivers protein-free fluid
J_epi (the absorbate from the gut lumen) into the interstitium. That fluid raises Pi and flushes
interstitial protein out through the lymph, so pi_i stays low and the villus capillaries can absorb
indefinitely (Levick & Michel 2010; Granger and co-workers' intestinal studies, from memory).

Steady state (unknown Jv, positive = filtration out of the capillary):
    JL   = Jv + J_epi                               (all interstitial inflow leaves as lymph)
    Pi   = Pi_L0 + JL / L                           (linear lymph relation, as ``balance``)
    Js   = JL Ci                                    (protein: capillary Patlak flux leaves with lymph)
    Jv   = Kf [(Pc - Pi) - sigma (pi_c - pi_i)]     (Starling)
The Patlak flux (``solute.protein_flux``) is linear in Cp and Ci, Js = alpha Cp - beta Ci, so
Ci/Cp = alpha / (JL + beta) in closed form, valid for either sign of Jv. With J_epi = 0 this is the
classic coupled steady state of ``balance.steady_state`` (same numbers), where no absorbing steady state
exists; with J_epi > 0 a steady state with Jv < 0 exists when the oncotic and hydrostatic forces allow.

Revised (glycocalyx) reading: while the capillary absorbs, the fluid entering the glycocalyx from the
tissue side is interstitial fluid, so the oncotic pressure beneath the glycocalyx equals pi_i (Levick &
Michel 2010; the space beneath the glycocalyx is then not washed by filtrate). The absorbing branch of the
``revised`` form is therefore this equation, and ``pi_g`` is returned equal to ``pi_i``. In an ordinary
tissue (J_epi = 0) the revised form (``balance.revised_steady_state``) gives filtration.

Solved by a fixed number of bisection steps on the bracket (-J_epi, Jv_hi] (JL >= 0 at the left end;
at the right end, Jv_hi = Kf (Pc - Pi_L0 - J_epi/L)/(1 + Kf/L), the residual is <= 0 because
Ci <= Cp), then one Newton step whose incoming iterate is cut from differentiation, so the PyTensor
gradient is the implicit-function gradient (the derivative in that step by a central difference).
If even JL = 0 leaves the residual negative (capillaries would take more than the epithelium delivers)
the state with no lymph flow is returned: Jv = -J_epi, Pi below Pi_L0 from Starling's equation (lymph
cannot run backwards), Ci = Cp e^-|Pe| (inward diffusion balancing the outward sweep), ``lymph_stopped`` 1.

Units: Kf and L in mL/min/mmHg per basis; Jv, J_epi, JL and PS in mL/min per basis; pressures mmHg;
Cp in g/dL; ratio Ci/Cp dimensionless.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.physiology.balance import oncotic_from_ratio
from uncertainty.physiology.iteration import fixed_steps, stop_gradient
from uncertainty.physiology.solute import protein_flux
from uncertainty.physiology.starling import filtration

Array = Any

DEFAULT_STEPS = 64  # bisection halvings: the bracket shrinks by 2^-64, below double precision


def washout_ratio(Jv: Array, J_epi: Array, sigma: Array, PS: Array, xp: Any = np) -> Array:
    """Interstitial to plasma protein ratio Ci/Cp (1) with lymph JL = Jv + J_epi washing the interstitium.

    From the Patlak flux (``solute.protein_flux``), linear in Cp and Ci: Js = alpha Cp - beta Ci, and the
    protein balance Js = JL Ci: Ci/Cp = alpha / (JL + beta). Jv, J_epi, PS in mL/min per basis; sigma (1).
    Needs JL > 0 or PS > 0 (pure diffusion with no lymph gives Ci = Cp e^-|Pe| for absorption).
    """
    alpha = protein_flux(Jv, sigma, PS, 1.0, 0.0, xp)
    beta = -protein_flux(Jv, sigma, PS, 0.0, 1.0, xp)
    JL = xp.maximum(Jv + J_epi, 0.0)
    return alpha / (JL + beta)


def _residual(Jv: Array, Kf: Array, Pc: Array, sigma: Array, PS: Array, pi_c: Array, L: Array,
              Pi_L0: Array, J_epi: Array, Cp: Array | None, xp: Any) -> Array:
    R = washout_ratio(Jv, J_epi, sigma, PS, xp)
    pi_i, _ = oncotic_from_ratio(R, pi_c, Cp)
    Pi = Pi_L0 + (Jv + J_epi) / L
    return filtration(Kf, Pc, Pi, pi_c, pi_i, sigma) - Jv


def absorbing_steady_state(Kf: Array, Pc: Array, sigma: Array, PS: Array, pi_c: Array, L: Array, Pi_L0: Array,
                           J_epi: Array, *, Cp: Array | None = None, xp: Any = np,
                           n_steps: int = DEFAULT_STEPS) -> dict[str, Array]:
    """Steady state of a tissue whose interstitium receives protein-free fluid J_epi (absorbing mucosa).

    Arguments as ``balance.steady_state`` (Kf, L in mL/min/mmHg per basis; PS in mL/min per basis;
    Pc, pi_c, Pi_L0 in mmHg; sigma (1); optional Cp in g/dL for the Landis-Pappenheimer scaling of pi_i)
    plus J_epi >= 0, epithelial fluid delivered to the interstitium (mL/min per basis).
    Returns dict ``Jv`` (negative: sustained absorption), ``Pi``, ``pi_i``, ``pi_g`` (= pi_i, see the
    module docstring), ``ratio`` (Ci/Cp), ``JL`` (lymph flow = Jv + J_epi), ``lymph_stopped`` (1.0 when
    the capillaries would absorb more than J_epi and the no-lymph state is returned, else 0.0).
    """
    gain = 1.0 + Kf / L
    lo0 = -J_epi + 0.0 * (Kf + Pc + sigma + PS + pi_c + L + Pi_L0)
    hi0 = xp.maximum(Kf * (Pc - Pi_L0 - J_epi / L) / gain, lo0)

    def F(x: Array) -> Array:
        return _residual(x, Kf, Pc, sigma, PS, pi_c, L, Pi_L0, J_epi, Cp, xp)

    full = 0.0 * lo0
    par = [Kf + full, Pc + full, sigma + full, PS + full, pi_c + full, L + full, Pi_L0 + full, J_epi + full]
    if Cp is not None:
        par.append(Cp + full)

    def step(_i: Array, lo: Array, hi: Array, *p: Array) -> tuple[Array, Array]:
        mid = 0.5 * (lo + hi)
        kf, pc, s, ps, pic, lc, pl0, je = p[:8]
        pos = _residual(mid, kf, pc, s, ps, pic, lc, pl0, je, p[8] if len(p) > 8 else None, xp) > 0
        return xp.where(pos, mid, lo), xp.where(pos, hi, mid)

    lo, hi = fixed_steps(step, (lo0, hi0), n_steps, 1.0, xp, params=tuple(par))
    x = stop_gradient(0.5 * (lo + hi), xp)
    stopped = F(lo0) <= 0
    # one Newton step for the gradient (value change is below the bracket width)
    width = hi0 - lo0
    d = 1e-6 * width + 1e-300
    slope = (F(x + d) - F(x - d)) / (2.0 * d)
    safe_slope = stop_gradient(xp.where(xp.abs(slope) > 0, slope, -1.0), xp)  # constant: -F_theta / F_x
    polished = x - F(x) / safe_slope
    interior = (width > 0) & ~stopped
    Jv = xp.where(interior, polished, xp.where(stopped, lo0, x))
    R = washout_ratio(Jv, J_epi, sigma, PS, xp)
    pi_i, _ = oncotic_from_ratio(R, pi_c, Cp)
    JL = Jv + J_epi
    # With lymph stopped, Pi sits below Pi_L0 where Starling's equation gives Jv = -J_epi.
    Pi_stopped = Pc - sigma * (pi_c - pi_i) - Jv / Kf
    Pi = xp.where(stopped, Pi_stopped, Pi_L0 + JL / L)
    return {"Jv": Jv, "Pi": Pi, "pi_i": pi_i, "pi_g": pi_i, "ratio": R, "JL": JL,
            "lymph_stopped": xp.where(stopped, 1.0, 0.0)}
