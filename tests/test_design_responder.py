"""Binary responder endpoints: Fleiss' sample size with continuity correction, the corrected z test against
scipy's corrected chi-square, the exact binomial power against trials simulated with scipy.stats, the
end-to-end design and bad input (no PyMC)."""

from __future__ import annotations

import importlib
import math
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from uncertainty.analyses.design import binary
from uncertainty.analyses.design.report_section import protocol_markdown
from uncertainty.analyses.design.table import table
from uncertainty.core.errors import InputError
from uncertainty.distributions import log_sd_from_cv

sys.path.insert(0, str(Path(__file__).parent))
from test_design_tests import BASE, _study  # noqa: E402

dz = importlib.import_module("uncertainty.analyses.design")
RESP = dict(BASE, responder={"cut": 0.0035}, n_range=[10, 120], n_points=4, trials=2000)


def test_fleiss_sample_size_against_the_textbook() -> None:
    # 0.05 against 0.10, alpha 0.05 two-sided, power 0.80: 474 per group with continuity correction, 435 without
    # (Fleiss 1981, Statistical Methods for Rates and Proportions, table A.3; from memory)
    assert binary.fleiss_n(0.05, 0.10, 0.05, 0.8) == 474
    # the same formula written out (Fleiss, Tytun & Ury 1980, Biometrics 36:343; from memory)
    p0, p1 = 0.3, 0.5
    za, zb = stats.norm.ppf(0.975), stats.norm.ppf(0.9)
    n1 = (za * math.sqrt(2 * 0.4 * 0.6) + zb * math.sqrt(0.21 + 0.25)) ** 2 / 0.04
    assert binary.fleiss_n(p0, p1, 0.05, 0.9) == math.ceil(n1 / 4 * (1 + math.sqrt(1 + 4 / (n1 * 0.2))) ** 2)
    assert binary.fleiss_n(p1, p0, 0.05, 0.9) == binary.fleiss_n(p0, p1, 0.05, 0.9)


def test_corrected_z_squared_is_scipys_corrected_chi_square() -> None:
    # scipy.stats.chi2_contingency with Yates' correction (the correction applies when |O - E| >= 1/2)
    rng = np.random.default_rng(1)
    for _ in range(40):
        n = int(rng.integers(8, 60))
        x0, x1 = (int(v) for v in rng.integers(1, n, 2))
        if abs(x1 - x0) < 1:
            continue
        chi2 = stats.chi2_contingency([[x0, n - x0], [x1, n - x1]], correction=True)[0]
        assert float(binary.z_cc(x0, x1, n)) ** 2 == pytest.approx(chi2, rel=1e-9, abs=1e-12)


@pytest.mark.parametrize(("n", "p0", "p1"), [(29, 0.3, 0.6), (15, 0.1, 0.45), (60, 0.55, 0.35)])
def test_exact_power_against_scipy_simulated_trials(n: int, p0: float, p1: float) -> None:
    # 40000 simulated trials, each table tested by scipy.stats.chi2_contingency (corrected), success only in
    # the direction of benefit (the sign of p1 - p0); MC se of power <= 0.0025
    rng = np.random.default_rng(2)
    m = 40_000
    x0, x1 = rng.binomial(n, p0, m), rng.binomial(n, p1, m)
    sign = 1 if p1 > p0 else -1
    pval = {}
    for a, b in set(zip(x0.tolist(), x1.tolist(), strict=True)):
        tab = np.array([[a, n - a], [b, n - b]])
        pval[a, b] = 1.0 if tab.sum(axis=0).min() == 0 else stats.chi2_contingency(tab, correction=True)[1]
    sim = np.mean([(pval[a, b] < 0.05) and sign * (b - a) > 0 for a, b in zip(x0, x1, strict=True)])
    exact = float(binary.exact_power(n, p0, p1, 0.05))
    assert abs(sim - exact) < 4 * math.sqrt(exact * (1 - exact) / m)


def test_exact_n_is_near_fleiss_and_reaches_the_target() -> None:
    # Fleiss' corrected formula approximates the power of the corrected test (Fleiss, Tytun & Ury 1980; from
    # memory): the exact n lies within 10 % of it, and the exact power there reaches the target
    for p0, p1 in ((0.3, 0.5), (0.2, 0.45), (0.6, 0.4)):
        n = binary.n_for_power(p0, p1, 0.05, 0.8, "two_sided", 5, 500)
        assert abs(n - binary.fleiss_n(p0, p1, 0.05, 0.8)) <= 0.1 * binary.fleiss_n(p0, p1, 0.05, 0.8)
        assert binary.exact_power(n, p0, p1) >= 0.8 > binary.exact_power(n - 1, p0, p1) - 0.02


def test_response_probabilities_of_a_lognormal_endpoint() -> None:
    # closed form: log Kf normal with sd sqrt(ln(1 + cv^2)) per spread (between 0.35, measurement 0.2), median 0.004
    sd = math.sqrt(log_sd_from_cv(0.35) ** 2 + log_sd_from_cv(0.2) ** 2)
    p0, p1 = binary.proportions(math.log(0.004), sd, math.log(0.7), math.log(0.0035), "below")
    assert p0 == pytest.approx(stats.lognorm(s=sd, scale=0.004).cdf(0.0035), rel=1e-12)
    assert p1 == pytest.approx(stats.lognorm(s=sd, scale=0.004 * 0.7).cdf(0.0035), rel=1e-12)


def test_responder_design_end_to_end() -> None:
    res = dz.design(_study(RESP)).to_dict()
    r = res["responder"]
    assert r["side"] == "below" and r["more_is_benefit"]  # a decrease is the benefit, so below the cut
    n = binary.n_for_power(r["p_control"], r["p_treated"], 0.05, 0.8, "two_sided", 10, 120)
    assert res["n_per_arm_completing"] == n and res["total_n_completing"] == 2 * n
    for row in res["curve"]:
        assert abs(row["power"] - row["power_analytic"]) < 4 * max(row["power_mc_se"], 2e-3)
    # responders above the cut on the harmful side: fewer responders is the benefit, the same test and n
    flip = dz.design(_study(dict(RESP, responder={"cut": 0.0035, "side": "above"}))).to_dict()
    assert not flip["responder"]["more_is_benefit"] and flip["n_per_arm_completing"] == n
    md = protocol_markdown(res)
    assert "Responder endpoint" in md and "continuity correction" in md and "exact binomial" in md
    assert "responder: Kf below 0.0035" in table(res)
    assert any(a["what"] == "response probabilities (control, treated)" for a in res["assumptions"])


@pytest.mark.parametrize(("patch", "key", "value"), [
    ({"responder": {"cut": "low"}}, "design.responder.cut", "low"),
    ({"responder": {"cut": -1.0}}, "design.responder.cut", -1.0),
    ({"responder": {"cut": 0.003, "side": "left"}}, "design.responder.side", "left"),
    ({"responder": {"cut": 0.003, "level": 2}}, "design.responder.level", 2),
    ({"design": "crossover", "within_subject": {"Kf": {"cv": 0.1}}}, "design.responder", {"cut": 0.0035}),
    ({"test": "non_inferiority", "margin": 1.1}, "design.responder", {"cut": 0.0035}),
])
def test_bad_responder_sections_name_the_key(patch: dict, key: str, value: object) -> None:
    with pytest.raises(InputError) as err:
        dz.parse_design(_study(dict(RESP, **patch)))
    assert (err.value.key, err.value.value) == (key, value)


def test_exact_path_is_refused_for_responders() -> None:
    with pytest.raises(InputError) as err:
        dz.design(_study(RESP), exact=True)
    assert err.value.key == "design.responder"
