"""Organ-specific model forms in studies: the revised form of the absorbing intestinal mucosa
(``physiology.mucosa.absorbing_steady_state``) and extravascular lung water in the steady forms.

Check values: sustained absorption only where the interstitium is washed by a protein-free fluid supply
(Levick & Michel 2010, Cardiovasc Res 87:198, "Microvascular fluid exchange and the revised Starling
principle"); Pc = LAP + 0.4 (PAP - LAP) (Gaar, Taylor, Owens & Guyton 1967, Am J Physiol 213:910).
"""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from uncertainty.analyses.propagate import propagate
from uncertainty.app.cli import main
from uncertainty.core.errors import StudyError
from uncertainty.forms.evaluate import evaluate, required_inputs
from uncertainty.forms.general import SAFETY_INPUTS
from uncertainty.physiology import lung, mucosa
from uncertainty.study import Study

PRIORS = Path(__file__).resolve().parents[1] / "priors"


def _study(tissue: str, model: str, **extra) -> Study:
    head = {"title": "invented: organ form check", "tissue": tissue, "model": model, "seed": 3,
            **extra.pop("head", {})}
    return Study.from_dict({"study": head, **extra})


# ---- absorbing intestinal mucosa, revised form --------------------------------------------------------

def test_mucosa_revised_form_needs_j_epi_and_routes_through_absorbing_steady_state():
    assert "J_epi" in required_inputs("revised", "intestinal_mucosa")
    assert "J_epi" not in required_inputs("revised", "skeletal_muscle")
    assert "J_epi" not in required_inputs("steady_state", "intestinal_mucosa")
    s = _study("intestinal_mucosa", "revised")
    assert "J_epi" in s.names
    med = {k: p.median() for k, p in s.priors.items()}
    out = evaluate(s, med)
    ref = mucosa.absorbing_steady_state(med["Kf"], out["Pc"], med["sigma"],
                                        med["PS"], out["pi_c"], med["L"], med["Pi_L0"], med["J_epi"],
                                        Cp=med["Cp"])
    for k in ("Jv", "Pi", "pi_i", "pi_g", "ratio", "JL"):
        assert out[k] == pytest.approx(ref[k], rel=1e-12), k
    # lymph carries capillary filtration plus the epithelial absorbate (mass balance, closed form)
    assert out["JL"] == pytest.approx(out["Jv"] + med["J_epi"], rel=1e-12)
    # the force breakdown still sums to the net pressure, with pi_g (= pi_i here) opposing filtration
    total = out["force_Pc"] + out["force_Pi"] + out["force_pi_c"] + out["force_pi_i"]
    assert total == pytest.approx(out["net_pressure"], rel=1e-9)
    assert out["Jv"] == pytest.approx(med["Kf"] * out["net_pressure"], rel=1e-9)
    # the resting forms do not take J_epi
    assert "J_epi" not in _study("intestinal_mucosa", "steady_state").names


def test_revised_form_absorbs_in_mucosa_only():
    # Levick & Michel 2010: sustained absorption is impossible in ordinary tissues at steady state
    # (P(absorption) exactly 0 there), possible in the absorbing intestinal mucosa.
    gut = propagate(_study("intestinal_mucosa", "revised"), samples=4096).to_dict()
    assert gut["p_absorption"] > 0.05 + 5 * gut["p_absorption_mc_se"]  # a material share (> 5%)
    assert gut["typical_p_absorption"] > 0.05
    assert gut["nan_draws"]["individual"]["Jv"] == 0
    for tissue in ("skeletal_muscle", "skin_subcutis"):
        d = propagate(_study(tissue, "revised"), samples=4096).to_dict()
        assert d["p_absorption"] == 0.0 and d["typical_p_absorption"] == 0.0, tissue


def test_mucosa_without_j_epi_prior_exits_2(tmp_path, monkeypatch):
    # A prior set for the mucosa that lacks J_epi: the revised form refuses the study, naming the key.
    folder = tmp_path / "priors"
    shutil.copytree(PRIORS, folder)
    text = (folder / "intestinal_mucosa.toml").read_text(encoding="utf-8")
    start = text.index("[priors.J_epi]")
    end = text.index("[priors.", start + 5)
    (folder / "intestinal_mucosa.toml").write_text(text[:start] + text[end:], encoding="utf-8")
    import uncertainty.study.resolve as study_mod
    from uncertainty import priors

    monkeypatch.setattr(study_mod, "load_prior_set", lambda name: priors.load_prior_set(name, folder))
    with pytest.raises(StudyError) as exc:
        _study("intestinal_mucosa", "revised")
    assert exc.value.key == "parameters.J_epi" and exc.value.value is None
    assert "J_epi" in exc.value.reason
    _study("intestinal_mucosa", "steady_state")  # the resting forms do not need it
    p = tmp_path / "gut.toml"
    p.write_text('[study]\ntissue = "intestinal_mucosa"\nmodel = "revised"\n', encoding="utf-8")
    res = CliRunner().invoke(main, ["check", str(p)])
    out = (res.output or "") + (getattr(res, "stderr", "") or "")
    assert res.exit_code == 2 and "gut.toml" in out and "parameters.J_epi" in out and "Traceback" not in out
    # declaring it in the study is enough (0.2 mL/min/100 g, the order of magnitude of the prior set, from memory)
    p.write_text(p.read_text() + '\n[parameters]\nJ_epi = "0.2 mL/min/100g"\n', encoding="utf-8")
    assert CliRunner().invoke(main, ["check", str(p)]).exit_code == 0


# ---- extravascular lung water, steady forms --------------------------------------------------------------

@pytest.mark.parametrize("model", ["steady_state", "revised"])
def test_lung_water_is_an_output_of_the_steady_forms(model):
    s = _study("lung", model)
    assert {"EVLW", "oedema_volume", "Pc"} <= set(s.outputs()) and "EVLW0" in s.names
    assert "EVLW" not in _study("skeletal_muscle", model).outputs()
    for k in SAFETY_INPUTS:  # the linear lung of this closed form: without the safety factors
        s.priors.pop(k, None)
    rng = np.random.default_rng(7)
    v = {k: p.median() * rng.uniform(0.8, 1.2, 16) for k, p in s.priors.items()}
    out = evaluate(s, v)
    # Gaar et al. 1967: Pc = LAP + 0.4 (PAP - LAP), draw by draw
    v["PAP"] = v["LAP"] + v["TPG"]  # PAP = LAP + TPG (priors/lung.toml, issue 15 item 9)
    np.testing.assert_allclose(out["PAP"], v["PAP"], rtol=1e-14)
    np.testing.assert_allclose(out["Pc"], v["LAP"] + 0.4 * (v["PAP"] - v["LAP"]), rtol=1e-14)
    # EVLW = EVLW0 + C_tis (Pi - Pi_ref), linear compliance (closed form; Pi_ref = the lung set's Pi median)
    assert s.Pi_ref == pytest.approx(-3.0)  # priors/lung.toml Pi prior mean
    np.testing.assert_allclose(out["EVLW"], v["EVLW0"] + v["C_tis"] * (out["Pi"] - s.Pi_ref), rtol=1e-12)
    # the same numbers as physiology.lung.lung_water, which takes LAP and PAP itself
    ref = lung.lung_water(v["Kf"], v["LAP"], v["PAP"], v["sigma"], v["PS"], out["pi_c"], v["L"], v["Pi_L0"],
                          v["C_tis"], s.Pi_ref, v["EVLW0"], Cp=v["Cp"], revised=model == "revised")
    for k in ("Jv", "Pi", "oedema_volume", "EVLW"):
        np.testing.assert_allclose(out[k], ref[k], rtol=1e-12, atol=1e-12, err_msg=k)


def test_left_heart_failure_raises_lung_water_and_pc_follows_gaar():
    base = propagate(_study("lung", "steady_state"), samples=4096, outputs=["EVLW", "Pc", "PAP"])
    hf = propagate(_study("lung", "steady_state", head={"conditions": ["heart_failure_left"]}), samples=4096,
                   outputs=["EVLW", "Pc", "PAP"])
    for layer in ("individual", "typical"):
        b, h = base.summaries[layer], hf.summaries[layer]
        se = np.hypot(b["EVLW"].mc_se["median"], h["EVLW"].mc_se["median"])
        assert h["EVLW"].median > b["EVLW"].median + 5 * se, layer
        # E[Pc] = 0.6 E[LAP] + 0.4 E[PAP] (Gaar et al. 1967, linear): baseline LAP 8 mmHg (priors/lung.toml);
        # left-sided failure shifts it by +17 mmHg (priors/conditions.toml); PAP = LAP + TPG is derived
        for r, lap in ((b, 8.0), (h, 25.0)):
            pap = r["PAP"].mean
            tol = 5 * (r["Pc"].mc_se["mean"] + 0.4 * r["PAP"].mc_se["mean"]) + 0.6 * 5 * 2.5 / np.sqrt(4096)
            assert abs(r["Pc"].mean - (lap + 0.4 * (pap - lap))) < tol + 1e-9, layer


@pytest.mark.parametrize("model", ["steady_state", "revised"])
def test_lung_safety_factors_match_the_physiology_function(model):
    """With the lung set's safety factors (compliance break, JL_max, alveolar flooding) the form gives the
    numbers of physiology.lung.lung_water, and a normally hydrated lung holds no oedema."""
    s = _study("lung", model)
    assert {"flooding", "safety_margin"} <= set(s.outputs())
    rng = np.random.default_rng(11)
    v = {k: p.median() * rng.uniform(0.8, 1.2, 16) for k, p in s.priors.items()}
    for k in ("Pi_break", "P_flood"):  # pressures: spread around their median additively
        v[k] = s.priors[k].median() + rng.uniform(-1.0, 1.0, 16)
    out = evaluate(s, v)
    v["PAP"] = v["LAP"] + v["TPG"]  # PAP = LAP + TPG (priors/lung.toml, issue 15 item 9)
    ref = lung.lung_water(v["Kf"], v["LAP"], v["PAP"], v["sigma"], v["PS"], out["pi_c"], v["L"], v["Pi_L0"],
                          v["C_tis"], s.Pi_ref, v["EVLW0"], Cp=v["Cp"], revised=model == "revised",
                          C_high=v["C_tis_high"], P_break=v["Pi_break"], JL_max=v["JL_max"],
                          G_flood=v["G_flood"], P_flood=v["P_flood"], k_AFC=v["k_AFC"])
    for k in ("Jv", "Pi", "oedema_volume", "EVLW", "flooding"):
        np.testing.assert_allclose(out[k], ref[k], rtol=1e-12, atol=1e-12, err_msg=k)
    # at LAP 8 / PAP 14 the lung sits below its break: no oedema, no flooding (by construction of the curve)
    low = out["Pi"] < v["Pi_break"]
    assert low.any() and np.all(out["oedema_volume"][low] == 0.0)
