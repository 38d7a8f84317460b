"""Cohort data files: long format with a column map, time units, blank cells, one term per observation.

Every CSV here is invented (lab-shaped, no real subjects). The sampling test checks the posterior of a
measured quantity against the conjugate normal-normal closed form (common practice).
"""

from __future__ import annotations

import textwrap
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner

from uncertainty.analyses.inference.model_builder import build_model
from uncertainty.analyses.inference.problem import problem_from_study
from uncertainty.app.cli import main
from uncertainty.core.errors import StudyError
from uncertainty.study import data_notes, load_study

HEAD = """\
[study]
title = "cohort fixture (invented)"
tissue = "skeletal_muscle"
"""

# invented ICU-style export: patient_id, day, COP_mmHg with blank cells, extra columns that are not read
LAB_CSV = """\
patient_id,ward,day,COP_mmHg,comment
P01,ICU-A,0,21.0,admission
P01,ICU-A,1,,sample haemolysed
P01,ICU-A,2,19.5,
P02,ICU-B,0,18.9,
P02,ICU-B,1,18.1,
,ICU-B,2,17.7,unlabelled tube
P03,ICU-A,0,22.4,
P03,ICU-A,3,,
"""


def _study(tmp_path: Path, observations: str, files: dict[str, str]) -> Path:
    for name, text in files.items():
        (tmp_path / name).write_text(text)
    path = tmp_path / "study.toml"
    path.write_text(HEAD + textwrap.dedent(observations))
    return path


def _check(path: Path) -> object:
    return CliRunner().invoke(main, ["check", str(path)])


LAB_OBS = """
[[observations]]
kind = "measurement"
parameter = "pi_c"
file = "cop.csv"
columns = { subject = "patient_id", time = "day", value = "COP_mmHg" }
sd = 1.0
unit = "mmHg"
"""


# ------------------------------------------------------------------------------------------------ reading


def test_lab_shaped_file_loads_through_the_column_map(tmp_path: Path) -> None:
    s = load_study(_study(tmp_path, LAB_OBS, {"cop.csv": LAB_CSV}))
    data = s.observations[0].data
    # 8 data rows: 2 blank COP cells and 1 blank patient_id are missing readings (invented file above)
    assert data["subject"] == ["P01", "P01", "P02", "P02", "P03"]
    assert data["value"] == [21.0, 19.5, 18.9, 18.1, 22.4]
    # day -> min: 1 day = 1440 min (exact)
    assert data["time_min"] == [0.0, 2 * 1440.0, 0.0, 1440.0, 0.0]
    assert data["line"] == [2, 4, 5, 6, 8]
    assert "ward" not in data and "comment" not in data
    notes = data_notes(s.observations)
    assert len(notes) == 1 and "3 of 8 rows skipped" in notes[0]
    assert "blank COP_mmHg in 2" in notes[0] and "blank patient_id in 1" in notes[0]
    # the note reaches the inference output (built.notes go into the result's notes)
    built = build_model(problem_from_study(s))
    assert notes[0] in built.notes
    assert any("repeated readings of one steady value" in n for n in built.notes)


def test_check_prints_the_skipped_rows_note(tmp_path: Path) -> None:
    res = _check(_study(tmp_path, LAB_OBS, {"cop.csv": LAB_CSV}))
    assert res.exit_code == 0, res.output
    assert "note: observations[0] (cop.csv): 3 of 8 rows skipped" in res.output


def test_seconds_and_unit_named_time_columns(tmp_path: Path) -> None:
    # invented cuff readings, time in seconds: 30 s = 0.5 min (exact)
    csv_s = "subject,time_s,volume\nA,0,0.0\nA,30,0.02\nA,60,-0.004\nB,0,0.0\nB,30,0.03\n"
    csv_t = "id,t_s,vol\nA,0,0.0\nA,30,0.02\n"
    obs = """
    [[observations]]
    kind = "volume_time_course"
    file = "a.csv"
    step = { parameter = "Pv", to = 30, unit = "mmHg" }

    [[observations]]
    kind = "volume_time_course"
    file = "b.csv"
    columns = { subject = "id", time = { column = "t_s", unit = "s" }, value = "vol" }
    step = { parameter = "Pv", to = 30, unit = "mmHg" }

    [[observations]]
    kind = "volume_time_course"
    file = "b.csv"
    columns = { subject = "id", time = "t_s", value = "vol" }
    step = { parameter = "Pv", to = 30, unit = "mmHg" }
    """
    s = load_study(_study(tmp_path, obs, {"a.csv": csv_s, "b.csv": csv_t}))
    a, b, c = s.observations
    assert a.data["time_min"] == [0.0, 0.5, 1.0, 0.0, 0.5]
    assert b.data["time_min"] == c.data["time_min"] == [0.0, 0.5]
    assert b.data["volume"] == [0.0, 0.02]
    # a slightly negative zeroed reading is kept (the curve has a baseline offset) and counted in a note
    assert a.data["volume"][2] == -0.004
    assert any("1 of 5 volume readings are below zero" in n for n in data_notes(s.observations))


def test_wide_file_serves_one_observation_per_column(tmp_path: Path) -> None:
    # invented wide export: a column per quantity, blank where not measured
    wide = "subject,Cp_g_dL,pi_c_mmHg,Pi_mmHg\nP01,6.35,22.9,\nP02,5.70,19.3,-1.7\nP03,5.41,,\nP04,5.83,19.9,0.8\n"
    obs = """
    [[observations]]
    kind = "measurement"
    parameter = "Cp"
    file = "wide.csv"
    columns = { value = "Cp_g_dL" }
    sd = 0.2
    unit = "g/dL"

    [[observations]]
    kind = "measurement"
    parameter = "pi_c"
    file = "wide.csv"
    columns = { value = "pi_c_mmHg" }
    instrument = "colloid_osmometer"
    unit = "mmHg"

    [[observations]]
    kind = "measurement"
    parameter = "Pi"
    file = "wide.csv"
    columns = { value = "Pi_mmHg" }
    instrument = "wick_in_needle"
    unit = "mmHg"
    """
    s = load_study(_study(tmp_path, obs, {"wide.csv": wide}))
    cp, pic, pi = (o.data for o in s.observations)
    assert cp["subject"] == ["P01", "P02", "P03", "P04"]
    assert pic["subject"] == ["P01", "P02", "P04"] and pi["subject"] == ["P02", "P04"]
    assert pi["value"] == [-1.7, 0.8]
    problem = problem_from_study(s)
    assert [len(o.rows.value) for o in problem.observations] == [4, 3, 2]


def test_per_row_sd_column_and_default(tmp_path: Path) -> None:
    text = "subject,value,sd\nA,20,0.5\nA,21,\nB,19,2\n"
    obs = """
    [[observations]]
    kind = "measurement"
    parameter = "pi_c"
    file = "r.csv"
    sd = 1.5
    unit = "kPa"
    """
    s = load_study(_study(tmp_path, obs, {"r.csv": text}))
    o = problem_from_study(s).observations[0]
    kpa = 7.50062  # mmHg per kPa (common practice)
    assert o.values == pytest.approx(np.array([20, 21, 19]) * kpa, rel=1e-5)
    # a blank sd cell takes the observation's sd
    assert o.sds == pytest.approx(np.array([0.5, 1.5, 2.0]) * kpa, rel=1e-5)


# --------------------------------------------------------------------------------------- one term per entry


def _readings(n_per_subject: int, base: float = 20.0, step: float = 0.1, subjects: int = 3) -> str:
    rows = ["subject,value"]
    for s in range(subjects):
        rows += [f"S{s},{base + step * (k + s):g}" for k in range(n_per_subject)]   # invented readings
    return "\n".join(rows) + "\n"


MULTI = """
[[observations]]
kind = "measurement"
parameter = "pi_c"
file = "m.csv"
sd = 1.0

[[observations]]
kind = "lymph_flow"
file = "l.csv"
sd = 0.002

[[observations]]
kind = "swelling_rate"
file = "w.csv"
sd = 0.002
lymph = { dist = "lognormal", median = 0.004, gsd = 1.5, origin = "invented" }
"""


@pytest.mark.parametrize("n", [2, 12])
def test_multi_row_files_build_one_term_each(tmp_path: Path, n: int) -> None:
    lymph = _readings(n, 0.004, 0.0001)  # invented flows, mL/min/100g
    s = load_study(_study(tmp_path, MULTI, {"m.csv": _readings(n), "l.csv": lymph, "w.csv": lymph}))
    built = build_model(problem_from_study(s))
    names = [t.name for t in built.terms]
    assert names == ["obs0__measurement", "obs1__lymph_flow", "obs2__swelling_rate"]
    for t in built.terms:
        assert built.model[f"{t.name}__data"].get_value().shape == (3 * n,)
        assert list(t.subjects) == [k // n for k in range(3 * n)]
    assert built.subjects == ["S0", "S1", "S2"]


def test_model_size_does_not_grow_with_readings(tmp_path: Path) -> None:
    sizes = []
    for n in (2, 30):
        folder = tmp_path / f"n{n}"
        folder.mkdir()
        flows = _readings(n, 0.004, 0.0001)  # invented flows, mL/min/100g
        s = load_study(_study(folder, MULTI, {"m.csv": _readings(n), "l.csv": flows, "w.csv": flows}))
        model = build_model(problem_from_study(s)).model
        sizes.append((sorted(model.named_vars), len(model.free_RVs)))
    assert sizes[0] == sizes[1]


# ------------------------------------------------------------------------------------------------ refusals


BAD_CASES = [
    # (csv text, columns map or "", expected key, expected text in the message)
    ("patient_id,day,COP_mmHg\nP01,0,21\nP01,1,abc\n", 'columns = { subject = "patient_id", value = "COP_mmHg" }',
     "observations[0].file", "cop.csv line 3, column COP_mmHg: not a number"),
    ("patient_id,day,COP_mmHg\nP01,0,21\n", 'columns = { subject = "patient_id", value = "COP" }',
     "observations[0].columns.value", "has no column 'COP'"),
    ("patient_id,t,COP_mmHg\nP01,0,21\n", 'columns = { subject = "patient_id", time = "t", value = "COP_mmHg" }',
     "observations[0].columns.time", "say the unit of the time column"),
    ("patient_id,COP_mmHg\nP01,21\nP02,21,5\n", 'columns = { subject = "patient_id", value = "COP_mmHg" }',
     "observations[0].file", "cop.csv line 3: 3 cells where the first line has 2"),
    ("patient_id,COP_mmHg\n# a comment line\nP01,nan\n", 'columns = { subject = "patient_id", value = "COP_mmHg" }',
     "observations[0].file", "cop.csv line 3, column COP_mmHg: NaN or infinite value"),
    ("subject,COP_mmHg\nP01,21\n", "", "observations[0].file", "cop.csv has no value column"),
]


@pytest.mark.parametrize("text,cmap,key,message", BAD_CASES, ids=range(len(BAD_CASES)))
def test_check_refuses_bad_files_naming_file_line_and_column(tmp_path: Path, text: str, cmap: str, key: str,
                                                             message: str) -> None:
    obs = f"""
    [[observations]]
    kind = "measurement"
    parameter = "pi_c"
    file = "cop.csv"
    {cmap}
    sd = 1.0
    """
    path = _study(tmp_path, obs, {"cop.csv": text})
    res = _check(path)
    assert res.exit_code == 2, res.output
    err = res.stderr.strip()
    assert len(err.splitlines()) == 1 and "Traceback" not in res.output
    assert str(path) in err and f": {key}: " in err
    assert message in err, err


def test_errors_show_at_most_the_offending_cell_shortened(tmp_path: Path) -> None:
    secret = "Jane Example-Patient"      # invented name in another cell: must never be echoed
    long_cell = "x" * 200
    text = f"subject,name,value\nA,{secret},21\nB,{secret},{long_cell}\n"
    obs = """
    [[observations]]
    kind = "measurement"
    parameter = "pi_c"
    file = "cop.csv"
    sd = 1.0
    """
    res = _check(_study(tmp_path, obs, {"cop.csv": text}))
    assert res.exit_code == 2
    assert secret not in res.stderr and long_cell not in res.stderr
    # issue 17: file, line and column only; not even the offending cell is shown
    assert "line 3, column value: not a number" in res.stderr and "xxx" not in res.stderr
    # a header that is really a data row (no header line) is not echoed either
    res = _check(_study(tmp_path, obs, {"cop.csv": f"A,{secret},21\n"}))
    assert res.exit_code == 2 and secret not in res.stderr


def test_blank_sd_cell_without_a_default_is_refused(tmp_path: Path) -> None:
    obs = """
    [[observations]]
    kind = "measurement"
    parameter = "pi_c"
    file = "r.csv"
    """
    with pytest.raises(StudyError) as exc:
        load_study(_study(tmp_path, obs, {"r.csv": "subject,value,sd\nA,20,0.5\nB,21,\n"}))
    assert "r.csv line 3, column sd" in str(exc.value)


# ------------------------------------------------------------------------------------------------ sampling


@pytest.mark.slow
def test_multi_row_measurement_file_infers_conjugate_posterior(tmp_path: Path) -> None:
    """One subject, four readings of Pi: the model is normal-normal, so the posterior of the subject's Pi is
    the conjugate closed form (common practice): precision 1/s0^2 + sum 1/sd_k^2."""
    from uncertainty.analyses.inference.api import fit

    # invented readings of one subject, well above the prior median (-1 mmHg in the skeletal_muscle set)
    text = "subject,day,Pi_mmHg,sd\nS1,0,2.0,1.0\nS1,1,2.6,\nS1,2,1.4,0.8\nS1,3,2.2,1.0\n"
    obs = """
    [[observations]]
    kind = "measurement"
    parameter = "Pi"
    file = "pi.csv"
    columns = { time = "day", value = "Pi_mmHg" }
    sd = 1.2
    unit = "mmHg"
    """
    s = load_study(_study(tmp_path, obs, {"pi.csv": text}))
    prior = s.priors["Pi"]
    assert prior.dist == "normal" and "sd" in prior.between_subject
    # the individual's prior: typical-value prior and between-subject spread, both normal
    m0 = prior.params["mean"]
    v0 = prior.params["sd"] ** 2 + float(prior.between_subject["sd"]) ** 2
    y = np.array([2.0, 2.6, 1.4, 2.2])
    sd = np.array([1.0, 1.2, 0.8, 1.0])
    prec = 1 / v0 + np.sum(1 / sd**2)
    mean = (m0 / v0 + np.sum(y / sd**2)) / prec
    post_sd = prec ** -0.5
    result = fit(s, chains=2, draws=300, tune=300, seed=11)
    draws = result.idata.posterior["Pi__subject"].values[..., 0].ravel()
    assert abs(draws.mean() - mean) < 0.25 * post_sd
    assert draws.std() == pytest.approx(post_sd, rel=0.15)
    # the posterior moved from the prior mean toward the readings
    assert abs(draws.mean() - y.mean()) < abs(m0 - y.mean())


def test_a_subject_in_two_groups_names_the_line(tmp_path: Path) -> None:
    from uncertainty.core.errors import InputError

    obs = """
    [[observations]]
    kind = "measurement"
    parameter = "pi_c"
    file = "g.csv"
    columns = { group = "arm" }
    sd = 1.0
    """
    # invented: subject B listed in both arms
    s = load_study(_study(tmp_path, obs, {"g.csv": "subject,arm,value\nA,x,20\nB,x,21\nB,y,22\n"}))
    with pytest.raises(InputError) as exc:
        build_model(problem_from_study(s))
    assert "g.csv line 4: subject 'B' is in two groups" in str(exc.value)
