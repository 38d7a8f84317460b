"""Organ-specific exchange: lung (Gaar relation, lung water), brain (crystalloid osmotic term),
absorbing intestinal mucosa (sustained absorption), each against a published formula or closed form,
and numpy vs PyTensor agreement to 1e-12 for every new xp function.
"""

import inspect

import numpy as np
import pytest
import scipy.constants as sc

from uncertainty.forms import general
from uncertainty.forms.spec import FormContext
from uncertainty.physiology import balance, lung, mucosa, osmotic, starling
from uncertainty.physiology.solute import protein_flux

# ---- lung ------------------------------------------------------------------------------------------

# Ordinary lung values for the steady state, from memory (order of magnitude; Staub 1974 Physiol Rev
# 54:678 for the lymph and interstitium picture): Kf 0.2 mL/min/mmHg/100 g, sigma 0.7, PS 0.01 mL/min/100 g,
# pi_c 25 mmHg, L 0.05 mL/min/mmHg/100 g, Pi_L0 -3 mmHg, C_tis 1 mL/mmHg/100 g, Pi_ref -3 mmHg.
LUNG = dict(Kf=0.2, sigma=0.7, PS=0.01, pi_c=25.0, L=0.05, Pi_L0=-3.0, C_tis=1.0, Pi_ref=-3.0)


def test_gaar_relation_at_textbook_pressures():
    # Gaar et al. 1967 (Am J Physiol 213:910): Pc = LAP + 0.4 (PAP - LAP); LAP 8, PAP 15 -> 10.8 mmHg
    # (textbook pressures, common practice).
    out = lung.lung_water(LAP=8.0, PAP=15.0, **LUNG)
    assert out["Pc"] == pytest.approx(10.8, abs=1e-12)


def test_lung_water_closed_form_without_protein_reflection():
    # Closed form: sigma = 0 removes the oncotic term, so Jv = Kf (Pc - Pi_L0)/(1 + Kf/L),
    # Pi = Pi_L0 + Jv/L, EVLW = EVLW0 + C_tis (Pi - Pi_ref).
    p = dict(LUNG, sigma=0.0)
    out = lung.lung_water(LAP=8.0, PAP=15.0, EVLW0=50.0, **p)
    Jv = p["Kf"] * (10.8 - p["Pi_L0"]) / (1 + p["Kf"] / p["L"])
    assert out["Jv"] == pytest.approx(Jv, rel=1e-10)
    assert out["EVLW"] == pytest.approx(50.0 + p["C_tis"] * (p["Pi_L0"] + Jv / p["L"] - p["Pi_ref"]), rel=1e-10)
    assert out["tau"] == pytest.approx(p["C_tis"] / (p["Kf"] + p["L"]))


def test_evlw_index_of_the_icrp_reference_lung():
    # ICRP Publication 89 reference male (Turner, Atoms, Radiation, and Radiation Protection, Table 16.1):
    # 500 g of blood-free lung; predicted body weight at 176 cm, 50 + 0.91 (176 - 152.4) = 71.5 kg (ARDSNet,
    # common practice). At 75 mL water per 100 g tissue (lung.toml EVLW0, from memory) EVLW is 375 mL, so
    # EVLWI = 375 / 71.5 = 5.24 mL/kg, inside the normal 7.4 +/- 3.3 mL/kg (Tagami et al. 2010 Crit Care 14:R162).
    M = 500.0 / 71.5
    assert lung.evlw_index(75.0, M) == pytest.approx(375.0 / 71.5, rel=1e-12)
    assert 7.4 - 3.3 < lung.evlw_index(75.0, M) < 7.4 + 3.3


def test_left_heart_failure_acts_through_lap():
    # Raised LAP (left-sided failure; 25 mmHg, from memory a typical pulmonary oedema threshold) raises Pc,
    # filtration, lymph flow and lung water; the steady state keeps fluid and protein balances closed.
    normal = lung.lung_water(LAP=8.0, PAP=15.0, **LUNG)
    failing = lung.lung_water(LAP=25.0, PAP=35.0, **LUNG)
    assert failing["Pc"] == pytest.approx(25.0 + 0.4 * 10.0)
    for k in ("Jv", "Pi", "EVLW"):
        assert failing[k] > normal[k]
    assert failing["pi_i"] < normal["pi_i"]  # protein washed out by the higher filtration (Patlak)
    Ci = failing["ratio"]  # in units of Cp
    assert protein_flux(failing["Jv"], LUNG["sigma"], LUNG["PS"], 1.0, Ci) == pytest.approx(failing["Jv"] * Ci)


# ---- brain -----------------------------------------------------------------------------------------

def test_crystalloid_term_for_a_10_mosm_step():
    # van 't Hoff at 37 degC (common practice), from scipy's CODATA constants: R T / mmHg per mOsm/kg
    # (1 mOsm/kg water taken as 1 mol/m^3): about 19.3 mmHg; a 10 mOsm/kg plasma step gives ~193 mmHg x sigma.
    per = sc.R * (273.15 + 37.0) / sc.mmHg
    assert osmotic.MMHG_PER_MOSM == pytest.approx(per, rel=1e-6)
    assert 19.2 < per < 19.4
    for s in (1.0, 0.1, 0.02):
        # rel 1e-6: scipy's mmHg is 101325/760 Pa, ours the conventional 133.322387 Pa
        assert osmotic.crystalloid_pressure(s, 300.0, 290.0) == pytest.approx(10.0 * per * s, rel=1e-6)
    assert osmotic.crystalloid_pressure(1.0, 300.0, 290.0) == pytest.approx(193.0, abs=1.0)


def test_brain_flux_reduces_to_starling_and_osmotherapy_reverses_it():
    # Equal osmolality: the brain form is Starling's equation (``starling.filtration``).
    args = dict(Kf=0.001, Pc=25.0, Pi=8.0, pi_c=25.0, pi_i=3.0, sigma=0.95)
    base = osmotic.brain_filtration(**args, sigma_s=0.98, osm_c=290.0, osm_i=290.0)
    assert base == pytest.approx(starling.filtration(**args), rel=1e-14)
    # A 10 mOsm/kg plasma step with sigma_s 0.98 (from memory: the barrier reflects NaCl almost fully)
    # adds -0.98 * 193.4 mmHg to the net pressure.
    step = osmotic.brain_net_pressure(**{k: v for k, v in args.items() if k != "Kf"}, sigma_s=0.98,
                                      osm_c=300.0, osm_i=290.0)
    expect = starling.net_pressure(25.0, 8.0, 25.0, 3.0, 0.95) - 0.98 * 10.0 * osmotic.MMHG_PER_MOSM
    assert step == pytest.approx(expect)
    assert step < 0
    forces = osmotic.brain_forces(25.0, 8.0, 25.0, 3.0, 0.95, 0.98, 300.0, 290.0)
    assert sum(forces.values()) == pytest.approx(step, rel=1e-12)
    total = osmotic.crystalloid_sum([(0.98, 300.0, 290.0), (0.5, 10.0, 5.0)])
    assert total == pytest.approx((0.98 * 10.0 + 0.5 * 5.0) * osmotic.MMHG_PER_MOSM)


# ---- absorbing mucosa ------------------------------------------------------------------------------

# Absorbing intestinal mucosa, from memory (order of magnitude; Granger and co-workers' cat small-intestine
# studies): Kf 0.1 mL/min/mmHg/100 g, Pc 22 mmHg, sigma 0.9, PS 0.005 mL/min/100 g, pi_c 25 mmHg,
# L 0.2 mL/min/mmHg/100 g, Pi_L0 0 mmHg; epithelial absorbate J_epi 0.2 mL/min/100 g.
MUCOSA = dict(Kf=0.1, Pc=22.0, sigma=0.9, PS=0.005, pi_c=25.0, L=0.2, Pi_L0=0.0)
J_EPI = 0.2


def test_revised_form_sustains_absorption_in_mucosa_not_in_ordinary_tissue():
    # Levick & Michel 2010 (Cardiovasc Res 87:198): sustained absorption only where a protein-free fluid
    # supply washes the interstitium (intestinal mucosa).
    gut = mucosa.absorbing_steady_state(**MUCOSA, J_epi=J_EPI)
    assert gut["Jv"] < 0 and gut["lymph_stopped"] == 0.0
    ordinary = balance.revised_steady_state(**MUCOSA)
    assert ordinary["Jv"] > 0
    # no epithelial supply: the mucosa function is the ordinary (classic) steady state, filtration
    same = mucosa.absorbing_steady_state(**MUCOSA, J_epi=0.0)
    classic = balance.steady_state(**MUCOSA)
    assert same["Jv"] > 0
    for k in ("Jv", "Pi", "pi_i", "ratio"):
        assert same[k] == pytest.approx(classic[k], rel=1e-9)


def test_mucosa_balances_close():
    # Conservation: lymph = capillary filtration + epithelial inflow; protein leaving in lymph = Patlak flux;
    # Starling's equation holds at the solution.
    out = mucosa.absorbing_steady_state(**MUCOSA, J_epi=J_EPI)
    assert out["JL"] == pytest.approx(out["Jv"] + J_EPI, rel=1e-12)
    assert out["JL"] == pytest.approx(MUCOSA["L"] * (out["Pi"] - MUCOSA["Pi_L0"]), rel=1e-12)
    Js = protein_flux(out["Jv"], MUCOSA["sigma"], MUCOSA["PS"], 1.0, out["ratio"])
    assert Js == pytest.approx(out["JL"] * out["ratio"], rel=1e-9)
    Jv = starling.filtration(MUCOSA["Kf"], MUCOSA["Pc"], out["Pi"], MUCOSA["pi_c"], out["pi_i"], MUCOSA["sigma"])
    assert Jv == pytest.approx(out["Jv"], rel=1e-9)
    assert out["pi_i"] == pytest.approx(MUCOSA["pi_c"] * out["ratio"])


def test_mucosa_closed_form_without_reflection():
    # sigma = 0: no oncotic term, Jv = Kf (Pc - Pi_L0 - J_epi/L)/(1 + Kf/L) (closed form).
    p = dict(MUCOSA, sigma=0.0, Pc=5.0, L=0.02)
    out = mucosa.absorbing_steady_state(**p, J_epi=J_EPI)
    expect = p["Kf"] * (p["Pc"] - p["Pi_L0"] - J_EPI / p["L"]) / (1 + p["Kf"] / p["L"])
    assert expect < 0
    assert out["Jv"] == pytest.approx(expect, rel=1e-10)


def test_mucosa_lymph_stops_when_capillaries_take_everything():
    # Pc low: capillaries would absorb more than the epithelium supplies; the no-lymph state is returned,
    # with Starling's equation giving Pi below Pi_L0.
    out = mucosa.absorbing_steady_state(**dict(MUCOSA, Pc=12.0), J_epi=J_EPI)
    assert out["lymph_stopped"] == 1.0
    assert out["Jv"] == pytest.approx(-J_EPI)
    assert out["Pi"] < MUCOSA["Pi_L0"]
    Jv = starling.filtration(MUCOSA["Kf"], 12.0, out["Pi"], MUCOSA["pi_c"], out["pi_i"], MUCOSA["sigma"])
    assert Jv == pytest.approx(-J_EPI, rel=1e-9)


# ---- numpy vs PyTensor -----------------------------------------------------------------------------

pytensor = pytest.importorskip("pytensor")
pt = pytest.importorskip("pytensor.tensor")

RNG = np.random.default_rng(1967)
N = 32


def u(lo, hi):
    return RNG.uniform(lo, hi, N)


CASES = {
    "osmotic.mmhg_per_mosm": (osmotic.mmhg_per_mosm, dict(T=u(290, 315))),
    "osmotic.crystalloid_pressure": (osmotic.crystalloid_pressure, dict(
        sigma_s=u(0, 1), osm_c=u(270, 330), osm_i=u(270, 330))),
    "osmotic.brain_net_pressure": (osmotic.brain_net_pressure, dict(
        Pc=u(15, 35), Pi=u(0, 15), pi_c=u(15, 30), pi_i=u(0, 5), sigma=u(0.8, 1), sigma_s=u(0.5, 1),
        osm_c=u(280, 320), osm_i=u(280, 300))),
    "osmotic.brain_filtration": (osmotic.brain_filtration, dict(
        Kf=u(1e-4, 1e-2), Pc=u(15, 35), Pi=u(0, 15), pi_c=u(15, 30), pi_i=u(0, 5), sigma=u(0.8, 1),
        sigma_s=u(0.5, 1), osm_c=u(280, 320), osm_i=u(280, 300))),
    "osmotic.brain_forces": (osmotic.brain_forces, dict(
        Pc=u(15, 35), Pi=u(0, 15), pi_c=u(15, 30), pi_i=u(0, 5), sigma=u(0.8, 1), sigma_s=u(0.5, 1),
        osm_c=u(280, 320), osm_i=u(280, 300))),
    "lung.lung_water": (lung.lung_water, dict(
        Kf=u(0.05, 0.4), LAP=u(2, 30), PAP=u(10, 40), sigma=u(0.5, 0.9), PS=u(0.002, 0.02), pi_c=u(18, 30),
        L=u(0.02, 0.2), Pi_L0=u(-5, 0), C_tis=u(0.5, 2), Pi_ref=u(-5, -1), EVLW0=u(30, 60))),
    "lung.extravascular_water": (
        lambda Pi, Pi_ref, C_tis, EVLW0, C_high, P_break, xp=np: lung.extravascular_water(
            Pi, Pi_ref, C_tis, EVLW0, C_high=C_high, P_break=P_break, xp=xp),
        dict(Pi=u(-6, 10), Pi_ref=u(-5, -1), C_tis=u(0.5, 2), EVLW0=u(60, 90), C_high=u(5, 20), P_break=u(-2, 3))),
    "lung.evlw_index": (lung.evlw_index, dict(EVLW=u(50, 120), M_lung=u(5, 10))),
    "lung.alveolar_water": (lung.alveolar_water, dict(flooding=u(0, 0.5), k_AFC=u(0.0005, 0.01))),
    "lung.pulmonary_arterial_pressure": (lung.pulmonary_arterial_pressure, dict(LAP=u(2, 35), TPG=u(1, 20))),
    "osmotic.crystalloid_sum": (lambda s1, c1, i1, s2, c2, i2: osmotic.crystalloid_sum(
        [(s1, c1, i1), (s2, c2, i2)]), dict(s1=u(0, 1), c1=u(270, 330), i1=u(270, 330), s2=u(0, 1),
                                          c2=u(0, 20), i2=u(0, 20))),
    "mucosa.washout_ratio": (mucosa.washout_ratio, dict(
        Jv=u(-0.15, 0.2), J_epi=u(0.15, 0.4), sigma=u(0.5, 1), PS=u(0.001, 0.01))),
    "mucosa.absorbing_steady_state": (mucosa.absorbing_steady_state, dict(
        Kf=u(0.05, 0.2), Pc=u(10, 30), sigma=u(0.7, 0.95), PS=u(0.002, 0.01), pi_c=u(20, 28), L=u(0.1, 0.4),
        Pi_L0=u(-1, 1), J_epi=u(0.0, 0.3))),
}
NUMPY_ONLY: set[str] = set()


SLOW_CASES = {"lung.lung_water", "mucosa.absorbing_steady_state"}  # compile a Newton graph or a scan: tens of s


@pytest.mark.parametrize("name", [pytest.param(n, marks=pytest.mark.slow) if n in SLOW_CASES else n
                                  for n in sorted(CASES)])
def test_numpy_and_pytensor_agree(name):
    func, args = CASES[name]
    names = list(args)
    sym = [pt.dvector(n) for n in names]
    kw = {"xp": pt} if "xp" in inspect.signature(func).parameters else {}
    out_sym = func(*sym, **kw)
    out_np = func(*[args[n] for n in names])
    if not isinstance(out_sym, dict):
        out_sym, out_np = {"": out_sym}, {"": out_np}
    keys = list(out_sym)
    f = pytensor.function(sym, [out_sym[k] for k in keys], on_unused_input="ignore", mode="NUMBA")
    res = f(*[args[n] for n in names])
    for k, b in zip(keys, res, strict=True):
        a = np.broadcast_to(out_np[k], b.shape)
        assert np.all(np.isfinite(a)), (name, k)
        np.testing.assert_allclose(b, a, rtol=1e-12, atol=1e-12 * max(1.0, float(np.max(np.abs(a)))),
                                   err_msg=f"{name} {k}")
    if name == "mucosa.absorbing_steady_state":
        jv = np.asarray(out_np["Jv"])
        assert (jv < 0).any() and (jv > 0).any()  # both regimes exercised


def test_every_new_public_function_has_a_case():
    missing = []
    for mod_name, mod in {"osmotic": osmotic, "lung": lung, "mucosa": mucosa}.items():
        for fname, obj in vars(mod).items():
            if fname.startswith("_") or not inspect.isfunction(obj) or obj.__module__ != mod.__name__:
                continue
            if f"{mod_name}.{fname}" not in CASES and f"{mod_name}.{fname}" not in NUMPY_ONLY:
                missing.append(f"{mod_name}.{fname}")
    assert not missing


@pytest.mark.slow
def test_mucosa_gradient_matches_finite_difference():
    # The bisection is cut from differentiation; the final Newton step carries the implicit gradient.
    Pc = pt.dscalar("Pc")
    p = {k: v for k, v in MUCOSA.items() if k != "Pc"}
    out = mucosa.absorbing_steady_state(Pc=Pc, **p, J_epi=J_EPI, xp=pt)["Jv"]
    g = pytensor.function([Pc], pytensor.grad(out, Pc), mode="NUMBA")(22.0)
    h = 1e-4
    fd = (mucosa.absorbing_steady_state(Pc=22.0 + h, **p, J_epi=J_EPI)["Jv"]
          - mucosa.absorbing_steady_state(Pc=22.0 - h, **p, J_epi=J_EPI)["Jv"]) / (2 * h)
    assert g == pytest.approx(fd, rel=1e-5)


def test_brain_classic_form_reaches_the_crystalloid_term():
    # van 't Hoff at 37 C: R T = 19.34 mmHg per mOsm/kg (common practice). A 10 mOsm/kg plasma excess at
    # sigma_s 0.95 opposes filtration by 0.95 x 193.4 = 183.7 mmHg, dwarfing the protein term.
    v = {"Kf": 4e-5, "Pc": 25.0, "Pi": 10.0, "pi_c": 25.6, "pi_i": 0.07, "sigma": 0.995, "sigma_s": 0.95,
         "Osm_p": 300.0, "Osm_i": 290.0}
    res = general.brain_classic(v, FormContext(tissue="brain"), np)
    assert res.outputs["force_osm"] == pytest.approx(-0.95 * 10.0 * osmotic.MMHG_PER_MOSM, rel=1e-12)
    assert osmotic.MMHG_PER_MOSM == pytest.approx(19.34, abs=0.01)
    protein = 25.0 - 10.0 - 0.995 * (25.6 - 0.07)
    assert res.outputs["net_pressure"] == pytest.approx(protein + res.outputs["force_osm"], rel=1e-12)
    assert res.outputs["Jv"] == pytest.approx(4e-5 * res.outputs["net_pressure"], rel=1e-12)
    # without the osmolalities the form is Starling's (protein terms only)
    plain = general.brain_classic({k: v[k] for k in ("Kf", "Pc", "Pi", "pi_c", "pi_i", "sigma")},
                                  FormContext(tissue="brain"), np)
    assert plain.outputs["Jv"] == pytest.approx(4e-5 * protein, rel=1e-12)
