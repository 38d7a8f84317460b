"""The quality gate on hand-made draws (no PyMC): which check failed and what to raise, tail ESS gated,
one chain, Monte Carlo errors of the summaries against the iid closed forms, a negative contraction
explained, and a failed gate flagged in every file ``infer --out`` writes.

Closed forms: for n independent draws of sd s, the standard error of the mean is s / sqrt(n), and of
the p-quantile sqrt(p (1 - p) / n) / f(q_p) with f the density at the quantile (asymptotic normality
of sample quantiles; e.g. van der Vaart, Asymptotic Statistics, 1998, section 21.2; from memory).
"""

from __future__ import annotations

import json
import os

import numpy as np
import pytest
from scipy import stats

from uncertainty.analyses.inference.diagnostics import (
    Gate,
    contraction_note,
    describe,
    diagnose,
    gate_message,
    summary_mcse,
)
from uncertainty.analyses.inference.result import InferenceResult


def _idata(x, diverging=0):
    import arviz as az

    stats_ = np.zeros(x.shape, dtype=bool)
    stats_.flat[:diverging] = True
    return az.from_dict(posterior={"Pc": x}, sample_stats={"diverging": stats_})


def test_iid_draws_pass_and_each_check_is_one_sentence():
    x = np.random.default_rng(1).standard_normal((4, 1000))
    d = diagnose(_idata(x), ["Pc"], Gate())
    assert d["passed"] and d["failed_checks"] == [] and gate_message(d) == ""
    lines = describe(d)
    assert len(lines) >= 4 and all(line.endswith("met.") for line in lines[:4])


def test_short_tail_ess_fails_and_says_what_to_raise():
    # an AR(1) chain (phi 0.9, invented) of 300 draws x 2 chains: ESS far below 400
    rng = np.random.default_rng(2)
    x = np.zeros((2, 300))
    for t in range(1, 300):
        x[:, t] = 0.9 * x[:, t - 1] + rng.standard_normal(2)
    d = diagnose(_idata(x), ["Pc"], Gate(r_hat_max=1.5, ess_bulk_min=0.0))
    assert d["failed_checks"] == ["ess_tail"] and not d["passed"]
    msg = gate_message(d)
    assert "tail ESS" in msg and "--draws" in msg and "Pc" in msg and "R-hat" not in msg
    d = diagnose(_idata(x, diverging=3), ["Pc"], Gate(r_hat_max=1.5, ess_bulk_min=0.0, ess_tail_min=0.0))
    assert d["failed_checks"] == ["divergences"] and "--target-accept" in gate_message(d)


def test_one_chain_gives_a_split_r_hat_not_nan():
    x = np.random.default_rng(3).standard_normal((1, 1000))
    d = diagnose(_idata(x), ["Pc"], Gate())
    assert np.isfinite(d["r_hat_max"]) and d["r_hat_max"] < 1.01 and d["passed"]
    assert "two halves" in describe(d)[0] and "nan" not in describe(d)[0]
    # a chain whose halves sit apart fails R-hat
    x[0, 500:] += 3.0
    d = diagnose(_idata(x), ["Pc"], Gate())
    assert "r_hat" in d["failed_checks"] and "--tune" in gate_message(d)


def test_mcse_of_mean_and_interval_ends_match_iid_closed_forms():
    n, s = 4 * 4000, 2.0
    x = s * np.random.default_rng(4).standard_normal((4, 4000))
    m = summary_mcse(x)
    assert m["mean"] == pytest.approx(s / np.sqrt(n), rel=0.1)
    q_se = np.sqrt(0.025 * 0.975 / n) / stats.norm.pdf(stats.norm.ppf(0.025, scale=s), scale=s)
    assert m["ci95"][0] == pytest.approx(q_se, rel=0.25) and m["ci95"][1] == pytest.approx(q_se, rel=0.25)


def test_negative_contraction_is_explained():
    assert contraction_note("Kf", 0.3, 1000) is None
    assert "within Monte Carlo error" in contraction_note("Kf", -0.02, 1000)
    assert "wider than the prior as a whole" in contraction_note("Kf", -0.5, 4000)


def test_failed_gate_flags_every_file_and_the_json(tmp_path):
    doc = {"diagnostics": {"passed": False, "failed_checks": ["ess_bulk"], "failing": ["Pc"],
                           "failed_quantities": {"ess_bulk": ["Pc"]}, "r_hat_max": 1.0, "ess_bulk_min": 90.0,
                           "ess_tail_min": 500.0, "divergences": 0, "bfmi_min": 1.0},
           "trustworthy": False, "parameters": {}, "units": {"Jv": "mL/min/100g"}, "subjects": {},
           "Jv": {"mean": 0.01, "sd": 0.002, "ci95": [0.006, 0.014], "hdi95": [0.006, 0.014]},
           "typical": {"Jv": {"mean": 0.01, "sd": 0.002, "ci95": [0.006, 0.014]}},
           "new_subject": {"Jv": {"mean": 0.01, "sd": 0.003, "ci95": [0.004, 0.016]}}}
    paths = InferenceResult(doc=doc).save(str(tmp_path))
    assert all(os.path.basename(p).startswith(InferenceResult.failed_prefix) for p in paths.values())
    assert sorted(os.listdir(tmp_path)) == sorted(os.path.basename(p) for p in paths.values())
    assert json.loads((tmp_path / f"{InferenceResult.failed_prefix}inference.json").read_text())[
        "trustworthy"] is False


def test_divergent_draws_in_one_tail_are_named():
    """Three divergent transitions whose draws sit at the top of Pc (invented draws) are named with their
    quantiles; an unrelated quantity with a subject dimension is not, and without divergences nothing is."""
    import arviz as az

    from uncertainty.analyses.inference.diagnostics import divergent_tails

    rng = np.random.default_rng(2)
    pc, other = rng.standard_normal((4, 500)), rng.standard_normal((4, 500, 3))
    diverging = np.zeros((4, 500), dtype=bool)
    top = np.argsort(pc.ravel())[-40:][::14]          # three draws among the top 2 % of Pc
    diverging.flat[top] = True
    idata = az.from_dict(posterior={"Pc": pc, "Kf__subject_z": other}, sample_stats={"diverging": diverging},
                         coords={"subject": ["A", "B", "C"]}, dims={"Kf__subject_z": ["subject"]})
    tails = divergent_tails(idata, ["Pc", "Kf__subject_z"])
    assert tails[0]["quantity"] == "Pc" and tails[0]["side"] == "high"
    assert all(q >= 0.98 for q in tails[0]["quantiles"]) and len(tails[0]["quantiles"]) == 3
    # a subject's unrelated score is named by chance with probability about 0.03 (three uniform quantiles on one
    # side with a mean beyond 0.85: 2 x 0.45^3 / 6); with this seed none is
    assert [t["quantity"] for t in tails] == ["Pc"]
    d = diagnose(idata, ["Pc", "Kf__subject_z"], Gate())
    assert d["divergent_tails"] == tails and "divergent draws sat in the tails of (Pc high)" in gate_message(d)
    calm = az.from_dict(posterior={"Pc": pc}, sample_stats={"diverging": np.zeros((4, 500), dtype=bool)})
    assert divergent_tails(calm, ["Pc"]) == [] and diagnose(calm, ["Pc"], Gate())["divergent_tails"] == []
