"""AB/BA two-period crossover designs: the closed-form sample size, the noncentral-t power against trials
simulated and analysed with scipy.stats, the end-to-end design and bad input (no PyMC)."""

from __future__ import annotations

import importlib
import math
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from uncertainty.analyses.design import trial_power as tp
from uncertainty.analyses.design.report_section import protocol_markdown
from uncertainty.core.errors import InputError
from uncertainty.distributions import log_sd_from_cv

sys.path.insert(0, str(Path(__file__).parent))
from test_design_tests import BASE, _study  # noqa: E402

dz = importlib.import_module("uncertainty.analyses.design")
CROSS = dict(BASE, design="crossover", within_subject={"Kf": {"cv": 0.15}}, effect={"parameter": "Kf",
             "multiply": 0.85}, n_range=[4, 40], n_points=4, trials=2000)


@pytest.mark.parametrize(("delta", "sigma_w"), [(0.5, 1.0), (-0.2, 0.35), (3.0, 5.0)])
def test_normal_sample_size_is_julious_closed_form(delta: float, sigma_w: float) -> None:
    # total N = 2 (z_{1-a/2} + z_{1-b})^2 sigma_w^2 / delta^2 for the AB/BA crossover (Julious 2004, Stat Med
    # 23:1921, crossover trials with normal data; from memory), i.e. n = (z + z)^2 sigma_w^2 / delta^2 per
    # sequence; the sd passed is that of a period difference, sqrt(2) sigma_w
    z = stats.norm.ppf(0.975) + stats.norm.ppf(0.9)
    n_seq = tp.z_sample_size(delta, math.sqrt(2) * sigma_w, 0.05, 0.9, "crossover")
    assert n_seq == math.ceil(z**2 * sigma_w**2 / delta**2)


def test_t_power_is_the_crossover_noncentral_t() -> None:
    # closed form: the estimate has variance 2 sigma_w^2 / N with N = 2n subjects, df N - 2 (Julious 2004; from
    # memory); rho = 0.6 and sigma = 1 give sigma_w^2 = (1 - rho) sigma^2
    sigma, rho, delta = 1.0, 0.6, 0.45
    sd_diff = math.sqrt(2 * (1 - rho)) * sigma
    for n in (4, 10, 25):
        big_n = 2 * n
        ncp = delta / math.sqrt(2 * (1 - rho) * sigma**2 / big_n)
        expect = stats.nct.sf(stats.t.ppf(0.975, big_n - 2), big_n - 2, ncp)
        assert float(tp.t_power(n, delta, sd_diff, 0.05, "crossover")) == pytest.approx(expect, rel=1e-10)


def test_t_power_against_simulated_crossover_trials_with_a_period_effect() -> None:
    # scipy.stats: 20000 simulated AB/BA trials (subject effect sd 0.8, within-subject sd 0.5, a period effect
    # of 0.7 that the analysis must remove), analysed by the two-sample t test of the period differences
    # between sequences; the rejection rate in the direction of benefit is the noncentral-t power
    rng = np.random.default_rng(7)
    n, delta, sb, sw, period, trials = 9, 0.4, 0.8, 0.5, 0.7, 20000
    subj = rng.normal(0, sb, (trials, 2 * n))
    p1 = subj + rng.normal(0, sw, (trials, 2 * n)) + np.r_[np.full(n, delta), np.zeros(n)]
    p2 = subj + rng.normal(0, sw, (trials, 2 * n)) + period + np.r_[np.zeros(n), np.full(n, delta)]
    d = p1 - p2
    res = stats.ttest_ind(d[:, :n], d[:, n:], axis=1)
    sim = float(np.mean((res.pvalue < 0.05) & (res.statistic > 0)))
    expect = float(tp.t_power(n, delta, math.sqrt(2) * sw, 0.05, "crossover"))
    assert abs(sim - expect) < 4 * math.sqrt(expect * (1 - expect) / trials)


def test_crossover_design_end_to_end() -> None:
    st = _study(CROSS)
    res = dz.design(st).to_dict()
    # the sd of a period difference is sqrt(2 (1 - rho)) sigma on the log scale (rho = between^2 / sigma^2)
    b, w, m = log_sd_from_cv(0.35), log_sd_from_cv(0.15), log_sd_from_cv(0.2)
    sigma = math.sqrt(b**2 + w**2 + m**2)
    rho = b**2 / sigma**2
    assert res["sd_analysis_scale"] == pytest.approx(math.sqrt(2 * (1 - rho)) * sigma, rel=1e-12)
    effect = math.log(0.85)
    n = tp.n_for_power(effect, res["sd_analysis_scale"], 0.05, 0.8, "crossover", 4, 40)
    assert res["n_per_arm_completing"] == n and res["total_n_completing"] == 2 * n
    for row in res["curve"]:
        exact = float(tp.t_power(row["n_per_arm"], effect, res["sd_analysis_scale"], 0.05, "crossover"))
        assert abs(row["power"] - exact) < 4 * max(row["power_mc_se"], 2e-3)
    # a crossover needs far fewer subjects than parallel groups when subjects differ more than occasions do
    par = dz.design(_study(dict(CROSS, design="parallel", n_range=[4, 400], trials=200))).to_dict()
    assert res["total_n_completing"] < 0.5 * par["total_n_completing"]
    md = protocol_markdown(res)
    assert "per sequence" in md and "crossover" in md.lower()
    assert any(a["what"] == "crossover periods" for a in res["assumptions"])


@pytest.mark.parametrize(("patch", "key"), [({"within_subject": {}}, "design.within_subject"),
                                            ({"baseline": True}, "design.baseline")])
def test_bad_crossover_sections_name_the_key(patch: dict, key: str) -> None:
    with pytest.raises(InputError) as err:
        dz.parse_design(_study(dict(CROSS, **patch)))
    assert err.value.key == key
