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

from uncertainty.app.cli import main
from uncertainty.core.errors import StudyError
from uncertainty.forms.evaluate import evaluate
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
    from uncertainty.analyses.inference.model_builder import build_model
    from uncertainty.analyses.inference.problem import problem_from_study

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


# ---- the "Kf is only bounded below" note in analyses --------------------------------------------------

#: Hydropenic Munich-Wistar rat, per glomerulus (Deen, Troy, Robertson & Brenner 1973, J Clin Invest 52:1500,
#: abstract: Kf 0.08 nL/(s mmHg) = 4.8 nL/min/mmHg; P_GC about 45 and Bowman's space about 10 mmHg, afferent
#: plasma flow about 75 nL/min, plasma protein about 5.7 g/dL, from memory), scaled to two kidneys of about
#: 2 g with about 30,000 glomeruli each (from memory): Kf 4.8 nL/min/mmHg x 60,000 / 20 (100 g units) =
#: 14.4 mL/min/mmHg/100 g, RPF 75 nL/min x 60,000 = 4.5 mL/min. These reach filtration equilibrium
#: (single-nephron FF about 0.33, Deen et al. 1973).
RAT_HEAD = dict(HEAD, title="invented: rat micropuncture values", tissue_mass="2 g")
RAT = {"Kf": {"dist": "lognormal", "median": 14.4, "gsd": 1.2, "unit": "mL/min/mmHg/100g"},
       "Pc": {"dist": "normal", "mean": 45.0, "sd": 2.0, "unit": "mmHg"},
       "Pi": {"dist": "normal", "mean": 10.0, "sd": 1.0, "unit": "mmHg"},
       "Cp": {"dist": "normal", "mean": 5.7, "sd": 0.2, "unit": "g/dL"},
       "RPF": {"dist": "normal", "mean": 4.5, "sd": 0.3, "unit": "mL/min"}}
#: Plasma loading raised single-nephron plasma flow to several times the hydropenic value and abolished
#: equilibrium, which let Deen et al. (1973) fix Kf uniquely; 250 nL/min (from memory) x 60,000 = 15 mL/min.
HIGH_FLOW = dict(RAT, RPF={"dist": "normal", "mean": 15.0, "sd": 1.0, "unit": "mL/min"})

BOUNDED_BELOW = "observations bound Kf only from below"


def _rat(parameters: dict, **extra) -> Study:
    return Study.from_dict({"study": dict(RAT_HEAD), "parameters": parameters, **extra})


def test_no_filtration_is_an_output():
    s = _study()
    assert "no_filtration" in s.outputs()
    # afferent oncotic pressure above P_GC - P_Bowman: nothing filters (Deen et al. 1972 model; pi at 7 g/dL
    # is about 25.6 mmHg by the Landis-Pappenheimer relation, common practice)
    out = evaluate(s, {"Pc": np.array([60.0, 40.0]), "Pi": np.array([18.0, 18.0])})
    assert out["no_filtration"].tolist() == [0.0, 1.0]
    assert out["GFR"][1] == 0.0 and out["GFR"][0] > 0


def test_propagate_notes_kf_bounded_below_at_rat_equilibrium():
    from uncertainty.analyses.propagate import propagate

    s = _rat(RAT)
    # the whole-kidney scaling leaves Kf/Q_A as per glomerulus: the study at its medians is the
    # single-glomerulus solution (4.8 nL/min/mmHg, dP 35 mmHg, 75 nL/min, 5.7 g/dL)
    one = glomerular_filtration(4.8, 35.0, 75.0, 5.7)
    at_medians = evaluate(s, {})
    assert at_medians["FF"] == pytest.approx(one["FF"], rel=1e-9) and one["equilibrium"] == 1.0
    r = propagate(s, samples=2048, outputs=["GFR", "FF", "equilibrium"])
    notes = [n for n in r.notes if BOUNDED_BELOW in n]
    assert len(notes) == 1
    assert notes[0] in r.to_dict()["notes"]
    # single-nephron FF about 0.33 at equilibrium (Deen et al. 1973)
    assert 0.29 < r.summaries["individual"]["FF"].median < 0.36
    share = r.summaries["individual"]["equilibrium"].mean
    assert share > 0.5 and f"in {100 * share:.0f}% of evaluations" in notes[0]


def test_propagate_has_no_note_without_equilibrium():
    from uncertainty.analyses.propagate import propagate

    r = propagate(_rat(HIGH_FLOW), samples=2048, outputs=["GFR", "FF", "equilibrium"])
    assert r.summaries["individual"]["equilibrium"].mean < 0.05
    assert not [n for n in r.notes if "equilibrium" in n or "filters" in n]
    # disequilibrium at high plasma flow: FF falls (Deen et al. 1973)
    assert r.summaries["individual"]["FF"].median < 0.27


def test_propagate_command_prints_the_note(tmp_path):
    import json

    p = tmp_path / "rat.toml"
    lines = ["[study]", 'tissue = "glomerulus"', 'model = "glomerular"', 'tissue_mass = "2 g"', "seed = 3", "",
             "[parameters]"]
    for k, d in RAT.items():
        lines.append(f"{k} = {json.dumps(d).replace(':', ' =')}")
    p.write_text("\n".join(lines) + "\n", encoding="utf-8")
    res = CliRunner().invoke(main, ["propagate", str(p), "--samples", "1024", "--json"])
    assert res.exit_code == 0, res.output
    assert any(BOUNDED_BELOW in n for n in json.loads(res.stdout)["notes"])
    res = CliRunner().invoke(main, ["propagate", str(p), "--samples", "1024"])
    assert res.exit_code == 0 and BOUNDED_BELOW in res.output


def test_inference_summary_notes_from_posterior_draws():
    # The inference summary evaluates the model on the posterior draws; here prior draws stand in for them
    # (no sampling). Rat values -> the note; high plasma flow -> none.
    from uncertainty.analyses.inference.api import posterior_output_notes
    from uncertainty.analyses.inference.problem import problem_from_study

    rng = np.random.default_rng(5)
    for params, expect in ((RAT, True), (HIGH_FLOW, False)):
        prob = problem_from_study(_rat(params))
        draws = {k: np.asarray(p.frozen().rvs(size=400, random_state=rng), dtype=float)
                 for k, p in prob.priors.items()}
        notes = posterior_output_notes(prob, draws)
        assert any(BOUNDED_BELOW in n for n in notes) is expect
