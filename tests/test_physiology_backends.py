"""Every public physiology function gives the same numbers on numpy and on PyTensor (float64).

Each case evaluates the function once on numpy arrays and once on symbolic pytensor vectors
compiled with pytensor.function; they must agree to 1e-12 (relative, or absolute near zero).
"""

import inspect

import numpy as np
import pytest

pytensor = pytest.importorskip("pytensor")
pt = pytest.importorskip("pytensor.tensor")

from uncertainty.physiology import balance, capillary, interstitium, oncotic, solute, starling  # noqa: E402

RNG = np.random.default_rng(20240501)
N = 64


def u(lo, hi):
    return RNG.uniform(lo, hi, N)


# name -> (function, dict of numpy arguments); every argument is a float64 vector of length N.
CASES = {
    "starling.net_pressure": (starling.net_pressure, dict(
        Pc=u(5, 45), Pi=u(-6, 4), pi_c=u(15, 30), pi_i=u(2, 15), sigma=u(0.5, 1))),
    "starling.filtration": (starling.filtration, dict(
        Kf=u(0.001, 0.02), Pc=u(5, 45), Pi=u(-6, 4), pi_c=u(15, 30), pi_i=u(2, 15), sigma=u(0.5, 1))),
    "starling.forces": (starling.forces, dict(
        Pc=u(5, 45), Pi=u(-6, 4), pi_c=u(15, 30), pi_i=u(2, 15), sigma=u(0.5, 1))),
    "oncotic.pi_total_protein": (oncotic.pi_total_protein, dict(C=u(0, 10))),
    "oncotic.pi_cubic": (lambda C: oncotic.pi_cubic(C, "albumin"), dict(C=u(0, 10))),
    "oncotic.pi_cubic_slope": (lambda C: oncotic.pi_cubic_slope(C, "total"), dict(C=u(0, 10))),
    "oncotic.pi_albumin": (oncotic.pi_albumin, dict(C=u(0, 6))),
    "oncotic.pi_globulin": (oncotic.pi_globulin, dict(C=u(0, 5))),
    "oncotic.pi_albumin_globulin": (oncotic.pi_albumin_globulin, dict(C_alb=u(0, 6), C_glob=u(0, 5))),
    "oncotic.pi_albumin_globulin_parts": (
        lambda C_alb, C_glob: dict(zip(("alb", "glob"), oncotic.pi_albumin_globulin_parts(C_alb, C_glob),
                                       strict=True)),
        dict(C_alb=u(0, 6), C_glob=u(0, 5))),
    "oncotic.pi_van_t_hoff": (oncotic.pi_van_t_hoff, dict(C=u(0, 8), molar_mass=u(5e4, 2e5), T=u(290, 315))),
    "capillary.mean_capillary_pressure": (capillary.mean_capillary_pressure, dict(
        Pa=u(60, 110), Pv=u(2, 30), r=u(0.05, 2))),
    "capillary.hydrostatic_offset": (capillary.hydrostatic_offset, dict(height_cm=u(-50, 120), density=u(1, 1.1))),
    "interstitium.imbibition_pressure": (interstitium.imbibition_pressure, dict(Pi0=u(-4, 2), P_imb=u(-60, 0))),
    "capillary.pulmonary_capillary_pressure": (capillary.pulmonary_capillary_pressure, dict(
        LAP=u(2, 25), PAP=u(10, 45), fraction=u(0.3, 0.5))),
    "capillary.axial_pressure": (capillary.axial_pressure, dict(x=u(0, 1), Pc_art=u(25, 40), Pc_ven=u(5, 20))),
    "capillary.axial_filtration": (capillary.axial_filtration, dict(
        x=u(0, 1), Kf=u(0.001, 0.02), Pc_art=u(25, 40), Pc_ven=u(5, 20), Pi=u(-6, 4), pi_c=u(15, 30),
        pi_i=u(2, 15), sigma=u(0.5, 1))),
    "capillary.mean_axial_filtration": (capillary.mean_axial_filtration, dict(
        Kf=u(0.001, 0.02), Pc_art=u(25, 40), Pc_ven=u(5, 20), Pi=u(-6, 4), pi_c=u(15, 30),
        pi_i=u(2, 15), sigma=u(0.5, 1))),
    "capillary.absorbing_fraction": (capillary.absorbing_fraction, dict(
        Pc_art=u(15, 45), Pc_ven=np.r_[u(5, 25)[:-2], 15.0, 15.0], Pi=u(-6, 4), pi_c=u(15, 30),
        pi_i=u(2, 15), sigma=u(0.5, 1))),
    "solute.peclet": (solute.peclet, dict(Jv=u(-0.01, 0.02), sigma=u(0, 1), PS=u(1e-4, 0.01))),
    "solute.protein_flux": (solute.protein_flux, dict(
        Jv=np.r_[u(-0.02, 0.02)[:-3], 0.0, 1e-13, -1e-13], sigma=np.r_[u(0, 1)[:-1], 1.0],
        PS=u(1e-4, 0.01), Cp=u(4, 8), Ci=u(1, 5))),
    "solute.steady_state_ratio": (solute.steady_state_ratio, dict(
        Jv=np.r_[u(-0.02, 0.02)[:-2], 0.0, 1e-13], sigma=np.r_[u(0, 1)[:-1], 1.0], PS=u(1e-4, 0.01))),
    "solute.ratio_and_slope": (lambda Jv, sigma, PS, xp=np: solute.ratio_and_slope(Jv, sigma, PS, xp)[1], dict(
        Jv=u(-0.01, 0.05), sigma=u(0.5, 0.99), PS=u(0.001, 0.01))),
    "solute.steady_state_ratio_slope": (solute.steady_state_ratio_slope, dict(
        Jv=np.r_[u(-0.02, 0.02)[:-2], 0.0, 1e-13], sigma=np.r_[u(0, 1)[:-1], 1.0], PS=u(1e-4, 0.01))),
    "interstitium.lymph_flow": (interstitium.lymph_flow, dict(Pi=u(-6, 10), L=u(0.001, 0.05), Pi_L0=u(-6, 0))),
    "interstitium.lymph_flow[saturating]": (
        lambda Pi, L, Pi_L0, JL_max, xp=np: interstitium.lymph_flow(Pi, L, Pi_L0, JL_max, xp=xp),
        dict(Pi=u(-6, 10), L=u(0.001, 0.05), Pi_L0=u(-6, 0), JL_max=u(0.01, 0.2))),
    "interstitium.tissue_volume": (interstitium.tissue_volume, dict(
        Pi=u(-6, 10), C_tis=u(0.3, 2), Pi_ref=u(-4, 0), C_high=u(5, 20), P_break=u(-2, 3))),
    "interstitium.interstitial_pressure": (interstitium.interstitial_pressure, dict(
        V=u(-3, 30), C_tis=u(0.3, 2), Pi_ref=u(-4, 0), C_high=u(5, 20), P_break=u(-2, 3))),
    "interstitium.oedema_volume": (interstitium.oedema_volume, dict(
        Pi=u(-6, 10), Pi_ref=u(-4, 0), C_tis=u(0.3, 2), C_high=u(5, 20), P_break=u(-2, 3))),
    "interstitium.venous_pressure": (interstitium.venous_pressure, dict(
        P_cuff=u(0, 80), Pv0=u(3, 12), transmission=u(0.8, 1))),
    "interstitium.volume_time_course": (
        lambda t, P1, P2, Kf, C_tis, L, Cv, Pv0, tau_v, r, xp=np: interstitium.volume_time_course(
            t, [0.0, 4.0], [P1, P2], Kf, C_tis, L, Cv, Pv0=Pv0, tau_v=tau_v, r=r, xp=xp),
        dict(t=u(0, 10), P1=u(10, 40), P2=u(40, 70), Kf=u(0.002, 0.008), C_tis=u(0.5, 10), L=u(0.002, 0.02),
             Cv=u(0.03, 0.15), Pv0=u(4, 12), tau_v=u(0.3, 1.5), r=u(0.1, 0.4))),
    "interstitium.cuff_curve": (
        lambda t, P1, P2, Kf, C_tis, Cv, Pv_rest, Pvi, tau_v, xp=np: interstitium.cuff_curve(
            t, [0.0, 4.0], [P1, P2], Kf, C_tis, 0.0, Cv, Pv_rest=Pv_rest, Pvi=Pvi, tau_v=tau_v, smooth=1.0, xp=xp),
        dict(t=u(0, 10), P1=u(10, 40), P2=u(40, 70), Kf=u(0.002, 0.008), C_tis=u(0.5, 10), Cv=u(0.03, 0.15),
             Pv_rest=u(4, 12), Pvi=u(10, 25), tau_v=u(0.3, 1.5))),
    "balance.oncotic_from_ratio": (
        lambda R, pi_c, Cp: dict(zip(("pi", "dpi_dR"), balance.oncotic_from_ratio(R, pi_c, Cp), strict=True)),
        dict(R=u(0.05, 1), pi_c=u(18, 32), Cp=u(5, 8))),
    "balance.oncotic_from_ratio[proportional]": (
        lambda R, pi_c: dict(zip(("pi", "dpi_dR"), balance.oncotic_from_ratio(R, pi_c, None), strict=True)),
        dict(R=u(0.05, 1), pi_c=u(18, 32))),
    # safety factors of the steady forms (smooth compliance break, volume-driven lymph, overflow)
    "interstitium.smooth_tissue_volume": (interstitium.smooth_tissue_volume, dict(
        Pi=u(-6, 10), C_tis=u(0.3, 2), Pi_ref=u(-4, 0), C_high=u(3, 20), P_break=u(-2, 3), width=u(0.2, 1))),
    "interstitium.tissue_compliance": (interstitium.tissue_compliance, dict(
        Pi=np.r_[u(-6, 10)[:-2], -400.0, 400.0], C_tis=u(0.3, 2), C_high=u(3, 20), P_break=u(-2, 3),
        width=u(0.2, 1))),
    "interstitium.oedema_beyond_break": (interstitium.oedema_beyond_break, dict(
        Pi=u(-6, 10), C_tis=u(0.3, 2), C_high=u(3, 20), P_break=u(-2, 3))),
    "interstitium.volume_lymph_flow": (
        lambda Pi, L, Pi_L0, C_tis, C_high, P_break, JL_max, xp=np: dict(zip(
            ("JL", "slope"), interstitium.volume_lymph_flow(Pi, L, Pi_L0, C_tis, C_high, P_break, JL_max, xp=xp),
            strict=True)),
        dict(Pi=u(-6, 10), L=u(0.001, 0.05), Pi_L0=u(-6, -1), C_tis=u(0.3, 2), C_high=u(3, 20), P_break=u(-1, 3),
             JL_max=u(0.01, 0.3))),
    "interstitium.volume_lymph_flow[linear]": (
        lambda Pi, L, Pi_L0, xp=np: interstitium.volume_lymph_flow(Pi, L, Pi_L0, xp=xp)[0],
        dict(Pi=u(-6, 10), L=u(0.001, 0.05), Pi_L0=u(-6, -1))),
    "interstitium.overflow": (
        lambda Pi, G, P_over, xp=np: dict(zip(("J", "slope"), interstitium.overflow(Pi, G, P_over, xp=xp),
                                              strict=True)),
        dict(Pi=u(-6, 10), G=u(0.1, 3), P_over=u(0, 5))),
    "balance.safety_steady_state": (
        lambda Kf, Pc, sigma, PS, pi_c, L, Pi_L0, C_tis, C_high, P_break, JL_max, G, P_fl, xp=np:
        balance.safety_steady_state(Kf, Pc, sigma, PS, pi_c, L, Pi_L0, C_tis=C_tis, C_high=C_high,
                                    P_break=P_break, JL_max=JL_max, G_flood=G, P_flood=P_fl, xp=xp),
        dict(Kf=u(0.002, 0.05), Pc=np.r_[u(8, 45)[:-1], -8.0], sigma=u(0.6, 0.95), PS=u(0.001, 0.03),
             pi_c=u(15, 30), L=u(0.002, 0.02), Pi_L0=u(-6, -1), C_tis=u(0.3, 2), C_high=u(3, 10),
             P_break=u(-1, 2), JL_max=u(0.03, 0.5), G=u(0.3, 2), P_fl=u(2, 5))),
    "balance.safety_steady_state[revised, Cp]": (
        lambda Kf, Pc, sigma, PS, pi_c, L, Pi_L0, C_tis, C_high, P_break, JL_max, PS_large, Cp, xp=np:
        balance.safety_steady_state(Kf, Pc, sigma, PS, pi_c, L, Pi_L0, C_tis=C_tis, C_high=C_high,
                                    P_break=P_break, JL_max=JL_max, PS_large=PS_large, revised=True, Cp=Cp, xp=xp),
        dict(Kf=u(0.002, 0.01), Pc=u(8, 45), sigma=u(0.6, 0.95), PS=u(0.001, 0.01), pi_c=u(15, 30),
             L=u(0.002, 0.02), Pi_L0=u(-6, -1), C_tis=u(0.3, 2), C_high=u(3, 10), P_break=u(-1, 2),
             JL_max=u(0.03, 0.5), PS_large=u(0, 0.002), Cp=u(4, 8))),
    # the burns shift of the pressure-volume relation inside the solve (shifted_state through safety_steady_state)
    "balance.shifted_state": (
        lambda Kf, Pc, sigma, PS, pi_c, L, Pi_L0, C_tis, C_high, P_break, JL_max, P_imb, xp=np:
        balance.safety_steady_state(Kf, Pc, sigma, PS, pi_c, L, Pi_L0, C_tis=C_tis, C_high=C_high,
                                    P_break=P_break, JL_max=JL_max, P_imb=P_imb, xp=xp),
        dict(Kf=u(0.002, 0.05), Pc=u(8, 45), sigma=u(0.4, 0.95), PS=u(0.001, 0.03), pi_c=u(15, 30),
             L=u(0.002, 0.02), Pi_L0=u(-6, -1), C_tis=u(0.3, 2), C_high=u(3, 10), P_break=u(-1, 2),
             JL_max=u(0.03, 0.5), P_imb=u(-45, 0))),
    "balance.safety_margin[P_imb]": (
        lambda Kf, Pc, sigma, PS, pi_c, L, Pi_L0, P_accel, C_tis, C_high, JL_max, P_imb, xp=np: balance.safety_margin(
            Kf, Pc, sigma, PS, pi_c, L, Pi_L0, P_accel, C_tis=C_tis, C_high=C_high, P_break=P_accel,
            JL_max=JL_max, P_imb=P_imb, xp=xp),
        dict(Kf=u(0.002, 0.05), Pc=u(8, 45), sigma=u(0.6, 0.95), PS=u(0.001, 0.03), pi_c=u(15, 30),
             L=u(0.002, 0.02), Pi_L0=u(-6, -1), P_accel=u(-1, 4), C_tis=u(0.3, 2), C_high=u(3, 10),
             JL_max=u(0.03, 0.5), P_imb=u(-45, 0))),
    "balance.safety_margin": (
        lambda Kf, Pc, sigma, PS, pi_c, L, Pi_L0, P_accel, C_tis, C_high, JL_max, xp=np: balance.safety_margin(
            Kf, Pc, sigma, PS, pi_c, L, Pi_L0, P_accel, C_tis=C_tis, C_high=C_high, P_break=P_accel,
            JL_max=JL_max, xp=xp),
        dict(Kf=u(0.002, 0.05), Pc=u(8, 45), sigma=u(0.6, 0.95), PS=u(0.001, 0.03), pi_c=u(15, 30),
             L=u(0.002, 0.02), Pi_L0=u(-6, -1), P_accel=u(-1, 4), C_tis=u(0.3, 2), C_high=u(3, 10),
             JL_max=u(0.03, 0.5))),
}


def test_safety_steady_state_gradient_is_the_implicit_one():
    """PyTensor gradients of the safety-factor steady state (bisection + one Newton step) against central
    differences of the numpy solution."""
    names = ("Kf", "Pc", "PS", "C_high", "JL_max")
    base = dict(Kf=0.004, Pc=30.0, sigma=0.9, PS=0.003, pi_c=25.0, L=0.003, Pi_L0=-3.0, C_tis=1.4,
                C_high=7.0, P_break=0.0, JL_max=0.05)

    def solve(xp, **kw):
        a = {**base, **kw}
        return balance.safety_steady_state(a["Kf"], a["Pc"], a["sigma"], a["PS"], a["pi_c"], a["L"], a["Pi_L0"],
                                           C_tis=a["C_tis"], C_high=a["C_high"], P_break=a["P_break"],
                                           JL_max=a["JL_max"], xp=xp)

    sym = {n: pt.dscalar(n) for n in names}
    out = solve(pt, **sym)
    f = pytensor.function(list(sym.values()), pytensor.grad(out["Pi"], list(sym.values())))
    grads = f(*[base[n] for n in names])
    for n, g in zip(names, grads, strict=True):
        h = 1e-6 * abs(base[n])
        fd = (solve(np, **{n: base[n] + h})["Pi"] - solve(np, **{n: base[n] - h})["Pi"]) / (2 * h)
        np.testing.assert_allclose(g, fd, rtol=1e-5, err_msg=n)

# Functions that are documented as numpy only (labels, root finding, ODEs, regressions).
NUMPY_ONLY = {"starling.direction", "oncotic.protein_from_pi", "interstitium.volume_time_course_ode",
              "interstitium.slow_phase_slope", "interstitium.kf_pvi_regression"}
# Checked on both back-ends in test_physiology_balance.py (values and gradients).
ELSEWHERE = {"balance.steady_state", "balance.revised_steady_state"}


def evaluate_both(func, args):
    names = list(args)
    sym = [pt.dvector(n) for n in names]
    kwargs = {"xp": pt} if "xp" in inspect.signature(func).parameters else {}
    out_sym = func(*sym, **kwargs)
    kwargs_np = {"xp": np} if kwargs else {}
    out_np = func(*[args[n] for n in names], **kwargs_np)
    if isinstance(out_sym, dict):
        keys = list(out_sym)
        f = pytensor.function(sym, [out_sym[k] for k in keys], on_unused_input="ignore")
        res = f(*[args[n] for n in names])
        return {k: (np.broadcast_to(out_np[k], (N,)), r) for k, r in zip(keys, res, strict=True)}
    f = pytensor.function(sym, out_sym, on_unused_input="ignore")
    return {"": (np.broadcast_to(out_np, (N,)), f(*[args[n] for n in names]))}


@pytest.mark.parametrize("name", sorted(CASES))
def test_numpy_and_pytensor_agree(name):
    func, args = CASES[name]
    for key, (a, b) in evaluate_both(func, args).items():
        assert np.all(np.isfinite(a)), (name, key)
        np.testing.assert_allclose(b, a, rtol=1e-12, atol=1e-12 * max(1.0, np.max(np.abs(a))),
                                   err_msg=f"{name} {key}")


def test_every_public_function_has_a_case():
    modules = {"starling": starling, "oncotic": oncotic, "capillary": capillary, "solute": solute,
               "interstitium": interstitium, "balance": balance}
    missing = []
    for mod_name, mod in modules.items():
        for fname, obj in vars(mod).items():
            if fname.startswith("_") or not inspect.isfunction(obj) or obj.__module__ != mod.__name__:
                continue
            full = f"{mod_name}.{fname}"
            if full not in CASES and full not in NUMPY_ONLY and full not in ELSEWHERE:
                missing.append(full)
    assert not missing


@pytest.mark.parametrize("fname", ["protein_flux", "steady_state_ratio"])
def test_pytensor_gradients_finite_at_limits(fname):
    # Jv <= 0, Jv = 0, sigma = 1: the unused branch of a where must not leak NaN into gradients.
    Jv, sigma, PS = pt.dvector("Jv"), pt.dvector("sigma"), pt.dvector("PS")
    if fname == "protein_flux":
        out = solute.protein_flux(Jv, sigma, PS, 7.0, 3.0, xp=pt)
    else:
        out = solute.steady_state_ratio(Jv, sigma, PS, xp=pt)
    grads = pytensor.grad(out.sum(), [Jv, sigma, PS])
    f = pytensor.function([Jv, sigma, PS], grads)
    vals = f(np.array([-0.01, 0.0, 1e-14, 0.003, 0.003, 5.0]),
             np.array([0.9, 0.9, 0.9, 1.0, 0.0, 0.5]),
             np.array([1e-3, 1e-3, 1e-3, 1e-3, 1e-3, 1e-5]))
    for g in vals:
        assert np.all(np.isfinite(g))


# Public functions of the other physiology modules, and the test that runs them on both back-ends.
OTHER_FILES = {
    "osmotic": "tests/test_organs.py",  # has its own every-function check over its CASES
    "lung": "tests/test_organs.py",
    "mucosa": "tests/test_organs.py",
    "glomerulus.glomerular_filtration": "tests/test_glomerulus.py",
    "glomerulus.efferent_protein": "tests/test_glomerulus.py",
    "glomerulus.filtration_fraction": "tests/test_glomerulus.py",
    "glomerulus.equilibrium_note": "numpy only (a sentence for the report)",
    # loop drivers, not formulas: run on both back-ends through glomerulus and mucosa
    "iteration.fixed_steps": "tests/test_glomerulus.py, tests/test_organs.py",
    "iteration.stop_gradient": "tests/test_organs.py (mucosa)",
    "iteration.is_pytensor": "back-end switch",
    "two_pore": "tests/test_two_pore.py",
    "whole_body": "tests/test_whole_body.py (simulate through PyTensor; step_rates and rhs_vector numpy only)",
    "whole_body_kernel": "tests/test_whole_body_kernel.py (numba, against the numpy course)",
    "whole_body_op": "tests/test_whole_body_kernel.py (PyTensor only: the kernel as an Op)",
    "cut_gradient": "tests/test_cut_gradient.py (PyTensor only)",
    "safety_root_op": "tests/test_safety_root_op.py (PyTensor only: balance's bisection as an Op, against numpy)",
}


def test_every_physiology_function_on_both_back_ends_somewhere():
    import importlib
    import pkgutil

    import uncertainty.physiology as physiology

    here = {"starling", "oncotic", "capillary", "solute", "interstitium", "balance"}
    missing = []
    for info in pkgutil.iter_modules(physiology.__path__):
        mod = importlib.import_module(f"uncertainty.physiology.{info.name}")
        for fname, obj in vars(mod).items():
            if fname.startswith("_") or not inspect.isfunction(obj) or obj.__module__ != mod.__name__:
                continue
            full = f"{info.name}.{fname}"
            covered = (full in CASES or full in NUMPY_ONLY or full in ELSEWHERE) if info.name in here else (
                info.name in OTHER_FILES or full in OTHER_FILES)
            if not covered:
                missing.append(full)
    assert not missing, f"physiology functions without a numpy-vs-PyTensor case: {missing}"
