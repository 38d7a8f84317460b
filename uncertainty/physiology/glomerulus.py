"""Glomerular ultrafiltration along the capillary, with plasma protein concentrating as filtrate leaves.

Deen, Robertson & Brenner (1972, Am J Physiol 223:1178-1183) model of one "unitary" glomerular
capillary: with Q(x) the plasma flow at fractional distance x (0 afferent .. 1 efferent end),

    dQ/dx = -Kf [dP(x) - pi(C)]          (oncotic pressure in Bowman's space taken as 0)
    C Q = C_A Q_A                         (protein is retained: it does not cross the wall)

where dP = P_GC - P_T is the transcapillary hydraulic pressure difference (here constant or falling
linearly along the length), C the plasma protein concentration and pi(C) its oncotic pressure
(default: the Landis & Pappenheimer total-protein relation of ``oncotic.pi_total_protein``). In the
normalised flow q = Q/Q_A:  dq/dx = -(Kf/Q_A) [dP(x) - pi(C_A/q)].

It is solved with the classical fourth-order Runge-Kutta method over a FIXED number of equal steps,
in plain arithmetic plus ``xp`` (numpy or pytensor.tensor), so the same code runs Monte Carlo and
PyMC. The equation becomes stiff only near filtration equilibrium at very large Kf/Q_A; the
``stiffness`` output (step length times the largest local decay rate met) must stay below
about 2.5 for RK4 to be stable (it is about 0.1-0.5 for rat and human values with 64 steps).

Filtration equilibrium: when the net pressure dP - pi falls to zero before the efferent end, the rest
of the capillary filters nothing, and GFR no longer depends on Kf: the data then bound Kf only from
below (Deen et al. 1972; Deen, Troy, Robertson & Brenner 1973, J Clin Invest 52:1500). With a
constant dP the solution depends on x only through (Kf/Q_A) x, so the smallest Kf that still reaches
equilibrium (within ``eq_tol``) exactly at the efferent end is Kf * x_equilibrium (``Kf_lower_bound``).

Units: Kf in flow per mmHg per glomerulus (e.g. nL/min/mmHg; 0.08 nL/(s mmHg) = 4.8 nL/min/mmHg) or
per kidney (mL/min/mmHg), Q_A in the same flow unit (nL/min or mL/min), pressures in mmHg, C in g/dL.
The equations are unchanged when Kf and Q_A are both scaled by the number of glomeruli, so a
whole-kidney Kf with the renal plasma flow gives whole-kidney GFR directly; ``n_glomeruli`` multiplies
single-nephron flows (GFR, Q_eff) when Kf and Q_A are per glomerulus.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

from uncertainty.physiology.iteration import fixed_steps
from uncertainty.physiology.oncotic import pi_total_protein

Array = Any

DEFAULT_STEPS = 64
#: Efferent net pressure (mmHg) below which filtration equilibrium counts as reached: about the
#: resolution of micropuncture pressure and oncotic-pressure readings (from memory).
DEFAULT_EQ_TOL = 1.0
_Q_FLOOR = 1e-3  # normalised flow floor inside the right-hand side (guards an unstable overshoot only)


def _net(q: Array, dP: Array, C_A: Array, oncotic: Callable[[Array], Array], xp: Any) -> Array:
    """Local net ultrafiltration pressure dP - pi(C_A/q), mmHg."""
    return dP - oncotic(C_A / xp.maximum(q, _Q_FLOOR))


def _decay_rate(q: Array, a: Array, C_A: Array, oncotic: Callable[[Array], Array], xp: Any) -> Array:
    """|d(rhs)/dq| = a C pi'(C) / q at C = C_A/q: the local decay rate of the net pressure (per unit x).

    pi' by a central difference with relative step 1e-3 (a diagnostic only; exact for the quadratic part
    of a cubic relation, and large enough that rounding does not differ between back-ends).
    """
    qs = xp.maximum(q, _Q_FLOOR)
    C = C_A / qs
    eps = 1e-3
    c_dpi = (oncotic(C * (1.0 + eps)) - oncotic(C * (1.0 - eps))) / (2.0 * eps)  # = C pi'(C)
    return xp.abs(a * c_dpi / qs)


def _above_fraction(n0: Array, n1: Array, tol: float, xp: Any) -> Array:
    """Fraction of one step, linear in the net pressure from n0 to n1, where it exceeds ``tol``."""
    d = n0 - n1
    flat = xp.abs(d) < 1e-300
    safe = xp.where(flat, 1.0, d)
    falling = xp.minimum(xp.maximum((n0 - tol) / safe, 0.0), 1.0)
    rising = 1.0 - xp.minimum(xp.maximum((tol - n0) / xp.where(flat, -1.0, -safe), 0.0), 1.0)
    sloped = xp.where(d > 0, falling, rising)
    return xp.where(flat, xp.where(n0 > tol, 1.0, 0.0), sloped)


def glomerular_filtration(Kf: Array, dP: Array, Q_A: Array, C_A: Array, dP_eff: Array | None = None,
                          *, n_glomeruli: Array = 1.0, oncotic: Callable[[Array], Array] = pi_total_protein,
                          n_steps: int = DEFAULT_STEPS, eq_tol: float = DEFAULT_EQ_TOL,
                          xp: Any = np) -> dict[str, Array]:
    """Filtration along a glomerular capillary (Deen, Robertson & Brenner 1972), fixed-step RK4.

    Parameters (arrays broadcast):
      Kf: ultrafiltration coefficient, flow/mmHg (per glomerulus, or per kidney with Q_A = RPF).
      dP: transcapillary hydraulic pressure difference P_GC - P_T at the afferent end, mmHg.
      Q_A: afferent plasma flow, same flow unit as Kf * mmHg.
      C_A: afferent (systemic) plasma protein concentration, g/dL.
      dP_eff: dP at the efferent end (mmHg), linear fall along the length; None = constant dP.
      n_glomeruli: multiplies GFR and Q_eff (1 when Kf and Q_A are already whole-kidney values).
      oncotic: pi(C), g/dL -> mmHg, written in plain arithmetic (default Landis & Pappenheimer total).
      n_steps: fixed number of RK4 steps; eq_tol: efferent net pressure (mmHg) counted as equilibrium.

    Returns a dict of arrays:
      GFR (flow, times n_glomeruli), FF (filtration fraction GFR/Q_A, 1), Q_eff (efferent plasma flow),
      C_eff (g/dL), pi_aff, pi_eff, net_pressure_aff, net_pressure_eff, mean_net_pressure
      (= single-capillary GFR / Kf), all mmHg; x_equilibrium (fraction of the length filtering with net
      pressure above eq_tol; 1 when equilibrium is not reached), equilibrium (1.0 reached, 0.0 not),
      Kf_lower_bound (Kf x_equilibrium: the smallest Kf consistent with the same GFR when equilibrium
      is reached, exact for constant dP up to the linear interpolation of the crossing within a step;
      equal to Kf otherwise), stiffness (RK4 step times the local decay rate of the net pressure at the
      smallest flow met at any stage, where it is largest; RK4 is stable below about 2.5: above it, raise n_steps),
      no_filtration (1.0 where the net pressure is nowhere above zero, so GFR = 0, else 0.0). Where the
      local net pressure dP - pi is negative the flux is zero (the net pressure is clipped at 0): the
      wall does not return filtrate from Bowman's space, so GFR >= 0 always.
    """
    h = 1.0 / n_steps
    a = Kf / Q_A
    dP1 = dP if dP_eff is None else dP_eff
    slope = dP1 - dP  # linear fall of dP along x


    q = 1.0 + 0.0 * (a + dP + dP1 + C_A)  # full broadcast shape
    n_prev = _net(q, dP, C_A, oncotic, xp)
    net_aff = n_prev

    def step(x0: Array, q: Array, n_prev: Array, x_eq: Array, q_min: Array, a: Array, dP: Array, slope: Array,
             C_A: Array) -> tuple[Array, ...]:
        def rhs(x: Array, q: Array) -> Array:
            # no filtration where the net pressure is negative: the glomerular wall does not reabsorb
            # filtrate from Bowman's space (zero, not negative, flow; exact clip, so numpy == PyTensor)
            return -a * xp.maximum(_net(q, dP + slope * x, C_A, oncotic, xp), 0.0)

        k1 = rhs(x0, q)
        k2 = rhs(x0 + 0.5 * h, q + 0.5 * h * k1)
        k3 = rhs(x0 + 0.5 * h, q + 0.5 * h * k2)
        k4 = rhs(x0 + h, q + h * k3)
        q_min = xp.minimum(q_min, xp.minimum(q + 0.5 * h * xp.minimum(k1, k2), q + h * k3))
        q = q + (h / 6.0) * (k1 + 2.0 * k2 + 2.0 * k3 + k4)
        q_min = xp.minimum(q_min, q)
        n_next = _net(q, dP + slope * (x0 + h), C_A, oncotic, xp)
        x_eq = x_eq + h * _above_fraction(n_prev, n_next, eq_tol, xp)
        return q, n_next, x_eq, q_min

    # q_min: smallest flow met at any stage, where the decay rate a C pi'(C)/q is largest
    q, n_prev, x_eq, q_min = fixed_steps(step, (q, n_prev, 0.0 * q, q), n_steps, h, xp,
                                         params=(a + 0.0 * q, dP + 0.0 * q, slope + 0.0 * q, C_A + 0.0 * q))
    net_eff = n_prev
    C_eff = C_A / xp.maximum(q, _Q_FLOOR)
    ff = 1.0 - q
    reached = xp.where(net_eff <= eq_tol, 1.0, 0.0)
    none = xp.where(ff <= 0.0, 1.0, 0.0)  # the net pressure is nowhere positive: nothing filters
    stiffness = h * _decay_rate(q_min, a, C_A, oncotic, xp)
    return {
        "GFR": n_glomeruli * Q_A * ff,
        "FF": ff,
        "Q_eff": n_glomeruli * Q_A * q,
        "C_eff": C_eff,
        "pi_aff": oncotic(C_A) + 0.0 * q,
        "pi_eff": oncotic(C_eff),
        "net_pressure_aff": net_aff,
        "net_pressure_eff": net_eff,
        "mean_net_pressure": Q_A * ff / Kf,
        "x_equilibrium": x_eq,
        "equilibrium": reached,
        "Kf_lower_bound": xp.where(reached > 0.5, Kf * x_eq, Kf + 0.0 * q),
        "stiffness": stiffness,
        "no_filtration": none,
    }


def efferent_protein(C_A: Array, FF: Array) -> Array:
    """Efferent plasma protein (g/dL) from afferent protein C_A (g/dL) and filtration fraction FF (1).

    Protein conservation with a protein-free filtrate: C_eff = C_A / (1 - FF).
    """
    return C_A / (1.0 - FF)


def filtration_fraction(GFR: Array, RPF: Array) -> Array:
    """Filtration fraction GFR / RPF (dimensionless); GFR and RPF (renal plasma flow) in one flow unit."""
    return GFR / RPF


#: Share of draws at filtration equilibrium from which analyses add the "Kf bounded below" note to their
#: results (our choice: a material share, 5%).
MATERIAL_SHARE = 0.05


def equilibrium_note(result: dict[str, Array], Kf_unit: str = "", min_share: float = 0.0) -> str | None:
    """Plain-language note when filtration equilibrium is reached in some or all evaluations (numpy only).

    ``result`` is the dict of ``glomerular_filtration`` (or model outputs with ``equilibrium``,
    ``x_equilibrium``, ``Kf_lower_bound`` and optionally ``no_filtration``). Evaluations with no filtration
    at all count apart (their share is stated; there the data say nothing about Kf). Returns None when the
    share reaching equilibrium while filtering is at most ``min_share`` (1) and nothing fails to filter.
    """
    reached = np.asarray(result["equilibrium"], dtype=float).ravel()
    none = np.asarray(result.get("no_filtration", np.zeros_like(reached)), dtype=float).ravel()
    none = np.broadcast_to(none, reached.shape)
    ok = np.isfinite(reached)
    n = int(ok.sum())
    if n == 0:
        return None
    filtering = ok & (none < 0.5)
    eq = filtering & (reached > 0.5)
    share = float(eq.sum()) / n
    share_none = float((ok & (none > 0.5)).sum()) / n
    parts = []
    if share > min_share and eq.any():
        bound = np.broadcast_to(np.asarray(result["Kf_lower_bound"], dtype=float).ravel(), reached.shape)[eq]
        x_eq = np.broadcast_to(np.asarray(result["x_equilibrium"], dtype=float).ravel(), reached.shape)[eq]
        unit = f" {Kf_unit}" if Kf_unit else ""
        parts.append(f"filtration equilibrium is reached before the efferent end in {100 * share:.0f}% of "
                     f"evaluations (median position {np.median(x_eq):.2f} of the capillary length): there GFR "
                     f"does not depend on Kf, so observations bound Kf only from below (median lower bound "
                     f"{np.median(bound):.3g}{unit})")
    if share_none > 0:
        parts.append(f"in {100 * share_none:.2g}% of evaluations the afferent oncotic pressure is at or above "
                     "P_GC - P_Bowman, so nothing filters (GFR = 0; the net pressure is clipped at zero, not "
                     "reversed)")
    return "; ".join(parts) if parts else None
