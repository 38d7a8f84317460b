"""The two-pore form (``physiology.two_pore``, ``forms.two_pore``): numpy against PyTensor, closed forms
(alpha_L = 0 is the single-pore steady state; no pressure gradient leaves pure diffusion; the convective
floor 1 - sigma_eff at high filtration), pore-theory limits, and the form through the analyses."""

from __future__ import annotations

import inspect

import numpy as np
import pytest

from uncertainty.analyses.inference.api import check_model
from uncertainty.analyses.propagate import propagate
from uncertainty.analyses.validation import load_table, predict_row
from uncertainty.forms.catalogue import study_outputs
from uncertainty.physiology import balance, oncotic, two_pore
from uncertainty.study import Study

pytensor = pytest.importorskip("pytensor")
pt = pytest.importorskip("pytensor.tensor")

RNG = np.random.default_rng(20261203)
#: one-shot graphs: the Python linker skips the C compilation (minutes on a loaded machine), same arithmetic
MODE = "FAST_COMPILE"
N = 24


def u(lo: float, hi: float) -> np.ndarray:
    return RNG.uniform(lo, hi, N)


# the steady-state arguments over a wide range (invented test ranges), safety factors on
STEADY = dict(Kf=u(0.001, 0.01), Pc=np.r_[u(5, 45)[:-1], -5.0], pi_c=u(15, 30), L=u(0.0005, 0.01),
              Pi_L0=u(-5, -1), alpha_L=u(0.0, 0.3))
SAFETY = dict(C_tis=u(0.5, 3), C_high=u(3, 12), P_break=u(-1, 2), JL_max=u(0.01, 0.2), Cp=u(4, 8))

CASES = {
    "diffusive_hindrance": (two_pore.diffusive_hindrance, dict(r=np.r_[u(3, 40)[:-1], 3.0])),
    "pore_reflection": (two_pore.pore_reflection, dict(r=np.r_[u(3, 40)[:-1], 3.0])),
    "pore_permeability": (two_pore.pore_permeability, dict(Kf_pore=u(1e-4, 0.01), r=u(3.6, 40))),
    "pore_properties": (two_pore.pore_properties, dict(Kf=u(1e-3, 0.01), alpha_L=u(0, 0.3), r_S=u(3.8, 6),
                                                      r_L=u(15, 35))),
    "pore_flows": (two_pore.pore_flows, dict(Kf=u(1e-3, 0.01), alpha_L=u(0, 0.3), sigma_S=u(0.8, 1),
                                            sigma_L=u(0, 0.3), Pc=u(5, 45), Pi=u(-6, 4), pi_c=u(15, 30),
                                            pi_i=u(2, 15))),
    "two_pore_protein_flux": (two_pore.two_pore_protein_flux, dict(
        J_S=np.r_[u(-0.01, 0.02)[:-1], 0.0], J_L=u(-0.002, 0.01), sigma_S=u(0.8, 1), sigma_L=u(0, 0.3),
        PS_S=u(1e-4, 3e-3), PS_L=np.r_[u(1e-4, 3e-3)[:-1], 0.0], Cp=u(4, 8), Ci=u(0.5, 4))),
    "ratio_from_oncotic": (two_pore.ratio_from_oncotic, dict(pi=np.r_[u(0, 25)[:-1], -1.0], pi_c=u(20, 30),
                                                            Cp=u(5, 8))),
    # through pore_steady_state (its solver), with every safety factor and the oncotic cubic
    "two_pore_steady_state": (
        lambda Kf, Pc, pi_c, L, Pi_L0, alpha_L, r_S, r_L, C_tis, C_high, P_break, JL_max, Cp, xp:
        two_pore.two_pore_steady_state(Kf, Pc, pi_c, L, Pi_L0, alpha_L, r_S, r_L, C_tis=C_tis, C_high=C_high,
                                       P_break=P_break, JL_max=JL_max, Cp=Cp, xp=xp),
        {**STEADY, "r_S": u(4, 5), "r_L": u(18, 30), **SAFETY}),
    # the safety margin (bisection in the ratio + secant step), with the burns shift of the curve
    "two_pore_safety_margin": (
        lambda Kf, Pc, pi_c, L, Pi_L0, alpha_L, r_S, r_L, P_accel, C_tis, C_high, JL_max, Cp, P_imb, xp:
        two_pore.two_pore_safety_margin(Kf, Pc, pi_c, L, Pi_L0, alpha_L, r_S, r_L, P_accel, C_tis=C_tis,
                                        C_high=C_high, P_break=P_accel, JL_max=JL_max, Cp=Cp, P_imb=P_imb, xp=xp),
        {**STEADY, "r_S": u(4, 5), "r_L": u(18, 30), "P_accel": np.r_[u(-1, 2)[:-1], -20.0], "P_imb": u(-40, 0),
         **{k: SAFETY[k] for k in ("C_tis", "C_high", "JL_max", "Cp")}}),
}
#: public functions run on both back-ends through another case
THROUGH = {"pore_steady_state": "two_pore_steady_state", "pore_safety_margin": "two_pore_safety_margin"}


def _both(func, args):
    names = list(args)
    sym = [pt.dvector(n) for n in names]
    takes_xp = "xp" in inspect.signature(func).parameters
    out_sym = func(*sym, **({"xp": pt} if takes_xp else {}))
    out_np = func(*[args[n] for n in names], **({"xp": np} if takes_xp else {}))
    if not isinstance(out_sym, dict | tuple):
        out_sym, out_np = {"": out_sym}, {"": out_np}
    if isinstance(out_sym, tuple):
        out_sym, out_np = dict(enumerate(out_sym)), dict(enumerate(out_np))
    keys = list(out_sym)
    f = pytensor.function(sym, [out_sym[k] for k in keys], on_unused_input="ignore", mode=MODE)
    got = f(*[args[n] for n in names])
    return {k: (np.broadcast_to(out_np[k], (N,)), g) for k, g in zip(keys, got, strict=True)}


@pytest.mark.parametrize("name", sorted(CASES))
def test_numpy_and_pytensor_agree(name: str) -> None:
    func, args = CASES[name]
    for key, (a, b) in _both(func, args).items():
        assert np.all(np.isfinite(a)), (name, key)
        np.testing.assert_allclose(b, a, rtol=1e-9, atol=1e-12 * max(1.0, float(np.max(np.abs(a)))),
                                   err_msg=f"{name} {key}")


def test_every_public_function_has_a_case() -> None:
    public = [n for n, f in vars(two_pore).items()
              if not n.startswith("_") and inspect.isfunction(f) and f.__module__ == two_pore.__name__]
    assert sorted(public) == sorted([*CASES, *THROUGH])


def _solve(xp, **kw):
    a = dict(Kf=0.004, Pc=25.0, pi_c=25.0, L=0.003, Pi_L0=-3.0, alpha_L=0.08, r_S=4.5, r_L=23.0, C_tis=1.4,
             C_high=7.0, P_break=0.0, JL_max=0.05, Cp=7.0) | kw
    return two_pore.two_pore_steady_state(a["Kf"], a["Pc"], a["pi_c"], a["L"], a["Pi_L0"], a["alpha_L"], a["r_S"],
                                          a["r_L"], C_tis=a["C_tis"], C_high=a["C_high"], P_break=a["P_break"],
                                          JL_max=a["JL_max"], Cp=a["Cp"], xp=xp)


@pytest.mark.slow  # no sampling, but building the gradient graph takes about a minute on a loaded 2-core machine
def test_pytensor_gradient_is_the_implicit_one() -> None:
    """Gradients through bisection + secant step against central differences of the numpy solution."""
    base = dict(Kf=0.004, Pc=25.0, alpha_L=0.08, r_S=4.5, JL_max=0.05)
    sym = {n: pt.dscalar(n) for n in base}
    out = _solve(pt, **sym)
    keys = ("Pi", "ratio")
    f = pytensor.function(list(sym.values()), [g for k in keys for g in pytensor.grad(out[k], list(sym.values()))],
                          mode=MODE)
    got = f(*base.values())
    for i, key in enumerate(keys):
        for n, g in zip(base, got[i * len(base):(i + 1) * len(base)], strict=True):
            h = 1e-5 * abs(base[n])
            fd = (_solve(np, **{n: base[n] + h})[key] - _solve(np, **{n: base[n] - h})[key]) / (2 * h)
            np.testing.assert_allclose(g, fd, rtol=1e-4, atol=1e-9, err_msg=f"d{key}/d{n}")


@pytest.mark.parametrize("safety", [False, True])
def test_no_large_pores_is_the_single_pore_steady_state(safety: bool) -> None:
    """alpha_L = 0: every pore carries the small pores' sigma and PS, so the state is
    ``balance.safety_steady_state`` with them (a closed-form reduction, no tolerance for modelling)."""
    kw = dict(C_tis=1.5, C_high=7.5, P_break=0.0, JL_max=0.04, Cp=7.0) if safety else {}
    Kf, Pc, pi_c, L, Pi_L0 = 0.0025, np.array([12.0, 21.5, 35.0]), 25.6, 0.003, -3.0
    tp = two_pore.two_pore_steady_state(Kf, Pc, pi_c, L, Pi_L0, 0.0, 4.4, 24.0, **kw)
    one = balance.safety_steady_state(Kf, Pc, tp["sigma_S"], tp["PS_S"], pi_c, L, Pi_L0, C_tis=kw.get("C_tis"),
                                      C_high=kw.get("C_high"), P_break=kw.get("P_break"), JL_max=kw.get("JL_max"),
                                      Cp=kw.get("Cp"))
    for k in ("Jv", "Pi", "pi_i", "ratio"):
        np.testing.assert_allclose(tp[k], one[k], rtol=1e-9, atol=1e-12, err_msg=k)
    np.testing.assert_allclose(tp["Jv_large"], 0.0, atol=1e-15)


def test_no_pressure_gradient_leaves_pure_diffusion() -> None:
    """Pc = Pi and pi_c = pi_i: no flow through either pore, and the protein flux is Fick's
    (PS_S + PS_L)(Cp - Ci)."""
    pores = two_pore.pore_properties(0.003, 0.08, 4.5, 23.0)
    J_S, J_L = two_pore.pore_flows(0.003, 0.08, pores["sigma_S"], pores["sigma_L"], 10.0, 10.0, 20.0, 20.0)
    assert J_S == 0.0 and J_L == 0.0
    js = two_pore.two_pore_protein_flux(J_S, J_L, pores["sigma_S"], pores["sigma_L"], pores["PS_S"], pores["PS_L"],
                                        7.0, 3.0)
    np.testing.assert_allclose(js, (pores["PS_S"] + pores["PS_L"]) * (7.0 - 3.0), rtol=1e-14)


def test_high_filtration_floor_is_one_minus_sigma_eff() -> None:
    """As filtration grows (no lymph cap) convection dominates and Ci/Cp tends to
    a_S (1 - sigma_S) + a_L (1 - sigma_L) = 1 - sigma_eff (the limit of Patlak's ratio per pore)."""
    res = _solve(np, Pc=3000.0, JL_max=None, C_high=None, L=1.0)
    np.testing.assert_allclose(res["ratio"], 1.0 - res["sigma_eff"], rtol=0.02)


def test_both_balances_hold_at_the_solution() -> None:
    args = {k: v for k, v in {**STEADY, **SAFETY}.items()}
    p = two_pore.pore_properties(args["Kf"], args["alpha_L"], 4.5, 23.0)
    res = two_pore.pore_steady_state(args["Kf"], args["Pc"], args["pi_c"], args["L"], args["Pi_L0"], args["alpha_L"],
                                     p["sigma_S"], p["sigma_L"], p["PS_S"], p["PS_L"], C_tis=args["C_tis"],
                                     C_high=args["C_high"], P_break=args["P_break"], JL_max=args["JL_max"],
                                     Cp=args["Cp"])
    flowing = args["Pc"] > args["Pi_L0"]
    np.testing.assert_allclose((res["Jv_small"] + res["Jv_large"])[flowing], res["Jv"][flowing], rtol=1e-9)
    js = two_pore.two_pore_protein_flux(res["Jv_small"], res["Jv_large"], p["sigma_S"], p["sigma_L"], p["PS_S"],
                                        p["PS_L"], 1.0, res["ratio"])
    np.testing.assert_allclose(js[flowing], (res["Jv"] * res["ratio"])[flowing], rtol=1e-7, atol=1e-14)
    # no lymph below Pi_L0: the state of the other steady forms
    assert res["Jv"][~flowing] == 0.0 and res["ratio"][~flowing] == 1.0


def test_pore_theory_limits() -> None:
    """A point solute passes freely (sigma 0, no hindrance); a solute as large as the pore is reflected
    (sigma 1, no diffusion); albumin (3.55 nm) through 4.5 and 23 nm pores (Rippe & Haraldsson 1994, from
    memory: small pores nearly reflect it, large pores nearly do not)."""
    assert two_pore.pore_reflection(1e9) == pytest.approx(0.0, abs=1e-9)
    assert two_pore.diffusive_hindrance(1e9) == pytest.approx(1.0, abs=1e-6)
    assert two_pore.pore_reflection(3.0) == 1.0 and two_pore.diffusive_hindrance(3.0) == 0.0
    assert 0.9 < two_pore.pore_reflection(4.5) < 1.0
    assert 0.0 < two_pore.pore_reflection(23.0) < 0.15


def test_ratio_from_oncotic_inverts_the_cubic() -> None:
    """Against scipy's root of the Landis-Pappenheimer cubic (``oncotic.protein_from_pi``)."""
    pi = np.array([0.5, 5.0, 12.0, 25.6])
    R = two_pore.ratio_from_oncotic(pi, 25.6, 7.0)
    scale = 25.6 / oncotic.pi_cubic(7.0, "total")
    np.testing.assert_allclose(R * 7.0, oncotic.protein_from_pi(pi / scale, "total"), rtol=1e-12)
    np.testing.assert_allclose(two_pore.ratio_from_oncotic(pi, 25.6, None), pi / 25.6)


def _study(**extra) -> Study:
    doc = {"study": {"title": "two-pore skin (invented test study)", "tissue": "skin_subcutis",
                     "model": "two_pore", "seed": 3}, **extra}
    return Study.from_dict(doc)


def test_the_form_runs_through_propagate() -> None:
    s = _study(propagate={"samples": 256, "outputs": ["Jv", "pi_i", "ratio", "Jv_large"]})
    assert {"Jv", "Pi", "pi_i", "ratio", "JL", "Jv_large", "sigma_eff"} <= set(study_outputs(s))
    res = propagate(s, samples=256)
    d = res.to_dict()
    assert "pi_i" in str(d)


def test_check_declares_the_inference_model() -> None:
    s = _study(observations=[{"kind": "lymph_flow", "value": 0.01, "sd": 0.0025, "unit": "mL/min/100g"},
                             {"kind": "protein_ratio", "value": 0.5, "sd": 0.1, "unit": "1"}])
    got = check_model(s)
    assert got["readings"] == 2 and got["free_variables"] >= 10


def test_sepsis_and_burns_raise_the_large_pore_share() -> None:
    base = _study().priors["alpha_L"].median()
    for cond in ("sepsis", "burns"):
        s = Study.from_dict({"study": {"title": "t (invented)", "tissue": "skin_subcutis", "model": "two_pore",
                                       "conditions": [cond]}})
        assert s.priors["alpha_L"].median() > 1.5 * base, cond


def test_muscle_pi_i_row_inside_its_band() -> None:
    """The row the single-pore form misses (skeletal_muscle.pi_i.rat, 8-10 mmHg) is met by two pores
    with priors from another source (Rippe & Haraldsson's rat-muscle fit)."""
    row = next(r for r in load_table(tissue="skeletal_muscle") if r.id == "skeletal_muscle.pi_i.rat_two_pore")
    assert not row.known_gap
    assert predict_row(row, samples=512).verdict == "inside"


def test_safety_margin_is_the_rise_of_pc_that_brings_pi_to_the_break() -> None:
    """The margin's definition (``balance.safety_margin``): at Pc + margin the steady Pi equals Pi_break; with
    alpha_L = 0 it is the single-pore margin (closed-form reduction)."""
    kw = dict(C_tis=1.5, C_high=7.5, P_break=0.0, JL_max=0.04, Cp=7.0)
    Kf, Pc, pi_c, L, Pi_L0 = 0.0025, np.array([12.0, 21.5, 35.0]), 25.6, 0.003, -3.0
    m = two_pore.two_pore_safety_margin(Kf, Pc, pi_c, L, Pi_L0, 0.097, 4.4, 24.0, 0.0, **kw)
    at = two_pore.two_pore_steady_state(Kf, Pc + m, pi_c, L, Pi_L0, 0.097, 4.4, 24.0, **kw)
    np.testing.assert_allclose(at["Pi"], 0.0, atol=1e-7)
    p = two_pore.pore_properties(Kf, 0.0, 4.4, 24.0)
    np.testing.assert_allclose(two_pore.two_pore_safety_margin(Kf, Pc, pi_c, L, Pi_L0, 0.0, 4.4, 24.0, 0.0, **kw),
                               balance.safety_margin(Kf, Pc, p["sigma_S"], p["PS_S"], pi_c, L, Pi_L0, 0.0, **kw),
                               rtol=1e-9, atol=1e-9)


def test_imbibition_shift_is_the_intact_state_at_pc_minus_p_imb() -> None:
    """P_imb acts inside the solve: the injured tissue's state is the intact one at Pc - P_imb with Pi lowered by
    P_imb (filtration depends on Pi only through Pc - Pi); the margin shifts by -P_imb."""
    kw = dict(C_tis=1.5, C_high=7.5, P_break=0.0, JL_max=0.04, Cp=7.0)
    Kf, Pc, pi_c, L, Pi_L0 = 0.005, np.array([12.0, 42.0]), 25.6, 0.003, -3.0
    shifted = two_pore.two_pore_steady_state(Kf, Pc, pi_c, L, Pi_L0, 0.097, 4.4, 24.0, P_imb=-31.8, **kw)
    intact = two_pore.two_pore_steady_state(Kf, Pc + 31.8, pi_c, L, Pi_L0, 0.097, 4.4, 24.0, **kw)
    np.testing.assert_allclose(shifted["Pi"], intact["Pi"] - 31.8, rtol=1e-12)
    np.testing.assert_allclose(shifted["Pi_volume"], intact["Pi"], rtol=1e-12)
    for k in ("Jv", "pi_i", "ratio"):
        np.testing.assert_allclose(shifted[k], intact[k], rtol=1e-12)
    m = two_pore.two_pore_safety_margin(Kf, Pc, pi_c, L, Pi_L0, 0.097, 4.4, 24.0, 0.0, P_imb=-31.8, **kw)
    m0 = two_pore.two_pore_safety_margin(Kf, Pc, pi_c, L, Pi_L0, 0.097, 4.4, 24.0, 0.0, **kw)
    np.testing.assert_allclose(m, m0 - 31.8, rtol=1e-12)


def test_burns_steady_pi_stays_positive_with_the_shift_inside() -> None:
    """Burned skin through the two_pore form: the outputs of the steady forms (safety_margin, Pi_early), and the
    steady Pi stays positive although P_imb acts inside the solve (at steady state filtration must fall to what
    the lymph carries; the gap of validation row skin_subcutis.Pi.burns_steady)."""
    s = Study.from_dict({"study": {"title": "t (invented)", "tissue": "skin_subcutis", "model": "two_pore",
                                   "conditions": ["burns"], "seed": 2}})
    assert {"safety_margin", "Pi_early"} <= set(study_outputs(s))
    d = propagate(s, samples=256, seed=2).draws["typical"]
    assert np.median(d["Pi_early"]) < -10.0 < 0.0 < np.median(d["Pi"])
