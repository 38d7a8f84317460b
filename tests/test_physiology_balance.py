"""Coupled steady state: conservation of fluid and protein, positivity of filtration, agreement with
an independent root finder, and the PyTensor back-end (values and gradients)."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq

from uncertainty.physiology.balance import BISECTION_STEPS, revised_steady_state, safety_steady_state, steady_state
from uncertainty.physiology.oncotic import pi_total_protein
from uncertainty.physiology.solute import protein_flux, steady_state_ratio
from uncertainty.physiology.starling import filtration

# Ordinary-tissue values of the right order (from memory; skeletal muscle per 100 g):
# Kf 0.005 mL/min/mmHg, Pc 20 mmHg, sigma 0.9, PS 0.0005 mL/min, pi_c 25 mmHg,
# lymph conductance 0.002 mL/min/mmHg, lymph flow zero at Pi = -4 mmHg.
ORDINARY = dict(Kf=0.005, Pc=20.0, sigma=0.9, PS=0.0005, pi_c=25.0, L=0.002, Pi_L0=-4.0)
CP = 7.0  # g/dL, normal plasma total protein (Guyton & Hall, from memory)


def lymph(Pi, L, Pi_L0):
    return L * (Pi - Pi_L0)


@pytest.mark.parametrize("use_cp", [False, True])
def test_conserves_fluid_and_protein(use_cp):
    kw = {"Cp": CP} if use_cp else {}
    out = steady_state(**ORDINARY, **kw)
    p = ORDINARY
    # Fluid: Starling filtration at the solved Pi, pi_i equals lymph flow.
    Jv_starling = filtration(p["Kf"], p["Pc"], out["Pi"], p["pi_c"], out["pi_i"], p["sigma"])
    assert out["Jv"] == pytest.approx(Jv_starling, rel=1e-12)
    assert out["Jv"] == pytest.approx(lymph(out["Pi"], p["L"], p["Pi_L0"]), rel=1e-12)
    # Protein: Patlak flux at Ci = ratio * Cp equals lymph protein outflow JL * Ci.
    Ci = out["ratio"] * CP
    Js = protein_flux(out["Jv"], p["sigma"], p["PS"], CP, Ci)
    assert Js == pytest.approx(out["Jv"] * Ci, rel=1e-12)
    if use_cp:  # pi_i through the Landis-Pappenheimer polynomial, rescaled to the given pi_c
        assert out["pi_i"] == pytest.approx(p["pi_c"] * pi_total_protein(Ci) / pi_total_protein(CP))
    else:
        assert out["pi_i"] == pytest.approx(p["pi_c"] * out["ratio"])


def test_matches_independent_root_finder():
    p = ORDINARY

    def residual(J):
        Pi = p["Pi_L0"] + J / p["L"]
        pi_i = p["pi_c"] * steady_state_ratio(J, p["sigma"], p["PS"])
        return filtration(p["Kf"], p["Pc"], Pi, p["pi_c"], pi_i, p["sigma"]) - J

    J_ref = brentq(residual, 1e-12, 1.0, xtol=1e-16, rtol=1e-14)
    assert steady_state(**p)["Jv"] == pytest.approx(J_ref, rel=1e-10)


@settings(max_examples=200, deadline=None)
@given(
    Kf=st.floats(1e-4, 0.05), Pc=st.floats(5.0, 45.0), sigma=st.floats(0.5, 0.99),
    PS=st.floats(1e-5, 0.01), pi_c=st.floats(15.0, 32.0), L=st.floats(5e-4, 0.05),
    Pi_L0=st.floats(-6.0, 2.0),
)
def test_filtration_positive_in_ordinary_tissues(Kf, Pc, sigma, PS, pi_c, L, Pi_L0):
    # Levick & Michel 2010 (Cardiovasc Res 87:198): no sustained absorption at steady state in
    # ordinary tissues. Here Pc > Pi_L0 throughout the ranges (from memory, ordinary tissues).
    out = steady_state(Kf, Pc, sigma, PS, pi_c, L, Pi_L0)
    assert out["Jv"] > 0
    assert 0 < out["ratio"] <= 1
    resid = filtration(Kf, Pc, out["Pi"], pi_c, out["pi_i"], sigma) - out["Jv"]
    assert abs(resid) <= 1e-12 * Kf * (Pc - Pi_L0 + pi_c)
    # Bounded by the no-oncotic-gradient value Kf (Pc - Pi_L0) / (1 + Kf/L) (closed form).
    assert out["Jv"] <= Kf * (Pc - Pi_L0) / (1 + Kf / L) * (1 + 1e-12)


def test_vectorised_broadcast():
    Pc = np.linspace(10, 40, 7)
    out = steady_state(**dict(ORDINARY, Pc=Pc))
    assert out["Jv"].shape == (7,)
    assert np.all(np.diff(out["Jv"]) > 0)  # more pressure, more filtration
    for k, Pck in enumerate(Pc):
        assert out["Jv"][k] == pytest.approx(steady_state(**dict(ORDINARY, Pc=Pck))["Jv"], rel=1e-13)


def test_revised_reduces_to_classic_without_large_pores():
    a = steady_state(**ORDINARY)
    b = revised_steady_state(**ORDINARY, PS_large=0.0)
    for k in ("Jv", "Pi", "pi_i", "ratio"):
        assert b[k] == pytest.approx(a[k], rel=1e-13)
    assert b["pi_g"] == pytest.approx(b["pi_i"], rel=1e-13)


def test_revised_conserves_protein_and_jv_ignores_pi_i():
    p = ORDINARY
    out = revised_steady_state(**p, PS_large=0.0005)
    Cg, Ci = out["ratio_g"] * CP, out["ratio"] * CP
    # Across the glycocalyx: Patlak flux equals the filtrate's protein (washed subglycocalyx space).
    assert protein_flux(out["Jv"], p["sigma"], p["PS"], CP, Cg) == pytest.approx(out["Jv"] * Cg, rel=1e-12)
    # Interstitium: lymph protein = filtrate protein + large-pore diffusion.
    assert out["Jv"] * Ci == pytest.approx(out["Jv"] * Cg + 0.0005 * (CP - Ci), rel=1e-12)
    # Jv follows the glycocalyx forces (pi_g), whatever pi_i is (Levick & Michel 2010).
    assert out["pi_i"] > out["pi_g"]
    assert out["Jv"] == pytest.approx(filtration(p["Kf"], p["Pc"], out["Pi"], p["pi_c"], out["pi_g"], p["sigma"]),
                                      rel=1e-12)
    assert out["Jv"] == pytest.approx(revised_steady_state(**p, PS_large=0.01)["Jv"], rel=1e-13)


# --- PyTensor back-end -----------------------------------------------------------------------------

pytensor = pytest.importorskip("pytensor")
pt = pytest.importorskip("pytensor.tensor")

NAMES = ["Kf", "Pc", "sigma", "PS", "pi_c", "L", "Pi_L0"]


def _grid(n=32, seed=7):
    rng = np.random.default_rng(seed)
    return dict(Kf=10 ** rng.uniform(-3.5, -1.5, n), Pc=rng.uniform(-8, 45, n), sigma=rng.uniform(0.3, 1.0, n),
                PS=10 ** rng.uniform(-5, -2, n), pi_c=rng.uniform(15, 32, n), L=10 ** rng.uniform(-3.3, -1.5, n),
                Pi_L0=rng.uniform(-6, 2, n))


@pytest.mark.parametrize("func,extra", [(steady_state, {}),
                                        (revised_steady_state, {"PS_large": 0.0005, "Cp": CP})])
def test_numpy_and_pytensor_agree(func, extra):
    # Same numbers to 1e-12 on a grid spanning wide ranges (including Pc below the lymph threshold);
    # gradients finite everywhere on it.
    vals = _grid()
    sym = [pt.dvector(n) for n in NAMES]
    out_sym = func(*sym, **extra, xp=pt)
    keys = list(out_sym)
    grads = pytensor.grad(out_sym["Jv"].sum(), sym)
    f = pytensor.function(sym, [out_sym[k] for k in keys] + grads)
    res = f(*[vals[n] for n in NAMES])
    out_np = func(*[vals[n] for n in NAMES], **extra)
    for k, r in zip(keys, res[: len(keys)], strict=True):
        a = np.broadcast_to(out_np[k], r.shape)
        np.testing.assert_allclose(r, a, rtol=1e-12, atol=1e-12 * np.max(np.abs(a)), err_msg=k)
    for g in res[len(keys):]:
        assert np.all(np.isfinite(g))


@pytest.mark.parametrize("extra", [{}, {"Cp": CP}])
def test_pytensor_gradient_matches_finite_difference(extra):
    x = {k: pt.dscalar(k) for k in NAMES}
    out = steady_state(*[x[k] for k in NAMES], **extra, xp=pt)
    wrt = [x["Kf"], x["Pc"]]
    f = pytensor.function(list(x.values()), [g for key in ("Jv", "Pi", "pi_i")
                                             for g in pytensor.grad(out[key], wrt)])
    grads = f(*[ORDINARY[k] for k in NAMES])
    for key_i, key in enumerate(("Jv", "Pi", "pi_i")):
        for j, name in enumerate(("Kf", "Pc")):
            h = 1e-6 * abs(ORDINARY[name])
            up = steady_state(**dict(ORDINARY, **{name: ORDINARY[name] + h}), **extra)[key]
            dn = steady_state(**dict(ORDINARY, **{name: ORDINARY[name] - h}), **extra)[key]
            fd = (up - dn) / (2 * h)
            assert grads[2 * key_i + j] == pytest.approx(fd, rel=1e-6), (key, name)


def test_no_lymph_state_when_capillary_pressure_is_below_the_lymph_zero() -> None:
    # one-way lymph valves (common practice): with Pc <= Pi_L0 nothing filters and no lymph flows;
    # Pi equals Pc and pi_i equals pi_c, continuous with the filtering branch at Pc = Pi_L0
    from uncertainty.physiology.balance import revised_steady_state, steady_state

    args = dict(Kf=0.004, sigma=0.9, PS=0.002, pi_c=25.0, L=0.01, Pi_L0=2.0)
    for fn in (steady_state, revised_steady_state):
        low = fn(Pc=np.array([1.0, 2.0]), **args)
        assert np.all(low["Jv"] == 0.0) and np.allclose(low["Pi"], [1.0, 2.0])
        assert np.allclose(low["pi_i"], 25.0)
        edge = fn(Pc=np.array([2.0 + 1e-9]), **args)
        assert edge["Jv"][0] >= 0 and abs(edge["Pi"][0] - 2.0) < 1e-6


def test_safety_state_keeps_lymph_forward_when_flooding_opens_near_pi_l0():
    # A lung prior draw whose flooding pressure lies only 1.7 mmHg (3.4 smoothing widths) above Pi_L0: the
    # softplus tail of the overflow once pushed the root below Pi_L0, with lymph running backwards (Jv < 0).
    # Levick & Michel 2010 (Cardiovasc Res 87:198): no sustained absorption at steady state in an ordinary
    # tissue, so Jv >= 0 and Pi >= Pi_L0 (lymph cannot flow backwards).
    out = safety_steady_state(0.0308, 5.29, 0.811, 0.0171, 28.0, 0.00596, -0.233, C_tis=0.125, C_high=6.02,
                              P_break=1.07, JL_max=0.288, G_flood=3.82, P_flood=1.49, Cp=7.64)
    assert out["Jv"] >= 0.0 and out["JL"] >= 0.0 and out["flooding"] >= 0.0
    assert out["Pi"] >= -0.233


def test_safety_state_bisection_count_is_at_solver_precision():
    # BISECTION_STEPS halvings and one Newton step give the root that twice as many halvings give, on random
    # draws across wide ranges (ranges from memory, as in test_physiology_backends). Tolerance 1e-11 mmHg:
    # common practice, a few hundred ulps of pressures of tens of mmHg.
    rng = np.random.default_rng(3)
    n = 2000

    def u(a: float, b: float) -> np.ndarray:
        return rng.uniform(a, b, n)

    args = (u(0.002, 0.05), u(-8, 45), u(0.6, 0.95), u(0.001, 0.03), u(15, 30), u(0.002, 0.02), u(-6, -1))
    kw = dict(C_tis=u(0.3, 2), C_high=u(3, 10), P_break=u(-1, 2), JL_max=u(0.03, 0.5), G_flood=u(0.3, 2),
              P_flood=u(2, 5), Cp=u(4, 8))
    ref = safety_steady_state(*args, **kw, n_steps=2 * BISECTION_STEPS)
    out = safety_steady_state(*args, **kw)
    assert np.max(np.abs(out["Pi"] - ref["Pi"])) < 1e-11
    assert np.max(np.abs(out["Jv"] - ref["Jv"])) < 1e-11 * np.max(np.abs(ref["Jv"])) + 1e-15
