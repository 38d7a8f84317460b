"""The whole-body time course and its adjoint as compiled loops (numba), for inference.

Same equations and arithmetic as :func:`uncertainty.physiology.whole_body.simulate` (fixed classical fourth-order
Runge-Kutta steps, the right-hand side of ``_fluxes`` / ``_derivatives`` on the prepared constants of
``_Prepared``), written out per subject in scalar code so that a sampler's log density and its gradient cost one
pass forward and one backward through the steps, compiled once and cached on disk. The forward pass records the
terms of every right-hand side evaluation (the records below), so the backward pass only multiplies: for 20
subjects and 48 steps the reverse pass fell from 1.25 to 0.43 ms and the forward rose from 0.56 to 0.65 ms. The
gradient is the exact reverse-mode derivative of the discrete steps (hand-derived; checked against finite
differences and against the numpy course in the tests).

Layout (columns are subjects or draws, ``n`` of them):

- state ``(N_STATE, n)``, rows :data:`STATE` then per bed ``Pi``, ``Qi`` (the order of ``initial_state``);
- quantities ``(N_GLOBAL + N_BED x beds, n)``, rows :data:`GLOBAL` then per bed :data:`BED`, the constants of
  ``_Prepared`` (mL, mmHg, mL/min, mL/mmHg, g/dL, per whole bed);
- plan ``(n_steps, 5)``: per step the infusion (mL/min), infused protein (g/min), bleeding (mL/min of whole
  blood) and the renal terms (a, b) of ``renal_terms``;
- ``sat`` ``(beds,)``: whether a bed's lymph flow saturates (tanh);
- records ``(n, n_steps, 4, N_PLASMA_RECORD + N_BED_RECORD x beds)``: per subject, step and Runge-Kutta stage the
  terms of ``_plasma`` and of each ``_bed`` (what the reverse pass reads).
"""

from __future__ import annotations

from typing import Any

import numba
import numpy as np

from uncertainty.physiology.oncotic import COEFFICIENTS

#: Global rows of the quantities matrix (``_Prepared``): resting plasma and blood volume (mL), vascular
#: compliance times (1 + r) (mL/mmHg), crystalloid clearance constant (mL/min), basal urine (mL/min).
GLOBAL = ("Vp0", "Vb0", "vasc", "k_r", "u_basal")
#: Rows per bed (``_Prepared.beds``; whole bed): break pressure (mmHg), volume slopes vC, vS (mL/mmHg, mL) and
#: offset v0 (mL), resting volume Vi0 (mL), lymph drive terms lP, lS, l0 and scale lm, compliance step cS
#: (mL/mmHg), m Kf (mL/min/mmHg), Pc (mmHg), sigma (1), m PS (mL/min).
BED = ("Pb", "vC", "vS", "v0", "Vi0", "lP", "lS", "l0", "lm", "cS", "mKf", "Pc", "sigma", "mPS")
#: Whole-body state rows before the beds' (``initial_state``).
STATE = ("Vp", "Qp", "Vrbc", "U", "B")
N_GLOBAL, N_BED, N_STATE = len(GLOBAL), len(BED), len(STATE)
#: A right-hand side evaluation's record, what the reverse pass reads instead of evaluating it again: Vp and Vrbc
#: (mL), the nine terms of ``_plasma``, then per bed the nineteen terms of ``_bed``.
N_PLASMA_RECORD, N_BED_RECORD = 11, 19

_A1, _A2, _A3 = COEFFICIENTS["total"]
#: Series threshold of the Bernoulli factor (``whole_body._PE_SERIES``).
_PE_SERIES = 1e-4

#: LLVM's floating-point freedoms the kernels take: reassociation, fused multiply-add, reciprocals and the sign of
#: zero; not "no NaNs or infinities" (a bad draw's NaN must reach the log density) nor approximate functions. Our
#: measurement (20 subjects, 48 steps, idle 2-core machine): forward 0.69 -> 0.62 ms, reverse 0.46 -> 0.33 ms.
FASTMATH = {"reassoc", "contract", "arcp", "nsz"}
_jit = numba.njit(cache=True, fastmath=FASTMATH, error_model="numpy")
#: For the shared pieces of the right-hand side and its reverse pass: inlined where called (a call returning a
#: tuple of 19 numbers cost as much as the arithmetic).
_jit_inline = numba.njit(cache=True, fastmath=FASTMATH, error_model="numpy", inline="always")


def quantity_rows(prepared: Any) -> list[Any]:
    """The constants of ``whole_body._Prepared`` in the row order of the quantities matrix (:data:`GLOBAL`, then
    per bed :data:`BED`; numbers, numpy arrays or tensors over the draws, as prepared)."""
    return [getattr(prepared, k) for k in GLOBAL] + [b[k] for _, b in prepared.beds for k in BED]


@_jit_inline
def _plasma(s, q, r):  # noqa: ANN001, ANN202 (numba)
    """The whole-body terms at ``s`` (one subject): Cp (g/dL), pi_c (mmHg), dPc (mmHg), the dilution, the
    clearance constant, the unclipped urine flow (mL/min), the blood volume (mL), the haematocrit and the plasma
    bled (mL/min)."""
    Vp, Qp, Vrbc = s[0], s[1], s[2]
    Cp = 100.0 * Qp / Vp
    pic = Cp * (_A1 + Cp * (_A2 + Cp * _A3))
    dPc = (Vp + Vrbc - q[1]) / q[2]
    dil = (Vp - q[0]) / q[0]
    kk = q[3] * r[3] + r[4]
    tot = Vp + Vrbc
    hct = Vrbc / tot
    return Cp, pic, dPc, dil, kk, q[4] + kk * dil, tot, hct, r[2] * (1.0 - hct)


@_jit_inline
def _bed(s, q, b, sat, inv_w, Cp, pic, dPc):  # noqa: ANN001, ANN202 (numba)
    """The flows of bed ``b`` at ``s`` and the intermediate values the reverse pass reads (whole bed)."""
    o, k = N_GLOBAL + N_BED * b, N_STATE + 2 * b
    Pi, Qi = s[k], s[k + 1]
    x = (Pi - q[o]) * inv_w
    e = np.exp(-abs(x))
    rr = 1.0 / (1.0 + e)
    sp = max(x, 0.0) + np.log(1.0 + e)
    lg = rr if x >= 0 else e * rr
    den = q[o + 4] + (q[o + 1] * Pi + q[o + 2] * sp - q[o + 3])
    ci = Qi / den
    Ci = 100.0 * ci
    pii = Ci * (_A1 + Ci * (_A2 + Ci * _A3))
    sigma, mPS = q[o + 12], q[o + 13]
    net = (q[o + 11] + dPc - Pi) - sigma * (pic - pii)
    Jv = q[o + 10] * net
    u = q[o + 5] * Pi + q[o + 6] * sp - q[o + 7]
    th = np.tanh(u) if sat[b] else u
    JL = q[o + 8] * th
    pe = Jv * (1.0 - sigma) / mPS
    qq = abs(pe)
    decay = np.exp(-qq)
    bern = 1.0 + qq * (0.5 + qq / 12.0) if qq < _PE_SERIES else qq / (1.0 - decay)
    g = Cp - Ci * decay if pe >= 0 else Cp * decay - Ci
    Js = mPS * bern * g / 100.0
    C = q[o + 1] + q[o + 9] * lg
    return Pi, sp, lg, den, ci, Ci, pii, net, Jv, th, JL, pe, qq, decay, bern, g, Js, JL * ci, C


@_jit
def _rhs(s, q, r, sat, inv_w, d, rec):  # noqa: ANN001, ANN202 (numba)
    """d/dt of the state ``s`` (one subject) into ``d``, its terms into the record ``rec``; ``r``: the step's plan
    row."""
    Cp, pic, dPc, dil, kk, uraw, tot, hct, bp = _plasma(s, q, r)
    rec[0], rec[1], rec[2], rec[3], rec[4], rec[5], rec[6] = s[0], s[2], Cp, pic, dPc, dil, kk
    rec[7], rec[8], rec[9], rec[10] = uraw, tot, hct, bp
    urine = max(uraw, 0.0)
    dVp = r[0] - bp - (urine - q[4])
    dQp = r[1] - bp * Cp / 100.0
    for b in range(sat.shape[0]):
        k = N_STATE + 2 * b
        Pi, sp, lg, den, ci, Ci, pii, net, Jv, th, JL, pe, qq, decay, bern, g, Js, JLs, C = _bed(
            s, q, b, sat, inv_w, Cp, pic, dPc)
        o = N_PLASMA_RECORD + N_BED_RECORD * b
        rec[o], rec[o + 1], rec[o + 2], rec[o + 3], rec[o + 4], rec[o + 5], rec[o + 6] = Pi, sp, lg, den, ci, Ci, pii
        rec[o + 7], rec[o + 8], rec[o + 9], rec[o + 10], rec[o + 11], rec[o + 12] = net, Jv, th, JL, pe, qq
        rec[o + 13], rec[o + 14], rec[o + 15], rec[o + 16], rec[o + 17], rec[o + 18] = decay, bern, g, Js, JLs, C
        dVp = dVp - Jv + JL
        dQp = dQp - Js + JLs
        d[k] = (Jv - JL) / C
        d[k + 1] = Js - JLs
    d[0], d[1], d[2], d[3], d[4] = dVp, dQp, -r[2] * hct, urine, bp


@_jit
def _rhs_vjp(rec, q, r, sat, inv_w, gd, gs, gq):  # noqa: ANN001, ANN202, PLR0915 (numba)
    """Add gd . d(rhs)/d(s) to ``gs`` and gd . d(rhs)/d(q) to ``gq`` at the state whose record (:func:`_rhs`) is
    ``rec`` (one subject)."""
    Vp, Vrbc, Cp, pic, dPc, dil, kk, uraw, tot, _, bp = (rec[0], rec[1], rec[2], rec[3], rec[4], rec[5], rec[6],
                                                        rec[7], rec[8], rec[9], rec[10])
    gdVp, gdQp = gd[0], gd[1]
    gbp = gd[4] - gdVp - gdQp * Cp / 100.0
    gurine = gd[3] - gdVp
    gq[4] += gdVp  # u_basal in -(urine - u_basal)
    ghct = -r[2] * gd[2] - r[2] * gbp
    gCp = -gdQp * bp / 100.0
    gpic = 0.0
    gdPc = 0.0
    for b in range(sat.shape[0]):
        o, k = N_GLOBAL + N_BED * b, N_STATE + 2 * b
        f = N_PLASMA_RECORD + N_BED_RECORD * b
        Pi, sp, lg, den, ci, Ci, pii, net, Jv, th = (rec[f], rec[f + 1], rec[f + 2], rec[f + 3], rec[f + 4],
                                                     rec[f + 5], rec[f + 6], rec[f + 7], rec[f + 8], rec[f + 9])
        JL, pe, qq, decay, bern, g, C = (rec[f + 10], rec[f + 11], rec[f + 12], rec[f + 13], rec[f + 14],
                                         rec[f + 15], rec[f + 18])
        sigma, mPS, mKf = q[o + 12], q[o + 13], q[o + 10]
        dPi = (Jv - JL) / C
        # backward
        gdPi, gdQi = gd[k], gd[k + 1]
        gJs = gdQi - gdQp
        gJLs = gdQp - gdQi
        gJv = gdPi / C - gdVp
        gJL = gdVp - gdPi / C + gJLs * ci
        gC = -gdPi * dPi / C
        gq[o + 1] += gC
        gq[o + 9] += gC * lg
        glg = gC * q[o + 9]
        gci = gJLs * JL
        # Js = mPS bern g / 100
        gq[o + 13] += bern * g / 100.0 * gJs
        gbern = mPS * g / 100.0 * gJs
        gg = mPS * bern / 100.0 * gJs
        if pe >= 0:
            gCp += gg
            gCi = -decay * gg
            gdecay = -Ci * gg
        else:
            gCp += decay * gg
            gCi = -gg
            gdecay = Cp * gg
        if qq < _PE_SERIES:
            gqq = gbern * (0.5 + qq / 6.0)
        else:
            om = 1.0 - decay
            gqq = gbern / om
            gdecay += gbern * qq / (om * om)
        gqq -= decay * gdecay
        gpe = gqq if pe >= 0 else -gqq
        gJv += gpe * (1.0 - sigma) / mPS
        gq[o + 12] -= gpe * Jv / mPS
        gq[o + 13] -= gpe * pe / mPS
        # JL = lm th
        gq[o + 8] += gJL * th
        gu = gJL * q[o + 8] * ((1.0 - th * th) if sat[b] else 1.0)
        gq[o + 5] += gu * Pi
        gq[o + 6] += gu * sp
        gq[o + 7] -= gu
        gPi = gu * q[o + 5]
        gsp = gu * q[o + 6]
        # Jv = mKf net
        gq[o + 10] += gJv * net
        gnet = gJv * mKf
        gq[o + 11] += gnet
        gdPc += gnet
        gPi -= gnet
        gq[o + 12] -= gnet * (pic - pii)
        gpic -= gnet * sigma
        gCi += gnet * sigma * (_A1 + Ci * (2.0 * _A2 + Ci * 3.0 * _A3))
        gci += 100.0 * gCi
        # ci = Qi / den
        gs[k + 1] += gci / den
        gden = -gci * ci / den
        gq[o + 4] += gden
        gq[o + 1] += gden * Pi
        gPi += gden * q[o + 1]
        gq[o + 2] += gden * sp
        gsp += gden * q[o + 2]
        gq[o + 3] -= gden
        # sp and lg of x: d sp/dx = lg, d lg/dx = lg (1 - lg)
        gx = gsp * lg + glg * lg * (1.0 - lg)
        gPi += gx * inv_w
        gq[o] -= gx * inv_w
        gs[k] += gPi
    # urine = max(uraw, 0), uraw = u_basal + kk dil
    guraw = gurine if uraw > 0 else 0.0
    gq[4] += guraw
    gq[3] += guraw * dil * r[3]
    gdil = guraw * kk
    gVp = gdil / q[0]
    gq[0] -= gdil * Vp / (q[0] * q[0])
    # hct = Vrbc / (Vp + Vrbc)
    gVp -= ghct * Vrbc / (tot * tot)
    gVrbc = ghct * Vp / (tot * tot)
    # dPc = (Vp + Vrbc - Vb0) / vasc
    gdVb = gdPc / q[2]
    gq[2] -= gdPc * dPc / q[2]
    gVp += gdVb
    gVrbc += gdVb
    gq[1] -= gdVb
    # pic = cubic(Cp), Cp = 100 Qp / Vp
    gCp += gpic * (_A1 + Cp * (2.0 * _A2 + Cp * 3.0 * _A3))
    gs[1] += 100.0 * gCp / Vp
    gVp -= gCp * Cp / Vp
    gs[0] += gVp
    gs[2] += gVrbc


@_jit
def _rk4(s, q, r, dt, sat, inv_w, out, k1, k2, k3, k4, tmp, rec):  # noqa: ANN001, ANN202 (numba)
    """One Runge-Kutta step from ``s`` into ``out``; the four right-hand sides' records into ``rec`` (4, record
    length), which the reverse pass reads; the k's and ``tmp``: work arrays of the state's length."""
    ns = s.shape[0]
    h2 = 0.5 * dt
    _rhs(s, q, r, sat, inv_w, k1, rec[0])
    for i in range(ns):
        tmp[i] = s[i] + h2 * k1[i]
    _rhs(tmp, q, r, sat, inv_w, k2, rec[1])
    for i in range(ns):
        tmp[i] = s[i] + h2 * k2[i]
    _rhs(tmp, q, r, sat, inv_w, k3, rec[2])
    for i in range(ns):
        tmp[i] = s[i] + dt * k3[i]
    _rhs(tmp, q, r, sat, inv_w, k4, rec[3])
    h6 = dt / 6.0
    for i in range(ns):
        out[i] = s[i] + h6 * (k1[i] + 2.0 * k2[i] + 2.0 * k3[i] + k4[i])


@_jit
def _rk4_vjp(rec, q, r, dt, sat, inv_w, lam, gs, gq, w):  # noqa: ANN001, ANN202 (numba)
    """Cotangent of the step's start into ``gs`` (overwritten) and of ``q`` added to ``gq``, for the cotangent
    ``lam`` of its end; ``rec``: the step's four records (:func:`_rk4`); ``w``: work array (2, state length)."""
    ns = gs.shape[0]
    h2, h6 = 0.5 * dt, dt / 6.0
    lk, gx = w[0], w[1]
    for i in range(ns):
        gs[i] = lam[i]
        gx[i] = 0.0
        lk[i] = h6 * lam[i]
    _rhs_vjp(rec[3], q, r, sat, inv_w, lk, gx, gq)  # k4
    for i in range(ns):
        gs[i] += gx[i]
        lk[i] = 2.0 * h6 * lam[i] + dt * gx[i]
        gx[i] = 0.0
    _rhs_vjp(rec[2], q, r, sat, inv_w, lk, gx, gq)  # k3
    for i in range(ns):
        gs[i] += gx[i]
        lk[i] = 2.0 * h6 * lam[i] + h2 * gx[i]
        gx[i] = 0.0
    _rhs_vjp(rec[1], q, r, sat, inv_w, lk, gx, gq)  # k2
    for i in range(ns):
        gs[i] += gx[i]
        lk[i] = h6 * lam[i] + h2 * gx[i]
        gx[i] = 0.0
    _rhs_vjp(rec[0], q, r, sat, inv_w, lk, gx, gq)  # k1
    for i in range(ns):
        gs[i] += gx[i]


@_jit
def course(start: np.ndarray, quantities: np.ndarray, plan: np.ndarray, dt: float, sat: np.ndarray,
           inv_w: float) -> tuple[np.ndarray, np.ndarray]:
    """The state after every step (time 0 first) and the terms of each step's right-hand sides.

    Parameters
    ----------
    start : ndarray (state, n)
        Resting state (``initial_state``; mL, g, mmHg).
    quantities : ndarray (quantities, n)
        :data:`GLOBAL` and per bed :data:`BED` rows.
    plan : ndarray (n_steps, 5)
        Rates per step (module docstring).
    dt : float
        Step, min.
    sat : ndarray of bool (beds,)
        Saturating lymph per bed.
    inv_w : float
        1 / the break width of the tissue curve, 1/mmHg.

    Returns
    -------
    trajectory : ndarray (n_steps + 1, state, n)
    records : ndarray (n, n_steps, 4, 11 + 19 beds)
        Per subject and step the terms of the four right-hand sides (:data:`N_PLASMA_RECORD`), what
        :func:`course_vjp` reads instead of evaluating them again (its cost falls by about two thirds).
    """
    ns, n = start.shape
    n_steps = plan.shape[0]
    out = np.empty((n_steps + 1, ns, n))
    records = np.empty((n, n_steps, 4, N_PLASMA_RECORD + N_BED_RECORD * sat.shape[0]))
    traj = np.empty((n_steps + 1, ns))
    w = np.empty((5, ns))
    for j in range(n):
        q = quantities[:, j].copy()
        traj[0, :] = start[:, j]
        for i in range(n_steps):
            _rk4(traj[i], q, plan[i], dt, sat, inv_w, traj[i + 1], w[0], w[1], w[2], w[3], w[4], records[j, i])
        out[:, :, j] = traj
    return out, records


@_jit
def course_vjp(records: np.ndarray, quantities: np.ndarray, plan: np.ndarray, dt: float, sat: np.ndarray,
               inv_w: float, g_out: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Cotangents of the start and of ``quantities`` for the cotangent ``g_out`` of :func:`course`'s trajectory.

    Parameters
    ----------
    records : ndarray (n, n_steps, 4, record length)
        :func:`course`'s second output.
    quantities, plan, dt, sat, inv_w
        As :func:`course`.
    g_out : ndarray (n_steps + 1, state, n)
        d(objective)/d(trajectory).

    Returns
    -------
    tuple of ndarray
        d(objective)/d(start) (state, n) and d(objective)/d(quantities) (quantities, n).
    """
    n_steps = plan.shape[0]
    ns, n = g_out.shape[1], g_out.shape[2]
    g_start = np.empty((ns, n))
    g_q = np.zeros((quantities.shape[0], n))
    w = np.empty((2, ns))
    lam = np.empty(ns)
    gs = np.empty(ns)
    gq = np.empty(quantities.shape[0])
    for j in range(n):
        q = quantities[:, j].copy()
        lam[:] = g_out[n_steps, :, j]
        gq[:] = 0.0
        for i in range(n_steps - 1, -1, -1):
            _rk4_vjp(records[j, i], q, plan[i], dt, sat, inv_w, lam, gs, gq, w)
            lam[:] = gs
            lam += g_out[i, :, j]
        g_start[:, j] = lam
        g_q[:, j] = gq
    return g_start, g_q
