"""Interstitium and lymph: pressure-volume relation, lymph outflow, oedema, and limb volume after
venous-cuff steps (venous congestion plethysmography).

Pressure-volume relation (Aukland & Reed 1993, Physiol Rev 73:1; Guyton's curve, from memory):
interstitial volume V (excess over a reference state at Pi_ref) rises with Pi with compliance C_tis;
in the two-slope form compliance rises to C_high above a break pressure P_break (low compliance in
the normally hydrated, sub-atmospheric range, very high once the gel is expanded).

Lymph outflow JL = L (Pi - Pi_L0); with JL_max it saturates smoothly,
JL = JL_max tanh(L (Pi - Pi_L0) / JL_max) (same slope L at Pi_L0, approaching JL_max).

Venous-cuff protocol (one or several cumulative steps of cuff pressure at given times):
- venous pressure Pv = max(Pv0, T * P_cuff), with transmission T about 0.9 (Christ et al. 1997,
  J Physiol 503:463);
- capillary pressure change dPc = dPv / (1 + r) (from Pc = (r Pa + Pv)/(1 + r), ``capillary``);
- fast phase: venous volume approaches Cv (Pv - Pv0) with time constant tau_v (about 1 min);
- slow phase (linear interstitium): dVi/dt = Kf (dPc - dVi/C_tis) - L dVi/C_tis, oncotic pressures
  unchanged over the protocol; an exponential approach with time constant C_tis/(Kf + L) whose
  initial slope is Kf dPc and whose plateau is C_tis Kf dPc/(Kf + L).
  Limb volume change = venous + interstitial volume.
The linear case has a closed form (``volume_time_course``, xp arithmetic, usable in PyMC); the non-
linear case (two-slope compliance, saturating lymph) is integrated with scipy ``solve_ivp``
(``volume_time_course_ode``, numpy only). ``slow_phase_slope`` and ``kf_pvi_regression`` recover Kf and
the isovolumetric venous pressure Pvi from a curve (common practice of venous congestion
plethysmography: Gamble et al. 1993, J Physiol 464:407).

Units: pressures mmHg; volumes mL per basis (mL/100 mL tissue in limb plethysmography); C_tis and Cv
mL/mmHg per basis; Kf and L mL/min/mmHg per basis; JL, Jv mL/min per basis; times in minutes.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from uncertainty.core.errors import InputError
from uncertainty.physiology.capillary import mean_capillary_pressure

Array = Any

TRANSMISSION = 0.9  # cuff -> venous pressure, Christ et al. 1997 J Physiol 503:463 (from memory)
TAU_VENOUS_MIN = 1.0  # venous filling time constant, about 1 min (from memory)


# --- lymph -----------------------------------------------------------------------------------------

def lymph_flow(Pi: Array, L: Array, Pi_L0: Array, JL_max: Array | None = None, xp: Any = np) -> Array:
    """Lymph outflow (mL/min per basis) JL = L (Pi - Pi_L0); smooth saturation at JL_max if given.

    Pi and Pi_L0 in mmHg (Pi_L0: pressure at which lymph flow extrapolates to zero), L in
    mL/min/mmHg per basis. Saturating form JL_max tanh(L (Pi - Pi_L0)/JL_max): slope L at Pi_L0.
    The linear form is not clipped at zero below Pi_L0 (it is a local linearisation).
    """
    lin = L * (Pi - Pi_L0)
    if JL_max is None:
        return lin
    return JL_max * xp.tanh(lin / JL_max)


# --- pressure-volume ---------------------------------------------------------------------------------

def tissue_volume(Pi: Array, C_tis: Array, Pi_ref: Array, C_high: Array | None = None,
                  P_break: Array | None = None, xp: Any = np) -> Array:
    """Interstitial volume (mL per basis) above the reference state at Pi_ref, as a function of Pi.

    Linear: C_tis (Pi - Pi_ref). Two-slope (C_high and P_break given): compliance C_tis below P_break
    and C_high above it (piecewise linear, continuous). Pressures mmHg, compliances mL/mmHg per basis.
    """
    V = C_tis * (Pi - Pi_ref)
    if C_high is None or P_break is None:
        return V
    return V + (C_high - C_tis) * (xp.maximum(Pi - P_break, 0.0) - xp.maximum(Pi_ref - P_break, 0.0))


def interstitial_pressure(V: Array, C_tis: Array, Pi_ref: Array, C_high: Array | None = None,
                          P_break: Array | None = None, xp: Any = np) -> Array:
    """Interstitial pressure (mmHg) at excess volume V (mL per basis): the inverse of ``tissue_volume``."""
    if C_high is None or P_break is None:
        return Pi_ref + V / C_tis
    V_break = tissue_volume(P_break, C_tis, Pi_ref, C_high, P_break, xp)
    # Volume measured from the break point; below it slope 1/C_tis, above it 1/C_high.
    dV = V - V_break
    return P_break + xp.where(dV > 0, dV / C_high, dV / C_tis)


def oedema_volume(Pi: Array, Pi_ref: Array, C_tis: Array, C_high: Array | None = None,
                  P_break: Array | None = None, xp: Any = np) -> Array:
    """Steady-state oedema volume (mL per basis): interstitial volume at Pi above that at Pi_ref.

    Pi is the steady-state interstitial pressure (e.g. from ``balance.steady_state``), Pi_ref the
    reference (normally hydrated) pressure, both mmHg; compliance as ``tissue_volume``.
    """
    return tissue_volume(Pi, C_tis, Pi_ref, C_high, P_break, xp)


# --- smooth pressure-volume relation and volume-driven lymph (the safety factors) -------------------

BREAK_WIDTH = 0.5  # mmHg: the bend of the smooth two-slope curve spans about +/- 3 widths (from memory:
# Guyton's interstitial pressure-volume curves bend over 1-3 mmHg near atmospheric pressure, Guyton AC 1965
# Circ Res 16:452; a shape parameter, not a measured value)


def _softplus(x: Array, xp: Any) -> Array:
    """log(1 + e^x), written so that it cannot overflow (numpy and PyTensor)."""
    return xp.maximum(x, 0.0) + xp.log1p(xp.exp(-xp.abs(x)))


def _sigmoid(x: Array, xp: Any) -> Array:
    """1 / (1 + e^-x), the derivative of ``_softplus``, as (1 + tanh(x/2))/2 (no overflow, no branch, so
    plain numbers work on PyTensor too)."""
    return 0.5 * (1.0 + xp.tanh(0.5 * x))


def smooth_tissue_volume(Pi: Array, C_tis: Array, Pi_ref: Array, C_high: Array, P_break: Array,
                         width: Array = BREAK_WIDTH, xp: Any = np) -> Array:
    """Interstitial volume (mL per basis) above that at Pi_ref on a smooth two-slope pressure-volume curve.

    V(Pi) = C_tis (Pi - Pi_ref) + (C_high - C_tis) [s(Pi) - s(Pi_ref)], s(P) = width softplus((P - P_break)/width):
    compliance C_tis well below the break pressure P_break and C_high well above it, bending over a few
    ``width`` (the shape of Guyton's curves: low compliance in the normally hydrated, sub-atmospheric range,
    several-fold higher once the gel is expanded; Guyton AC 1965 Circ Res 16:452, Wiig H, Reed RK 1981 Acta
    Physiol Scand 113:297). Pressures and width in mmHg; compliances in mL/mmHg per basis. The sharp
    ``tissue_volume`` is the limit width -> 0.
    """
    s = width * (_softplus((Pi - P_break) / width, xp) - _softplus((Pi_ref - P_break) / width, xp))
    return C_tis * (Pi - Pi_ref) + (C_high - C_tis) * s


def tissue_compliance(Pi: Array, C_tis: Array, C_high: Array, P_break: Array, width: Array = BREAK_WIDTH,
                      xp: Any = np) -> Array:
    """Interstitial compliance dV/dPi (mL/mmHg per basis) of ``smooth_tissue_volume`` at Pi (mmHg):
    C_tis + (C_high - C_tis) / (1 + exp(-(Pi - P_break)/width))."""
    return C_tis + (C_high - C_tis) * _sigmoid((Pi - P_break) / width, xp)


def oedema_beyond_break(Pi: Array, C_tis: Array, C_high: Array, P_break: Array, width: Array = BREAK_WIDTH,
                        xp: Any = np) -> Array:
    """Oedema (mL per basis): the volume the interstitium holds at Pi beyond the break of its own
    pressure-volume curve, max(V(Pi) - V(P_break), 0) with V of ``smooth_tissue_volume``.

    Measured from each subject's own curve (the break marks the end of the normally hydrated, low-compliance
    range), not from a population reference Pi: a subject whose Pi lies below his break holds none.
    Pi, P_break, width in mmHg; compliances mL/mmHg per basis. Continuous; the slope jumps at the break
    from 0 to the compliance there.
    """
    V = smooth_tissue_volume(Pi, C_tis, P_break, C_high, P_break, width, xp)
    return xp.maximum(V, 0.0)


def imbibition_pressure(Pi0: Array, P_imb: Array) -> Array:
    """Interstitial pressure (mmHg) of an injured matrix that still holds its pre-injury volume.

    Parameters
    ----------
    Pi0 : array
        Interstitial pressure of the intact, normally hydrated tissue (mmHg): a point (V0, Pi0) of its
        pressure-volume curve.
    P_imb : array
        Shift of the pressure-volume relation by the injury (mmHg, negative: a raised imbibition pressure). The
        injured matrix holds at Pi the volume the intact one held at Pi - P_imb, V_inj(Pi) = V(Pi - P_imb), as
        when heat-denatured collagen and hyaluronan expand their gel (Lund T, Onarheim H, Wiig H, Reed RK 1989
        Am J Physiol 256:H940, abstract: excised rat skin, no filtration possible, Pif -1.5 to -33.3 mmHg after a
        10-s scald).

    Returns
    -------
    array
        Pi0 + P_imb (mmHg): the inverse of the shifted curve at the pre-injury volume V0, i.e. the pressure
        early after the injury, before filtration has had time to swell the tissue (the suction that drives
        the first hour's oedema). Plain arithmetic (numpy arrays or PyTensor tensors).
    """
    return Pi0 + P_imb


def volume_lymph_flow(Pi: Array, L: Array, Pi_L0: Array, C_tis: Array | None = None, C_high: Array | None = None,
                      P_break: Array | None = None, JL_max: Array | None = None, width: Array = BREAK_WIDTH,
                      xp: Any = np) -> tuple[Array, Array]:
    """Lymph flow (mL/min per basis) driven by interstitial volume, and its slope dJL/dPi (mL/min/mmHg per basis).

    The initial lymphatics fill as the interstitium swells (anchoring filaments open them; Aukland K, Reed RK
    1993 Physiol Rev 73:1, from memory), so lymph is taken to follow the volume above that at Pi_L0:
    u = (L / C_tis) [V(Pi) - V(Pi_L0)] with V of ``smooth_tissue_volume``; in the normally hydrated range
    u = L (Pi - Pi_L0), the linear lymph line. Past the break of the pressure-volume curve the same lymph rise
    costs C_tis/C_high as much pressure: the compliance and lymph safety factors act together. With JL_max the
    flow saturates, JL = JL_max tanh(u / JL_max) (the lymph pumps' capacity). Without C_high / P_break the
    linear pressure relation is used; without JL_max no cap. Pressures mmHg, L mL/min/mmHg per basis.
    """
    if C_high is None or P_break is None or C_tis is None:
        u = L * (Pi - Pi_L0)
        du = L + 0.0 * Pi
    else:
        u = (L / C_tis) * smooth_tissue_volume(Pi, C_tis, Pi_L0, C_high, P_break, width, xp)
        du = (L / C_tis) * tissue_compliance(Pi, C_tis, C_high, P_break, width, xp)
    if JL_max is None:
        return u, du
    t = xp.tanh(u / JL_max)
    return JL_max * t, du * (1.0 - t * t)


FLOOD_WIDTH = 0.1  # mmHg: the rounding of the alveolar flooding onset (a numerical shape parameter, not a measured
# value): with the curve's BREAK_WIDTH (0.5 mmHg) the flooding path's large conductance made its softplus tail flood
# the alveoli while Pi lay 1-2 mmHg below P_flood, i.e. some 5 mmHg of left atrial pressure below the threshold that
# Guyton & Lindsey 1959 (Circ Res 7:649, abstract) measured; 0.1 mmHg keeps the onset smooth (gradients) but sharp


def overflow(Pi: Array, G: Array, P_over: Array, width: Array = FLOOD_WIDTH, xp: Any = np) -> tuple[Array, Array]:
    """Flow (mL/min per basis) out of a full interstitium by a path that opens at P_over, and its slope.

    G width softplus((Pi - P_over)/width): about G (Pi - P_over) once Pi exceeds P_over by a few widths,
    negligible below it. In the lung this is alveolar flooding: when the interstitium is full the alveolar
    walls give way and further filtrate floods the air spaces (Staub NC 1974 Physiol Rev 54:678, from
    memory). G in mL/min/mmHg per basis, pressures in mmHg.
    """
    z = (Pi - P_over) / width
    return G * width * _softplus(z, xp), G * _sigmoid(z, xp)


# --- venous-cuff protocol ------------------------------------------------------------------------------

def venous_pressure(P_cuff: Array, Pv0: Array, transmission: Array = TRANSMISSION, xp: Any = np,
                    smooth: float | None = None) -> Array:
    """Venous pressure (mmHg) under a cuff at P_cuff: max(Pv0, transmission * P_cuff).

    With ``smooth`` (mmHg) the corner is rounded: Pv0 + smooth * softplus((T P_cuff - Pv0) / smooth),
    written as max(x, 0) + smooth * log1p(exp(-|x| / smooth)) so it cannot overflow; it lies above the
    sharp max by at most smooth * log 2 (at the corner) and by < 0.05 mmHg once |x| > 3 smooth. A
    numerical device for gradient-based sampling (continuous derivative at the corner), not physiology.
    """
    if smooth is None:
        return xp.maximum(Pv0, transmission * P_cuff)
    x = transmission * P_cuff - Pv0
    return Pv0 + xp.maximum(x, 0.0) + smooth * xp.log1p(xp.exp(-xp.abs(x) / smooth))


def _levels(cuff_pressures: Sequence[Array], Pv0: Array, transmission: Array, r: Array, xp: Any,
            smooth: float | None = None):
    """Increments of Pv and Pc at each step (relative to the previous level)."""
    dPv, dPc = [], []
    prev_v, prev_c = Pv0, mean_capillary_pressure(0.0, Pv0, r)  # Pa cancels in differences
    for P in cuff_pressures:
        Pv = venous_pressure(P, Pv0, transmission, xp, smooth)
        Pc = mean_capillary_pressure(0.0, Pv, r)
        dPv.append(Pv - prev_v)
        dPc.append(Pc - prev_c)
        prev_v, prev_c = Pv, Pc
    return dPv, dPc


def volume_time_course(t: Array, step_times: Sequence[float], cuff_pressures: Sequence[Array],
                       Kf: Array, C_tis: Array, L: Array, Cv: Array, *, Pv0: Array,
                       tau_v: Array = TAU_VENOUS_MIN, r: Array = 0.2, transmission: Array = TRANSMISSION,
                       xp: Any = np, parts: bool = False, smooth: float | None = None,
                       tau: Array | None = None) -> Array | dict[str, Array]:
    """Limb volume change (mL per basis) at times t (min) after cumulative venous-cuff steps; linear model.

    Steps: at ``step_times[k]`` (min) the cuff goes to ``cuff_pressures[k]`` (mmHg) and stays there
    until the next step (a step down deflates). Before the first step the cuff is at 0 and the limb
    at steady state (Pv = Pv0). Kf, L in mL/min/mmHg per basis, C_tis and Cv (venous compliance) in
    mL/mmHg per basis, tau_v (venous filling time constant) in min, r = Rv/Ra (default 0.2, from
    memory: resting muscle 0.1-0.3, Pappenheimer & Soto-Rivera 1948), transmission 0.9 (Christ et
    al. 1997). Superposition of each step's response:
        venous:        Cv dPv_k (1 - exp(-s/tau_v))
        interstitial:  dPc_k Kf tau (1 - exp(-s/tau)),  tau = C_tis/(Kf + L),   s = max(t - t_k, 0)
    Written in ``xp`` arithmetic (step times are constants; pressures and parameters may be tensors).
    With ``parts=True`` returns dict ``total``, ``venous``, ``filtration``. ``smooth`` (mmHg, default
    None = the sharp max) rounds the corner of Pv = max(Pv0, T P_cuff), see ``venous_pressure``.
    ``tau`` (min), when given, is the slow time constant itself and C_tis, L are not used: the
    solution depends on them only through it (inference samples it as one quantity). All arguments
    broadcast: t as a row (1, T) and per-subject values as a column (n, 1) give an (n, T) table,
    and a shared tau_v and tau then cost one exponential per time and step instead of per reading.
    """
    dPv, dPc = _levels(cuff_pressures, Pv0, transmission, r, xp, smooth)
    if tau is None:
        tau = C_tis / (Kf + L)
    ven = 0.0 * t
    fil = 0.0 * t
    for tk, dv, dc in zip(step_times, dPv, dPc, strict=True):
        s = xp.maximum(t - tk, 0.0)
        ven = ven + Cv * dv * (-xp.expm1(-s / tau_v))
        fil = fil + dc * Kf * tau * (-xp.expm1(-s / tau))
    total = ven + fil
    if parts:
        return {"total": total, "venous": ven, "filtration": fil}
    return total


def cuff_curve(t: Array, step_times: Sequence[float], cuff_pressures: Sequence[Array], Kf: Array,
               C_tis: Array, L: Array, Cv: Array, *, Pv_rest: Array, Pvi: Array,
               tau_v: Array = TAU_VENOUS_MIN, r: Array = 0.2, transmission: Array = TRANSMISSION,
               smooth: float | None = None, xp: Any = np, tau: Array | None = None) -> Array:
    """Limb volume change (mL per basis) at t (min) over cuff steps, with the veins and the
    filtration referred to different baselines.

    The veins fill with venous pressure above the resting venous pressure ``Pv_rest`` (mmHg);
    filtration responds only once venous pressure exceeds the isovolumetric venous pressure ``Pvi``
    (mmHg; Gamble et al. 1993, J Physiol 464:407). Both parts are ``volume_time_course``'s; units as
    there. This is the curve the ``volume_time_course`` observation fits.
    """
    common = dict(tau_v=tau_v, r=r, transmission=transmission, xp=xp, parts=True, smooth=smooth, tau=tau)
    ven = volume_time_course(t, step_times, cuff_pressures, Kf, C_tis, L, Cv, Pv0=Pv_rest, **common)
    fil = volume_time_course(t, step_times, cuff_pressures, Kf, C_tis, L, Cv, Pv0=Pvi, **common)
    return ven["venous"] + fil["filtration"]


def volume_time_course_ode(t: Array, step_times: Sequence[float], cuff_pressures: Sequence[float],
                           Kf: float, C_tis: float, L: float, Cv: float, *, Pv0: float,
                           tau_v: float = TAU_VENOUS_MIN, r: float = 0.2, transmission: float = TRANSMISSION,
                           Pi0: float = 0.0, Pi_L0: float | None = None, JL_max: float | None = None,
                           C_high: float | None = None, P_break: float | None = None,
                           parts: bool = False, rtol: float = 1e-10, atol: float = 1e-12
                           ) -> np.ndarray | dict[str, np.ndarray]:
    """Limb volume change (mL per basis) at times t (min) by numerical integration (scipy solve_ivp).

    Same protocol and units as ``volume_time_course``, with optional non-linear tissue: two-slope
    compliance (C_high above P_break, mmHg) and saturating lymph (JL_max, mL/min per basis). Pi0 is
    the baseline interstitial pressure (mmHg), Pi_L0 the lymph zero-flow pressure (default: Pi0 - 1,
    only matters with JL_max). At baseline filtration equals lymph flow (steady state); over the
    protocol dVi/dt = Kf (dPc - dPi) - (JL(Pi0 + dPi) - JL(Pi0)). Integrated piecewise between steps
    (the input jumps there). Numpy only.
    """
    from scipy.integrate import solve_ivp

    t = np.asarray(t, dtype=float)
    if Pi_L0 is None:
        Pi_L0 = Pi0 - 1.0
    dPv, dPc = _levels(list(cuff_pressures), Pv0, transmission, r, np)
    Pv_level = np.cumsum(dPv)  # Pv - Pv0 in each segment
    Pc_level = np.cumsum(dPc)
    JL0 = lymph_flow(Pi0, L, Pi_L0, JL_max)

    def rhs(_s, y, k):
        Vv, Vi = y
        Pi = interstitial_pressure(Vi, C_tis, Pi0, C_high, P_break)
        dVv = (Cv * Pv_level[k] - Vv) / tau_v
        dVi = Kf * (Pc_level[k] - (Pi - Pi0)) - (lymph_flow(Pi, L, Pi_L0, JL_max) - JL0)
        return [dVv, dVi]

    bounds = list(step_times) + [max(float(np.max(t)), float(step_times[-1]))]
    ven = np.zeros_like(t)
    fil = np.zeros_like(t)
    y = np.zeros(2)
    for k in range(len(step_times)):
        a, b = float(bounds[k]), float(bounds[k + 1])
        mask = (t >= a) & (t <= b) if k == len(step_times) - 1 else (t >= a) & (t < b)
        if b > a:
            sol = solve_ivp(rhs, (a, b), y, args=(k,), t_eval=t[mask], rtol=rtol, atol=atol,
                            method="LSODA", dense_output=False)
            if mask.any():
                ven[mask], fil[mask] = sol.y[0], sol.y[1]
            end = solve_ivp(rhs, (a, b), y, args=(k,), t_eval=[b], rtol=rtol, atol=atol, method="LSODA")
            y = end.y[:, -1]
    total = ven + fil
    if parts:
        return {"total": total, "venous": ven, "filtration": fil}
    return total


# --- analysis of a measured curve ----------------------------------------------------------------------

def slow_phase_slope(t: Array, V: Array, t_from: float, t_to: float, *, t_step: float | None = None,
                     tau_v: float | None = None, at_onset: bool = False) -> float:
    """Slow-phase slope dV/dt (mL/min per basis) of a limb-volume curve over [t_from, t_to] (min).

    Least-squares fit to the points in the window of V = a + b s (+ q s^2) (+ c exp(-s/tau_v)),
    s = t - t_step (t_step defaults to t_from). The exponential column (when ``tau_v`` is given)
    removes what remains of venous filling in the window. With ``at_onset`` the quadratic term is
    included and b is the slope extrapolated back to the step (s = 0), before interstitial pressure has
    risen; otherwise b is the window's mean slope (the conventional straight-line fit). Numpy only.
    """

    t = np.asarray(t, dtype=float)
    V = np.asarray(V, dtype=float)
    t0 = t_from if t_step is None else t_step
    m = (t >= t_from) & (t <= t_to)
    sw = t[m] - t0
    cols = [np.ones(m.sum()), sw]
    if at_onset:
        cols.append(sw**2)
    if tau_v is not None:
        cols.append(np.exp(-sw / tau_v))
    X = np.column_stack(cols)
    if m.sum() < X.shape[1] + 1:
        raise InputError("too few points in the slow-phase window", key="t_from", value=(t_from, t_to))
    coef, *_ = np.linalg.lstsq(X, V[m], rcond=None)
    return float(coef[1])


def kf_pvi_regression(cuff_pressures: Sequence[float], slopes: Sequence[float], *,
                      transmission: float = 1.0, r: float = 0.0) -> dict[str, float]:
    """Kf and the isovolumetric pressure from slow-phase slopes against cuff pressure (linear regression).

    slopes (mL/min per basis) = b (P_cuff - Pvi_cuff); ``slope_per_mmHg`` b in mL/min/mmHg per basis,
    ``Pvi_cuff`` the cuff pressure of zero filtration (the regression's x-intercept), ``Pvi`` the
    corresponding venous pressure transmission * Pvi_cuff, ``Kf`` = b (1 + r)/transmission (the wall
    property; with the defaults transmission = 1 and r = 0 it equals b, the conventional
    plethysmographic Kf that treats cuff pressure as capillary pressure change), plus standard errors
    ``Kf_se`` and ``Pvi_se`` (delta method) and the intercept. Numpy only; needs >= 2 steps.
    """
    P = np.asarray(cuff_pressures, dtype=float)
    y = np.asarray(slopes, dtype=float)
    n = P.size
    if n < 2 or np.ptp(P) == 0:
        raise InputError("need at least two different cuff pressures", key="cuff_pressures", value=list(P))
    X = np.column_stack([np.ones(n), P])
    coef, *_ = np.linalg.lstsq(X, y, rcond=None)
    a, b = coef
    dof = n - 2
    if dof > 0:
        s2 = float(np.sum((y - X @ coef) ** 2) / dof)
        cov = s2 * np.linalg.inv(X.T @ X)
    else:
        cov = np.full((2, 2), np.nan)
    Pvi_cuff = -a / b
    grad = np.array([-1.0 / b, a / b**2])  # d(-a/b)/d(a, b)
    Pvi_se = float(np.sqrt(grad @ cov @ grad)) if dof > 0 else float("nan")
    factor = (1.0 + r) / transmission
    return {
        "slope_per_mmHg": float(b),
        "intercept": float(a),
        "Kf": float(b * factor),
        "Kf_se": float(np.sqrt(cov[1, 1]) * factor) if dof > 0 else float("nan"),
        "Pvi_cuff": float(Pvi_cuff),
        "Pvi": float(transmission * Pvi_cuff),
        "Pvi_se": Pvi_se * transmission,
    }
