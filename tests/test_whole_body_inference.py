"""The ``haemoglobin`` observation kind of the whole_body form: readings as ratios to each subject's first one
(closed forms), interpolation on the report grid, refusals, the time course it fits, and (slow: PyTensor takes
about a minute to build the graph) the model it builds, its terms counted.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from uncertainty.analyses.inference.model_builder import build_model
from uncertainty.analyses.inference.observations import kind_module
from uncertainty.analyses.inference.observations.course import interpolation, whole_body_course
from uncertainty.analyses.inference.observations.haemoglobin import design
from uncertainty.analyses.inference.problem import problem_from_study
from uncertainty.core.errors import InputError, StudyError
from uncertainty.study import Study


def _doc(obs: dict | None = None, model: str = "whole_body") -> dict:
    doc = {"study": {"tissue": "skeletal_muscle", "model": model, "body_mass": "73 kg", "seed": 3},
           "observations": [obs or {"kind": "haemoglobin", "file": "hb.csv", "sd": 0.2, "unit": "g/dL"}]}
    if model == "whole_body":
        doc["interventions"] = [{"kind": "infusion", "fluid": "crystalloid", "volume": "1500 mL",
                                 "duration": "30 min"}]
        doc["timeline"] = {"end": "90 min", "report_every": "10 min", "draws": 16}
    return doc


def _write(tmp: Path, rows: str) -> None:
    (tmp / "hb.csv").write_text("subject,time_min,value\n" + rows)


ROWS = "A,0,14.0\nA,30,12.6\nA,60,13.3\nB,0,15.0\nB,45,13.5\nC,20,14.1\n"


def test_readings_become_ratios_to_each_subjects_first(tmp_path: Path) -> None:
    _write(tmp_path, ROWS)
    problem = problem_from_study(Study.from_dict(_doc(), base_dir=tmp_path))
    obs = problem.observations[0]
    kind_module(obs).validate(obs, problem)
    d = design(obs, ["A", "B", "C"])
    np.testing.assert_allclose(d["value"], [12.6 / 14.0, 13.3 / 14.0, 13.5 / 15.0])
    np.testing.assert_allclose(d["time"], [30.0, 60.0, 45.0])
    np.testing.assert_allclose(d["ref_time"], [0.0, 0.0, 0.0])
    # delta method: sd_y = sqrt(sd^2 + (y sd)^2) / Hb_ref
    y = 12.6 / 14.0
    assert d["sd"][0] == pytest.approx(np.sqrt(0.2**2 + (y * 0.2) ** 2) / 14.0)
    assert list(d["subject"]) == [0, 0, 1] and list(d["skipped"]) == [2]


def test_interpolation_on_the_report_grid() -> None:
    lo, hi, w = interpolation(np.array([0.0, 5.0, 10.0, 25.0]), [0.0, 10.0, 20.0, 30.0])
    f = np.array([1.0, 0.9, 0.8, 0.85])
    np.testing.assert_allclose((1 - w) * f[lo] + w * f[hi], [1.0, 0.95, 0.9, 0.825])


def test_refusals(tmp_path: Path) -> None:
    _write(tmp_path, ROWS)
    with pytest.raises(StudyError):  # no data file
        Study.from_dict(_doc({"kind": "haemoglobin", "value": 13.0, "sd": 0.2}), base_dir=tmp_path)
    problem = problem_from_study(Study.from_dict(_doc(model="steady_state"), base_dir=tmp_path))
    obs = problem.observations[0]
    with pytest.raises(InputError) as exc:
        kind_module(obs).validate(obs, problem)
    assert exc.value.key.endswith("kind")
    _write(tmp_path, "A,0,14\nA,200,13\n")  # after the timeline's 90 min
    problem = problem_from_study(Study.from_dict(_doc(), base_dir=tmp_path))
    obs = problem.observations[0]
    with pytest.raises(InputError):
        kind_module(obs).validate(obs, problem)


def test_numpy_course_dilutes_then_recovers(tmp_path: Path) -> None:
    # the prediction the term interpolates, in numpy at the prior medians: Hb falls during the 1500 mL crystalloid
    # (30 min) and recovers part of the way by 90 min
    from uncertainty.priors import prior_medians

    _write(tmp_path, ROWS)
    study = Study.from_dict(_doc(), base_dir=tmp_path)
    v = {k: np.array([val]) for k, val in prior_medians("skeletal_muscle").items()}
    c = whole_body_course(v, study, "hb_ratio", np)
    assert c["times_min"][-1] == 90.0
    hb = [float(np.ravel(x)[0]) for x in c["hb_ratio"]]
    assert hb[0] == 1.0 and hb[3] == min(hb) < 0.95 and hb[3] < hb[-1] < 1.0


@pytest.mark.slow
def test_model_builds_with_one_term(tmp_path: Path) -> None:
    # structure only (no sampling): one likelihood term over the three later readings. Slow because PyTensor
    # takes about a minute to build the graph (the steady state of each bed and 45 Runge-Kutta steps)
    _write(tmp_path, ROWS)
    built = build_model(problem_from_study(Study.from_dict(_doc(), base_dir=tmp_path)), structure_only=True)
    assert len(built.terms) == 1
    assert built.terms[0].label == "haemoglobin relative to the first reading"


def _records(tmp: Path, file: str, sd: float) -> list:
    """The observation records of the study with readings ``file`` (as loaded: rows read from the file)."""
    return list(Study.from_dict(_doc({"kind": "haemoglobin", "file": file, "sd": sd, "unit": "g/dL"}),
                                base_dir=tmp).observations)


@pytest.mark.slow
def test_a_sessions_refit_data_are_the_ratios_the_term_fits(tmp_path: Path) -> None:
    # Session.fit(observations=...) takes new records; their data must be what the term fits (each subject's
    # readings over its first, with the delta-method sd), not the raw g/dL. The pymc sampler needs no compile.
    from uncertainty.analyses.inference.api import Session

    _write(tmp_path, ROWS)
    session = Session(Study.from_dict(_doc(), base_dir=tmp_path), sampler="pymc")
    (name,) = session.terms
    # invented new readings: subject A at half, B at two thirds of the first file's baseline, same ratios
    (tmp_path / "hb_new.csv").write_text("subject,time_min,value\nA,0,7.0\nA,30,6.3\nA,60,6.65\n"
                                         "B,0,10.0\nB,45,9.0\nC,20,14.1\n")
    data = session.data_from(_records(tmp_path, "hb_new.csv", 0.1))
    assert set(data) == {f"{name}__data", f"{name}__sd"}
    np.testing.assert_allclose(data[f"{name}__data"], [0.9, 0.95, 0.9])
    # the delta method's sd (closed form, as in test_readings_become_ratios_to_each_subjects_first)
    y, ref = np.array([0.9, 0.95, 0.9]), np.array([7.0, 7.0, 10.0])
    np.testing.assert_allclose(data[f"{name}__sd"], np.sqrt(0.1**2 + (y * 0.1) ** 2) / ref)
    # the session's own records give back the data it was built with
    own = session.data_from(_records(tmp_path, "hb.csv", 0.2))
    np.testing.assert_allclose(own[f"{name}__data"], session.built.model[f"{name}__data"].get_value())
    # another design (one reading fewer) is refused, naming the term
    (tmp_path / "hb_short.csv").write_text("subject,time_min,value\nA,0,14.0\nA,30,12.6\nB,0,15.0\nB,45,13.5\n")
    with pytest.raises(InputError) as err:
        session.data_from(_records(tmp_path, "hb_short.csv", 0.2))
    assert err.value.key == "observations" and err.value.value == name
