"""Study resolution: tissue -> conditions -> overrides, correlations, sections, data files, units.

Check values are the numbers of the shipped prior files (priors/*.toml, each with its origin there)
and closed-form unit conversions (1 h = 60 min; 1 kg = 1000 g; common practice).
"""

from __future__ import annotations

import hashlib
import json
import textwrap
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from uncertainty.app.cli import main
from uncertainty.core.errors import StudyError
from uncertainty.core.resources import studies_dir
from uncertainty.priors import load_prior_set
from uncertainty.study import Study, load_study

MUSCLE = load_prior_set("skeletal_muscle")


def _doc(**sections) -> dict:
    head = {"tissue": "skeletal_muscle", **sections.pop("head", {})}
    return {"study": head, **sections}


def test_override_replaces_whole_declaration() -> None:
    assert MUSCLE.priors["Pv"].between_subject == {"cv": 0.37}
    s = Study.from_dict(_doc(parameters={"Pv": {"dist": "normal", "mean": 12, "sd": 2, "unit": "mmHg"}}))
    assert s.priors["Pv"].params == {"mean": 12.0, "sd": 2.0}
    assert s.priors["Pv"].between_subject is None
    s = Study.from_dict(_doc(parameters={"Pv": {"dist": "normal", "mean": 12, "sd": 2,
                                                "between_subject": {"cv": 0.2}}}))
    assert s.priors["Pv"].between_subject == {"cv": 0.2}


def test_conditions_then_overrides() -> None:
    s = Study.from_dict(_doc(head={"conditions": ["venous_congestion"]}))
    shift = s.priors["Pv"].params["mean"] - MUSCLE.priors["Pv"].params["mean"]
    assert shift == pytest.approx(20.0)  # the venous_congestion row in priors/conditions.toml
    s = Study.from_dict(_doc(head={"conditions": ["venous_congestion"]}, parameters={"Pv": 15}))
    assert s.priors["Pv"].params == {"value": 15.0}
    assert "Pv" not in s.names


def test_overridden_quantity_drops_set_correlations_with_note() -> None:
    assert ("Kf", "PS", 0.5) in MUSCLE.correlations
    s = Study.from_dict(_doc(head={"model": "steady_state"},
                             parameters={"Kf": {"dist": "lognormal", "median": 0.004, "gsd": 1.3}}))
    assert not any({"Kf", "PS"} == {a, b} for a, b, _ in s.correlations)
    assert any("Kf-PS" in n and "dropped" in n for n in s.notes)
    kept = Study.from_dict(_doc(head={"model": "steady_state"}))
    assert any({"Kf", "PS"} == {a, b} for a, b, _ in kept.correlations)


def test_correlation_matrix_and_derived_alias() -> None:
    s = Study.from_dict(_doc(correlations={"pairs": [["Pa", "Pv", 0.3], ["pi_c", "sigma", -0.2]]}))
    i, j = s.names.index("Pa"), s.names.index("Pv")
    assert s.correlation[i, j] == s.correlation[j, i] == 0.3
    # pi_c is derived from Cp; its correlation applies to Cp
    k, m = s.names.index("Cp"), s.names.index("sigma")
    assert s.correlation[k, m] == -0.2
    assert np.allclose(np.diag(s.correlation), 1.0)
    assert np.linalg.eigvalsh(s.correlation).min() > 0


def test_solved_quantities_not_sampled_in_steady_forms() -> None:
    for model in ("steady_state", "revised"):
        s = Study.from_dict(_doc(head={"model": model}))
        assert "Pi" not in s.priors and "pi_i" not in s.priors
        assert {"PS", "L", "Pi_L0"} <= set(s.names)
        assert any("solves" in n for n in s.notes)
    with pytest.raises(StudyError) as info:
        Study.from_dict(_doc(head={"model": "steady_state"}, parameters={"pi_i": 10}))
    assert info.value.key == "parameters.pi_i"


def test_from_protein_override_and_tissue_mass() -> None:
    s = Study.from_dict(_doc(head={"tissue_mass": "800 g"}, parameters={
        "pi_c": {"from_protein": {"albumin": {"dist": "normal", "mean": 4.2, "sd": 0.3, "unit": "g/dL"},
                                  "globulin": {"dist": "normal", "mean": 2.8, "sd": 0.3, "unit": "g/dL"}}}}))
    assert s.derived["pi_c"].inputs == ("C_alb", "C_glob")
    assert {"C_alb", "C_glob"} <= set(s.names) and "Cp" not in s.priors
    assert s.tissue_mass_kg == pytest.approx(0.8)
    # the Cp-pi_i correlation of the set involved the overridden pi_c: dropped
    assert not s.correlations


def test_observation_units_instrument_and_data(tmp_path: Path) -> None:
    (tmp_path / "data").mkdir()
    (tmp_path / "data" / "v.csv").write_text("subject,time_min,volume,group\nA,0,0,x\nA,2,0.1,x\nB,0,0,y\n")
    text = textwrap.dedent("""
        [study]
        title = "fixture (invented)"
        tissue = "skeletal_muscle"

        [[observations]]
        kind = "lymph_flow"
        value = 0.12
        sd = 0.03
        unit = "mL/h/100g"

        [[observations]]
        kind = "measurement"
        parameter = "pi_c"
        value = 3.2
        unit = "kPa"
        instrument = "colloid_osmometer"

        [[observations]]
        kind = "volume_time_course"
        file = "data/v.csv"
        steps = [{ at_min = 0, to = 10 }, { at_min = 4, to = 2.0, unit = "kPa" }]
    """)
    path = tmp_path / "s.toml"
    path.write_text(text)
    s = load_study(path)
    assert s.hash == hashlib.sha256(path.read_bytes()).hexdigest()
    lymph, meas, vol = s.observations
    assert lymph.value == pytest.approx(0.12 / 60) and lymph.sd == pytest.approx(0.03 / 60)
    assert lymph.unit == "mL/min/100g"
    assert meas.value == pytest.approx(3.2 * 7.50062, rel=1e-5)  # kPa -> mmHg (common practice)
    inst = s.instruments["colloid_osmometer"]
    assert (meas.sd, meas.cv) == (inst.sd, inst.cv)
    assert vol.path == tmp_path / "data" / "v.csv"
    assert vol.data["volume"] == [0.0, 0.1, 0.0] and vol.data["subject"] == ["A", "A", "B"]
    assert vol.steps[1].to == pytest.approx(2.0 * 7.50062, rel=1e-5)


def test_non_positive_definite_refused_not_repaired() -> None:
    with pytest.raises(StudyError) as info:
        Study.from_dict(_doc(correlations={"pairs": [["Pa", "Pv", 0.8], ["Pa", "r", 0.8], ["Pv", "r", -0.8]]}))
    assert info.value.key == "correlations.pairs"


def test_sections_defaults() -> None:
    s = Study.from_dict(_doc(propagate={}, sensitivity={"method": "morris"}))
    assert s.propagate.samples == 16384 and s.propagate.method == "qmc"
    assert s.sensitivity.output == "Jv"
    assert s.observations is None and s.rank is None and s.design is None


SHIPPED = sorted(p for p in studies_dir().glob("*.toml"))


@pytest.mark.parametrize("path", SHIPPED, ids=[p.stem for p in SHIPPED])
def test_shipped_studies_pass_check(path: Path) -> None:
    result = CliRunner().invoke(main, ["check", str(path), "--json"])
    assert result.exit_code == 0, result.output
    doc = json.loads(result.stdout)
    assert doc["valid"] and doc["names"]


def test_at_least_three_shipped_studies() -> None:
    assert len(SHIPPED) >= 3


def test_priors_show_json_lists_origins() -> None:
    result = CliRunner().invoke(main, ["priors", "show", "skeletal_muscle", "--json"])
    assert result.exit_code == 0
    rows = json.loads(result.stdout)
    assert {"Kf", "Pa", "Pv", "r", "sigma", "Pi", "pi_c", "Pc"} <= {r["symbol"] for r in rows}
    for r in rows:
        assert set(r) >= {"symbol", "dist", "median", "ci95", "unit", "basis", "between_subject", "origin"}
        assert r["origin"], r["symbol"]


def test_priors_list_and_unknown_tissue() -> None:
    r = CliRunner().invoke(main, ["priors", "list", "--json"])
    assert r.exit_code == 0
    names = {s["name"] for s in json.loads(r.stdout)["prior_sets"]}
    assert {"skeletal_muscle", "skin_subcutis", "lung", "myocardium", "intestinal_mucosa", "brain",
            "glomerulus"} <= names
    r = CliRunner().invoke(main, ["priors", "show", "kidney"])
    assert r.exit_code == 2 and "kidney" in r.stderr


def test_condition_on_solved_quantity_noted() -> None:
    s = Study.from_dict(_doc(head={"model": "steady_state", "conditions": ["lymphatic_obstruction"]}))
    assert "Pi" not in s.priors
    assert any("lymphatic_obstruction changes Pi" in n for n in s.notes)
    # the lowered lymph conductance applies (multiply 0.3 in priors/conditions.toml)
    assert s.priors["L"].params["median"] == pytest.approx(0.3 * MUSCLE.priors["L"].params["median"])


def test_check_lists_every_analysis_section_present() -> None:
    # the forearm study has propagate, sensitivity, observations, infer and schedule (studies/forearm_volunteers.toml)
    path = next(p for p in SHIPPED if p.stem == "forearm_volunteers")
    doc = json.loads(CliRunner().invoke(main, ["check", str(path), "--json"]).stdout)
    assert doc["sections"] == ["propagate", "sensitivity", "observations", "infer", "schedule"]


def test_condition_rows_may_name_their_tissues() -> None:
    # lymphatic_obstruction lowers L by 0.9 in the subcutis (measured drainage rate constant) and by
    # 0.3 in muscle (judgement): rows with `tissues` in priors/conditions.toml
    skin = load_prior_set("skin_subcutis")
    s = Study.from_dict({"study": {"tissue": "skin_subcutis", "model": "steady_state",
                                   "conditions": ["lymphatic_obstruction"]}})
    assert s.priors["L"].params["median"] == pytest.approx(0.9 * skin.priors["L"].params["median"])
    # the capacity is derived (resting filtrate + JL_reserve): the row scales the derivation's result, and since the
    # condition moves L (an input of the resting filtrate) the filtrate is held at the healthy set's medians
    assert s.derived["JL_max"].multiply == pytest.approx(0.9)
    assert s.derived["JL_max"].healthy_filtrate is not None
    assert s.priors["JL_reserve"].median() == pytest.approx(skin.priors["JL_reserve"].median())
