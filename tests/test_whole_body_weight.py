"""``body_weight`` in a whole_body study: the time course ``body_weight_change`` against closed forms (the body at
rest loses its basal urine and insensible water; a mass balance of the compartments), readings as changes from each
subject's first, refusals (exit 2 naming file, key or line), and the observed points on the fan chart.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from toml_text import toml_text

from uncertainty.analyses.inference.observations import kind_module
from uncertainty.analyses.inference.observations.course import whole_body_course
from uncertainty.analyses.inference.observations.weight_course import design
from uncertainty.analyses.inference.problem import problem_from_study
from uncertainty.app.cli import main
from uncertainty.core.errors import InputError, StudyError
from uncertainty.physiology import whole_body as wb
from uncertainty.priors import prior_medians
from uncertainty.study import Study

CRYSTALLOID = [{"kind": "infusion", "fluid": "crystalloid", "volume": "1500 mL", "duration": "30 min"}]
# invented readings (kg; a subject with a single weight, blank sd cells take the observation's 0.1 kg)
ROWS = "subject,time_min,value,sd\nA,0,70.0,\nA,30,71.2,0.2\nA,90,70.6,\nB,0,80.0,\nB,60,80.9,\nC,20,65.0,\n"
OBS = {"kind": "body_weight", "file": "w.csv", "unit": "kg", "sd": 0.1}


def _doc(obs: dict | None = None, interventions: list | None = None, end: str = "90 min") -> dict:
    # invented settings: a 73 kg subject
    return {"study": {"tissue": "skeletal_muscle", "model": "whole_body", "body_mass": "73 kg", "seed": 3},
            "interventions": interventions or CRYSTALLOID,
            "timeline": {"end": end, "report_every": "10 min", "draws": 16},
            "observations": [obs or OBS]}


def _study(tmp: Path, rows: str = ROWS, **kw) -> Study:
    (tmp / "w.csv").write_text(rows, encoding="utf-8")
    return Study.from_dict(_doc(**kw), base_dir=tmp)


def _toml(doc: dict) -> str:
    return toml_text(doc)


def _one(series: list) -> np.ndarray:
    return np.array([float(np.ravel(x)[0]) for x in series])


def test_at_rest_the_body_loses_basal_urine_and_insensible_water(tmp_path: Path) -> None:
    # a bleed that starts at 60 min: before it nothing moves, so the weight falls at the basal urine flow (1 mL/kg/h,
    # common practice: 73/60 mL/min) plus the insensible loss ((450 + 300) mL/day, Institute of Medicine 2005,
    # Dietary Reference Intakes for Water, ch. 4, pp. 83 and 86), 1 kg per L: 0.1043 kg by 60 min
    bleed = [{"kind": "bleed", "volume": "450 mL", "start": "60 min", "duration": "10 min"}]
    study = _study(tmp_path, interventions=bleed)
    v = {k: np.array([val]) for k, val in prior_medians("skeletal_muscle").items()}
    c = whole_body_course(v, study, None, np)
    w, times = _one(c["body_weight_change"]), c["times_min"]
    rate = 73.0 / 60.0 + 750.0 / 1440.0  # mL/min
    for k in range(times.index(60.0) + 1):
        assert w[k] == pytest.approx(-rate * times[k] / 1000.0, rel=1e-9, abs=1e-12)
    # after the bleed the 450 mL of whole blood is gone from the scale as well; urine falls below its basal flow
    # while the plasma is short (never below 0), so the fall lies between 450 mL plus the insensible loss and 450 mL
    # plus all the basal losses
    k70 = times.index(70.0)
    assert -(0.450 + rate * 70.0 / 1000.0) < w[k70] < -(0.450 + 750.0 / 1440.0 * 70.0 / 1000.0)


def test_weight_is_the_compartments_balance(tmp_path: Path) -> None:
    # mass balance: with a crystalloid only, the weight gained is what the plasma and the two interstitial beds hold
    # above rest, less the basal urine and insensible water the compartments never carried (the form's plasma takes
    # basal urine as balanced by intake); the Runge-Kutta solution keeps it to rounding and the curve's truncation
    study = _study(tmp_path)
    v = {k: np.array([val]) for k, val in prior_medians("skeletal_muscle").items()}
    c = whole_body_course(v, study, None, np)
    t = np.asarray(c["times_min"])
    held = (_one(c["plasma_volume_change"]) + _one(c["interstitial_volume_change_muscle"])
            + _one(c["interstitial_volume_change_skin"]))
    basal = (73.0 / 60.0 + 750.0 / 1440.0) * t  # mL, as in the test above
    np.testing.assert_allclose(_one(c["body_weight_change"]) * 1000.0, held - basal, atol=0.01)  # mL, of 1500 infused
    assert _one(c["body_weight_change"])[t.tolist().index(30.0)] > 1.0  # most of the 1.5 L still in the body


def test_readings_become_changes_from_each_subjects_first(tmp_path: Path) -> None:
    problem = problem_from_study(_study(tmp_path))
    obs = problem.observations[0]
    kind_module(obs).validate(obs, problem)
    d = design(obs, ["A", "B", "C"])
    np.testing.assert_allclose(d["value"], [1.2, 0.6, 0.9], atol=1e-12)
    np.testing.assert_allclose(d["time"], [30.0, 90.0, 60.0])
    np.testing.assert_allclose(d["ref_time"], [0.0, 0.0, 0.0])
    # the difference of two normal readings: sd_y = sqrt(sd_k^2 + sd_ref^2)
    np.testing.assert_allclose(d["sd"], [np.hypot(0.2, 0.1), np.hypot(0.1, 0.1), np.hypot(0.1, 0.1)])
    assert list(d["subject"]) == [0, 0, 1] and list(d["skipped"]) == [2]


def test_grams_convert_to_kilograms(tmp_path: Path) -> None:
    rows = "subject,time_min,value\nA,0,70000\nA,30,71200\n"
    problem = problem_from_study(_study(tmp_path, rows=rows, obs={**OBS, "unit": "g", "sd": 100.0}))
    d = design(problem.observations[0], ["A"])
    np.testing.assert_allclose(d["value"], [1.2])
    np.testing.assert_allclose(d["sd"], [np.hypot(0.1, 0.1)])


def test_no_share_and_no_tissue_mass_in_a_whole_body_study(tmp_path: Path) -> None:
    _study(tmp_path)  # neither is needed
    with pytest.raises(StudyError) as exc:
        _study(tmp_path, obs={**OBS, "share": {"dist": "beta", "mean": 0.4, "sd": 0.1}})
    assert exc.value.key == "observations[0].share"
    with pytest.raises(StudyError, match="normal error"):
        _study(tmp_path, obs={**OBS, "sd": None, "cv": 0.01})
    # a steady form still needs both
    with pytest.raises(StudyError, match=r"observations\[0\].*share"):
        Study.from_dict({"study": {"tissue": "skeletal_muscle", "tissue_mass": "25 kg"},
                         "observations": [OBS]}, base_dir=tmp_path)


def test_kind_refuses_what_a_record_in_code_could_carry(tmp_path: Path) -> None:
    problem = problem_from_study(_study(tmp_path))
    obs = problem.observations[0]
    obs.cv, obs.sd = 0.01, None
    with pytest.raises(InputError, match="normal error"):
        kind_module(obs).validate(obs, problem)


@pytest.mark.parametrize("rows, needle", [
    (ROWS.replace("A,90,70.6,", "A,120,70.6,"), "line 4"),   # after the timeline's 90 min
    (ROWS.replace("B,60,80.9,", "B,60,0,"), "line 6"),        # not positive
    (ROWS.replace("A,30,71.2,0.2", "A,30,71.2,-1"), "line 3"),  # a negative sd
])
def test_bad_readings_exit_2_naming_file_and_line(tmp_path: Path, rows: str, needle: str) -> None:
    (tmp_path / "w.csv").write_text(rows, encoding="utf-8")
    path = tmp_path / "study.toml"
    path.write_text(_toml(_doc()), encoding="utf-8")
    res = CliRunner().invoke(main, ["check", str(path)])
    assert res.exit_code == 2, res.output
    assert "w.csv" in res.output and needle in res.output and "Traceback" not in res.output


def test_share_exits_2_at_check(tmp_path: Path) -> None:
    (tmp_path / "w.csv").write_text(ROWS, encoding="utf-8")
    path = tmp_path / "study.toml"
    path.write_text(_toml(_doc({**OBS, "share": {"dist": "beta", "mean": 0.4, "sd": 0.1}})), encoding="utf-8")
    res = CliRunner().invoke(main, ["check", str(path)])
    assert res.exit_code == 2, res.output
    assert "observations[0].share" in res.output and "Traceback" not in res.output


def test_points_on_the_fan_chart(tmp_path: Path) -> None:
    from uncertainty.analyses.propagate.timeline import observed_points

    obs = observed_points(_study(tmp_path))["body_weight_change"]
    assert obs["change_from_first"] and not obs["relative_to_first"]
    assert obs["subjects"] == ["A", "A", "A", "B", "B", "C"]
    np.testing.assert_allclose(obs["values"], [0.0, 1.2, 0.6, 0.0, 0.9, 0.0], atol=1e-12)
    assert wb.TIMELINE_UNITS["body_weight_change"] == "kg"


@pytest.mark.parametrize("interventions", [
    CRYSTALLOID, [{"kind": "bleed", "volume": "450 mL", "duration": "10 min"}]])
def test_the_models_step_is_accurate_against_a_fine_one(tmp_path: Path, interventions: list) -> None:
    # the course inside the model takes steps of up to MAX_STEP_MIN (4 min); against steps of 0.25 min over 64
    # individual-layer draws its error stays a tenth or less of a reading's error: 1e-3 in the Hb ratio (an Hb
    # reading repeats to about 1-2%, from memory), 2 mL of urine, 2 g of weight (a scale reads to about 0.1 kg,
    # from memory)
    from uncertainty.analyses.inference.observations.course import MAX_STEP_MIN
    from uncertainty.analyses.propagate.timeline import bed_ratios
    from uncertainty.analyses.sampling import draw
    from uncertainty.forms.evaluate import input_values
    from uncertainty.forms.whole_body import timeline_parameters

    study = _study(tmp_path, interventions=interventions, end="240 min")
    v = input_values(study, draw(study, 64, method="mc", seed=4, layer="individual"))
    body, beds, Cp0 = timeline_parameters(v, 73.0, bed_ratios(study.tissue))
    plan = study.timeline
    coarse = wb.simulate(body, beds, Cp0, plan.doses, plan.end, plan.report_every, max_step=MAX_STEP_MIN)
    fine = wb.simulate(body, beds, Cp0, plan.doses, plan.end, plan.report_every, max_step=0.25)
    for name, tol in (("hb_ratio", 1e-3), ("urine_volume", 2.0), ("body_weight_change", 0.002)):
        assert np.max(np.abs(np.array(coarse[name]) - np.array(fine[name]))) < tol, name
