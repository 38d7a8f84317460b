"""The ``plasma_protein`` observation kind of the whole_body form: loading (column map, units, blank sd cells),
refusals (exit 2 naming file, line and column, or the key), the time course it fits against the dilution closed
form, the observed points on the fan chart, and (slow: PyTensor builds the graph) the model it declares.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from toml_text import toml_text

from uncertainty.analyses.inference.observations import kind_module
from uncertainty.analyses.inference.observations.course import whole_body_course
from uncertainty.analyses.inference.observations.plasma_protein import design
from uncertainty.analyses.inference.problem import problem_from_study
from uncertainty.app.cli import main
from uncertainty.core.errors import InputError, StudyError
from uncertainty.physiology import whole_body as wb
from uncertainty.study import Study

CRYSTALLOID = [{"kind": "infusion", "fluid": "crystalloid", "volume": "1000 mL", "duration": "30 min"}]
# invented readings (g/L, a column map with a time column that states its unit, blank sd cells)
ROWS = ("patient,time (min),alb_g_per_L,sd\n"
        "A,0,42,1\nA,30,36,\nA,60,38,1\nB,0,40,\nB,45,35,1\nC,20,41,1\n")
OBS = {"kind": "plasma_protein", "protein": "albumin", "file": "alb.csv", "unit": "g/L", "sd": 0.5,
       "columns": {"subject": "patient", "time": "time (min)", "value": "alb_g_per_L"}}


def _doc(obs: dict | None = None, interventions: list | None = None) -> dict:
    # invented settings: a 73 kg subject, 90 min of timeline
    return {"study": {"tissue": "skeletal_muscle", "model": "whole_body", "body_mass": "73 kg", "seed": 3},
            "interventions": interventions or CRYSTALLOID,
            "timeline": {"end": "90 min", "report_every": "10 min", "draws": 16},
            "observations": [obs or OBS]}


def _study(tmp: Path, rows: str = ROWS, **kw) -> Study:
    (tmp / "alb.csv").write_text(rows, encoding="utf-8")
    return Study.from_dict(_doc(**kw), base_dir=tmp)


def _toml(doc: dict) -> str:
    return toml_text(doc)


def test_readings_become_ratios_to_each_subjects_first(tmp_path: Path) -> None:
    problem = problem_from_study(_study(tmp_path))
    obs = problem.observations[0]
    kind_module(obs).validate(obs, problem)
    d = design(obs, ["A", "B", "C"])
    np.testing.assert_allclose(d["value"], [36 / 42, 38 / 42, 35 / 40])  # the unit cancels
    np.testing.assert_allclose(d["time"], [30.0, 60.0, 45.0])
    assert list(d["subject"]) == [0, 0, 1] and list(d["skipped"]) == [2]
    # delta method in one unit: a blank sd cell takes the observation's 0.5 g/L, a filled one its own 1 g/L
    y = 36 / 42
    assert d["sd"][0] == pytest.approx(np.sqrt(0.5**2 + (y * 1.0) ** 2) / 42)
    y = 35 / 40
    assert d["sd"][2] == pytest.approx(np.sqrt(1.0**2 + (y * 0.5) ** 2) / 40)


def test_haemoglobin_sd_and_rows_share_one_unit(tmp_path: Path) -> None:
    # readings in g/L with the sd on the observation (converted to g/dL by the study): the rows are converted too,
    # so the ratio's error is the delta method's in one unit (it was ten times too small before)
    from uncertainty.analyses.inference.observations.haemoglobin import design as hb_design

    (tmp_path / "hb.csv").write_text("subject,time_min,value\nA,0,140\nA,30,126\n", encoding="utf-8")
    problem = problem_from_study(Study.from_dict(_doc({"kind": "haemoglobin", "file": "hb.csv", "sd": 2.0,
                                                       "unit": "g/L"}), base_dir=tmp_path))
    d = hb_design(problem.observations[0], ["A"])
    y = 126 / 140
    np.testing.assert_allclose(d["value"], [y])
    np.testing.assert_allclose(d["sd"], [np.sqrt(2.0**2 + (y * 2.0) ** 2) / 140])


def test_total_protein_is_the_default(tmp_path: Path) -> None:
    from uncertainty.analyses.inference.observations.plasma_protein import protein_of

    obs = {k: v for k, v in OBS.items() if k != "protein"}
    problem = problem_from_study(_study(tmp_path, obs=obs))
    assert protein_of(problem.observations[0]) == "total"


@pytest.mark.parametrize("rows, needle", [
    (ROWS.replace("A,30,36,", "A,30,abc,"), "line 3"),        # not a number
    (ROWS.replace("A,60,38,1", "A,120,38,1"), "line 4"),      # after the timeline's 90 min
    (ROWS.replace("B,45,35,1", "B,45,0,1"), "line 6"),        # not positive
])
def test_bad_readings_exit_2_naming_file_line_and_column(tmp_path: Path, rows: str, needle: str) -> None:
    (tmp_path / "alb.csv").write_text(rows, encoding="utf-8")
    path = tmp_path / "study.toml"
    path.write_text(_toml(_doc()), encoding="utf-8")
    res = CliRunner().invoke(main, ["check", str(path)])
    assert res.exit_code == 2, res.output
    assert "alb.csv" in res.output and needle in res.output and "alb_g_per_L" in res.output
    assert "Traceback" not in res.output


def test_albumin_refused_when_albumin_is_infused(tmp_path: Path) -> None:
    (tmp_path / "alb.csv").write_text(ROWS, encoding="utf-8")
    path = tmp_path / "study.toml"
    path.write_text(_toml(_doc(interventions=[{"kind": "infusion", "fluid": "albumin_20", "volume": "100 mL",
                                               "duration": "30 min"}])), encoding="utf-8")
    res = CliRunner().invoke(main, ["check", str(path)])
    assert res.exit_code == 2, res.output
    assert "observations[0].protein" in res.output and "albumin" in res.output and "Traceback" not in res.output


def test_schema_refusals(tmp_path: Path) -> None:
    (tmp_path / "alb.csv").write_text(ROWS, encoding="utf-8")
    with pytest.raises(StudyError):  # no data file
        Study.from_dict(_doc({"kind": "plasma_protein", "value": 7.0, "sd": 0.2}), base_dir=tmp_path)
    with pytest.raises(StudyError):  # protein on another kind
        Study.from_dict(_doc({"kind": "haemoglobin", "file": "alb.csv", "sd": 0.2, "protein": "albumin",
                              "columns": OBS["columns"]}), base_dir=tmp_path)
    with pytest.raises(StudyError):  # unknown protein
        Study.from_dict(_doc({**OBS, "protein": "globulin"}), base_dir=tmp_path)
    with pytest.raises(InputError) as exc:  # a cv error
        problem = problem_from_study(_study(tmp_path, obs={**OBS, "sd": None, "cv": 0.03}))
        o = problem.observations[0]
        kind_module(o).validate(o, problem)
    assert exc.value.key == "observations[0].cv"


def test_course_dilutes_protein_by_the_plasma_volume(tmp_path: Path) -> None:
    # numpy, one subject at the prior medians, 1 L of crystalloid over 30 min. Closed form: with the plasma
    # protein mass conserved, C/C0 = Vp0/Vp (Dill DB, Costill DL 1974 J Appl Physiol 37:247, abstract: the change
    # of plasma volume read from the rise of plasma protein). The model lets protein leave with the filtrate and
    # return by lymph, so the mass C Vp / (C0 Vp0) may fall, but by no more than the plasma pool's escape rate,
    # about 5% an hour (Crit Care 2022, doi 10.1186/s13054-022-03979-1, introduction, read through the search
    # tool). Haemoglobin is diluted in the whole blood, so it falls less than protein (common practice).
    from uncertainty.priors import prior_medians

    study = _study(tmp_path)
    v = {k: np.array([val]) for k, val in prior_medians("skeletal_muscle").items()}
    c = whole_body_course(v, study, "plasma_protein_ratio", np)
    pv = whole_body_course(v, study, "plasma_volume_change", np)["plasma_volume_change"]
    hb = whole_body_course(v, study, "hb_ratio", np)["hb_ratio"]
    vp0 = wb.body_parameters(73.0)["Vp0"]
    ratio = np.array([float(np.ravel(x)[0]) for x in c["plasma_protein_ratio"]])
    dilution = np.array([vp0 / (vp0 + float(np.ravel(x)[0])) for x in pv])
    assert ratio[0] == pytest.approx(1.0, abs=1e-12)
    k30 = c["times_min"].index(30.0)
    assert dilution[k30] < 0.9  # a real dilution to check against (1 L into about 3 L of plasma)
    assert ratio[k30] == pytest.approx(dilution[k30], abs=0.01)  # end of infusion: the fall is the dilution
    for k, t in enumerate(c["times_min"][1:], start=1):
        mass = ratio[k] / dilution[k]  # plasma protein mass relative to rest
        assert 1.0 - 0.05 * t / 60.0 <= mass <= 1.0 + 1e-9, t
        assert ratio[k] < float(np.ravel(hb[k])[0]) < 1.0, t


def test_points_on_the_fan_chart(tmp_path: Path) -> None:
    from uncertainty.analyses.propagate.timeline import observed_points

    obs = observed_points(_study(tmp_path))["plasma_protein_ratio"]
    assert obs["relative_to_first"] and obs["subjects"] == ["A", "A", "A", "B", "B", "C"]
    np.testing.assert_allclose(obs["values"], [1.0, 36 / 42, 38 / 42, 1.0, 35 / 40, 1.0])


@pytest.mark.slow
def test_model_builds_with_one_term(tmp_path: Path) -> None:
    # structure only (no sampling): one likelihood term over the three later readings. Slow because PyTensor
    # builds the graph of each bed's steady state and 45 Runge-Kutta steps
    from uncertainty.analyses.inference.model_builder import build_model

    built = build_model(problem_from_study(_study(tmp_path)), structure_only=True)
    assert len(built.terms) == 1
    assert built.terms[0].label == "plasma albumin relative to the first reading"
