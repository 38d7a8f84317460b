"""Posterior time courses of a whole_body study (``inference.posterior_timeline``): each subject's band is the time
course at that subject's own draws (a subject's course computed apart must match its row), the typical subject's at
the typical draws, a point posterior gives a band of no width, other forms have none; the printed table and the
figures. The draws are a stand-in posterior (prior draws of the study), so no sampling is needed."""

from __future__ import annotations

import types
from pathlib import Path

import arviz as az
import numpy as np
import pytest
from test_whole_body_inference import ROWS, _doc, _write

from uncertainty.analyses.inference.figure import timeline_fans
from uncertainty.analyses.inference.model_builder import build_model
from uncertainty.analyses.inference.posterior_timeline import posterior_timeline
from uncertainty.analyses.inference.problem import problem_from_study
from uncertainty.analyses.inference.report_section import section_html, summary
from uncertainty.analyses.inference.table import timeline_text
from uncertainty.analyses.propagate.timeline import band_over_time, courses_at
from uncertainty.analyses.sampling import draw
from uncertainty.study import Study

N = 16  # stand-in posterior draws (one chain)


def _setting(tmp: Path, rows: str) -> tuple:
    """A three-subject haemoglobin study (readings ``rows``), its model's structure, and stand-in draws: typical
    values from the typical layer, each subject's from the individual layer with its own seed."""
    _write(tmp, rows)
    study = Study.from_dict(_doc(), base_dir=tmp)
    built = build_model(problem_from_study(study), structure_only=True)
    typical = draw(study, N, seed=1, layer="typical")
    subjects = [draw(study, N, seed=2 + k, layer="individual") for k in range(len(built.subjects))]
    post = {}
    for q in built.problem.priors:
        post[q] = typical[q][None, :]
        post[f"{q}__subject"] = np.stack([s[q] for s in subjects], axis=-1)[None, :, :]
    return study, built, typical, subjects, az.from_dict(posterior=post)


@pytest.fixture(scope="module")
def setting(tmp_path_factory: pytest.TempPathFactory) -> tuple:
    """:func:`_setting` with the readings of test_whole_body_inference (subjects A and B first read at 0 min)."""
    return _setting(tmp_path_factory.mktemp("tl"), ROWS)


def test_each_subjects_band_is_its_own_course(setting: tuple) -> None:
    study, built, typical, subjects, idata = setting
    tl = posterior_timeline(built, idata, draws=N)
    plan = study.timeline
    assert tl["times_min"][0] == 0.0 and tl["times_min"][-1] == plan.end and tl["draws"] == N
    assert list(tl["subjects"]) == built.subjects == ["A", "B", "C"]
    for k, label in enumerate(built.subjects):
        alone = courses_at(study, subjects[k], plan.end, plan.report_every)
        for name in ("hb_ratio", "infused_retained_fraction", "urine_volume"):
            want = band_over_time(alone[name])
            got = tl["subjects"][label][name]
            np.testing.assert_allclose(np.array(got["median"][1:], float), np.array(want["median"][1:], float),
                                       rtol=1e-9)
            np.testing.assert_allclose(np.array(got["ci95"][1:], float), np.array(want["ci95"][1:], float),
                                       rtol=1e-9)
    alone = courses_at(study, typical, plan.end, plan.report_every)
    np.testing.assert_allclose(tl["typical"]["plasma_volume_change"]["median"],
                               band_over_time(alone["plasma_volume_change"])["median"], rtol=1e-9)
    # at rest, before the infusion: haemoglobin at its resting value in every draw (the ratio's definition)
    assert tl["subjects"]["B"]["hb_ratio"]["ci95"][0] == pytest.approx([1.0, 1.0])
    # the readings are on their course, over each subject's first
    assert tl["observed"]["hb_ratio"]["relative_to_first"]


def test_a_point_posterior_has_a_band_of_no_width(setting: tuple) -> None:
    study, built, _, _, idata = setting
    point = az.from_dict(posterior={k: np.repeat(v.values[:, :1], N, axis=1) for k, v in idata.posterior.items()})
    tl = posterior_timeline(built, point, draws=8)
    band = tl["subjects"]["C"]["plasma_volume_change"]
    lo, hi = np.array(band["ci95"], float).T
    np.testing.assert_allclose(lo, band["median"], atol=1e-9)
    np.testing.assert_allclose(hi, band["median"], atol=1e-9)


def test_other_forms_have_no_timeline() -> None:
    built = types.SimpleNamespace(problem=types.SimpleNamespace(study=types.SimpleNamespace(model="classic")))
    assert posterior_timeline(built, None) is None


def test_the_table_and_the_figures(setting: tuple, tmp_path: Path) -> None:
    _, built, _, _, idata = setting
    tl = posterior_timeline(built, idata, draws=N)
    text = timeline_text({"timeline": tl})
    lines = text.splitlines()
    assert lines[0].startswith("where the volume is over time")
    head = next(line for line in lines if line.startswith("infused_retained_fraction"))
    assert "30 min" in head and "60 min" in head and "90 min" in head     # the end (90 min) always
    assert sum(line.strip().startswith(("typical", "A ", "B ", "C ")) for line in lines) == 8  # 2 courses x 4 rows
    paths = timeline_fans(types.SimpleNamespace(doc={"timeline": tl}), str(tmp_path))
    names = {Path(p).name for p in paths}
    assert {"inference_timeline.png", "inference_timeline_subjects_hb_ratio.png"} <= names
    # a result without predictive intervals (saved before they existed, or urine read as rates only): the same
    # panels, without bars
    bare = {k: v for k, v in tl.items() if k != "predictive"}
    again = timeline_fans(types.SimpleNamespace(doc={"timeline": bare}), str(tmp_path / "bare"))
    assert {Path(p).name for p in again} == names
    assert timeline_text({}) == "" and timeline_fans(types.SimpleNamespace(doc={}), str(tmp_path)) == []
    html = section_html({"timeline": tl})
    assert "Where the volume is over time" in html and html.count("<table") == 2 and ">typical<" in html
    glance = summary({"Jv": {"mean": 0.01, "ci95": [0.0, 0.02]}, "timeline": tl})
    assert len(glance) == 3 and glance[1].startswith("Share of the infused volume in the plasma (typical subject, "
                                                     "posterior median")
    assert glance[2].startswith("Volume changes at 30 min (typical subject, posterior medians): plasma +")


def test_each_subjects_band_on_the_scale_of_its_readings(tmp_path: Path) -> None:
    # readings are shown over each subject's first; a subject first read at 20 min has its course over the course at
    # 20 min (ratio 1 there in every draw), one first read at rest its course over rest (the course itself)
    _, built, _, _, idata = _setting(tmp_path, "A,0,14.0\nA,30,12.6\nB,20,13.1\n"
                                               "B,45,13.5\nC,0,15.0\nC,60,14.4\n")
    tl = posterior_timeline(built, idata, draws=N)
    at20 = tl["times_min"].index(20.0)
    b = tl["as_read"]["hb_ratio"]["B"]
    assert b["median"][at20] == pytest.approx(1.0) and b["ci95"][at20] == pytest.approx([1.0, 1.0])
    assert b["median"][0] > 1.0   # at rest, before the dilution: above the diluted first reading
    np.testing.assert_allclose(tl["as_read"]["hb_ratio"]["A"]["median"], tl["subjects"]["A"]["hb_ratio"]["median"],
                               rtol=1e-12)


def test_a_failed_time_course_is_a_note_not_a_lost_fit(setting: tuple, monkeypatch: pytest.MonkeyPatch) -> None:
    # the time courses are a summary: if computing them fails, infer keeps its result and says why in a note
    from uncertainty.analyses.inference import api

    _, built, _, _, idata = setting

    def broken(*args: object, **kwargs: object) -> None:
        raise FloatingPointError("invented failure")

    monkeypatch.setattr(api, "posterior_timeline", broken)
    result = types.SimpleNamespace(doc={"notes": []}, idata=idata)
    api._add_timeline(result, built)
    assert "timeline" not in result.doc
    assert result.doc["notes"] == ["posterior time courses not computed: FloatingPointError: invented failure"]
    monkeypatch.undo()
    api._add_timeline(result, built)
    assert set(result.doc["timeline"]["subjects"]) == {"A", "B", "C"}


def test_each_readings_predictive_interval_is_the_convolution_in_closed_form(setting: tuple) -> None:
    # stand-in posterior of each reading's noise-free prediction: normal, mean m_k and sd s_k; the reading error is
    # normal with the term's sd e_k, so the predictive is normal(m_k, sqrt(s_k^2 + e_k^2)) and its 2.5 % and 97.5 %
    # points come from scipy.stats.norm (the outside reference); 40,000 draws put the sampled quantiles within about
    # 0.02 predictive sd of them
    from scipy import stats

    from uncertainty.analyses.inference.posterior_timeline import coverage, reading_intervals

    _, built, _, _, _ = setting
    (term,) = built.terms
    e = np.asarray(built.model[f"{term.name}__sd"].get_value(), dtype=float)
    k = e.size
    m, s = np.linspace(0.85, 0.95, k), np.linspace(0.01, 0.03, k)
    rng = np.random.default_rng(5)
    pred = m + s * rng.standard_normal((40_000, k))
    got = reading_intervals(built, az.from_dict(posterior={term.predicted: pred[None]}))
    (course,) = got
    entry = got[course]
    assert course == "hb_ratio"
    assert entry["subjects"] == ["A", "A", "B"] and entry["times_min"] == [30.0, 60.0, 45.0]  # C has one reading
    scale = np.hypot(s, e)
    want = np.stack([stats.norm.ppf(0.025, m, scale), stats.norm.ppf(0.975, m, scale)], axis=1)
    np.testing.assert_allclose(entry["ci95"], want, atol=0.03 * scale.max())
    # each reading as fitted beside its interval, and the count inside
    y = np.asarray(built.model[f"{term.name}__data"].get_value(), dtype=float)
    assert entry["values"] == pytest.approx(list(y))
    lo, hi = np.asarray(entry["ci95"]).T
    assert entry["inside"] == [bool(a <= v <= b) for a, v, b in zip(lo, y, hi, strict=True)]
    assert coverage(got) == (sum(entry["inside"]), 3) and coverage({}) == (0, 0)


def test_an_estimated_reading_error_gets_no_interval_and_the_count_is_said_once() -> None:
    # a term whose sd is a free variable is left out (its error would need drawing with the posterior); a term
    # with a fixed sd is kept, and coverage_line counts it (the sentence the terminal table and the summary share)
    import types

    import pymc as pm

    from uncertainty.analyses.inference.posterior_timeline import coverage_line, reading_intervals

    with pm.Model() as model:
        mu = pm.Normal("mu", 1.0, 0.1)
        noise = pm.HalfNormal("noise", 0.1)
        pm.Deterministic("fixed__pred", mu * np.ones(2))
        pm.Deterministic("free__pred", mu * np.ones(2))
        pm.Normal("fixed", mu=model["fixed__pred"], sigma=0.01, observed=np.array([1.0, 1.5]))
        pm.Data("fixed__data", np.array([1.0, 1.5]))
        pm.Normal("free", mu=model["free__pred"], sigma=noise, observed=np.array([1.0, 1.5]))

    def term(name: str) -> types.SimpleNamespace:
        obs = types.SimpleNamespace(kind="haemoglobin", extra={})
        return types.SimpleNamespace(name=name, observation=obs, predicted=f"{name}__pred", subjects=np.array([0, 0]),
                                     times_min=np.array([30.0, 60.0]))

    built = types.SimpleNamespace(model=model, terms=[term("fixed"), term("free")], subjects=["A"])
    post = {f"{n}__pred": np.ones((1, 2000, 2)) for n in ("fixed", "free")}
    got = reading_intervals(built, az.from_dict(posterior=post))
    assert got["hb_ratio"]["times_min"] == [30.0, 60.0] and got["hb_ratio"]["inside"] == [True, False]
    line = coverage_line({"predictive": got})
    assert line.startswith("Readings inside their 95% posterior predictive intervals: 1 of 2")
    assert coverage_line({}) == ""
