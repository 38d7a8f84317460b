"""Interstitium, lymph and venous-cuff time courses: closed forms, ODE agreement, Kf/Pvi recovery."""

import numpy as np
import pytest

from uncertainty.core.errors import InputError
from uncertainty.physiology import interstitium as it

# Human-limb-like values (from memory, order of magnitude; per 100 mL tissue): Kf 0.004
# mL/min/mmHg, lymph conductance 0.01 mL/min/mmHg, venous compliance 0.08 mL/mmHg, resting venous
# pressure 8 mmHg; interstitial compliance 1 mL/mmHg (normal hydration) or 10 (a stiffer test of the
# long-time-constant limit).
LIMB = dict(Kf=0.004, C_tis=1.0, L=0.01, Cv=0.08, Pv0=8.0)
STEPS, CUFFS = [0.0, 4.0, 8.0], [20.0, 40.0, 60.0]  # cumulative protocol, min and mmHg (invented)


def test_lymph_flow_linear_and_saturating():
    assert it.lymph_flow(2.0, 0.01, -1.0) == pytest.approx(0.03)
    # Smooth saturation: slope L at Pi_L0 (finite difference) and the plateau JL_max.
    h = 1e-6
    slope = (it.lymph_flow(-1.0 + h, 0.01, -1.0, 0.05) - it.lymph_flow(-1.0 - h, 0.01, -1.0, 0.05)) / (2 * h)
    assert slope == pytest.approx(0.01, rel=1e-8)
    assert it.lymph_flow(1e4, 0.01, -1.0, 0.05) == pytest.approx(0.05)
    assert it.lymph_flow(3.0, 0.01, -1.0, 0.05) < it.lymph_flow(3.0, 0.01, -1.0)


def test_pressure_volume_two_slope_and_inverse():
    Pi = np.linspace(-6, 10, 33)
    V = it.tissue_volume(Pi, 0.5, -2.0, C_high=10.0, P_break=1.0)
    # Closed form: slope 0.5 below the break, 10 above it, zero at the reference pressure.
    assert it.tissue_volume(-2.0, 0.5, -2.0, 10.0, 1.0) == 0.0
    assert it.tissue_volume(0.0, 0.5, -2.0, 10.0, 1.0) == pytest.approx(1.0)
    assert it.tissue_volume(3.0, 0.5, -2.0, 10.0, 1.0) == pytest.approx(0.5 * 3 + 10 * 2)
    np.testing.assert_allclose(it.interstitial_pressure(V, 0.5, -2.0, 10.0, 1.0), Pi, atol=1e-12)
    np.testing.assert_allclose(it.interstitial_pressure(it.tissue_volume(Pi, 0.5, -2.0), 0.5, -2.0), Pi)


def test_oedema_volume():
    # Linear compliance: C_tis (Pi - Pi_ref) (closed form).
    assert it.oedema_volume(1.0, -2.0, 0.6) == pytest.approx(1.8)
    # Above the break the steep limb dominates.
    assert it.oedema_volume(4.0, -2.0, 0.6, C_high=12.0, P_break=0.0) == pytest.approx(0.6 * 6 + 11.4 * 4)


def test_venous_pressure_transmission():
    # Christ et al. 1997 (J Physiol 503:463): venous pressure about 0.9 of cuff pressure.
    assert it.venous_pressure(40.0, 8.0) == pytest.approx(36.0)
    assert it.venous_pressure(5.0, 8.0) == 8.0  # cuff below venous pressure: no change


def test_analytic_and_ode_agree_linear():
    t = np.linspace(0, 14, 281)
    a = it.volume_time_course(t, STEPS, CUFFS, **LIMB, parts=True)
    b = it.volume_time_course_ode(t, STEPS, CUFFS, **LIMB, parts=True)
    for k in ("total", "venous", "filtration"):
        np.testing.assert_allclose(b[k], a[k], atol=1e-8, rtol=1e-7, err_msg=k)
    # Deflation step (cuff back to 0) is handled the same way.
    steps, cuffs = [0.0, 5.0], [40.0, 0.0]
    np.testing.assert_allclose(it.volume_time_course_ode(t, steps, cuffs, **LIMB),
                               it.volume_time_course(t, steps, cuffs, **LIMB), atol=1e-8)


def test_initial_slow_slope_is_kf_times_dpc():
    # Linear model (closed form): the filtration component starts at slope Kf * dPc, with
    # dPv = 0.9 * P_cuff - Pv0 (Christ et al. 1997) and dPc = dPv / (1 + r).
    r = 0.2
    dPc = (0.9 * 40.0 - 8.0) / (1 + r)
    h = 1e-6
    fil = it.volume_time_course(np.array([h]), [0.0], [40.0], **LIMB, r=r, parts=True)["filtration"][0]
    assert fil / h == pytest.approx(LIMB["Kf"] * dPc, rel=1e-6)
    # The slow-phase fit (window 1.5-6 min, venous tail and curvature fitted) recovers it from the
    # whole-limb curve.
    t = np.linspace(0, 6, 361)
    V = it.volume_time_course(t, [0.0], [40.0], **LIMB, r=r)
    slope = it.slow_phase_slope(t, V, 1.5, 6.0, t_step=0.0, tau_v=1.0, at_onset=True)
    # (the quadratic truncates the exponential decay, time constant 71 min: about 0.2% error here)
    assert slope == pytest.approx(LIMB["Kf"] * dPc, rel=5e-3)
    # The plain straight-line fit is biased upward by venous filling still under way at 1.5 min.
    assert it.slow_phase_slope(t, V, 1.5, 6.0) > 1.05 * LIMB["Kf"] * dPc


def test_plateau_closed_form_nonlinear():
    # Long-time plateau: Kf (dPc - dPi) = L dPi, so dPi = Kf dPc / (Kf + L) whatever the compliance
    # (closed form); with a two-slope curve the volume is tissue_volume(Pi0 + dPi).
    Pi0, P_break, C_high = -1.0, 0.0, 8.0
    t = np.array([0.0, 30000.0])  # >> the slowest time constant, C_high / (Kf + L) = 571 min
    out = it.volume_time_course_ode(t, [0.0], [40.0], **LIMB, Pi0=Pi0, C_high=C_high, P_break=P_break,
                                    parts=True)
    dPc = (0.9 * 40.0 - 8.0) / 1.2
    dPi = LIMB["Kf"] * dPc / (LIMB["Kf"] + LIMB["L"])
    expected = it.tissue_volume(Pi0 + dPi, LIMB["C_tis"], Pi0, C_high, P_break)
    assert out["filtration"][-1] == pytest.approx(expected, rel=1e-6)
    assert out["venous"][-1] == pytest.approx(LIMB["Cv"] * (0.9 * 40.0 - 8.0), rel=1e-8)


def test_saturating_lymph_raises_the_plateau():
    t = np.array([0.0, 3000.0])
    lin = it.volume_time_course_ode(t, [0.0], [60.0], **LIMB)[-1]
    sat = it.volume_time_course_ode(t, [0.0], [60.0], **LIMB, Pi0=0.0, Pi_L0=-2.0, JL_max=0.025)[-1]
    assert sat > lin


@pytest.mark.parametrize("C_tis,tol", [(10.0, 0.01), (1.0, 0.08)])
def test_cumulative_regression_recovers_kf_and_pvi(C_tis, tol):
    # Common practice of venous congestion plethysmography (Gamble et al. 1993, J Physiol 464:407):
    # slopes against cuff pressure give Kf (slope) and Pvi (x-intercept). In the linear model the
    # true isovolumetric venous pressure is Pv0 and the true Kf the wall's. The method is exact
    # when the interstitial time constant C_tis/(Kf + L) is long against the protocol (C_tis = 10:
    # 714 min); at 71 min (C_tis = 1) earlier steps' fluid raises Pi and lowers later slopes, an
    # underestimate of a few per cent (closed-form estimate (Kf + L) dVi / C_tis, about 5%).
    limb = dict(LIMB, C_tis=C_tis)
    t = np.linspace(0, 12, 721)
    V = it.volume_time_course(t, STEPS, CUFFS, **limb)
    slopes = [it.slow_phase_slope(t, V, tk + 1.5, tk + 4.0, t_step=tk, tau_v=1.0, at_onset=True)
              for tk in STEPS]
    fit = it.kf_pvi_regression(CUFFS, slopes, transmission=0.9, r=0.2)
    assert fit["Kf"] == pytest.approx(limb["Kf"], rel=tol)
    assert fit["Pvi"] == pytest.approx(limb["Pv0"], rel=1.3 * tol)
    assert fit["Kf"] <= limb["Kf"]
    assert fit["Pvi_cuff"] == pytest.approx(fit["Pvi"] / 0.9)


def test_regression_exact_on_exact_line_and_errors():
    fit = it.kf_pvi_regression([10, 20, 30, 40], [0.0, 0.04, 0.08, 0.12])
    assert fit["slope_per_mmHg"] == pytest.approx(0.004)
    assert fit["Pvi_cuff"] == pytest.approx(10.0)
    assert fit["Kf_se"] == pytest.approx(0.0, abs=1e-12)
    with pytest.raises(InputError):
        it.kf_pvi_regression([20, 20], [0.01, 0.02])
    with pytest.raises(InputError):
        it.slow_phase_slope(np.arange(3.0), np.arange(3.0), 0.0, 1.0, tau_v=1.0, at_onset=True)
def test_cuff_curve_is_venous_part_above_rest_plus_filtration_part_above_pvi():
    """cuff_curve against volume_time_course's two parts (and the ODE) for one invented subject."""
    t = np.linspace(0.0, 20.0, 81)
    at, cuffs = [0.0, 4.0, 8.0], [20.0, 30.0, 40.0]           # invented protocol
    kw = dict(tau_v=0.6, r=0.15, transmission=0.9)            # invented subject
    got = it.cuff_curve(t, at, cuffs, 0.004, 0.12, 0.0, 0.05, Pv_rest=8.0, Pvi=14.0, **kw)
    ven = it.volume_time_course(t, at, cuffs, 0.004, 0.12, 0.0, 0.05, Pv0=8.0, parts=True, **kw)
    fil = it.volume_time_course(t, at, cuffs, 0.004, 0.12, 0.0, 0.05, Pv0=14.0, parts=True, **kw)
    np.testing.assert_allclose(got, ven["venous"] + fil["filtration"], rtol=1e-12)
    # filtration starts only at the step whose venous pressure 0.9 x 20 = 18 mmHg exceeds Pvi = 14
    # mmHg: with Pvi at rest instead, more fluid filters (the ODE of the linear model agrees)
    ode = it.volume_time_course_ode(t, at, cuffs, 0.004, 0.12, 0.0, 0.05, Pv0=8.0, **kw)
    assert np.all(got[t > 1] < ode[t > 1])


def test_time_constant_given_directly_and_subject_by_time_table():
    """``tau`` given directly equals C_tis/(Kf + L); a (1, T) time row and (n, 1) subject columns give
    the (n, T) table whose rows are each subject's own curve."""
    t = np.linspace(0.0, 12.0, 49)
    at, cuffs = [0.0, 4.0, 8.0], [20.0, 30.0, 40.0]           # invented protocol
    kw = dict(tau_v=0.6, transmission=0.9)                     # invented subjects below
    kf, c_tis, lym = 0.004, 0.12, 0.001
    by_parts = it.volume_time_course(t, at, cuffs, kf, c_tis, lym, 0.05, Pv0=8.0, r=0.15, **kw)
    by_tau = it.volume_time_course(t, at, cuffs, kf, None, None, 0.05, Pv0=8.0, r=0.15, tau=c_tis / (kf + lym), **kw)
    np.testing.assert_allclose(by_tau, by_parts, rtol=1e-13)
    kfs, cvs = np.array([0.003, 0.004, 0.005]), np.array([0.04, 0.05, 0.06])
    pvis, rs = np.array([10.0, 14.0, 21.0]), np.array([0.1, 0.2, 0.3])
    table = it.cuff_curve(t[None, :], at, cuffs, kfs[:, None], None, None, cvs[:, None], Pv_rest=8.0,
                          Pvi=pvis[:, None], r=rs[:, None], tau=25.0, smooth=1.0, **kw)
    assert table.shape == (3, t.size)
    for s in range(3):
        one = it.cuff_curve(t, at, cuffs, kfs[s], 25.0 * kfs[s], 0.0, cvs[s], Pv_rest=8.0, Pvi=pvis[s], r=rs[s],
                            smooth=1.0, **kw)
        np.testing.assert_allclose(table[s], one, rtol=1e-12)
