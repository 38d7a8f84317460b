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

from uncertainty.physiology.interstitium import overflow, volume_lymph_flow
from uncertainty.physiology.iteration import fixed_steps, is_pytensor, stop_gradient
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
    # Last step with the incoming iterate and the slope held constant for differentiation: its gradient is
    # the implicit-function gradient -F_theta / F_Jv, and the gradient graph stays the size of one residual
    # instead of n_steps steps and their slopes' second derivatives.
    x = stop_gradient(x, xp)
    f, d = _residual(x, Kf, Pc, sigma, PS, pi_c, L, Pi_L0, Cp, xp)
    x = x - f / stop_gradient(d, xp)
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


# --- steady state with the safety factors -------------------------------------------------------------

#: halvings of the bracket [Pi_L0, Pc] (tens of mmHg): about 1e-7 mmHg wide, where the one Newton step that
#: follows (quadratic convergence) lands on the root to about 1e-14 mmHg, as 48 halvings did (checked on
#: 200,000 random draws per variant: largest difference 1.4e-14 mmHg in Pi); fewer halvings make every
#: evaluation (numpy loop or PyTensor scan) cheaper
BISECTION_STEPS = 30


def _safety_outflow(Pi: Array, L: Array, Pi_L0: Array, tissue: tuple[Array | None, ...], xp: Any
                    ) -> tuple[Array, Array, Array, Array]:
    """Lymph JL, overflow (flooding) Jf and their slopes d/dPi at Pi (mL/min, mL/min/mmHg per basis).

    The overflow is counted from its (smoothing) value at Pi_L0, so that both flows are 0 there: the outflow
    vanishes at the low end of the bracket [Pi_L0, Pc] and the root stays inside it even when P_flood lies only
    a few smoothing widths above Pi_L0 (the softplus tail of ``interstitium.overflow`` is otherwise a small
    flow at pressures where no alveolus floods)."""
    C_tis, C_high, P_break, JL_max, G_flood, P_flood = tissue
    JL, dJL = volume_lymph_flow(Pi, L, Pi_L0, C_tis, C_high, P_break, JL_max, xp=xp)
    if G_flood is None or P_flood is None:
        zero = 0.0 * Pi
        return JL, zero, dJL, zero
    Jf, dJf = overflow(Pi, G_flood, P_flood, xp=xp)
    Jf0, _ = overflow(Pi_L0, G_flood, P_flood, xp=xp)
    return JL, Jf - Jf0, dJL, dJf


def _safety_residual(Pi: Array, Kf: Array, Pc: Array, sigma: Array, PS: Array, pi_c: Array, L: Array, Pi_L0: Array,
                     tissue: tuple[Array | None, ...], Cp: Array | None, xp: Any) -> tuple[Array, Array]:
    """G(Pi) = Starling filtration at Pi minus the outflow (lymph + overflow) at Pi, and dG/dPi."""
    JL, Jf, dJL, dJf = _safety_outflow(Pi, L, Pi_L0, tissue, xp)
    J = JL + Jf
    dJ = dJL + dJf
    R, dR = ratio_and_slope(J, sigma, PS, xp)
    pi_o, dpi_dR = oncotic_from_ratio(R, pi_c, Cp)
    g = Kf * ((Pc - Pi) - sigma * (pi_c - pi_o)) - J
    dg = Kf * (-1.0 + sigma * dpi_dR * dR * dJ) - dJ
    return g, dg


def safety_steady_state(Kf: Array, Pc: Array, sigma: Array, PS: Array, pi_c: Array, L: Array, Pi_L0: Array, *,
                        C_tis: Array | None = None, C_high: Array | None = None, P_break: Array | None = None,
                        JL_max: Array | None = None, G_flood: Array | None = None, P_flood: Array | None = None,
                        PS_large: Array | None = None, revised: bool = False, Cp: Array | None = None,
                        P_imb: Array | None = None, xp: Any = np, n_steps: int = BISECTION_STEPS
                        ) -> dict[str, Array]:
    """Coupled steady state with the three safety factors against oedema (Guyton's; Aukland & Reed 1993
    Physiol Rev 73:1, from memory): interstitial pressure (compliance low until a break, several-fold higher
    past it), lymph flow (driven by interstitial volume, saturating at JL_max) and protein washout (Patlak),
    and optionally an overflow path (alveolar flooding in the lung: G_flood above P_flood).

    Unknown Pi: filtration Kf [(Pc - Pi) - sigma (pi_c - pi_o)] equals the outflow J(Pi) = JL(Pi) + Jf(Pi)
    (``interstitium.volume_lymph_flow`` and ``interstitium.overflow``), with pi_o the oncotic pressure of the
    filtrate, Ci/Cp = R(J) (``solute.steady_state_ratio``). The residual falls monotonically in Pi, so the
    root is bracketed by [Pi_L0, Pc] and found by ``n_steps`` bisection halvings (a fixed count; on PyTensor one
    compiled node, ``safety_root_op``, or a ``pytensor.scan`` with the overflow path), then one Newton step whose
    incoming iterate is cut from differentiation (the PyTensor gradient is then the implicit-function gradient).
    Without C_high, P_break, JL_max and the overflow this is the state of ``steady_state`` (linear lymph line).
    When Pc <= Pi_L0 no lymph flows: Jv = 0, Pi = Pc, pi_i = pi_c (as ``steady_state``).

    Parameters
    ----------
    Kf, L : array
        Filtration coefficient and lymph conductance (mL/min/mmHg per basis).
    Pc, pi_c, Pi_L0 : array
        Capillary pressure, plasma oncotic pressure, zero-lymph pressure (mmHg).
    sigma, PS : array
        Reflection coefficient (1) and protein permeability-surface product (mL/min per basis).
    C_tis, C_high, P_break : array, optional
        Pressure-volume curve: compliances (mL/mmHg per basis) below and above the break P_break (mmHg).
    JL_max : array, optional
        Maximal lymph flow (mL/min per basis).
    G_flood, P_flood : array, optional
        Overflow conductance (mL/min/mmHg per basis) and the pressure at which it opens (mmHg).
    PS_large : array, optional
        With ``revised``: the diffusive large-pore route of ``revised_steady_state`` (mL/min per basis).
    revised : bool
        Glycocalyx reading (``revised_steady_state``): the filtrate's oncotic pressure is pi_g beneath the
        glycocalyx; pi_i follows from the large-pore mixing.
    Cp : array, optional
        Plasma protein (g/dL) for the Landis-Pappenheimer scaling of pi_i (``oncotic_from_ratio``).
    P_imb : array, optional
        Shift of the interstitial pressure-volume relation by an injury (mmHg, negative: a raised imbibition
        pressure of the matrix, ``interstitium.imbibition_pressure``): the injured interstitium holds at Pi the
        volume the intact one holds at Pi - P_imb, so the volume-driven outflow is J(Pi - P_imb). Because
        filtration depends on Pi only through Pc - Pi, the state is that of the intact tissue at Pc - P_imb,
        with Pi lowered by P_imb (:func:`shifted_state`).
    xp : module
        numpy or pytensor.tensor.
    n_steps : int
        Bisection halvings.

    Returns
    -------
    dict
        ``Jv`` (mL/min per basis, = JL + flooding), ``Pi``, ``pi_i`` (mmHg), ``ratio`` (Ci/Cp), ``JL`` (lymph),
        ``flooding`` (overflow, mL/min per basis; 0 without the overflow path), and with ``revised`` also
        ``pi_g`` and ``ratio_g``.
    """
    if P_imb is not None:
        return shifted_state(lambda Pc_v: safety_steady_state(
            Kf, Pc_v, sigma, PS, pi_c, L, Pi_L0, C_tis=C_tis, C_high=C_high, P_break=P_break, JL_max=JL_max,
            G_flood=G_flood, P_flood=P_flood, PS_large=PS_large, revised=revised, Cp=Cp, xp=xp, n_steps=n_steps),
            Pc, P_imb)
    tissue = (C_tis, C_high, P_break, JL_max, G_flood, P_flood)
    present = [i for i, a in enumerate(tissue) if a is not None]
    full = 0.0 * (Kf + Pc + sigma + PS + pi_c + L + Pi_L0)
    lo0 = Pi_L0 + full
    hi0 = xp.maximum(Pc + full, lo0)
    base = [Kf + full, Pc + full, sigma + full, PS + full, pi_c + full, L + full, Pi_L0 + full]
    extra = [tissue[i] + full for i in present]
    cp = [] if Cp is None else [Cp + full]

    def unpack(p: tuple[Array, ...]) -> tuple[list[Array], tuple[Array | None, ...], Array | None]:
        t: list[Array | None] = [None] * 6
        for k, i in enumerate(present):
            t[i] = p[7 + k]
        return list(p[:7]), tuple(t), (p[7 + len(present)] if Cp is not None else None)

    def step(_i: Array, lo: Array, hi: Array, *p: Array) -> tuple[Array, Array]:
        b, t, c = unpack(p)
        mid = 0.5 * (lo + hi)
        g, _ = _safety_residual(mid, b[0], b[1], b[2], b[3], b[4], b[5], b[6], t, c, xp)
        pos = g > 0
        return xp.where(pos, mid, lo), xp.where(pos, hi, mid)

    if is_pytensor(xp) and G_flood is None and P_flood is None:  # the halvings as one compiled node
        from uncertainty.physiology.safety_root_op import bracket_midpoint

        zero = 0.0 * full
        curve = C_tis is not None and C_high is not None and P_break is not None
        rows = [*base, *(tissue[i] + full if tissue[i] is not None else zero for i in range(4)),
                (Cp + full) if Cp is not None else zero]
        x = stop_gradient(bracket_midpoint(rows, n_steps, curve, JL_max is not None, Cp is not None), xp)
    else:
        lo, hi = fixed_steps(step, (lo0, hi0), n_steps, 1.0, xp, params=tuple(base + extra + cp))
        x = stop_gradient(0.5 * (lo + hi), xp)
    g, dg = _safety_residual(x, Kf, Pc, sigma, PS, pi_c, L, Pi_L0, tissue, Cp, xp)
    safe = stop_gradient(xp.where(dg < 0, dg, -1.0), xp)  # the slope, constant: the implicit-function gradient
    x = xp.maximum(x - g / safe, lo0)  # the root lies in [Pi_L0, Pc]: keep the Newton step there
    flowing = Pc - Pi_L0 + full > 0
    Pi = xp.where(flowing, x, Pc + full)
    JL, Jf, _, _ = _safety_outflow(Pi, L, Pi_L0, tissue, xp)
    JL = xp.where(flowing, JL, full)
    Jf = xp.where(flowing, Jf, full)
    Jv = JL + Jf
    R = steady_state_ratio(Jv, sigma, PS, xp)
    pi_f, _ = oncotic_from_ratio(R, pi_c, Cp)
    out = {"Jv": Jv, "Pi": Pi, "JL": JL, "flooding": Jf}
    if not revised:
        out.update({"pi_i": pi_f, "ratio": R})
        return out
    J = xp.maximum(Jv, 0.0)
    PSl = 0.0 if PS_large is None else PS_large
    den = J + PSl
    Ri = 1.0 - J * (1.0 - R) / xp.where(den > 0, den, 1.0)
    pi_i, _ = oncotic_from_ratio(Ri, pi_c, Cp)
    out.update({"pi_i": pi_i, "ratio": Ri, "pi_g": pi_f, "ratio_g": R})
    return out


def shifted_state(solve: Any, Pc: Array, P_imb: Array) -> dict[str, Array]:
    """A steady state of a tissue whose interstitial pressure-volume relation is shifted by P_imb (mmHg).

    The shifted interstitium holds at Pi the volume the intact one holds at Pi' = Pi - P_imb, and every outflow
    (lymph, overflow) follows the volume, so it is J(Pi'). Filtration Kf [(Pc - Pi) - sigma (...)] equals
    Kf [((Pc - P_imb) - Pi') - sigma (...)], so the state in Pi' is the intact tissue's state at the capillary
    pressure Pc - P_imb: the imbibition pressure adds -P_imb to the pressure that drives filtration, exactly.

    Parameters
    ----------
    solve : callable
        Pc (mmHg) -> the intact tissue's steady-state dict (``Pi`` in mmHg among its entries).
    Pc : array
        Capillary pressure (mmHg).
    P_imb : array
        Shift of the pressure-volume relation (mmHg; negative: raised imbibition pressure).

    Returns
    -------
    dict
        ``solve(Pc - P_imb)`` with ``Pi`` (mmHg) lowered by P_imb (the others are unchanged: the outflow, protein
        and oncotic pressures depend on the volume, not on the pressure that holds it). ``Pi_volume`` (mmHg) is
        the pressure at which the intact curve holds the same volume, for volumes read off it.
    """
    res = dict(solve(Pc - P_imb))
    res["Pi_volume"] = res["Pi"]
    res["Pi"] = res["Pi"] + P_imb
    return res


def safety_margin(Kf: Array, Pc: Array, sigma: Array, PS: Array, pi_c: Array, L: Array, Pi_L0: Array,
                  P_accel: Array, *, C_tis: Array | None = None, C_high: Array | None = None,
                  P_break: Array | None = None, JL_max: Array | None = None, Cp: Array | None = None,
                  P_imb: Array | None = None, xp: Any = np) -> Array:
    """Safety margin (mmHg): how far Pc can rise before oedema accelerates, i.e. before the steady Pi
    reaches P_accel (mmHg; the break of the pressure-volume curve, or in the lung the pressure at which
    the alveoli flood).

    At Pi = P_accel the outflow J* = JL(P_accel) (``interstitium.volume_lymph_flow``) and the filtrate
    ratio R(J*) are known, so the capillary pressure that holds the steady state there is, in closed form,
    Pc* = P_accel + sigma (pi_c - pi_o(R(J*))) + J*/Kf; the margin is Pc* - Pc (negative: already past it).
    P_accel is a point of the intact pressure-volume curve; with ``P_imb`` (the shift of an injured matrix, see
    ``safety_steady_state``) the injured tissue reaches that volume at P_accel + P_imb, which is the margin of the
    intact tissue at Pc - P_imb. Other arguments and units as ``safety_steady_state``.
    """
    J, _ = volume_lymph_flow(P_accel, L, Pi_L0, C_tis, C_high, P_break, JL_max, xp=xp)
    R = steady_state_ratio(J, sigma, PS, xp)
    pi_o, _ = oncotic_from_ratio(R, pi_c, Cp)
    shift = 0.0 if P_imb is None else P_imb
    return P_accel + sigma * (pi_c - pi_o) + J / Kf - (Pc - shift)
