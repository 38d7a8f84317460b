"""Prior predictive of the whole-body kinds added with the time course: ``haematocrit``, ``urine`` read as rates and
``fluid_balance`` in a whole_body study (numpy only; no PyMC).

Subjects are prior draws of the individual layer (typical-subject uncertainty plus between-subject spread), each
solved by the numpy time course; their readings are simulated in the units a ward records them (haematocrit in %,
urine flows in mL/h, charted balances in mL), written to data files, read back through the study and the kind's
``design`` and predicted by the kind's own functions. Checked against what lies outside the kinds:

- closed forms over every prior draw: at rest nothing changes but the basal urine; with the kidneys silenced the
  chart records exactly the volume infused, and the body holds all of it in the plasma and the interstitium;
- relations between kinds: haematocrit and haemoglobin read one relative course, the blood's dilution
  BV0 / (BV0 + plasma volume change) while the red-cell volume is constant; rates times their intervals add up to
  the cumulative volume;
- the noise model: the standardised residuals (reading - prediction) / sd of simulated readings are standard normal
  (``scipy.stats.kstest``), which checks unit conversions, the pairing of each reading with its reference or
  interval, and the delta-method error of a ratio.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from uncertainty.analyses.inference.observations import haematocrit, haemoglobin, kind_module, urine, weight_course
from uncertainty.analyses.inference.observations.course import relative_prediction, whole_body_course
from uncertainty.analyses.inference.problem import problem_from_study
from uncertainty.analyses.propagate.timeline import bed_ratios
from uncertainty.analyses.sampling import draw
from uncertainty.forms.evaluate import input_values
from uncertainty.forms.whole_body import timeline_parameters
from uncertainty.physiology import whole_body as wb
from uncertainty.study import Study

BODY_KG = 73.0  # invented subject
VOLUME_ML, DURATION_MIN = 1500.0, 30.0  # invented dose: crystalloid, constant rate
CRYSTALLOID = [{"kind": "infusion", "fluid": "crystalloid", "volume": f"{VOLUME_ML:g} mL",
                "duration": f"{DURATION_MIN:g} min"}]
#: basal urine flow of the form, mL/min: 1 mL/kg/h (common practice; ``physiology.whole_body``)
BASAL_ML_MIN = BODY_KG / 60.0
#: blood volume at rest, mL: 70 mL/kg (common practice; ``physiology.whole_body.BLOOD_VOLUME_ML_PER_KG``)
BV0_ML = 70.0 * BODY_KG
#: significance level of the Kolmogorov-Smirnov tests (common practice)
ALPHA = 0.01


def _doc(observations: list, interventions: list | None = None) -> dict:
    # invented settings: 90 min of timeline reported every 10 min
    return {"study": {"tissue": "skeletal_muscle", "model": "whole_body", "body_mass": f"{BODY_KG:g} kg", "seed": 3},
            "interventions": interventions or CRYSTALLOID,
            "timeline": {"end": "90 min", "report_every": "10 min", "draws": 16},
            "observations": observations}


def _labels(n: int) -> list[str]:
    return [f"S{i:04d}" for i in range(n)]


def _write(tmp: Path, name: str, rows: list[tuple[str, float, float]], rng: np.random.Generator) -> None:
    """A data file of ``rows`` (subject, time in min, value) in a shuffled order (the kinds sort by time)."""
    order = rng.permutation(len(rows))
    text = "subject,time_min,value\n" + "".join(f"{rows[k][0]},{rows[k][1]!r},{rows[k][2]!r}\n" for k in order)
    (tmp / name).write_text(text, encoding="utf-8")


def _problem(tmp: Path, observations: list, interventions: list | None = None):
    problem = problem_from_study(Study.from_dict(_doc(observations, interventions), base_dir=tmp))
    for obs in problem.observations:
        kind_module(obs).validate(obs, problem)
    return problem


def _prior_values(study: Study, n: int, seed: int) -> dict:
    """Inputs of ``n`` prior draws of the individual layer (canonical units), one per simulated subject."""
    return input_values(study, draw(study, n, method="mc", seed=seed, layer="individual"))


def _columns(series: list, n: int) -> np.ndarray:
    """A course as a (report time, subject) array."""
    return np.stack([np.broadcast_to(np.ravel(x), (n,)) for x in series])


def _courses(study: Study, values: dict, n: int) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    c = whole_body_course(values, study, None, np)
    return np.asarray(c["times_min"]), {k: _columns(c[k], n) for k in wb.TIMELINE_UNITS}


def _dilution(dvp: np.ndarray, t: np.ndarray, when: np.ndarray, subject: np.ndarray) -> np.ndarray:
    """BV0 / (BV0 + dVp): the blood's dilution at report times ``when`` (min) of each ``subject`` (index), with
    ``dvp`` the plasma volume change (mL, (report time, subject)) and the red-cell volume constant."""
    k = np.searchsorted(t, when)
    assert np.all(t[k] == when)
    return BV0_ML / (BV0_ML + dvp[k, subject])


def _standard_normal(z: np.ndarray) -> float:
    """p-value of the Kolmogorov-Smirnov test of ``z`` against N(0, 1) (scipy.stats)."""
    return float(stats.kstest(z, "norm").pvalue)


# --- closed forms over every prior draw -----------------------------------------------------------------------------

def test_at_rest_every_prior_draw_changes_nothing_but_the_basal_urine(tmp_path: Path) -> None:
    # a bleed that starts at 60 min: before it each prior draw sits in its own resting state, so haematocrit keeps its
    # first reading, urine flows at the basal 1 mL/kg/h (common practice) and the chart falls by that urine alone
    n = 300
    bleed = [{"kind": "bleed", "volume": "450 mL", "start": "60 min", "duration": "10 min"}]
    rng = np.random.default_rng(11)
    subjects = _labels(n)
    times = (0.0, 20.0, 45.0, 60.0)  # 45 min lies between report times
    _write(tmp_path, "hct.csv", [(s, t, 42.0) for s in subjects for t in times], rng)  # placeholder readings
    _write(tmp_path, "rate.csv", [(s, t, 70.0) for s in subjects for t in times[1:]], rng)
    _write(tmp_path, "chart.csv", [(s, t, 0.0) for s in subjects for t in times], rng)
    problem = _problem(tmp_path, [{"kind": "haematocrit", "file": "hct.csv", "unit": "%", "sd": 0.5},
                                  {"kind": "urine", "how": "rate", "file": "rate.csv", "unit": "mL/h", "sd": 6.0},
                                  {"kind": "fluid_balance", "file": "chart.csv", "unit": "mL", "sd": 20.0}],
                       interventions=bleed)
    hct_obs, rate_obs, chart_obs = problem.observations
    t, c = _courses(problem.study, _prior_values(problem.study, n, seed=21), n)

    d = haematocrit.design(hct_obs, subjects)
    np.testing.assert_allclose(relative_prediction(c[haemoglobin.COURSE], list(t), d), 1.0, rtol=0, atol=1e-9)
    d = urine.design(rate_obs, subjects)
    np.testing.assert_allclose(urine.predicted(c[urine.COURSE], list(t), d), BASAL_ML_MIN, rtol=1e-9)
    d = weight_course.balance_design(chart_obs, subjects)
    np.testing.assert_allclose(weight_course.balance_predicted(c[weight_course.COURSE], list(t), d),
                               -BASAL_ML_MIN * d["time"] / 1000.0, rtol=1e-9, atol=1e-12)  # L
    # not a course that never moves: 30 min after the bleed every draw is diluted
    assert np.all(c["hb_ratio"][list(t).index(90.0)] < 0.99)


def test_with_the_kidneys_silenced_the_chart_records_the_volume_infused(tmp_path: Path) -> None:
    # no urine at all (basal flow and renal clearance constant set to 0 in each prior draw's body): the chart of a
    # constant-rate infusion reads V min(t, T) / T, V at the end, and the body holds all of V in the plasma and the
    # two interstitial beds (a mass balance)
    n = 300
    rng = np.random.default_rng(12)
    subjects = _labels(n)
    times = (0.0, 10.0, 25.0, 30.0, 45.0, 90.0)
    _write(tmp_path, "chart.csv", [(s, t, 0.0) for s in subjects for t in times], rng)  # placeholder readings
    _write(tmp_path, "rate.csv", [(s, t, 1.0) for s in subjects for t in times[1:]], rng)
    problem = _problem(tmp_path, [{"kind": "fluid_balance", "file": "chart.csv", "unit": "mL", "sd": 20.0},
                                  {"kind": "urine", "how": "rate", "file": "rate.csv", "unit": "mL/min", "sd": 0.1}])
    study = problem.study
    plan = study.timeline
    body, beds, Cp0 = timeline_parameters(_prior_values(study, n, seed=22), plan.body_mass_kg,
                                          bed_ratios(study.tissue))
    body = {**body, "u_basal": 0.0, "k_r": 0.0}
    sim = wb.simulate(body, beds, Cp0, plan.doses, plan.end, plan.report_every, max_step=4.0)
    t = list(sim["times_min"])
    c = {k: _columns(sim[k], n) for k in wb.TIMELINE_UNITS}

    d = weight_course.balance_design(problem.observations[0], subjects)
    infused = VOLUME_ML * np.minimum(d["time"], DURATION_MIN) / DURATION_MIN
    np.testing.assert_allclose(weight_course.balance_predicted(c[weight_course.COURSE], t, d), infused / 1000.0,
                               rtol=1e-12, atol=1e-12)
    d = urine.design(problem.observations[1], subjects)
    np.testing.assert_array_equal(urine.predicted(c[urine.COURSE], t, d), 0.0)
    held = c["plasma_volume_change"] + c["interstitial_volume_change_muscle"] + c["interstitial_volume_change_skin"]
    # 0.5 mL: the interstitial volumes follow from the integrated pressures, so the balance holds to the Runge-Kutta
    # error (measured below 0.05 mL with 4-min steps), not to rounding
    np.testing.assert_allclose(held[-1], VOLUME_ML, rtol=0, atol=0.5)
    assert np.ptp(c["plasma_volume_change"][-1]) > 100.0  # the draws share V out differently


# --- the noise model: standardised residuals of simulated readings -------------------------------------------------

def test_haematocrit_and_haemoglobin_readings_follow_the_blood_dilution(tmp_path: Path) -> None:
    # each simulated subject (a prior draw) has a resting haematocrit (invented: uniform 0.38-0.46) and a mean
    # corpuscular haemoglobin concentration of 33 g/dL (common practice: 32-36 g/dL), so Hb = 33 g/dL x Hct; while
    # the red-cell volume is constant (an infusion) both fall as the blood is diluted, by BV0 / (BV0 + dVp(t)) with
    # dVp the plasma volume change. Readings: the subject's first (at 0 or 10 min) and one later one, each with its
    # own normal error (invented: 0.5 % haematocrit, 0.15 g/dL haemoglobin); one ratio per subject, so the
    # standardised residuals are independent
    n = 1200
    rng = np.random.default_rng(13)
    subjects = _labels(n)
    later = (20.0, 30.0, 40.0, 60.0, 90.0)  # report times: the dilution needs no interpolation
    study = Study.from_dict(_doc([]), base_dir=tmp_path)
    t, c = _courses(study, _prior_values(study, n, seed=23), n)
    ref = np.where(np.arange(n) % 2 == 0, 0.0, 10.0)
    when = np.array([later[i % len(later)] for i in range(n)])
    hct0 = rng.uniform(0.38, 0.46, n)
    hct_rows, hb_rows = [], []
    for tk in (ref, when):
        true_hct = hct0 * _dilution(c["plasma_volume_change"], t, tk, np.arange(n))
        hct = true_hct + rng.normal(0.0, 0.005, n)
        hb = 33.0 * true_hct + rng.normal(0.0, 0.15, n)
        hct_rows += [(s, float(tk[i]), float(100.0 * hct[i])) for i, s in enumerate(subjects)]  # per cent
        hb_rows += [(s, float(tk[i]), float(hb[i])) for i, s in enumerate(subjects)]
    _write(tmp_path, "hct.csv", hct_rows, rng)
    _write(tmp_path, "hb.csv", hb_rows, rng)
    problem = _problem(tmp_path, [{"kind": "haematocrit", "file": "hct.csv", "unit": "%", "sd": 0.5},
                                  {"kind": "haemoglobin", "file": "hb.csv", "unit": "g/dL", "sd": 0.15}])
    preds = []
    for obs, design in zip(problem.observations, (haematocrit.design, haemoglobin.design), strict=True):
        d = design(obs, subjects)
        assert d["value"].size == n and d["skipped"].size == 0
        pred = relative_prediction(c[haemoglobin.COURSE], list(t), d)
        dvp = c["plasma_volume_change"]
        by_dilution = (_dilution(dvp, t, d["time"], d["subject"]) / _dilution(dvp, t, d["ref_time"], d["subject"]))
        np.testing.assert_allclose(pred, by_dilution, rtol=1e-12)
        z = (d["value"] - pred) / d["sd"]
        assert _standard_normal(z) > ALPHA, obs.kind
        preds.append(pred[np.argsort(d["subject"])])
    np.testing.assert_array_equal(preds[0], preds[1])  # one course for both kinds
    assert np.median(preds[0]) < 0.97  # a real dilution to read: 3 x a ratio's error (about 0.017)


def test_urine_flows_are_the_slopes_of_the_cumulative_volume(tmp_path: Path) -> None:
    # each simulated subject (a prior draw) empties its bladder at 0 and at each of three collections at times drawn
    # from the timeline (some between report times); a flow reading is the volume collected over the interval,
    # divided by it, in mL/h with a normal error (invented: 6 mL/h). The cumulative volume between report times is
    # taken linear (numpy.interp), as the form's kinds take it
    n = 400
    rng = np.random.default_rng(14)
    subjects = _labels(n)
    study = Study.from_dict(_doc([]), base_dir=tmp_path)
    t, c = _courses(study, _prior_values(study, n, seed=24), n)
    u = c[urine.COURSE]
    rows, cumulative = [], {}
    for i, s in enumerate(subjects):
        when = np.sort(rng.choice(np.arange(5.0, 91.0, 5.0), size=3, replace=False))
        volume = np.interp(when, t, u[:, i])
        flow = np.diff(np.concatenate([[0.0], volume])) / np.diff(np.concatenate([[0.0], when]))  # mL/min
        rows += [(s, float(w), float(60.0 * f + rng.normal(0.0, 6.0))) for w, f in zip(when, flow, strict=True)]
        cumulative[i] = (when, volume)
    _write(tmp_path, "rate.csv", rows, rng)
    problem = _problem(tmp_path, [{"kind": "urine", "how": "rate", "file": "rate.csv", "unit": "mL/h", "sd": 6.0}])
    d = urine.design(problem.observations[0], subjects)
    pred = urine.predicted(u, list(t), d)
    assert d["value"].size == 3 * n
    z = (d["value"] - pred) / d["sd"]
    assert _standard_normal(z) > ALPHA
    # the predicted flows times their intervals add up to the cumulative volume at each subject's last collection
    total = np.bincount(d["subject"], weights=pred * (d["time"] - d["prev_time"]), minlength=n)
    np.testing.assert_allclose(total, [cumulative[i][1][-1] for i in range(n)], rtol=1e-9)
    assert np.median(pred) > 1.5 * BASAL_ML_MIN  # the infusion raises the flow above basal


def test_charted_balances_follow_infused_less_urine(tmp_path: Path) -> None:
    # each simulated subject (a prior draw) has its balance charted at three times drawn from the timeline: what the
    # pump delivered (constant rate, V min(t, T) / T) less the urine passed (numpy.interp of its course), in mL with a
    # normal error (invented: 20 mL); no insensible loss on a chart. Independent errors per reading
    n = 400
    rng = np.random.default_rng(15)
    subjects = _labels(n)
    study = Study.from_dict(_doc([]), base_dir=tmp_path)
    t, c = _courses(study, _prior_values(study, n, seed=25), n)
    when = np.stack([rng.choice(np.arange(0.0, 91.0, 5.0), size=3, replace=False) for _ in range(n)])
    error = rng.normal(0.0, 20.0, when.shape)
    rows = []
    for i, s in enumerate(subjects):
        chart = (VOLUME_ML * np.minimum(when[i], DURATION_MIN) / DURATION_MIN
                 - np.interp(when[i], t, c[urine.COURSE][:, i]))
        rows += [(s, float(w), float(x + e)) for w, x, e in zip(when[i], chart, error[i], strict=True)]
    _write(tmp_path, "chart.csv", rows, rng)
    problem = _problem(tmp_path, [{"kind": "fluid_balance", "file": "chart.csv", "unit": "mL", "sd": 20.0}])
    d = weight_course.balance_design(problem.observations[0], subjects)
    pred = weight_course.balance_predicted(c[weight_course.COURSE], list(t), d)
    assert d["value"].size == 3 * n
    z = (d["value"] - pred) / d["sd"]
    assert _standard_normal(z) > ALPHA
    assert np.ptp(pred[d["time"] == 90.0]) > 0.1  # L: the draws' urine differs, so the chart does


@pytest.mark.parametrize("scale", [0.7, 1.4])
def test_the_residual_check_sees_a_wrong_error(scale: float) -> None:
    # the Kolmogorov-Smirnov check at the sizes above tells a reading error 30 % too small or 40 % too large
    # from the right one (so a lost or doubled term of an sd would not pass)
    z = np.random.default_rng(16).normal(0.0, scale, 1200)
    assert _standard_normal(z) < ALPHA
