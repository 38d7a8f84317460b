"""Whole-body time courses read at a chosen time: parsing, refusals and the values the analyses see.

Small studies (timeline 60 min, a handful of draws) so each test stays well under a second or two.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from toml_text import toml_text

from uncertainty.analyses.design import _endpoint, parse_design
from uncertainty.analyses.propagate.timeline import run_layer, values_at, values_over_time
from uncertainty.analyses.sampling import draw
from uncertainty.analyses.sensitivity import problem_from_study
from uncertainty.app.cli import main
from uncertainty.core.errors import StudyError
from uncertainty.physiology.whole_body import TIMELINE_UNITS
from uncertainty.study import Study
from uncertainty.study.endpoints import parse_time_endpoint


def _doc(**sections) -> dict:
    # invented settings: a 73 kg subject given 1000 mL of crystalloid over 20 min, 60 min of timeline
    doc = {"study": {"tissue": "skeletal_muscle", "model": "whole_body", "body_mass": "73 kg"},
           "interventions": [{"kind": "infusion", "fluid": "crystalloid", "volume": "1000 mL", "start": "0 min",
                              "duration": "20 min"}],
           "timeline": {"end": "60 min", "report_every": "10 min", "draws": 16}}
    doc.update(sections)
    return doc


def _toml(doc: dict) -> str:
    return toml_text(doc)


@pytest.fixture(scope="module")
def study() -> Study:
    return Study.from_dict(_doc())


@pytest.mark.parametrize("text, name, minutes", [
    ("infused_retained_fraction at 60 min", "infused_retained_fraction", 60.0),
    ("hb_ratio at 0.5 h", "hb_ratio", 30.0),
    ("  urine_volume   at 90 s ", "urine_volume", 1.5),
])
def test_endpoint_at_a_time_is_parsed_in_minutes(study: Study, text: str, name: str, minutes: float) -> None:
    p = parse_time_endpoint(text, study.timeline, key="sensitivity.output")
    assert p is not None and p.name == name and p.time_min == pytest.approx(minutes)
    assert p.unit == TIMELINE_UNITS[name]


def test_steady_outputs_are_not_time_endpoints(study: Study) -> None:
    assert parse_time_endpoint("Jv", study.timeline) is None
    over = parse_time_endpoint("hb_ratio over time", study.timeline, over_time=True)
    assert over is not None and over.time_min is None


@pytest.mark.parametrize("section, key, value", [
    ("sensitivity", "output", "hb_ratio at 61 min"),                      # beyond the end (60 min)
    ("sensitivity", "output", "hb_ratio at -5 min"),                      # negative
    ("sensitivity", "output", "hb_ratio at 0 min"),                       # not after 0
    ("sensitivity", "output", "hb_ratio at 30 mmHg"),                     # not a time unit
    ("sensitivity", "output", "hb_ratio at soon"),                        # not a quantity
    ("sensitivity", "output", "haemoglobin at 30 min"),                   # no such time course
    ("sensitivity", "output", "hb_ratio"),                                # a time course without a time
    ("rank", "output", "hb_ratio over time"),                             # over time: sensitivity only
    ("rank", "output", "urine_volume at 2 h"),
    ("design", "endpoint", "plasma_volume_change at 1 day"),
])
def test_bad_endpoint_times_exit_2_naming_key_and_value(tmp_path: Path, section: str, key: str, value: str) -> None:
    table = {key: value}
    if section == "design":
        table["effect"] = {"parameter": "Kf", "multiply": 0.7}
    path = tmp_path / "bad.toml"
    path.write_text(_toml(_doc(**{section: table})), encoding="utf-8")
    res = CliRunner().invoke(main, ["check", str(path)])
    assert res.exit_code == 2, res.output
    assert f"{section}.{key}" in res.output and value.split(" at ")[0] in res.output
    assert "Traceback" not in res.output


def test_time_endpoint_needs_a_whole_body_study() -> None:
    with pytest.raises(StudyError) as exc:
        parse_time_endpoint("hb_ratio at 30 min", None, key="rank.output")
    assert exc.value.key == "rank.output"


def test_cli_output_option_beyond_the_end_exits_2(tmp_path: Path) -> None:
    path = tmp_path / "wb.toml"
    path.write_text(_toml(_doc()), encoding="utf-8")
    res = CliRunner().invoke(main, ["sensitivity", str(path), "--output", "hb_ratio at 3 h"])
    assert res.exit_code == 2 and "sensitivity.output" in res.output and "Traceback" not in res.output


def test_value_at_a_report_time_is_the_timeline_draw(study: Study) -> None:
    # the same draws through propagate's timeline (run_layer) and through values_at: equal to rounding
    sim = run_layer(study, "typical", 16, 7)
    vals = draw(study, 16, method="qmc", seed=7, layer="typical")
    for name, t in (("infused_retained_fraction", 30.0), ("hb_ratio", 60.0), ("urine_volume", 10.0)):
        p = parse_time_endpoint(f"{name} at {t:g} min", study.timeline)
        i = sim["times_min"].index(t)
        np.testing.assert_allclose(values_at(study, p, vals), sim[name][i], rtol=1e-12, atol=1e-12)
    times, y = values_over_time(study, "hb_ratio", vals)
    assert times == sim["times_min"][1:] and y.shape == (16, len(times))
    np.testing.assert_allclose(y[:, -1], sim["hb_ratio"][-1], rtol=1e-12)


def test_value_between_report_times_lies_between_its_neighbours(study: Study) -> None:
    # the plasma volume change rises during the 20-min infusion: its value at 15 min lies between 10 and 20 min
    vals = draw(study, 8, method="qmc", seed=3, layer="typical")
    at = {t: values_at(study, parse_time_endpoint(f"plasma_volume_change at {t} min", study.timeline), vals)
          for t in (10, 15, 20)}
    assert np.all(at[10] < at[15]) and np.all(at[15] < at[20])


def test_sensitivity_problem_reads_the_time_course(study: Study) -> None:
    prob = problem_from_study(study, output="hb_ratio at 30 min", layer="typical")
    assert prob.unit == "1" and prob.output == "hb_ratio at 30 min"
    z = np.random.default_rng(0).standard_normal((4, prob.k))
    y = prob.model(z)
    assert y.shape == (4,) and np.all((0.5 < y) & (y < 1.0))  # haemodilution after 1 L of crystalloid


def test_design_endpoint_at_a_time(study: Study) -> None:
    s = Study.from_dict(_doc(design={"endpoint": "hb_ratio at 60 min", "effect": {"parameter": "Kf",
                                                                                   "multiply": 0.7}}))
    spec = parse_design(s)
    assert spec.endpoint_kind == "output" and spec.timepoint is not None and spec.timepoint.time_min == 60.0
    vals = draw(s, 6, method="mc", seed=1, layer="individual")
    y = _endpoint(s, spec, {k: v.reshape(2, 3) for k, v in vals.items()}, (2, 3))
    np.testing.assert_allclose(y.ravel(), values_at(s, spec.timepoint, vals), rtol=1e-12)


# --- observed points on the fan charts ------------------------------------------------------------------------

HB_ROWS = "subject,time_min,value\nA,0,14.0\nA,30,12.6\nA,60,13.3\nB,10,15.0\nB,50,13.5\n"  # invented readings


def test_fan_chart_overlays_the_observed_haemoglobin(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    from uncertainty.analyses.propagate import figure
    from uncertainty.analyses.propagate.timeline import timeline

    (tmp_path / "hb.csv").write_text(HB_ROWS, encoding="utf-8")
    s = Study.from_dict(_doc(observations=[{"kind": "haemoglobin", "file": "hb.csv", "sd": 0.2, "unit": "g/dL"}]),
                        base_dir=tmp_path)
    tl = timeline(s, draws=16)
    obs = tl["observed"]["hb_ratio"]
    assert obs["relative_to_first"] and obs["subjects"] == ["A", "A", "A", "B", "B"]
    np.testing.assert_allclose(obs["times_min"], [0, 30, 60, 10, 50])
    np.testing.assert_allclose(obs["values"], [1.0, 12.6 / 14.0, 13.3 / 14.0, 1.0, 13.5 / 15.0])
    json.dumps(tl)  # stored in results.json as it is

    shown = {}

    def keep(fig, out_dir, stem):
        shown["fig"] = fig
        return [stem]

    monkeypatch.setattr(figure, "save_figure", keep)
    two = {layer: {k: tl[layer][k] for k in ("hb_ratio", "urine_volume")} for layer in ("typical", "individual")}
    figure.plot_timeline({**tl, **two}, str(tmp_path))  # two panels keep the test light
    ax = next(a for a in shown["fig"].axes if a.get_title().startswith("hb_ratio"))
    lines = [ln for ln in ax.get_lines() if ln.get_marker() not in (None, "None", "")]
    assert len(lines) == 2  # one marker line per subject
    pts = sorted((float(x), float(y)) for ln in lines for x, y in zip(*ln.get_data(), strict=True))
    assert pts == sorted(zip(obs["times_min"], obs["values"], strict=True))
    other = next(a for a in shown["fig"].axes if a.get_title().startswith("urine_volume"))
    assert not [ln for ln in other.get_lines() if ln.get_marker() not in (None, "None", "")]


# --- sensitivity across time -----------------------------------------------------------------------------------

def test_sensitivity_over_time_equals_the_index_at_each_time(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # Shapley (the prior set correlates inputs), tiny samples: the point is the bookkeeping, not the indices.
    # One set of runs gives every time; each equals the analysis of that time alone (same seed, same design).
    from uncertainty.analyses.sensitivity import sensitivity

    doc = _doc()
    doc["timeline"]["end"] = "20 min"
    s = Study.from_dict(doc)
    kw = {"method": "shapley", "samples": 8, "replicates": 2, "layer": "typical"}
    over = sensitivity(s, output="hb_ratio over time", **kw)
    at10 = sensitivity(s, output="hb_ratio at 10 min", **kw)
    ot = over.over_time
    assert ot["times_min"] == [10.0, 20.0] and ot["key"] == "Sh"
    for p in over.players:
        assert ot["indices"][p]["Sh"][0] == pytest.approx(at10.indices[p]["Sh"], rel=1e-12)
    back = type(over).from_dict(json.loads(json.dumps(over.to_dict())))
    assert back.over_time["times_min"] == ot["times_min"]
    from uncertainty.analyses.sensitivity import figure

    shown = {}
    monkeypatch.setattr(figure, "save_figure", lambda fig, out, stem: shown.update(fig=fig, stem=stem) or [stem])
    figure.plot_over_time(over, str(tmp_path))
    assert shown["stem"] == "sensitivity_hb_ratio_over_time"
    lines = shown["fig"].axes[0].get_lines()
    assert len(lines) == 2 * min(6, len(over.players))  # Sh solid and S1 dashed per leading input
    np.testing.assert_allclose(lines[0].get_xdata(), [10.0, 20.0])


# --- the urine observation kind -------------------------------------------------------------------------------

URINE_ROWS = "subject,time_min,value\nA,0,0\nA,30,0.12\nA,60,0.41\nB,20,0.05\nB,60,0.30\n"  # invented, in L


def _urine_study(tmp_path: Path, rows: str = URINE_ROWS, **obs) -> Study:
    (tmp_path / "urine.csv").write_text(rows, encoding="utf-8")
    ob = {"kind": "urine", "file": "urine.csv", "sd": 0.02, "unit": "L", **obs}
    return Study.from_dict(_doc(observations=[ob]), base_dir=tmp_path)


def test_urine_readings_in_ml_after_time_0(tmp_path: Path) -> None:
    from uncertainty.analyses.inference.observations import kind_module
    from uncertainty.analyses.inference.observations.urine import design
    from uncertainty.analyses.inference.problem import problem_from_study as inference_problem

    problem = inference_problem(_urine_study(tmp_path))
    obs = problem.observations[0]
    kind_module(obs).validate(obs, problem)
    d = design(obs, ["A", "B"])
    np.testing.assert_allclose(d["value"], [120.0, 410.0, 50.0, 300.0])  # 1 L = 1000 mL
    np.testing.assert_allclose(d["time"], [30.0, 60.0, 20.0, 60.0])
    np.testing.assert_allclose(d["sd"], 20.0)
    assert list(d["subject"]) == [0, 0, 1, 1]


@pytest.mark.parametrize("rows, obs, key", [
    ("subject,time_min,value\nA,30,0.1\nA,90,0.2\n", {}, "file"),         # after the timeline's 60 min
    ("subject,time_min,value\nA,30,-0.1\n", {}, "file"),                   # negative volume
    ("subject,time_min,value\nA,30,0.12\n", {"sd": None, "cv": 0.1}, "cv"),  # a normal error only
])
def test_urine_refusals(tmp_path: Path, rows: str, obs: dict, key: str) -> None:
    from uncertainty.analyses.inference.observations import kind_module
    from uncertainty.analyses.inference.problem import problem_from_study as inference_problem
    from uncertainty.core.errors import InputError

    with pytest.raises(InputError) as exc:
        problem = inference_problem(_urine_study(tmp_path, rows, **obs))
        o = problem.observations[0]
        kind_module(o).validate(o, problem)
    assert exc.value.key.startswith("observations[0]") and exc.value.key.endswith(key)


def test_urine_prediction_is_the_timeline_course(tmp_path: Path) -> None:
    # what the term interpolates (whole_body_course, here in numpy; the term builds the same in PyTensor with 4-min
    # steps) against propagate's timeline of the same draws (0.5-min steps): equal to the Runge-Kutta error
    from uncertainty.analyses.inference.observations.course import whole_body_course
    from uncertainty.forms.evaluate import input_values

    s = _urine_study(tmp_path)
    vals = draw(s, 8, method="qmc", seed=5, layer="typical")
    sim = run_layer(s, "typical", 8, 5)
    c = whole_body_course(input_values(s, vals), s, "urine_volume", np)
    assert c["times_min"] == sim["times_min"]
    for got, want in zip(c["urine_volume"], sim["urine_volume"], strict=True):
        np.testing.assert_allclose(got, want, rtol=1e-4, atol=1e-3)  # mL
    assert float(np.min(sim["urine_volume"][-1])) > 0.0


def test_urine_points_on_the_fan_chart(tmp_path: Path) -> None:
    from uncertainty.analyses.propagate.timeline import observed_points

    obs = observed_points(_urine_study(tmp_path))["urine_volume"]
    assert not obs["relative_to_first"] and obs["subjects"] == ["A", "A", "A", "B", "B"]
    np.testing.assert_allclose(obs["values"], [0.0, 120.0, 410.0, 50.0, 300.0])
