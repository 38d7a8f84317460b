"""Bayesian sample size of a normal endpoint (issue 19 items 10 and 11): posterior interval width, probability of
success and EVSI against their closed forms, a numpy Monte Carlo of the preposterior distribution and scipy; the
study keys; the protocol page in the HTML report."""

from __future__ import annotations

import importlib
import math
import re

import numpy as np
import pytest
from scipy import integrate, stats

from uncertainty.analyses.design import bayes_n
from uncertainty.analyses.design.report_section import markdown_html, protocol_markdown, section_html
from uncertainty.app import report
from uncertainty.core.errors import InputError
from uncertainty.study import Study

dz = importlib.import_module("uncertainty.analyses.design")

# invented test values: a log-ratio effect with design prior N(-0.29, 0.15^2), endpoint sd 0.42 (log units)
M0, S0, SD = -0.29, 0.15, 0.42
Z = stats.norm.ppf(0.975)  # 1.95996 (common practice: the 95 % two-sided normal quantile)


def test_unit_normal_loss_matches_its_integral() -> None:
    # L(u) = int_u^inf (z - u) phi(z) dz (Raiffa & Schlaifer 1961, from memory), here by scipy quadrature
    for u in (-1.0, 0.0, 0.5, 2.0):
        quad = integrate.quad(lambda z, u=u: (z - u) * stats.norm.pdf(z), u, np.inf)[0]
        assert float(bayes_n.unit_normal_loss(u)) == pytest.approx(quad, abs=1e-8)


def test_width_n_is_the_closed_form() -> None:
    # 2 z s1 <= w with 1/s1^2 = 1/s0^2 + n / (2 sd^2)  =>  n = ceil(2 sd^2 ((2 z / w)^2 - 1 / s0^2))
    for w in (0.1, 0.2, 0.3):
        n = bayes_n.n_for_width(w, SD, S0)
        assert n == math.ceil(2 * SD**2 * ((2 * Z / w) ** 2 - 1 / S0**2))
        assert 2 * Z * float(bayes_n.posterior_sd(n, SD, S0)) <= w < 2 * Z * float(bayes_n.posterior_sd(n - 1, SD, S0))
    assert bayes_n.n_for_width(2 * Z * S0 + 1e-9, SD, S0) == 0  # the prior alone is narrow enough
    # paired: variance sd^2 / n, half the two-arm n (rounded up)
    assert bayes_n.n_for_width(0.2, SD, S0, "paired") == math.ceil(SD**2 * ((2 * Z / 0.2) ** 2 - 1 / S0**2))


@pytest.mark.parametrize(("a0", "sa"), [(M0, S0), (0.0, 0.5)])  # the design prior; a sceptical prior (invented)
def test_success_probability_matches_a_preposterior_monte_carlo(a0: float, sa: float) -> None:
    n, k = 30, 200_000
    rng = np.random.default_rng(19)
    delta = rng.normal(M0, S0, k)
    tau = SD * math.sqrt(2 / n)
    d = rng.normal(delta, tau)
    prec = 1 / sa**2 + 1 / tau**2
    mean, psd = (a0 / sa**2 + d / tau**2) / prec, prec**-0.5
    hit = mean + Z * psd < 0  # the 95 % interval lies wholly below 0 (a decrease is the benefit)
    p = float(bayes_n.success_probability(n, M0, S0, SD, a0, sa, -1.0))
    assert abs(p - hit.mean()) < 4 * math.sqrt(p * (1 - p) / k)


def test_success_n_is_the_first_n_reaching_the_target() -> None:
    n = bayes_n.n_for_success(0.8, M0, S0, SD, M0, S0, -1.0)
    p = bayes_n.success_probability(np.array([n - 1, n]), M0, S0, SD, M0, S0, -1.0)
    assert p[0] < 0.8 <= p[1]
    # the probability cannot pass the prior probability of benefit Phi(0.29 / 0.15) = 0.973
    assert bayes_n.n_for_success(0.98, M0, S0, SD, M0, S0, -1.0) is None


@pytest.mark.parametrize(("m0", "direction"), [(M0, -1.0), (0.05, 1.0), (0.05, -1.0)])
def test_evsi_is_the_unit_normal_loss_closed_form(m0: float, direction: float) -> None:
    ns = np.array([1, 10, 100, 10_000])
    tau2 = 2 * SD**2 / ns
    s_pre = S0**2 / np.sqrt(S0**2 + tau2)  # sd of the preposterior mean
    closed = s_pre * bayes_n.unit_normal_loss(abs(m0) / s_pre)
    np.testing.assert_allclose(bayes_n.evsi(ns, m0, S0, SD, m0, S0, direction), closed, rtol=1e-10, atol=1e-15)
    values = bayes_n.evsi(ns, m0, S0, SD, m0, S0, direction)
    assert np.all(np.diff(values) > 0) and values[-1] < bayes_n.evpi(m0, S0)
    assert values[-1] == pytest.approx(bayes_n.evpi(m0, S0), rel=0.02)


@pytest.mark.parametrize(("a0", "sa"), [(M0, S0), (0.0, 0.1)])
def test_evsi_matches_a_preposterior_monte_carlo(a0: float, sa: float) -> None:
    # value of the decision rule "adopt when the analysis posterior mean shows a decrease" over the design prior
    n, k = 20, 400_000
    rng = np.random.default_rng(23)
    delta = rng.normal(M0, S0, k)
    tau = SD * math.sqrt(2 / n)
    d = rng.normal(delta, tau)
    adopt = (a0 / sa**2 + d / tau**2) < 0
    gain = np.where(adopt, -delta, 0.0) - max(-M0, 0.0)
    est = float(bayes_n.evsi(n, M0, S0, SD, a0, sa, -1.0))
    assert abs(est - gain.mean()) < 4 * gain.std() / math.sqrt(k)


def _kf_study(tmp_path, **design) -> Study:
    # a quantity endpoint (Kf on the log scale); numbers invented for the test
    doc = {"study": {"title": "Kf endpoint, Bayesian sample size (invented)", "tissue": "skeletal_muscle",
                     "model": "classic", "seed": 11},
           "parameters": {"Kf": {"dist": "lognormal", "median": 0.004, "gsd": 1.3, "unit": "mL/min/mmHg/100g",
                                 "between_subject": {"cv": 0.38}},
                          "Pc": 20.0, "Pi": -1.0, "pi_c": 25.0, "pi_i": 10.0, "sigma": 0.9},
           "design": {"endpoint": "Kf", "effect": {"parameter": "Kf", "multiply": 0.75}, "measurement": {"cv": 0.2},
                      "n_range": [10, 100], "n_points": 3, "simulations": 100, "dropout": 0.1,
                      "design_prior": {"dist": "normal", "mean": M0, "sd": S0}, **design}}
    return Study.from_dict(doc, base_dir=tmp_path)


@pytest.fixture(scope="module")
def result(tmp_path_factory) -> dict:
    return dz.design(_kf_study(tmp_path_factory.mktemp("bayes"), bayes_width=0.2, bayes_success=0.8)).to_dict()


def test_design_json_carries_the_bayesian_sample_size(result: dict) -> None:
    b = result["bayesian_sample_size"]
    sd = result["sd_analysis_scale"]
    assert b["analysis_prior"] == {"mean": M0, "sd": S0} and b["analysis_prior_source"] == "the design prior"
    n_w = b["n_per_arm_width_completing"]
    assert n_w == math.ceil(2 * sd**2 * ((2 * Z / 0.2) ** 2 - 1 / S0**2))
    assert b["n_per_arm_width_enrolled"] == math.ceil(n_w / 0.9 - 1e-9)
    assert b["n_per_arm_success_completing"] == bayes_n.n_for_success(0.8, M0, S0, sd, M0, S0, -1.0)
    assert b["at_n_power"]["n_per_arm_completing"] == result["n_per_arm_completing"]
    assert b["at_n_width"]["width"] <= 0.2
    md = protocol_markdown(result)
    assert "### Bayesian sample size" in md and f"{b['n_per_arm_width_enrolled']} enrolled" in md


def test_report_shows_the_protocol_page_with_the_json_n(result: dict, tmp_path) -> None:
    html = report.render({"study": {"title": "t"}, "sections": {"design": {"status": "ok", "result": result}}},
                         tmp_path)
    block = html[html.index('id="design-protocol"'):]
    assert "<h3>Sample size</h3>" in block and "<h4>Bayesian sample size</h4>" in block
    n_c, n_e = result["n_per_arm_completing"], result["n_per_arm_enrolled"]
    assert re.search(rf"With {n_c} completing per arm \({n_e} enrolled per arm", block)
    assert "<th>assumption</th>" in block and "|---" not in block
    assert section_html(result).count('id="design-protocol"') == 1


def test_markdown_html_renders_tables_lists_and_escapes() -> None:
    out = markdown_html("## T\n\na < b\n\n| x | y |\n|---|---|\n| 1 | 2 |\n- note: z\n")
    assert out == ("<h3>T</h3><p>a &lt; b</p><div class=\"table-wrap\"><table><thead><tr><th>x</th><th>y</th>"
                   "</tr></thead><tbody><tr><td>1</td><td>2</td></tr></tbody></table></div><ul><li>note: z</li></ul>")


def test_bad_bayes_keys_name_the_key(tmp_path) -> None:
    with pytest.raises(InputError) as err:
        _kf_study(tmp_path, bayes_success=1.5)
    assert "bayes_success" in str(err.value.key)
    with pytest.raises(InputError) as err:
        _kf_study(tmp_path, bayes_width=-0.1)
    assert "bayes_width" in str(err.value.key)
    st = _kf_study(tmp_path, bayes_width=0.2, endpoint="Jv")  # the prior is over the effect on Kf, not on Jv
    with pytest.raises(InputError) as err:
        dz.parse_design(st)
    assert err.value.key == "design.bayes_width"
