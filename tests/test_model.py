"""model.evaluate: derivations and the three model forms, numpy and PyTensor alike.

Check values: Starling's equation Jv = Kf [(Pc - Pi) - sigma (pi_c - pi_i)] (Starling 1896; closed
form, common practice); Pc = (r Pa + Pv)/(1 + r) (Pappenheimer & Soto-Rivera 1948, Am J Physiol
152:471); Gaar et al. 1967 (Am J Physiol 213:910) Pc = LAP + 0.4 (PAP - LAP); the Patlak steady-state
ratio Ci/Cp = (1 - sigma)/(1 - sigma e^-Pe), Pe = Jv (1 - sigma)/PS (Patlak et al. 1963).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from uncertainty.forms.evaluate import OUTPUT_UNITS, evaluate, required_inputs
from uncertainty.forms.general import SAFETY_INPUTS
from uncertainty.study import Study


def _study(model: str = "classic", tissue: str = "skeletal_muscle", **extra) -> Study:
    doc = {"study": {"tissue": tissue, "model": model, **extra.pop("head", {})}}
    doc.update(extra)
    return Study.from_dict(doc)


def _linear(study: Study) -> Study:
    """The study without the safety factors (compliance break, JL_max): the linear lymph line."""
    for k in SAFETY_INPUTS:
        study.priors.pop(k, None)
        study.derived.pop(k, None)  # (the muscle set derives JL_max from the resting filtrate and JL_reserve)
    return study


def _medians(study: Study) -> dict[str, float]:
    return {s: p.median() for s, p in study.priors.items()}


def test_classic_is_starling_with_given_values() -> None:
    s = _study(parameters={"Pc": 25.0, "Pi": -2.0, "pi_c": 25.0, "pi_i": 8.0, "sigma": 0.9, "Kf": 0.004})
    out = evaluate(s, {})
    # closed form: 0.004 * ((25 + 2) - 0.9 * (25 - 8)) = 0.004 * 11.7
    assert out["Jv"] == pytest.approx(0.004 * 11.7)
    assert out["net_pressure"] == pytest.approx(11.7)
    total = out["force_Pc"] + out["force_Pi"] + out["force_pi_c"] + out["force_pi_i"]
    assert total == pytest.approx(11.7)
    assert out["force_pi_c"] == pytest.approx(-0.9 * 25.0)


def test_derivations_pc_and_pi_c() -> None:
    s = _study()
    v = _medians(s)
    out = evaluate(s, v)
    pc = (v["r"] * v["Pa"] + v["Pv"]) / (1 + v["r"])
    assert out["Pc"] == pytest.approx(pc)
    c = v["Cp"]
    # Landis & Pappenheimer total-protein relation (coefficients from memory)
    assert out["pi_c"] == pytest.approx(2.1 * c + 0.16 * c**2 + 0.009 * c**3)
    jv = v["Kf"] * ((pc - v["Pi"]) - v["sigma"] * (out["pi_c"] - v["pi_i"]))
    assert out["Jv"] == pytest.approx(jv)


def test_lung_pc_from_gaar() -> None:
    s = _study(tissue="lung")
    v = _medians(s)
    out = evaluate(s, v)
    pap = v["LAP"] + v["TPG"]  # PAP = LAP + TPG (priors/lung.toml, issue 15 item 9)
    assert out["PAP"] == pytest.approx(pap)
    assert out["Pc"] == pytest.approx(v["LAP"] + 0.4 * (pap - v["LAP"]))


@pytest.mark.parametrize("model", ["steady_state", "revised"])
def test_steady_forms_balance_fluid_and_protein(model: str) -> None:
    s = _linear(_study(model))
    assert "Pi" not in s.priors and "pi_i" not in s.priors
    from uncertainty.analyses.sampling import draw

    v = draw(s, 256, method="mc", seed=11, layer="typical")
    out = evaluate(s, v)
    jv, pi = out["Jv"], out["Pi"]
    # fluid balance: lymph flow L (Pi - Pi_L0) equals Jv
    np.testing.assert_allclose(v["L"] * (pi - v["Pi_L0"]), jv, rtol=1e-8, atol=1e-12)
    # Patlak steady-state ratio at the solved Jv
    pe = jv * (1 - v["sigma"]) / v["PS"]
    ratio = (1 - v["sigma"]) / (1 - v["sigma"] * np.exp(-pe))
    np.testing.assert_allclose(out["ratio"], ratio, rtol=1e-6)
    # Starling holds with the solved pressures (pi_g in the revised form)
    opposing = out["pi_g"] if model == "revised" else out["pi_i"]
    np.testing.assert_allclose(jv, v["Kf"] * ((out["Pc"] - pi) - v["sigma"] * (out["pi_c"] - opposing)),
                               rtol=1e-8, atol=1e-12)
    assert set(out) == set(s.outputs())


def test_revised_without_large_pores_equals_steady_state() -> None:
    a, b = _study("steady_state"), _study("revised")
    va = _medians(a)
    oa, ob = evaluate(a, va), evaluate(b, va)
    for k in ("Jv", "Pi", "pi_i"):
        assert ob[k] == pytest.approx(oa[k])
    assert ob["pi_g"] == pytest.approx(oa["pi_i"])


def test_whole_tissue_shift() -> None:
    s = _study(head={"tissue_mass": "3.2 kg"})
    out = evaluate(s, _medians(s))
    # 3.2 kg = 32 x 100 g; mL/min -> mL/h x 60; -> L/day x 1.44
    assert out["Jv_mL_per_h"] == pytest.approx(out["Jv"] * 32 * 60)
    assert out["Jv_L_per_day"] == pytest.approx(out["Jv"] * 32 * 1.44)


@pytest.mark.parametrize("model", ["classic", "steady_state", "revised"])
def test_pytensor_matches_numpy(model: str) -> None:
    import pytensor
    import pytensor.tensor as pt

    s = _study(model, head={"tissue_mass": "2 kg"})
    from uncertainty.analyses.sampling import draw

    v = draw(s, 64, method="mc", seed=5)
    syms = list(s.priors)
    tens = {k: pt.dvector(k) for k in syms}
    out_t = evaluate(s, tens, xp=pt)
    names = sorted(out_t)
    f = pytensor.function([tens[k] for k in syms], [out_t[k] for k in names], on_unused_input="ignore",
                        mode="FAST_COMPILE")
    got = f(*[np.asarray(v[k], dtype=float) for k in syms])
    ref = evaluate(s, v)
    for name, arr in zip(names, got, strict=True):
        np.testing.assert_allclose(np.broadcast_to(arr, np.shape(ref[name])), ref[name], rtol=1e-9, atol=1e-13,
                                   err_msg=name)


@pytest.mark.slow
def test_pytensor_gradient_of_steady_jv() -> None:
    """d Jv / d Kf through the unrolled steady state agrees with a central finite difference."""
    import pytensor
    import pytensor.tensor as pt

    s = _study("steady_state")
    v = _medians(s)
    kf = pt.dscalar("Kf")
    vals = {k: (kf if k == "Kf" else float(x)) for k, x in v.items()}
    jv = evaluate(s, vals, xp=pt)["Jv"]
    g = pytensor.function([kf], pytensor.grad(jv, kf), mode="FAST_COMPILE")(v["Kf"])
    h = v["Kf"] * 1e-5
    up = evaluate(s, {**v, "Kf": v["Kf"] + h})["Jv"]
    dn = evaluate(s, {**v, "Kf": v["Kf"] - h})["Jv"]
    assert float(g) == pytest.approx((up - dn) / (2 * h), rel=1e-5)


def test_output_units_cover_outputs_and_required_inputs() -> None:
    for model in ("classic", "steady_state", "revised"):
        s = _study(model, head={"tissue_mass": "1 kg"})
        assert set(s.outputs()) <= set(OUTPUT_UNITS)
    assert required_inputs("classic") == ("Kf", "Pc", "Pi", "pi_c", "pi_i", "sigma")
    assert "Pi" not in required_inputs("steady_state")


def test_oedema_volume_uses_reference_pi() -> None:
    s = _linear(_study("steady_state"))
    v = _medians(s)
    out = evaluate(s, v)
    assert s.Pi_ref == pytest.approx(-1.0)  # skeletal_muscle Pi prior median (priors/skeletal_muscle.toml)
    assert out["oedema_volume"] == pytest.approx(v["C_tis"] * (out["Pi"] - s.Pi_ref))
    assert math.isfinite(out["oedema_volume"])


@pytest.mark.parametrize("model", ["steady_state", "revised"])
def test_safety_factor_steady_state_balances_fluid_and_protein(model: str) -> None:
    """With the muscle set's safety factors: lymph (volume-driven, capped at JL_max) equals Jv, the Patlak
    ratio holds at the solved Jv, Starling holds with the solved pressures, and Jv never exceeds JL_max."""
    from uncertainty.analyses.sampling import draw
    from uncertainty.physiology.interstitium import volume_lymph_flow

    s = _study(model)
    assert {"C_tis_high", "Pi_break"} <= set(s.priors) and s.derived["JL_max"].formula == "lymph_capacity"
    v = draw(s, 256, method="mc", seed=11, layer="typical")
    out = evaluate(s, v)
    v["JL_max"] = out["JL_max"]  # the resting filtrate + JL_reserve, per draw
    jv, pi = out["Jv"], out["Pi"]
    jl, _ = volume_lymph_flow(pi, v["L"], v["Pi_L0"], v["C_tis"], v["C_tis_high"], v["Pi_break"], v["JL_max"])
    np.testing.assert_allclose(jl, jv, rtol=1e-8, atol=1e-12)
    assert np.all(jv <= v["JL_max"] * (1 + 1e-12))
    pe = jv * (1 - v["sigma"]) / v["PS"]
    np.testing.assert_allclose(out["ratio"], (1 - v["sigma"]) / (1 - v["sigma"] * np.exp(-pe)), rtol=1e-6)
    opposing = out["pi_g"] if model == "revised" else out["pi_i"]
    np.testing.assert_allclose(jv, v["Kf"] * ((out["Pc"] - pi) - v["sigma"] * (out["pi_c"] - opposing)),
                               rtol=1e-8, atol=1e-12)
    assert set(out) == set(s.outputs()) and "safety_margin" in out


def test_oedema_is_measured_from_the_subjects_own_curve() -> None:
    """A normally hydrated subject (Pi below the break of his pressure-volume curve) holds no oedema, whatever
    the population's reference Pi; venous congestion (+20 mmHg) gives oedema and uses up the safety margin."""
    s = _study("steady_state")
    v = _medians(s)
    out = evaluate(s, v)
    assert out["Pi"] < v["Pi_break"] and out["oedema_volume"] == 0.0 and out["safety_margin"] > 0
    c = _study("steady_state", head={"conditions": ["venous_congestion"]})
    oc = evaluate(c, _medians(c))
    assert oc["Pi"] > v["Pi_break"] and oc["oedema_volume"] > 0 and oc["safety_margin"] < 0
