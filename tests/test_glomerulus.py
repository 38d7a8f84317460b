"""Glomerular ultrafiltration along the capillary (Deen, Robertson & Brenner 1972, Am J Physiol 223:1178).

Checks: closed forms (constant pi), an independent scipy integration (quad of the separable form,
solve_ivp of the two-state flow/protein system), rat micropuncture values reaching filtration
equilibrium, protein conservation, and numpy vs PyTensor agreement to 1e-12.
"""

import numpy as np
import pytest
from scipy.integrate import quad, solve_ivp

from uncertainty.physiology import glomerulus
from uncertainty.physiology.glomerulus import efferent_protein, equilibrium_note, glomerular_filtration
from uncertainty.physiology.oncotic import pi_total_protein, protein_from_pi

# Rat values, Munich-Wistar, hydropenia.
# Kf per glomerulus 0.08 nL/(s mmHg) = 4.8 nL/min/mmHg: Deen, Troy, Robertson & Brenner 1973,
# J Clin Invest 52:1500 (abstract, confirmed).
RAT_KF = 0.08 * 60.0
# dP = P_GC - P_T about 35 mmHg, afferent plasma flow about 75 nL/min, plasma protein about 5.7 g/dL,
# SNFF about 0.3-0.38 with filtration equilibrium in hydropenia: from memory (Brenner, Deen and
# co-workers' micropuncture series, 1971-1973), not re-read.
RAT_DP = 35.0
RAT_QA = 75.0
RAT_CA = 5.7


def test_constant_pi_gives_kf_times_mean_net_pressure():
    # Closed form: with pi independent of C the right-hand side is linear in x, so
    # GFR = Kf * (mean dP - pi), mean dP = (dP_aff + dP_eff)/2 for a linear fall (exact integral).
    Kf, QA = np.array([4.8, 2.0, 10.0]), np.array([75.0, 150.0, 400.0])
    dP, dP_eff, pi = np.array([40.0, 35.0, 45.0]), np.array([30.0, 35.0, 39.0]), 20.0
    out = glomerular_filtration(Kf, dP, QA, 5.0, dP_eff, oncotic=lambda C: 0.0 * C + pi)
    np.testing.assert_allclose(out["GFR"], Kf * (0.5 * (dP + dP_eff) - pi), rtol=1e-12)
    np.testing.assert_allclose(out["mean_net_pressure"], 0.5 * (dP + dP_eff) - pi, rtol=1e-12)
    assert np.all(out["equilibrium"] == 0.0)


def test_protein_free_plasma_gives_kf_times_dp():
    # Closed form: no protein (C_A = 0) means pi = 0 everywhere, GFR = Kf dP.
    out = glomerular_filtration(4.8, 35.0, 500.0, 0.0)
    assert out["GFR"] == pytest.approx(4.8 * 35.0, rel=1e-12)


def test_matches_separable_integral_in_disequilibrium():
    # With constant dP, dq/dx = -(Kf/QA)(dP - pi(C_A/q)) separates:
    #   Kf/QA = integral_{q_E}^{1} dq / (dP - pi(C_A/q))   (scipy quad as the outside reference).
    # Plasma-loaded rat (doubled flow, Deen et al. 1973 design; numbers from memory): disequilibrium.
    Kf, dP, QA, CA = RAT_KF, RAT_DP, 2.2 * RAT_QA, 5.5
    out = glomerular_filtration(Kf, dP, QA, CA, n_steps=64)
    qE = 1.0 - float(out["FF"])
    val, _ = quad(lambda q: 1.0 / (dP - pi_total_protein(CA / q)), qE, 1.0, epsabs=1e-13, epsrel=1e-12)
    assert val == pytest.approx(Kf / QA, rel=1e-7)
    assert out["equilibrium"] == 0.0
    assert out["Kf_lower_bound"] == pytest.approx(Kf)


def _reference_ivp(Kf, dP, dP_eff, QA, CA):
    """Two-state system (Q, C) with dC/dx = -(C/Q) dQ/dx, integrated by scipy solve_ivp (DOP853).

    No flux where the net pressure is negative (filtrate is not reabsorbed from Bowman's space)."""

    def f(x, y):
        Q, C = y
        dQ = -Kf * max(dP + (dP_eff - dP) * x - pi_total_protein(C), 0.0)
        return [dQ, -C / Q * dQ]

    sol = solve_ivp(f, (0.0, 1.0), [QA, CA], method="DOP853", rtol=1e-12, atol=1e-12)
    return sol.y[0, -1], sol.y[1, -1]


@pytest.mark.parametrize(("dP_eff", "rel"), [(35.0, 1e-8), (31.0, 3e-6)])
def test_matches_solve_ivp_and_conserves_protein(dP_eff, rel):
    # Outside reference: scipy's DOP853 on the (Q, C) system, which carries protein as its own state.
    # Protein conservation: its efferent C must equal C_A/(1 - FF) from our filtration fraction.
    # With the falling dP the net pressure crosses zero inside the capillary and the flux stops there (a
    # kink): fixed-step RK4 is then second order near the crossing, 1e-6 at 64 steps, 1e-7 at 256.
    QE, CE = _reference_ivp(RAT_KF, RAT_DP, dP_eff, RAT_QA, RAT_CA)
    out = glomerular_filtration(RAT_KF, RAT_DP, RAT_QA, RAT_CA, dP_eff)
    assert out["Q_eff"] == pytest.approx(QE, rel=rel)
    assert CE == pytest.approx(efferent_protein(RAT_CA, out["FF"]), rel=rel)
    assert out["pi_eff"] == pytest.approx(pi_total_protein(CE), rel=10 * rel)


def test_rat_micropuncture_values_reach_equilibrium_before_efferent_end():
    # Deen, Troy, Robertson & Brenner 1973 (J Clin Invest 52:1500): filtration equilibrium is "typically
    # observed in the normal hydropenic rat" (abstract, confirmed); values above.
    out = glomerular_filtration(RAT_KF, RAT_DP, RAT_QA, RAT_CA)
    assert out["equilibrium"] == 1.0
    assert 0.3 < out["x_equilibrium"] < 0.95
    assert out["net_pressure_eff"] < glomerulus.DEFAULT_EQ_TOL
    # At equilibrium pi_eff ~ dP, so FF follows from protein conservation alone (closed form through the
    # inverse oncotic relation): FF = 1 - C_A / C(dP).
    ff_eq = 1.0 - RAT_CA / protein_from_pi(RAT_DP)
    assert out["FF"] == pytest.approx(ff_eq, abs=0.01)
    assert 0.28 < out["FF"] < 0.38  # SNFF about 1/3 (from memory)
    # Kf is then bounded below only: the lower bound reproduces equilibrium exactly at the efferent end
    # (constant dP: the solution depends on x only through Kf x / QA).
    lo = float(out["Kf_lower_bound"])
    assert lo < RAT_KF
    at_bound = glomerular_filtration(lo, RAT_DP, RAT_QA, RAT_CA)
    # (to within the linear interpolation of the crossing inside one step)
    assert at_bound["net_pressure_eff"] == pytest.approx(glomerulus.DEFAULT_EQ_TOL, abs=0.01)
    assert at_bound["x_equilibrium"] == pytest.approx(1.0, abs=1e-3)
    # and doubling Kf barely changes GFR (flow-limited), unlike in disequilibrium
    twice = glomerular_filtration(2 * RAT_KF, RAT_DP, RAT_QA, RAT_CA)
    assert abs(twice["GFR"] / out["GFR"] - 1) < 0.01
    note = equilibrium_note(out, "nL/min/mmHg")
    assert note is not None and "bound Kf only from below" in note


def test_plasma_flow_dependence_in_disequilibrium():
    # Deen et al. 1973: at raised plasma flow equilibrium is lost and GFR depends on Kf.
    base = glomerular_filtration(RAT_KF, RAT_DP, 2.2 * RAT_QA, RAT_CA)
    more = glomerular_filtration(1.5 * RAT_KF, RAT_DP, 2.2 * RAT_QA, RAT_CA)
    assert base["equilibrium"] == 0.0 and base["net_pressure_eff"] > glomerulus.DEFAULT_EQ_TOL
    assert more["GFR"] > 1.1 * base["GFR"]
    assert equilibrium_note(base) is None


def test_human_textbook_whole_kidney_values():
    # Human textbook estimates (not measurements): P_GC 60, Bowman's 18 mmHg, Kf 12.5 mL/min/mmHg
    # (both kidneys), RPF about 650 mL/min, plasma pi about 25 mmHg, GFR about 125 mL/min, FF about 0.2
    # (common practice; textbook estimates).
    CA = protein_from_pi(25.0)
    out = glomerular_filtration(12.5, 60.0 - 18.0, 650.0, CA)
    assert out["equilibrium"] == 0.0
    assert 100.0 < out["GFR"] < 160.0
    assert 0.15 < out["FF"] < 0.25


def test_whole_kidney_scaling():
    # Scaling Kf and QA by the number of glomeruli leaves FF unchanged and scales GFR (exact identity).
    single = glomerular_filtration(RAT_KF, RAT_DP, 2 * RAT_QA, RAT_CA)
    n = 30_000.0
    kidney = glomerular_filtration(n * RAT_KF, RAT_DP, n * 2 * RAT_QA, RAT_CA)
    scaled = glomerular_filtration(RAT_KF, RAT_DP, 2 * RAT_QA, RAT_CA, n_glomeruli=n)
    assert kidney["FF"] == pytest.approx(single["FF"], rel=1e-12)
    assert kidney["GFR"] == pytest.approx(n * single["GFR"], rel=1e-12)
    assert scaled["GFR"] == pytest.approx(kidney["GFR"], rel=1e-12)


def test_stiffness_diagnostic_flags_unstable_steps():
    # RK4's real stability limit is about 2.785 in h*lambda (common practice); large Kf/QA with few
    # steps must be flagged, and with enough steps the answer converges.
    few = glomerular_filtration(50.0, RAT_DP, RAT_QA, RAT_CA, n_steps=16)
    ok = glomerular_filtration(50.0, RAT_DP, RAT_QA, RAT_CA, n_steps=64)
    fine = glomerular_filtration(50.0, RAT_DP, RAT_QA, RAT_CA, n_steps=1024)
    assert few["stiffness"] > 2.5
    assert ok["stiffness"] < 2.5
    assert ok["GFR"] == pytest.approx(fine["GFR"], rel=1e-9)


def test_rk4_converges_at_fourth_order():
    # Richardson check on the disequilibrium case: halving the step divides the error by about 16.
    args = (RAT_KF, RAT_DP, 2.2 * RAT_QA, RAT_CA, 30.0)
    ref = glomerular_filtration(*args, n_steps=2048)["GFR"]
    e8 = abs(glomerular_filtration(*args, n_steps=8)["GFR"] - ref)
    e16 = abs(glomerular_filtration(*args, n_steps=16)["GFR"] - ref)
    assert 10.0 < e8 / e16 < 22.0


# ---- numpy vs PyTensor -------------------------------------------------------------------------

pytensor = pytest.importorskip("pytensor")
pt = pytest.importorskip("pytensor.tensor")


def _both(func, args, **kw):
    names = list(args)
    sym = [pt.dvector(n) for n in names]
    out_sym = func(*sym, **kw, **({"xp": pt} if "xp" in func.__code__.co_varnames else {}))
    out_np = func(*[args[n] for n in names], **kw)
    if not isinstance(out_sym, dict):
        out_sym, out_np = {"": out_sym}, {"": out_np}
    keys = list(out_sym)
    f = pytensor.function(sym, [out_sym[k] for k in keys], on_unused_input="ignore", mode=MODE)
    res = f(*[args[n] for n in names])
    return {k: (np.broadcast_to(out_np[k], res[i].shape), res[i]) for i, k in enumerate(keys)}


# The numba back-end is the one nutpie samples with; it compiles the scan in seconds (the C back-end
# takes much longer on this graph).
MODE = "NUMBA"
RNG = np.random.default_rng(1972)
M = 32


def _u(lo, hi):
    return RNG.uniform(lo, hi, M)


@pytest.mark.parametrize("name", [
    # compiling the scan takes tens of seconds on a loaded 2-core machine
    pytest.param("glomerular_filtration", marks=pytest.mark.slow), "efferent_protein", "filtration_fraction"])
def test_numpy_and_pytensor_agree(name):
    cases = {
        # spans equilibrium and disequilibrium, constant and falling dP
        "glomerular_filtration": dict(Kf=_u(2.0, 12.0), dP=_u(30.0, 45.0), Q_A=_u(50.0, 250.0), C_A=_u(4.5, 7.0),
                                      dP_eff=_u(28.0, 45.0)),
        "efferent_protein": dict(C_A=_u(4.5, 7.0), FF=_u(0.05, 0.45)),
        "filtration_fraction": dict(GFR=_u(20.0, 40.0), RPF=_u(60.0, 250.0)),
    }
    func = getattr(glomerulus, name)
    results = _both(func, cases[name])
    for key, (a, b) in results.items():
        assert np.all(np.isfinite(a)), key
        np.testing.assert_allclose(b, a, rtol=1e-12, atol=1e-12 * max(1.0, float(np.max(np.abs(a)))), err_msg=key)
    if name == "glomerular_filtration":
        eq = results["equilibrium"][0]
        assert 0 < eq.sum() < M  # both regimes were exercised


@pytest.mark.slow  # compiles the gradient of a scan
def test_pytensor_gradient_finite_and_matches_finite_difference():
    Kf = pt.dscalar("Kf")
    out = glomerular_filtration(Kf, RAT_DP, 2.2 * RAT_QA, RAT_CA, xp=pt)["GFR"]
    g = pytensor.function([Kf], pytensor.grad(out, Kf), mode=MODE)(RAT_KF)
    h = 1e-5
    fd = (glomerular_filtration(RAT_KF + h, RAT_DP, 2.2 * RAT_QA, RAT_CA)["GFR"]
          - glomerular_filtration(RAT_KF - h, RAT_DP, 2.2 * RAT_QA, RAT_CA)["GFR"]) / (2 * h)
    assert np.isfinite(g) and g == pytest.approx(fd, rel=1e-6)


def test_no_filtration_when_oncotic_pressure_exceeds_hydraulic_difference():
    # Deen et al. 1972 model: the flux is Kf times the net pressure where it is positive; where the afferent
    # oncotic pressure (about 21 mmHg at 5.7 g/dL, Landis & Pappenheimer relation) is above dP, nothing
    # filters: GFR exactly 0 (not negative), and the note states the share.
    dP = np.array([15.0, 35.0])
    out = glomerular_filtration(RAT_KF, dP, RAT_QA, RAT_CA)
    assert pi_total_protein(RAT_CA) > 15.0
    assert out["GFR"][0] == 0.0 and out["no_filtration"][0] == 1.0
    assert out["GFR"][1] > 0.0 and out["no_filtration"][1] == 0.0
    note = equilibrium_note(out)
    assert note is not None and "50% of evaluations" in note and "nothing filters" in note


def test_clipped_flux_numpy_equals_pytensor_with_finite_gradient():
    pytensor = pytest.importorskip("pytensor")
    pt = pytest.importorskip("pytensor.tensor")
    dP = np.array([15.0, 22.0, 35.0])  # below, near and above the afferent oncotic pressure (about 21 mmHg)
    ref = glomerular_filtration(RAT_KF, dP, RAT_QA, RAT_CA, n_steps=16)
    x = pt.dvector("dP")
    out = glomerular_filtration(RAT_KF, x, RAT_QA, RAT_CA, n_steps=16, xp=pt)
    grad = pytensor.grad(out["GFR"].sum(), x)
    f = pytensor.function([x], [out["GFR"], out["no_filtration"], grad], mode="FAST_COMPILE")
    gfr, none, g = f(dP)
    np.testing.assert_allclose(gfr, ref["GFR"], rtol=1e-12, atol=1e-12)
    np.testing.assert_array_equal(none, ref["no_filtration"])
    assert np.all(np.isfinite(g)) and g[0] == 0.0 and g[2] > 0.0
