"""Answers of a cohort fit (per-subject tables, cohort summaries, group effects) against hand computation
from a small made-up posterior: the draws are written here, the expected numbers computed here by
other routes (explicit loops over draws and subjects, linearity of the mean), not by the code tested."""

from __future__ import annotations

import math
from types import SimpleNamespace
from typing import Any

import numpy as np
import pytest
import xarray as xr
from scipy import stats

from uncertainty.analyses.inference import answers_table
from uncertainty.analyses.inference.answers import add_answers
from uncertainty.analyses.inference.problem import Problem
from uncertainty.analyses.inference.result import InferenceResult

MASS_KG = 25.0          # invented tissue mass
DP = 10.0               # invented fixed pressure difference, mmHg
SUBJECTS = ["s1", "s2", "s3", "s4"]
GROUP = {"s1": "control", "s2": "control", "s3": "sepsis", "s4": "sepsis"}


def _prior(positive: bool, sd: float) -> Any:
    frozen = stats.lognorm(0.3) if positive else stats.norm(0.0, sd)
    return SimpleNamespace(distribution=SimpleNamespace(positive_support=positive), sd=lambda: sd,
                           frozen=lambda: frozen)


def _evaluate(v: dict[str, Any], xp: Any) -> dict[str, Any]:
    jv = v["Kf"] * (v["dP"] - v["Pi"])
    per_organ = MASS_KG * 10.0          # 100 g units in 25 kg
    return {"Jv": jv, "net_pressure": v["dP"] - v["Pi"], "Jv_mL_per_h": jv * per_organ * 60.0,
            "Jv_L_per_day": jv * per_organ * 1.44}


def _fake(seed: int = 3) -> tuple[Any, Any, dict[str, np.ndarray]]:
    rng = np.random.default_rng(seed)
    c, d, n = 2, 50, len(SUBJECTS)
    kf = np.exp(rng.normal(np.log(0.004), 0.1, (c, d)))
    kf_s = kf[..., None] * np.exp(rng.normal(0.0, 0.3, (c, d, n)))
    kf_s[..., 2:] *= 1.8                       # the sepsis subjects leakier (invented)
    pi = rng.normal(1.0, 0.5, (c, d))
    pi_s = pi[..., None] + rng.normal(0.0, 1.0, (c, d, n))
    eff = rng.normal(np.log(1.8), 0.2, (c, d, 1))
    post = xr.Dataset({
        "Kf": (("chain", "draw"), kf), "Pi": (("chain", "draw"), pi),
        "Kf__subject": (("chain", "draw", "subject"), kf_s),
        "Pi__subject": (("chain", "draw", "subject"), pi_s),
        "Kf__effect": (("chain", "draw", "group"), eff),
        "Jv__subject": (("chain", "draw", "subject"), kf_s * (DP - pi_s)),
        "Jv__typical": (("chain", "draw"), kf * (DP - pi)),
    })
    problem = Problem(priors={"Kf": _prior(True, 0.001), "Pi": _prior(False, 1.0)}, fixed={"dP": DP},
                      evaluate=_evaluate, observations=[], basis="100g", tissue_mass_kg=MASS_KG)
    built = SimpleNamespace(problem=problem, subjects=SUBJECTS, hierarchical=True, groups=["control", "sepsis"],
                            subject_group=GROUP, context=SimpleNamespace(subject_params={}))
    draws = {"Kf": kf_s.reshape(c * d, n), "Pi": pi_s.reshape(c * d, n), "eff": eff.reshape(c * d),
             "kf": kf.reshape(-1), "pi": pi.reshape(-1)}
    return built, SimpleNamespace(posterior=post), draws


def _doc() -> dict[str, Any]:
    return {"subjects": {s: {"group": GROUP[s]} for s in SUBJECTS}, "typical": {}, "new_subject": {},
            "units": {"Jv": "mL/min/100g"}}


def test_per_subject_values_and_units() -> None:
    built, idata, dr = _fake()
    doc = _doc()
    add_answers(doc, built, idata, None)
    assert doc["subject_quantities"] == ["Kf", "Pi", "net_pressure", "Jv", "Jv_mL_per_h", "Jv_L_per_day"]
    for k, sid in enumerate(SUBJECTS):
        kf = dr["Kf"][:, k]
        assert doc["subjects"][sid]["Kf"]["mean"] == pytest.approx(sum(kf) / len(kf))
        jv = [kf[i] * (DP - dr["Pi"][i, k]) for i in range(len(kf))]
        assert doc["subjects"][sid]["Jv"]["mean"] == pytest.approx(sum(jv) / len(jv))
        # mL/min/100g -> mL/h for 25 kg: x 250 x 60; -> L/day: x 250 x 1440 / 1000 (hand arithmetic)
        assert doc["subjects"][sid]["Jv_mL_per_h"]["mean"] == pytest.approx(sum(jv) / len(jv) * 15000.0)
        assert doc["subjects"][sid]["Jv_L_per_day"]["mean"] == pytest.approx(sum(jv) / len(jv) * 360.0)
        srt = sorted(kf)   # 100 draws: numpy's linear-interpolation 2.5% point sits between the 3rd and 4th
        lo = srt[2] + 0.475 * (srt[3] - srt[2])
        assert doc["subjects"][sid]["Kf"]["ci95"][0] == pytest.approx(lo)
    assert doc["units"]["Kf"] == "mL/min/mmHg/100g" and doc["units"]["Pi"] == "mmHg"
    assert doc["units"]["Jv_mL_per_h"] == "mL/h" and doc["units"]["Jv_L_per_day"] == "L/day"


def test_cohort_total_and_typical() -> None:
    built, idata, dr = _fake()
    doc = _doc()
    add_answers(doc, built, idata, {"Kf": dr["kf"] * 1.1, "Pi": dr["pi"], "dP": DP})
    # the mean of a sum is the sum of the means (another route than summing per draw)
    expected = sum(doc["subjects"][s]["Jv_L_per_day"]["mean"] for s in SUBJECTS)
    assert doc["cohort_total"]["Jv_L_per_day"]["mean"] == pytest.approx(expected)
    jv_typ = [dr["kf"][i] * (DP - dr["pi"][i]) for i in range(dr["kf"].size)]
    assert doc["typical"]["Jv"]["mean"] == pytest.approx(sum(jv_typ) / len(jv_typ))
    assert doc["typical"]["Kf"]["mean"] == pytest.approx(dr["kf"].mean())
    assert doc["new_subject"]["Jv"]["mean"] == pytest.approx(1.1 * sum(jv_typ) / len(jv_typ))


def test_group_effects_by_hand() -> None:
    built, idata, dr = _fake()
    doc = _doc()
    add_answers(doc, built, idata, None)
    rows = {(e["quantity"], e["of"]): e for e in doc["group_effects"]}
    model = rows[("Kf", "typical value (model effect)")]
    ratios = sorted(math.exp(x) for x in dr["eff"])
    assert model["measure"] == "ratio" and model["group"] == "sepsis" and model["reference"] == "control"
    assert model["estimate"] == pytest.approx(0.5 * (ratios[49] + ratios[50]))
    assert model["direction"] == "higher"
    assert model["p_direction"] == pytest.approx(sum(r > 1 for r in ratios) / 100)
    # ratio of geometric means over the cohort's own subjects, draw by draw
    kf = dr["Kf"]
    geo = [math.sqrt(kf[i, 2] * kf[i, 3]) / math.sqrt(kf[i, 0] * kf[i, 1]) for i in range(kf.shape[0])]
    subj = rows[("Kf", "subjects' geometric mean")]
    assert subj["estimate"] == pytest.approx(float(np.median(geo)))
    assert subj["p_direction"] == pytest.approx(sum(g > 1 for g in geo) / len(geo))
    # Pi can be negative: a difference of means, in mmHg
    pi = dr["Pi"]
    diff = [(pi[i, 2] + pi[i, 3]) / 2 - (pi[i, 0] + pi[i, 1]) / 2 for i in range(pi.shape[0])]
    e = rows[("Pi", "subjects' mean")]
    assert e["measure"] == "difference" and e["unit"] == "mmHg"
    side = e["direction"] == "higher"
    assert e["p_direction"] == pytest.approx(sum((d > 0) == side for d in diff) / len(diff))


def test_tables_terminal_csv_and_report() -> None:
    built, idata, _ = _fake()
    doc = _doc()
    add_answers(doc, built, idata, None)
    text = answers_table.text(doc)
    assert "Kf (mL/min/mmHg/100g)" in text and "Jv (L/day)" in text and "cohort total" in text
    assert "sepsis vs control" in text
    # tidy rows: one table per kind of row, each row naming its unit
    subj = answers_table.subject_rows(doc)
    assert len(subj) == len(SUBJECTS) * len(doc["subject_quantities"])
    assert {r["unit"] for r in subj if r["quantity"] == "Kf"} == {"mL/min/mmHg/100g"}
    assert {r["level"] for r in answers_table.cohort_rows(doc)} >= {"typical subject", "cohort total"}
    assert answers_table.effect_rows(doc)[0]["ci95_low"] < answers_table.effect_rows(doc)[0]["ci95_high"]
    html = answers_table.html(doc)
    assert "<h3>Per subject</h3>" in html and "<h3>Group effects</h3>" in html


def test_result_frames_one_per_kind(tmp_path: Any) -> None:
    built, idata, _ = _fake()
    doc = _doc()
    add_answers(doc, built, idata, None)
    blk = {"mean": 1.0, "sd": 0.1, "ci95": [0.8, 1.2]}
    doc.update({"parameters": {}, "Jv": blk, "new_subject": {"Jv": blk, **doc["new_subject"]}})
    doc["typical"].setdefault("Jv", blk)
    frames = InferenceResult(doc=doc).to_dataframe()
    assert set(frames) == {"", "subjects", "cohort", "group_effects"}
    assert list(frames["subjects"].columns)[:4] == ["subject", "group", "quantity", "unit"]


def test_posterior_flux_beyond_lymph_return_is_flagged() -> None:
    # the limit is propagate's guard (8 L/day, Levick & Michel 2010, from memory); the draws are made here
    from uncertainty.analyses.inference.answers import flag_implausible_flux
    from uncertainty.analyses.propagate import WHOLE_BODY_LYMPH_L_PER_DAY

    rng = np.random.default_rng(3)
    subjects = rng.lognormal(np.log([2.0, 12.0, 7.0]), 0.3, size=(400, 3))   # medians 2, 12, 7 L/day
    doc: dict[str, Any] = {"notes": []}
    flag_implausible_flux(doc, {"subjects": subjects, "typical": rng.lognormal(np.log(5.0), 0.2, 400)},
                          ["A", "B", "C"])
    assert [f["who"] for f in doc["flags"]] == ["B"]
    assert doc["flags"][0]["median"] == pytest.approx(np.median(subjects[:, 1]))
    assert doc["flags"][0]["limit"] == WHOLE_BODY_LYMPH_L_PER_DAY
    assert len(doc["notes"]) == 1 and "B 1" in doc["notes"][0]
    quiet: dict[str, Any] = {"notes": []}
    flag_implausible_flux(quiet, {"subjects": subjects[:, :1], "typical": None}, ["A"])
    assert "flags" not in quiet and not quiet["notes"]
