"""The glomerular model form in studies, its observation kinds, and organ-specific bad input (issue 8).

Checks: the study-level form reproduces ``physiology.glomerulus`` at the prior medians (closed-form unit
conversion of RPF to per 100 g), textbook human whole-kidney magnitudes, and exit status 2 with file, key
and value for a form without its quantities, a lymph-flow observation for brain, a filtration fraction at
or above 1, and a glomerular observation under another form.
"""

from __future__ import annotations

import numpy as np
import pytest
from click.testing import CliRunner

from uncertainty.cli import main
from uncertainty.errors import StudyError
from uncertainty.model import evaluate
from uncertainty.physiology.glomerulus import glomerular_filtration
from uncertainty.study import Study

HEAD = {"title": "invented: glomerular form check", "tissue": "glomerulus", "model": "glomerular",
        "tissue_mass": "0.3 kg", "seed": 3}


def _study(**extra) -> Study:
    doc = {"study": dict(HEAD)}
    doc.update(extra)
    return Study.from_dict(doc)


def test_glomerular_form_matches_physiology_at_medians():
    s = _study()
    assert set(s.names) == {"Kf", "Pc", "Pi", "Cp", "RPF"}
    out = evaluate(s, {})
    med = {k: s.priors[k].median() for k in s.names}
    # RPF (mL/min, whole tissue) per 100 g: divided by 0.3 kg / 100 g = 3 (closed form)
    ref = glomerular_filtration(med["Kf"], med["Pc"] - med["Pi"], med["RPF"] / 3.0, med["Cp"])
    assert out["Jv"] == pytest.approx(ref["GFR"], rel=1e-12)
    assert out["GFR"] == pytest.approx(3.0 * ref["GFR"], rel=1e-12)
    assert out["FF"] == pytest.approx(ref["FF"], rel=1e-12)
    # force breakdown sums to the mean net ultrafiltration pressure, GFR = Kf x mean net pressure
    total = out["force_Pc"] + out["force_Pi"] + out["force_pi_c"] + out["force_pi_i"]
    assert total == pytest.approx(out["net_pressure"], rel=1e-12)
    assert out["Jv"] == pytest.approx(med["Kf"] * out["net_pressure"], rel=1e-12)
    # Human textbook estimates (common practice; textbook, not measured): GFR about 125 mL/min,
    # filtration fraction about 0.2, about 180 L/day; human glomeruli do not reach equilibrium.
    assert 100 < out["GFR"] < 160
    assert 0.15 < out["FF"] < 0.25
    assert 140 < out["Jv_L_per_day"] < 230
    assert out["equilibrium"] == 0.0


def test_glomerular_form_vectorised():
    s = _study()
    n = 5
    vals = {k: np.full(n, s.priors[k].median()) for k in s.names}
    vals["RPF"] = np.linspace(300.0, 900.0, n)
    out = evaluate(s, vals)
    assert out["GFR"].shape == (n,)
    assert np.all(np.diff(out["GFR"]) > 0)  # plasma-flow dependence of GFR (Deen et al. 1973)
    assert np.all(np.diff(out["FF"]) < 0)


def _bad(tmp_path, text: str) -> tuple[int, str]:
    p = tmp_path / "bad.toml"
    p.write_text(text, encoding="utf-8")
    res = CliRunner().invoke(main, ["check", str(p)])
    return res.exit_code, (res.output or "") + (getattr(res, "stderr", "") or "")


GLOM = """[study]
tissue = "glomerulus"
model = "glomerular"
tissue_mass = "0.3 kg"
"""


def test_form_without_its_quantities_exits_2(tmp_path):
    code, msg = _bad(tmp_path, GLOM.replace('tissue_mass = "0.3 kg"\n', ""))
    assert code == 2 and "bad.toml" in msg and "study.tissue_mass" in msg
    code, msg = _bad(tmp_path, GLOM.replace('"glomerulus"', '"skeletal_muscle"'))
    assert code == 2 and "study.model" in msg and "glomerular" in msg
    with pytest.raises(StudyError) as exc:
        Study.from_dict({"study": dict(HEAD, tissue="skeletal_muscle")})
    assert exc.value.key == "study.model" and exc.value.value == "glomerular"


def test_lymph_flow_for_brain_refused_with_reason(tmp_path):
    text = """[study]
tissue = "brain"

[[observations]]
kind = "lymph_flow"
value = 0.002
sd = 0.0005
unit = "mL/min/100g"
"""
    code, msg = _bad(tmp_path, text)
    assert code == 2
    assert "observations[0].kind" in msg and "lymphatics" in msg and "lymph_flow" in msg


@pytest.mark.parametrize("ff", [1.0, 1.2])
def test_filtration_fraction_at_or_above_one_refused(tmp_path, ff):
    text = GLOM + f"""
[[observations]]
kind = "filtration_fraction"
value = {ff}
sd = 0.02
"""
    code, msg = _bad(tmp_path, text)
    assert code == 2 and "observations[0]" in msg and "between 0 and 1" in msg and str(ff) in msg


def test_glomerular_observation_under_another_form_refused(tmp_path):
    text = """[study]
tissue = "glomerulus"

[[observations]]
kind = "GFR"
value = 120
sd = 10
unit = "mL/min"
"""
    code, msg = _bad(tmp_path, text)
    assert code == 2 and "observations[0].kind" in msg and "glomerular" in msg


def test_valid_glomerular_observations_pass_check(tmp_path):
    text = GLOM + """
[[observations]]
kind = "GFR"
value = 120
sd = 10
unit = "mL/min"

[[observations]]
kind = "filtration_fraction"
value = 0.19
sd = 0.02
"""
    code, msg = _bad(tmp_path, text)
    assert code == 0, msg


@pytest.mark.slow
def test_glomerular_form_numpy_and_pytensor_agree():
    pytensor = pytest.importorskip("pytensor")
    pt = pytest.importorskip("pytensor.tensor")
    s = _study()
    rng = np.random.default_rng(8)
    vals = {k: s.priors[k].median() * rng.uniform(0.85, 1.15, 8) for k in s.names}
    sym = {k: pt.dvector(k) for k in s.names}
    out_sym = evaluate(s, sym, xp=pt)
    keys = ["Jv", "GFR", "FF", "pi_eff", "net_pressure", "Kf_lower_bound"]
    f = pytensor.function(list(sym.values()), [out_sym[k] for k in keys], mode="NUMBA")
    res = f(*[vals[k] for k in s.names])
    ref = evaluate(s, vals)
    for k, r in zip(keys, res, strict=True):
        np.testing.assert_allclose(r, ref[k], rtol=1e-12, atol=1e-12, err_msg=k)


@pytest.mark.slow  # compiles the glomerular scan inside a PyMC model
def test_glomerular_observations_build_and_prior_predictive():
    # GFR and FF readings are terms of the PyMC model; their prior predictive centres on the forward
    # model at the human textbook priors (GFR about 125 mL/min, FF about 0.2: textbook estimates).
    pm = pytest.importorskip("pymc")
    from uncertainty.inference.model_builder import build_model
    from uncertainty.inference.problem import problem_from_study

    obs = [{"kind": "GFR", "value": 110.0, "sd": 8.0, "unit": "mL/min"},
           {"kind": "filtration_fraction", "value": 0.17, "sd": 0.015},
           {"kind": "RPF", "value": 640.0, "cv": 0.1, "unit": "mL/min"}]
    s = _study(observations=obs)
    built = build_model(problem_from_study(s))
    names = {v.name for v in built.model.observed_RVs}
    assert {"obs0__GFR", "obs1__filtration_fraction", "obs2__RPF"} <= names
    with built.model:
        pp = pm.sample_prior_predictive(200, random_seed=5).prior_predictive
    assert 100 < float(pp["obs0__GFR"].median()) < 160
    assert 0.15 < float(pp["obs1__filtration_fraction"].median()) < 0.25
    assert 550 < float(pp["obs2__RPF"].median()) < 750  # RPF prior 650 mL/min (textbook estimate)
