"""Scenarios: paired changes against closed forms, unit conversion of the changes, errors.

Closed form (classic Starling, Jv = Kf ((Pc - Pi) - sigma (pi_c - pi_i))): a change of +D in Pc changes
Jv by exactly Kf * D on every draw, and the net pressure by exactly D; a multiplier x m on Kf changes Jv
by (m - 1) Jv. The posterior path is checked on hand-made posterior draws (no sampling).
"""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest

from uncertainty.analyses.scenarios import change_summary, quantile_map, scenarios
from uncertainty.core.errors import InputError, StudyError
from uncertainty.study import Study

BASE = {"study": {"tissue": "skeletal_muscle", "model": "classic", "seed": 11}}


def _study(*scs: dict, **extra: dict) -> Study:
    return Study.from_dict({**BASE, **extra, "scenarios": list(scs)})


def test_shift_of_Pc_changes_Jv_by_Kf_times_shift_on_every_draw() -> None:
    study = _study({"name": "Pc up", "changes": {"Pc": "+3 mmHg"}})
    res = scenarios(study, samples=512)
    for layer in ("typical", "individual"):
        d = res.draws["Pc up"]["prior"][layer]
        kf = d["inputs"]["Kf"]
        np.testing.assert_allclose(d["scenario"]["Jv"] - d["base"]["Jv"], kf * 3.0, rtol=1e-9, atol=1e-15)
        np.testing.assert_allclose(d["scenario"]["net_pressure"] - d["base"]["net_pressure"], 3.0, rtol=1e-9)
        s = res.to_dict()["scenarios"][0]["prior"][layer]["Jv"]
        assert s["median"] == pytest.approx(float(np.median(kf * 3.0)), rel=1e-9)
        assert s["p_increase"] == 1.0 and s["p_decrease"] == 0.0


def test_shift_of_a_prior_quantity_and_a_multiplier() -> None:
    # Pc given directly as a prior (not derived from Pa, Pv, r): the shift acts on its draws
    study = _study({"name": "both", "changes": {"Pc": "-2 mmHg", "Kf": "x0.5"}},
                   parameters={"Pc": {"dist": "normal", "mean": 20, "sd": 2, "unit": "mmHg"}})
    assert "Pc" in study.names
    d = scenarios(study, samples=256).draws["both"]["prior"]["typical"]
    kf, base = d["inputs"]["Kf"], d["base"]
    # Jv' = 0.5 Kf (net - 2) = 0.5 Jv - Kf  (closed form of the classic Starling equation)
    np.testing.assert_allclose(d["scenario"]["Jv"], 0.5 * base["Jv"] - kf, rtol=1e-9, atol=1e-15)


def test_protein_change_in_g_per_dL_and_g_per_L_agree() -> None:
    # 10 g/L = 1 g/dL (1 dL = 0.1 L, SI definition)
    a = _study({"name": "a", "changes": {"Cp": "+1 g/dL"}}).scenarios[0].changes_resolved[0]
    b = _study({"name": "b", "changes": {"Cp": "+10 g/L"}}).scenarios[0].changes_resolved[0]
    assert a.shift == pytest.approx(1.0) and b.shift == pytest.approx(1.0)
    # a pressure change in kPa: 1 kPa = 7.50062 mmHg (1 mmHg = 133.322 Pa, from memory)
    c = _study({"name": "c", "changes": {"Pv": "-0.5 kPa"}}).scenarios[0].changes_resolved[0]
    assert c.shift == pytest.approx(-0.5 * 7.50062, rel=1e-5)


def test_more_plasma_protein_lowers_filtration() -> None:
    res = scenarios(_study({"name": "protein", "changes": {"Cp": "+1 g/dL"}}), samples=512).to_dict()
    s = res["scenarios"][0]["prior"]["typical"]
    assert s["pi_c"]["median"] > 0 and s["Jv"]["p_decrease"] == 1.0


def test_condition_added_keeps_each_draws_quantile() -> None:
    study = _study({"name": "septic", "conditions_add": ["sepsis"]})
    septic = study.with_conditions(["sepsis"])
    res = scenarios(study, samples=256)
    d = res.draws["septic"]["prior"]["typical"]
    assert d["scenario"]["Jv"].shape == d["base"]["Jv"].shape
    # the quantile map is exact for a shift and a scale: F_new^-1(F_base(x)) on the priors themselves
    p0, p1 = study.priors["Kf"], septic.priors["Kf"]
    x = np.asarray(p0.frozen().ppf([0.1, 0.5, 0.9]))
    np.testing.assert_allclose(quantile_map(p0, p1, x), p1.frozen().ppf([0.1, 0.5, 0.9]), rtol=1e-8)
    removed = Study.from_dict({**BASE, "study": {**BASE["study"], "conditions": ["sepsis"]},
                               "scenarios": [{"name": "recovered", "conditions_remove": ["sepsis"]}]})
    r = scenarios(removed, samples=256).to_dict()["scenarios"][0]["prior"]["typical"]["Jv"]
    a = scenarios(study, samples=256).to_dict()["scenarios"][0]["prior"]["typical"]["Jv"]
    assert np.sign(r["median"]) == -np.sign(a["median"])


def _fake_posterior(study: Study, n_subj: int = 3, chains: int = 2, draws: int = 40) -> SimpleNamespace:
    import xarray as xr

    rng = np.random.default_rng(0)
    data = {}
    labels = [f"s{k}" for k in range(n_subj)]
    for name in study.names:
        x = np.asarray(study.priors[name].frozen().rvs(size=(chains, draws), random_state=rng), dtype=float)
        data[name] = (("chain", "draw"), x)
        data[f"{name}__subject"] = (("chain", "draw", "subject"), np.repeat(x[..., None], n_subj, axis=2)
                                    * np.linspace(0.9, 1.1, n_subj))
    return SimpleNamespace(posterior=xr.Dataset(data, coords={"subject": labels}))


def test_posterior_draws_per_subject_in_closed_form() -> None:
    study = _study({"name": "Pc up", "changes": {"Pc": "+3 mmHg"}})
    post = _fake_posterior(study)
    doc = scenarios(study, samples=256, posterior=post).to_dict()["scenarios"][0]["posterior"]
    assert set(doc["subjects"]) == {"s0", "s1", "s2"} and doc["draws"] == 80
    for k, sid in enumerate(("s0", "s1", "s2")):
        kf = post.posterior["Kf__subject"].values[..., k].ravel()
        assert doc["subjects"][sid]["Jv"]["median"] == pytest.approx(float(np.median(3.0 * kf)), rel=1e-9)
    kf = post.posterior["Kf"].values.ravel()
    assert doc["typical"]["Jv"]["ci95"][1] == pytest.approx(float(np.quantile(3.0 * kf, 0.975)), rel=1e-9)


def test_change_summary_counts_round_off_as_no_change() -> None:
    s = change_summary(np.array([1.0, 2.0, 3.0]), np.array([1.0, 2.0 + 1e-17, 4.0]))
    assert s["p_increase"] == pytest.approx(1 / 3) and s["p_decrease"] == 0.0


def test_result_round_trip_table_and_report() -> None:
    res = scenarios(_study({"name": "lower Pv", "changes": {"Pv": "-5 mmHg"}}), samples=128)
    text = res.table()
    assert "scenario lower Pv: Pv -5 mmHg" in text and "Jv" in text
    again = type(res).from_dict(res.to_dict())
    assert "lower Pv" in again.html_section()
    assert len(res.to_dataframe()) == 2 * len(res.to_dict()["outputs"])


def test_errors() -> None:
    with pytest.raises(InputError):
        scenarios(Study.from_dict(BASE))
    with pytest.raises(InputError):
        scenarios(_study({"name": "a", "changes": {"Pv": "-5"}}), samples=10)
    with pytest.raises(StudyError, match=r"scenarios\[1\]\.name"):
        _study({"name": "a", "changes": {"Pv": "-5"}}, {"name": "a", "changes": {"Pv": "+5"}})
    with pytest.raises(StudyError, match=r"scenarios\[0\]\.conditions_add\[0\]"):
        Study.from_dict({**BASE, "study": {**BASE["study"], "conditions": ["sepsis"]},
                         "scenarios": [{"name": "a", "conditions_add": ["sepsis"]}]})
