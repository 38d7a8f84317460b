"""The ``haematocrit`` kind, ``urine`` read as rates and ``fluid_balance`` in a whole_body study: each kind's readings
(design arrays) and predictions against values computed by hand from the numpy time course
(``observations.course.whole_body_course``), closed forms (rates telescope to the cumulative volume; a body at rest
charts only its basal urine), haematocrit and haemoglobin giving one term, the refusals (exit 2 through
``fluidshift check``), the fan-chart points and the notes. No sampling.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from toml_text import toml_text

from uncertainty.analyses.inference.observations import haematocrit, haemoglobin, kind_module, urine, weight_course
from uncertainty.analyses.inference.observations.course import relative_prediction, whole_body_course
from uncertainty.analyses.inference.problem import problem_from_study
from uncertainty.app.cli import main
from uncertainty.core.errors import InputError, StudyError
from uncertainty.physiology import whole_body as wb
from uncertainty.priors import prior_medians
from uncertainty.study import Study

CRYSTALLOID = [{"kind": "infusion", "fluid": "crystalloid", "volume": "1500 mL", "duration": "30 min"}]
# invented readings. Haematocrit in per cent (blank sd cells take the observation's 0.5 %); a subject with one reading
HCT_ROWS = "subject,time_min,value,sd\nA,0,42,\nA,30,37.8,1\nA,75,39.9,\nB,0,45,\nB,45,40.5,\nC,20,41,\n"
# urine flows in mL/h, rows out of time order, each the mean since the subject's previous reading (or time 0)
RATE_ROWS = "subject,time_min,value\nA,45,300\nA,20,90\nB,60,240\nA,90,120\n"
# charted balances in mL (converted to L), from 0 where the chart starts
BALANCE_ROWS = "subject,time_min,value\nA,0,0\nA,30,1400\nA,75,1100\nB,45,1250\n"


def _doc(observations: list, interventions: list | None = None, model: str = "whole_body") -> dict:
    # invented settings: a 73 kg subject, 90 min of timeline reported every 10 min
    doc = {"study": {"tissue": "skeletal_muscle", "model": model, "body_mass": "73 kg", "seed": 3},
           "observations": observations}
    if model == "whole_body":
        doc["interventions"] = interventions or CRYSTALLOID
        doc["timeline"] = {"end": "90 min", "report_every": "10 min", "draws": 16}
    return doc


def _files(tmp: Path, **rows: str) -> None:
    defaults = {"hct": HCT_ROWS, "rate": RATE_ROWS, "balance": BALANCE_ROWS}
    for name, text in {**defaults, **rows}.items():
        (tmp / f"{name}.csv").write_text(text, encoding="utf-8")


HCT = {"kind": "haematocrit", "file": "hct.csv", "unit": "%", "sd": 0.5}
RATE = {"kind": "urine", "how": "rate", "file": "rate.csv", "unit": "mL/h", "sd": 6.0}
BALANCE = {"kind": "fluid_balance", "file": "balance.csv", "unit": "mL", "sd": 100.0}


def _problem(tmp: Path, observations: list, interventions: list | None = None, **rows: str):
    _files(tmp, **rows)
    problem = problem_from_study(Study.from_dict(_doc(observations, interventions), base_dir=tmp))
    for obs in problem.observations:
        kind_module(obs).validate(obs, problem)
    return problem


def _course(study: Study, name: str) -> tuple[list[float], np.ndarray]:
    """The numpy course ``name`` for two subjects: the prior medians, and the medians with Kf doubled and the
    lymph conductance halved (so the subjects differ), as a (report time, subject) array."""
    med = prior_medians("skeletal_muscle")
    v = {k: np.array([x, x]) for k, x in med.items()}
    v["Kf"] = np.array([med["Kf"], 2.0 * med["Kf"]])
    v["L"] = np.array([med["L"], 0.5 * med["L"]])
    c = whole_body_course(v, study, name, np)
    return c["times_min"], np.stack([np.broadcast_to(np.ravel(x), (2,)) for x in c[name]])


# --- haematocrit --------------------------------------------------------------------------------------------------

def test_haematocrit_readings_become_ratios_to_each_subjects_first(tmp_path: Path) -> None:
    problem = _problem(tmp_path, [HCT])
    d = haematocrit.design(problem.observations[0], ["A", "B", "C"])
    np.testing.assert_allclose(d["value"], [37.8 / 42, 39.9 / 42, 40.5 / 45])  # the per cent cancels
    np.testing.assert_allclose(d["time"], [30.0, 75.0, 45.0])
    np.testing.assert_allclose(d["ref_time"], [0.0, 0.0, 0.0])
    assert list(d["subject"]) == [0, 0, 1] and list(d["skipped"]) == [2]
    # delta method in the fraction the study converts to: sd_y = sqrt(sd_k^2 + (y sd_ref)^2) / Hct_ref
    y = 37.8 / 42
    assert d["sd"][0] == pytest.approx(np.sqrt(0.01**2 + (y * 0.005) ** 2) / 0.42)
    y = 40.5 / 45
    assert d["sd"][2] == pytest.approx(np.sqrt(0.005**2 + (y * 0.005) ** 2) / 0.45)


def test_haematocrit_as_a_fraction_reads_as_in_per_cent(tmp_path: Path) -> None:
    fraction = ("subject,time_min,value,sd\nA,0,0.42,\nA,30,0.378,0.01\nA,75,0.399,\nB,0,0.45,\nB,45,0.405,\n"
                "C,20,0.41,\n")
    per_cent = haematocrit.design(_problem(tmp_path, [HCT]).observations[0], ["A", "B", "C"])
    as_one = haematocrit.design(_problem(tmp_path, [{**HCT, "unit": "1", "sd": 0.005}], hct=fraction)
                                .observations[0], ["A", "B", "C"])
    for key in ("value", "sd", "time", "ref_time", "subject"):
        np.testing.assert_allclose(as_one[key], per_cent[key], rtol=1e-12)
    no_unit = {k: v for k, v in HCT.items() if k != "unit"}  # a fraction when no unit is given
    d = haematocrit.design(_problem(tmp_path, [{**no_unit, "sd": 0.005}], hct=fraction).observations[0],
                           ["A", "B", "C"])
    np.testing.assert_allclose(d["value"], per_cent["value"], rtol=1e-12)


def test_haematocrit_predicts_the_hb_ratio_course(tmp_path: Path) -> None:
    # the term's prediction, hb_ratio(t) / hb_ratio(t_ref), against the numpy course interpolated by hand: A at 30
    # min is a report time; A at 75 and B at 45 lie halfway between report times (0 for both references)
    problem = _problem(tmp_path, [HCT])
    d = haematocrit.design(problem.observations[0], ["A", "B", "C"])
    times, hb = _course(problem.study, "hb_ratio")
    k = {t: times.index(t) for t in (0.0, 30.0, 40.0, 50.0, 70.0, 80.0)}
    by_hand = [hb[k[30.0], 0] / hb[k[0.0], 0],
               0.5 * (hb[k[70.0], 0] + hb[k[80.0], 0]) / hb[k[0.0], 0],
               0.5 * (hb[k[40.0], 1] + hb[k[50.0], 1]) / hb[k[0.0], 1]]
    np.testing.assert_allclose(relative_prediction(hb, times, d), by_hand, rtol=1e-12)
    assert hb[k[0.0], 0] == 1.0 and by_hand[0] < 0.95  # a real dilution to compare (1.5 L of crystalloid)
    assert haemoglobin.COURSE == "hb_ratio" and "hb_ratio" in wb.TIMELINE_UNITS


def test_haematocrit_and_haemoglobin_give_the_same_term(tmp_path: Path) -> None:
    # haemoglobin proportional to haematocrit (a constant mean corpuscular haemoglobin concentration; the factor
    # 0.33 g/dL per % is invented, near the bedside rule Hct % ~ 3 x Hb g/dL, common practice), its sd scaled alike:
    # the same ratios, the same errors, so the same prediction of the same course
    factor = 0.33
    rows = HCT_ROWS.splitlines()
    hb_rows = [rows[0]]
    for line in rows[1:]:
        s, t, v, sd = line.split(",")
        hb_rows.append(f"{s},{t},{float(v) * factor!r},{'' if not sd else repr(float(sd) * factor)}")
    (tmp_path / "hb.csv").write_text("\n".join(hb_rows) + "\n", encoding="utf-8")
    hb_obs = {"kind": "haemoglobin", "file": "hb.csv", "unit": "g/dL", "sd": 0.5 * factor}
    problem = _problem(tmp_path, [HCT, hb_obs])
    hct_d = haematocrit.design(problem.observations[0], ["A", "B", "C"])
    hb_d = haemoglobin.design(problem.observations[1], ["A", "B", "C"])
    for key in ("value", "sd", "time", "ref_time", "subject", "skipped"):
        np.testing.assert_allclose(hct_d[key], hb_d[key], rtol=1e-12, err_msg=key)
    times, hb = _course(problem.study, haemoglobin.COURSE)
    np.testing.assert_array_equal(relative_prediction(hb, times, hct_d), relative_prediction(hb, times, hb_d))


# --- urine as rates -----------------------------------------------------------------------------------------------

def test_urine_rate_readings_in_ml_per_min_since_the_previous_reading(tmp_path: Path) -> None:
    problem = _problem(tmp_path, [RATE])
    obs = problem.observations[0]
    assert urine.how_of(obs) == "rate"
    d = urine.design(obs, ["A", "B"])
    # file order kept; each reading's interval from its subject's previous reading in time (0 for the first)
    np.testing.assert_allclose(d["time"], [45.0, 20.0, 60.0, 90.0])
    np.testing.assert_allclose(d["prev_time"], [20.0, 0.0, 0.0, 45.0])
    np.testing.assert_allclose(d["value"], [5.0, 1.5, 4.0, 2.0])  # mL/h over 60 -> mL/min
    np.testing.assert_allclose(d["sd"], 0.1)
    assert list(d["subject"]) == [0, 0, 1, 0]


def test_urine_rate_predicts_the_courses_slope_over_each_interval(tmp_path: Path) -> None:
    problem = _problem(tmp_path, [RATE])
    d = urine.design(problem.observations[0], ["A", "B"])
    times, u = _course(problem.study, urine.COURSE)
    k = {t: times.index(t) for t in (0.0, 20.0, 40.0, 50.0, 60.0, 90.0)}
    u45 = 0.5 * (u[k[40.0], 0] + u[k[50.0], 0])  # 45 min: halfway between report times
    by_hand = [(u45 - u[k[20.0], 0]) / 25.0, (u[k[20.0], 0] - u[k[0.0], 0]) / 20.0,
               (u[k[60.0], 1] - u[k[0.0], 1]) / 60.0, (u[k[90.0], 0] - u45) / 45.0]
    np.testing.assert_allclose(urine.predicted(u, times, d), by_hand, rtol=1e-12)
    assert u[k[0.0], 0] == 0.0 and min(by_hand) > 0.5  # mL/min: basal urine alone is 73/60, 1 mL/kg/h


def test_rates_are_differences_of_the_cumulative_volumes(tmp_path: Path) -> None:
    # one subject's cumulative volumes (invented, mL) and the rates they imply over the same intervals: the rate term
    # predicts the differences of the cumulative term's predictions over the intervals, and its readings are the
    # differences of the readings
    cumulative = "subject,time_min,value\nA,0,0\nA,25,60\nA,50,170\nA,90,260\n"
    rates = "subject,time_min,value\nA,25,2.4\nA,50,4.4\nA,90,2.25\n"  # (60 - 0)/25, (170 - 60)/25, (260 - 170)/40
    (tmp_path / "cum.csv").write_text(cumulative, encoding="utf-8")
    cum_obs = {"kind": "urine", "file": "cum.csv", "unit": "mL", "sd": 5.0}
    problem = _problem(tmp_path, [{**RATE, "unit": "mL/min", "sd": 0.2}, cum_obs], rate=rates)
    rate_d = urine.design(problem.observations[0], ["A"])
    cum_d = urine.design(problem.observations[1], ["A"])
    times, u = _course(problem.study, urine.COURSE)
    cum = urine.predicted(u, times, cum_d)
    dt = np.diff(np.concatenate([[0.0], cum_d["time"]]))
    np.testing.assert_allclose(urine.predicted(u, times, rate_d), np.diff(np.concatenate([[0.0], cum])) / dt,
                               rtol=1e-12)
    np.testing.assert_allclose(rate_d["value"], np.diff(np.concatenate([[0.0], cum_d["value"]])) / dt, rtol=1e-12)


def test_cumulative_urine_is_unchanged_by_default(tmp_path: Path) -> None:
    (tmp_path / "cum.csv").write_text("subject,time_min,value\nA,0,0\nA,30,80\n", encoding="utf-8")
    problem = _problem(tmp_path, [{"kind": "urine", "file": "cum.csv", "unit": "mL", "sd": 5.0}])
    obs = problem.observations[0]
    d = urine.design(obs, ["A"])
    assert urine.how_of(obs) == "cumulative" and "prev_time" not in d
    np.testing.assert_allclose(d["value"], [80.0])
    times, u = _course(problem.study, urine.COURSE)
    np.testing.assert_allclose(urine.predicted(u, times, d), [u[times.index(30.0), 0]])


# --- fluid_balance in a whole_body study ---------------------------------------------------------------------------

def test_fluid_balance_is_the_charted_balance_of_the_course(tmp_path: Path) -> None:
    # the chart records infused - bled - urine (no insensible loss): against the numpy urine course by hand, 1500 mL
    # of crystalloid over 30 min
    problem = _problem(tmp_path, [BALANCE])
    d = weight_course.balance_design(problem.observations[0], ["A", "B"])
    np.testing.assert_allclose(d["value"], [0.0, 1.4, 1.1, 1.25])  # mL -> L, as charted, time 0 kept
    np.testing.assert_allclose(d["sd"], 0.1)
    np.testing.assert_allclose(d["time"], [0.0, 30.0, 75.0, 45.0])
    times, w = _course(problem.study, weight_course.COURSE)
    _, u = _course(problem.study, urine.COURSE)
    k = {t: times.index(t) for t in (0.0, 30.0, 40.0, 50.0, 70.0, 80.0)}
    by_hand = [0.0, (1500.0 - u[k[30.0], 0]) / 1000.0,
               (1500.0 - 0.5 * (u[k[70.0], 0] + u[k[80.0], 0])) / 1000.0,
               (1500.0 - 0.5 * (u[k[40.0], 1] + u[k[50.0], 1])) / 1000.0]
    np.testing.assert_allclose(weight_course.balance_predicted(w, times, d), by_hand, rtol=1e-9, atol=1e-12)


def test_a_chart_at_rest_records_only_the_basal_urine(tmp_path: Path) -> None:
    # a bleed that starts at 60 min: before it nothing moves, so the chart falls at the basal urine flow only (1
    # mL/kg/h, common practice: 73/60 mL/min), while the weight also loses insensible water ((450 + 300) mL/day,
    # Institute of Medicine 2005, Dietary Reference Intakes for Water, ch. 4, pp. 83 and 86)
    bleed = [{"kind": "bleed", "volume": "450 mL", "start": "60 min", "duration": "10 min"}]
    rows = "subject,time_min,value\nA,20,-20\nA,50,-60\n"
    problem = _problem(tmp_path, [BALANCE], interventions=bleed, balance=rows)
    d = weight_course.balance_design(problem.observations[0], ["A"])
    times, w = _course(problem.study, weight_course.COURSE)
    chart = weight_course.balance_predicted(w, times, d)
    np.testing.assert_allclose(chart, -73.0 / 60.0 * d["time"] / 1000.0, rtol=1e-9)  # L
    weight = w[[times.index(20.0), times.index(50.0)], 0]
    np.testing.assert_allclose(weight, -(73.0 / 60.0 + 750.0 / 1440.0) * d["time"] / 1000.0, rtol=1e-9)  # kg


def test_fluid_balance_takes_no_share_or_tissue_mass_in_a_whole_body_study(tmp_path: Path) -> None:
    from uncertainty.analyses.inference.observations import fluid_balance

    problem = _problem(tmp_path, [BALANCE])  # neither given, neither needed
    obs = problem.observations[0]
    assert fluid_balance.typical_output(obs, problem) is None  # the resting Jv is not what the chart pins
    _files(tmp_path)
    with pytest.raises(StudyError) as exc:
        Study.from_dict(_doc([{**BALANCE, "share": {"dist": "beta", "mean": 0.4, "sd": 0.1}}]), base_dir=tmp_path)
    assert exc.value.key == "observations[0].share"
    # a steady form still needs the share (and the tissue mass)
    with pytest.raises(StudyError, match=r"observations\[0\].*share"):
        Study.from_dict({"study": {"tissue": "skeletal_muscle", "tissue_mass": "25 kg"}, "observations": [BALANCE]},
                        base_dir=tmp_path)


def test_whole_body_notes_name_the_body_balance_not_the_share(tmp_path: Path) -> None:
    from uncertainty.analyses.inference.api import with_kind_notes
    from uncertainty.analyses.inference.observations import fluid_balance

    (tmp_path / "w.csv").write_text("subject,time_min,value\nA,0,70\nA,30,71.2\n", encoding="utf-8")
    weights = {"kind": "body_weight", "file": "w.csv", "unit": "kg", "sd": 0.1}
    problem = _problem(tmp_path, [BALANCE, weights, RATE])
    notes = with_kind_notes([], problem.observations, problem)
    assert notes == [weight_course.BALANCE_NOTE, weight_course.NOTE, urine.RATE_NOTE]
    assert fluid_balance.NOTE not in notes
    # without the problem (and in a steady study) a kind keeps its own note
    assert with_kind_notes([], problem.observations[:1]) == [fluid_balance.NOTE]


# --- refusals: exit 2 through fluidshift check, naming the key or the file and line --------------------------------

@pytest.mark.parametrize("obs, rows, needles", [
    (RATE, {"rate": "subject,time_min,value\nA,30,60\nA,60,-30\n"}, ["rate.csv line 3", "urine_flow"]),  # negative
    (RATE, {"rate": "subject,time_min,value\nA,30,60\nA,30,90\n"}, ["rate.csv line 3", "one time"]),
    (RATE, {"rate": "subject,time_min,value\nA,0,60\nA,30,90\n"}, ["rate.csv line 2", "time 0"]),
    ({**RATE, "how": "hourly"}, {}, ["observations[0].how", "hourly"]),                   # unknown how
    ({**HCT, "how": "rate"}, {}, ["observations[0]", "no how"]),                          # how on another kind
    (HCT, {"hct": "subject,time_min,value\nA,0,42\nA,30,137.8\n"}, ["hct.csv line 3", "strictly between 0 and 1"]),
    ({**HCT, "unit": "1", "sd": 0.005}, {"hct": "subject,time_min,value\nA,0,42\nA,30,38\n"}, ["hct.csv line 2"]),
    ({**HCT, "unit": "1", "sd": 0.005}, {"hct": "subject,time_min,value\nA,0,0.42\nA,30,0\n"}, ["hct.csv line 3"]),
    ({**HCT, "file": None, "value": 0.4}, {}, ["observations[0]", "data file"]),             # no data file
    ({**HCT, "sd": None, "cv": 0.02}, {"hct": "subject,time_min,value\nA,0,42\nA,30,38\n"},
     ["observations[0].cv", "normal error"]),
    ({**BALANCE, "share": {"dist": "beta", "mean": 0.4, "sd": 0.1}}, {}, ["observations[0].share", "no share"]),
])
def test_refusals_exit_2_naming_key_or_line(tmp_path: Path, obs: dict, rows: dict, needles: list) -> None:
    _files(tmp_path, **rows)
    path = tmp_path / "study.toml"
    path.write_text(toml_text(_doc([{k: v for k, v in obs.items() if v is not None}])), encoding="utf-8")
    res = CliRunner().invoke(main, ["check", str(path)])
    assert res.exit_code == 2, res.output
    assert "Traceback" not in res.output
    for needle in needles:
        assert needle in res.output, (needle, res.output)


def test_haematocrit_needs_a_whole_body_study(tmp_path: Path) -> None:
    _files(tmp_path)
    problem = problem_from_study(Study.from_dict(_doc([HCT], model="steady_state"), base_dir=tmp_path))
    obs = problem.observations[0]
    with pytest.raises(InputError, match="whole_body") as exc:
        kind_module(obs).validate(obs, problem)
    assert exc.value.key == "observations[0].kind"


# --- the fan chart ----------------------------------------------------------------------------------------------

def test_points_on_the_fan_chart(tmp_path: Path) -> None:
    from uncertainty.analyses.propagate.timeline import observed_points

    _files(tmp_path)
    points = observed_points(Study.from_dict(_doc([HCT, RATE]), base_dir=tmp_path))
    hct = points["hb_ratio"]
    assert hct["relative_to_first"] and hct["subjects"] == ["A", "A", "A", "B", "B", "C"]
    np.testing.assert_allclose(hct["values"], [1.0, 37.8 / 42, 39.9 / 42, 1.0, 40.5 / 45, 1.0])
    # rates drawn as the cumulative volumes they add up to: A 1.5 mL/min x 20 min, then 5 x 25, then 2 x 45
    vol = points["urine_volume"]
    assert not vol["relative_to_first"] and vol["subjects"] == ["A", "A", "A", "B"]
    np.testing.assert_allclose(vol["times_min"], [20.0, 45.0, 90.0, 60.0])
    np.testing.assert_allclose(vol["values"], [30.0, 155.0, 245.0, 240.0])


def test_charted_balances_on_the_weight_chart_in_kg(tmp_path: Path) -> None:
    # the fluid_balance kind is fitted to body_weight_change through charted_balance (weight + insensible loss since
    # 0, at 1 kg/L): its points are the readings taken back through that relation, so on the weight chart in kg
    from uncertainty.analyses.propagate.timeline import balance_as_weight_change, observed_points

    _files(tmp_path)
    (tmp_path / "w.csv").write_text("subject,time_min,value\nA,0,70\nA,30,71.2\n", encoding="utf-8")
    weights = {"kind": "body_weight", "file": "w.csv", "unit": "kg", "sd": 0.1}
    chart = observed_points(Study.from_dict(_doc([weights, BALANCE]), base_dir=tmp_path))["body_weight_change"]
    assert chart["series"] == ["body_weight"] * 2 + ["fluid_balance"] * 4
    assert chart["subjects"] == ["A", "A", "A", "A", "A", "B"]
    assert not chart["change_from_first"] and not chart["relative_to_first"]  # two ways of showing on one chart
    assert set(chart["legends"]) == {"body_weight", "fluid_balance"}
    t = np.array(chart["times_min"][2:])
    np.testing.assert_allclose(t, [0.0, 30.0, 75.0, 45.0])
    # closed form: mL -> L, less (450 + 300) mL/day of insensible loss (Institute of Medicine 2005, ch. 4), 1 kg/L
    by_hand = (np.array([0.0, 1400.0, 1100.0, 1250.0]) - 750.0 / 1440.0 * t) / 1000.0
    np.testing.assert_allclose(chart["values"][2:], by_hand, rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(chart["values"][:2], [0.0, 1.2], atol=1e-12)  # weights: minus the first
    # the inverse of the relation the term is fitted through, at any time
    y, tt = np.array([0.3, -0.2, 1.7]), np.array([5.0, 60.0, 240.0])
    np.testing.assert_allclose(weight_course.charted_balance(balance_as_weight_change(y, tt), tt), y, rtol=1e-12)


def test_every_timed_kind_is_drawn_on_the_chart_of_its_course() -> None:
    # a timed kind of a whole_body study fits one of the form's time courses: its readings go on that course's chart
    import importlib

    from uncertainty.analyses.inference.observations import KINDS, plasma_protein
    from uncertainty.analyses.propagate.timeline import OBSERVED_COURSES, OBSERVED_LEGENDS

    timed = {k for k, m in KINDS.items()
             if getattr(importlib.import_module(f"uncertainty.analyses.inference.observations.{m}"), "TIMED", False)}
    assert timed == set(OBSERVED_COURSES)
    fitted = {"haemoglobin": haemoglobin.COURSE, "haematocrit": haemoglobin.COURSE, "urine": urine.COURSE,
              "body_weight": weight_course.COURSE, "fluid_balance": weight_course.COURSE,
              "plasma_protein": plasma_protein.COURSE}
    assert {k: c for k, (c, _) in OBSERVED_COURSES.items()} == fitted
    assert all(c in wb.TIMELINE_UNITS for c in fitted.values())
    assert set(OBSERVED_LEGENDS) == set(OBSERVED_COURSES) | {"urine_rate"}


def test_the_figure_draws_every_series_of_a_chart(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # weights, charted balances, haematocrit and urine flows of one study: each chart shows its readings, one colour
    # and one legend entry per series, one marker line per subject and series
    from uncertainty.analyses.propagate import figure
    from uncertainty.analyses.propagate.timeline import timeline

    _files(tmp_path)
    (tmp_path / "w.csv").write_text("subject,time_min,value\nA,0,70\nA,30,71.2\n", encoding="utf-8")
    weights = {"kind": "body_weight", "file": "w.csv", "unit": "kg", "sd": 0.1}
    tl = timeline(Study.from_dict(_doc([HCT, RATE, BALANCE, weights]), base_dir=tmp_path), draws=8)
    shown: dict = {}

    def keep(fig, out_dir, stem):
        shown["fig"] = fig
        return [stem]

    monkeypatch.setattr(figure, "save_figure", keep)
    figure.plot_timeline(tl, str(tmp_path))
    for name, n_lines in (("hb_ratio", 3), ("urine_volume", 2), ("body_weight_change", 3)):
        obs = tl["observed"][name]
        ax = next(a for a in shown["fig"].axes if a.get_title().split(" ")[0] == name)
        lines = [ln for ln in ax.get_lines() if ln.get_marker() not in (None, "None", "")]
        assert len(lines) == n_lines, name  # subjects x series
        pts = sorted((float(x), float(y)) for ln in lines for x, y in zip(*ln.get_data(), strict=True))
        assert pts == sorted(zip(obs["times_min"], obs["values"], strict=True)), name
        legend = [t.get_text() for t in ax.get_legend().get_texts()]
        assert [x for x in legend if x.startswith("observed")] == [f"observed: {obs['legends'][s]}"
                                                                   for s in dict.fromkeys(obs["series"])]
        colours = {s: {ln.get_color() for ln, z in zip(lines, _series_of_lines(obs), strict=True) if z == s}
                   for s in set(obs["series"])}
        assert all(len(c) == 1 for c in colours.values()) and len(set.union(*colours.values())) == len(colours)


def _series_of_lines(obs: dict) -> list[str]:
    """The series of each marker line ``figure.draw_observed`` draws, in drawing order (series, then subject)."""
    out = []
    for s in dict.fromkeys(obs["series"]):
        out += [s] * len(dict.fromkeys(x for x, z in zip(obs["subjects"], obs["series"], strict=True) if z == s))
    return out


# --- the model: every new term built in PyTensor and evaluated at one point -----------------------------------------

@pytest.mark.slow
def test_the_models_terms_keep_the_relations_at_a_point(tmp_path: Path) -> None:
    # slow: about 25 s to build the PyTensor graph and compile the predictions (no sampling). One model with
    # haematocrit and the proportional haemoglobin, cumulative urine and the rates it implies, weights and a charted
    # balance; its predictions (PyTensor, 4-min Runge-Kutta steps) evaluated at the initial point: haematocrit's
    # equal haemoglobin's, the rates equal the differences of the cumulative predictions over their intervals, and
    # the charted balance equals the weight change plus the insensible loss since 0
    import pytensor

    from uncertainty.analyses.inference.model_builder import build_model

    (tmp_path / "hb.csv").write_text("subject,time_min,value\nA,0,13.86\nA,30,12.474\nB,0,14.85\nB,45,13.365\n",
                                     encoding="utf-8")  # 0.33 x the haematocrit rows below (invented)
    (tmp_path / "cum.csv").write_text("subject,time_min,value\nA,25,60\nA,50,170\nA,90,260\n", encoding="utf-8")
    (tmp_path / "w.csv").write_text("subject,time_min,value\nA,0,70\nA,30,71.2\nA,75,71.0\n", encoding="utf-8")
    hct_rows = "subject,time_min,value\nA,0,42\nA,30,37.8\nB,0,45\nB,45,40.5\n"
    rates = "subject,time_min,value\nA,25,2.4\nA,50,4.4\nA,90,2.25\n"
    observations = [{**HCT, "sd": 0.5}, {"kind": "haemoglobin", "file": "hb.csv", "unit": "g/dL", "sd": 0.165},
                    {"kind": "urine", "file": "cum.csv", "unit": "mL", "sd": 5.0},
                    {**RATE, "unit": "mL/min", "sd": 0.2},
                    {"kind": "body_weight", "file": "w.csv", "unit": "kg", "sd": 0.1},
                    {**BALANCE, "unit": "L", "sd": 0.1}]
    problem = _problem(tmp_path, observations, hct=hct_rows, rate=rates,
                       balance="subject,time_min,value\nA,30,1.4\nA,75,1.1\n")
    built = build_model(problem)
    model = built.model
    assert [t.label for t in built.terms] == [
        "haematocrit relative to the first reading", "haemoglobin relative to the first reading",
        "cumulative urine volume since time 0", "mean urine flow since the previous reading",
        "body weight change from the first reading", "charted fluid balance since time 0"]
    names = [f"obs{i}__{o['kind']}__pred" for i, o in enumerate(observations)]
    outs = model.replace_rvs_by_values([model[n] for n in names])
    fn = pytensor.function(model.value_vars, outs, mode="FAST_COMPILE", on_unused_input="ignore")
    point = model.initial_point()
    hct, hb, cum, rate, weight, chart = fn(*[point[v.name] for v in model.value_vars])
    np.testing.assert_allclose(hct, hb, rtol=1e-12)
    assert hct.size == 2 and np.all(hct < 0.97)  # diluted at 30 and 45 min
    np.testing.assert_allclose(rate, np.diff(np.concatenate([[0.0], cum])) / np.array([25.0, 25.0, 40.0]),
                               rtol=1e-9)
    # weights at 30 and 75 min minus the weight at 0 (where the course is 0): the course itself, kg
    np.testing.assert_allclose(chart, weight + wb.INSENSIBLE_LOSS_ML_MIN * np.array([30.0, 75.0]) / 1000.0,
                               rtol=1e-9)


@pytest.mark.parametrize("kind", ["haematocrit", "urine"])
def test_kf_and_t_el_keep_their_own_spread_factors_under_their_readings(tmp_path: Path, kind: str) -> None:
    # red-cell dilution informs each subject's Kf alone (haemoglobin.OWN_SPREAD), urine each subject's elimination
    # half-life t_el (urine.OWN_SPREAD): that quantity's between-subject spread has its own factor and the joint
    # factor holds the others
    from uncertainty.analyses.inference.model_builder import build_model

    problem = _problem(tmp_path, [HCT if kind == "haematocrit" else RATE])
    built = build_model(problem, structure_only=True)
    free = {v.name for v in built.model.free_RVs}
    assert "joint__spread_z" in free
    assert ("Kf__spread_z" in free) is (kind == "haematocrit")
    assert ("t_el__spread_z" in free) is (kind == "urine")
    joint_note = next(n for n in built.notes if n.startswith("one between-subject spread factor"))
    joint = joint_note.split(" for ")[1].split(" (")[0].split(", ")
    assert ("Kf" in joint) is (kind != "haematocrit") and ("t_el" in joint) is (kind != "urine")


def test_each_kinds_reading_intervals_on_its_chart(tmp_path: Path) -> None:
    # haematocrit (ratios, per-reading sds), cumulative urine (one sd), a charted balance (shown as the weight change
    # it implies) and urine read as rates (left out: the chart shows volumes). A stand-in posterior puts each
    # reading's prediction at a fixed value c, so its predictive is normal(c, sd) and the interval's ends are
    # c -/+ 1.959964 sd (scipy.stats.norm, the outside reference), within 0.06 sd (about 4.5 standard errors of a
    # 2.5 % quantile from 40,000 draws)
    import arviz as az
    from scipy import stats

    from uncertainty.analyses.inference.model_builder import build_model
    from uncertainty.analyses.inference.posterior_timeline import reading_intervals
    from uncertainty.analyses.propagate.timeline import balance_as_weight_change

    (tmp_path / "cum.csv").write_text("subject,time_min,value\nA,30,80\nB,60,150\n", encoding="utf-8")
    cum = {"kind": "urine", "file": "cum.csv", "unit": "mL", "sd": 5.0}
    built = build_model(_problem(tmp_path, [HCT, cum, BALANCE, RATE]), structure_only=True)
    post = {}
    for term in built.terms:
        n = int(np.asarray(built.model[f"{term.name}__data"].get_value()).size)
        post[term.predicted] = np.broadcast_to(np.linspace(0.5, 1.5, n), (1, 40_000, n))
    got = reading_intervals(built, az.from_dict(posterior=post))
    assert set(got) == {"hb_ratio", "urine_volume", "body_weight_change"}   # the rates are left out
    z = stats.norm.ppf(0.975)
    for term in built.terms:
        kind = term.observation.kind
        if kind == "urine" and urine.how_of(term.observation) == "rate":
            continue
        course = {"haematocrit": "hb_ratio", "urine": "urine_volume", "fluid_balance": "body_weight_change"}[kind]
        entry = got[course]
        sd = np.broadcast_to(np.asarray(built.model[term.name].owner.inputs[-1].eval(), float).ravel(),
                             term.times_min.shape)
        c = np.linspace(0.5, 1.5, sd.size)
        lo, hi = c - z * sd, c + z * sd
        if kind == "fluid_balance":
            lo, hi = balance_as_weight_change(lo, term.times_min), balance_as_weight_change(hi, term.times_min)
        np.testing.assert_allclose(entry["ci95"], np.stack([lo, hi], axis=1), atol=0.06 * float(sd.min()))
        assert entry["times_min"] == [float(t) for t in term.times_min]   # one term per course here
