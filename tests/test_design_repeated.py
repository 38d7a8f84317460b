"""Repeated measures (baseline plus k follow-ups, compound symmetry): the variance factor of the mean of the
follow-ups, with and without baseline adjustment, against closed forms and simulated trials (no PyMC)."""

from __future__ import annotations

import importlib
import math
import sys
from pathlib import Path

import pytest

from uncertainty.analyses.design import trial_power as tp
from uncertainty.analyses.design.report_section import protocol_markdown
from uncertainty.core.errors import InputError
from uncertainty.distributions import log_sd_from_cv

sys.path.insert(0, str(Path(__file__).parent))
from test_design_tests import BASE, _study  # noqa: E402

dz = importlib.import_module("uncertainty.analyses.design")
REP = dict(BASE, followups=3, within_subject={"Kf": {"cv": 0.2}}, effect={"parameter": "Kf", "multiply": 0.85},
           n_range=[8, 150], n_points=3, trials=2000)
# log-scale spreads of the test study: between 0.35, within 0.2, measurement 0.2 (cv)
B2 = log_sd_from_cv(0.35) ** 2
SIGMA2 = B2 + 2 * log_sd_from_cv(0.2) ** 2
RHO = B2 / SIGMA2


@pytest.mark.parametrize("k", [1, 2, 3, 6])
def test_variance_factor_of_the_mean_of_k_follow_ups(k: int) -> None:
    # compound symmetry: var(mean of k) = sigma^2 (1 + (k - 1) rho) / k (Diggle, Heagerty, Liang & Zeger 2002,
    # Analysis of Longitudinal Data, 2nd ed.; from memory); with one baseline, ANCOVA leaves
    # sigma^2 ((1 + (k - 1) rho) / k - rho^2) (Frison & Pocock 1992, Stat Med 11:1685; from memory)
    f = (1 + (k - 1) * RHO) / k
    st = _study(dict(REP, followups=k))
    sd, _ = dz.analytic_sd(st, dz.parse_design(st))
    assert sd**2 == pytest.approx(SIGMA2 * f, rel=1e-12)
    st = _study(dict(REP, followups=k, baseline=True))
    sd, _ = dz.analytic_sd(st, dz.parse_design(st))
    assert sd**2 == pytest.approx(SIGMA2 * (f - RHO**2), rel=1e-12)


@pytest.mark.parametrize("baseline", [False, True])
def test_simulated_power_of_repeated_measures_matches_the_closed_form(baseline: bool) -> None:
    # 2000 simulated trials per point with three follow-ups each (the mean analysed on the log scale): the
    # simulated power lies within 4 MC se of the noncentral t at the compound-symmetry sd
    res = dz.design(_study(dict(REP, baseline=baseline))).to_dict()
    analysis = "ancova" if baseline else "parallel"
    for row in res["curve"]:
        exact = float(tp.t_power(row["n_per_arm"], math.log(0.85), res["sd_analysis_scale"], 0.05, analysis))
        assert abs(row["power"] - exact) < 4 * max(row["power_mc_se"], 2e-3)
    one = dz.design(_study(dict(REP, baseline=baseline, followups=1, trials=200))).to_dict()
    assert res["n_per_arm_completing"] < one["n_per_arm_completing"]  # more follow-ups, fewer subjects
    assert res["followups"] == 3 and "mean of 3 follow-ups" in protocol_markdown(res)
    assert any(a["what"] == "repeated measures" for a in res["assumptions"])


@pytest.mark.parametrize(("patch", "value"), [({"followups": 0}, 0), ({"followups": 2.5}, 2.5),
                                              ({"followups": 2, "design": "paired"}, 2),
                                              ({"followups": 2, "responder": {"cut": 0.003}}, 2)])
def test_bad_followups_name_the_key(patch: dict, value: object) -> None:
    with pytest.raises(InputError) as err:
        dz.parse_design(_study(dict(REP, **patch)))
    assert (err.value.key, err.value.value) == ("design.followups", value)
