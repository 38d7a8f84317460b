"""Sensitivity of the posterior: given-data first-order indices of Jv on posterior draws, beside the same
indices on prior draws, against the closed form of a linear-Gaussian model; and the block in the
inference document, terminal table and report (posterior draws written here with numpy, no sampling).

Closed form: for jointly Gaussian X with covariance C and Y = a^T X, E[Y | X_i] is linear in X_i, so
Var(E[Y | X_i]) = Cov(Y, X_i)^2 / Var(X_i) = (C a)_i^2 / C_ii and S_i = (C a)_i^2 / (C_ii a^T C a)
(Gaussian conditioning, from memory); with independent inputs this is a_i^2 sigma_i^2 / sum_j a_j^2
sigma_j^2 (Saltelli et al. 2008, Global Sensitivity Analysis: The Primer, Wiley, ch. 1, linear models;
from memory). The posterior covariance of a Gaussian prior N(m0, C0) updated by y = H x + e,
e ~ N(0, R), is (C0^-1 + H^T R^-1 H)^-1 (conjugate normal update, from memory).
"""

from __future__ import annotations

import json
from types import SimpleNamespace

import numpy as np
import pytest

from uncertainty.analyses.given_data import first_order_given_data, given_data_indices
from uncertainty.analyses.inference.posterior_sensitivity import html, posterior_sensitivity, text

NAMES = ["Pc", "Pi", "pi_i"]
A = np.array([1.0, -1.0, 0.9])                 # Jv / Kf = Pc - Pi - sigma (pi_c - pi_i), sigma 0.9 (invented)
PRIOR_SD = np.array([3.0, 2.0, 1.5])            # invented prior sds, mmHg
H = np.array([[1.0, -1.0, 0.0]])                # one reading of Pc - Pi (invented), the data identify the sum
READING_SD = 1.0                                # invented, mmHg


def _covariances() -> tuple[np.ndarray, np.ndarray]:
    c0 = np.diag(PRIOR_SD**2)
    c = np.linalg.inv(np.linalg.inv(c0) + H.T @ H / READING_SD**2)
    return c0, c


def _closed_form(c: np.ndarray, a: np.ndarray = A) -> np.ndarray:
    return (c @ a) ** 2 / (np.diag(c) * (a @ c @ a))


def test_linear_gaussian_posterior_and_prior_indices_match_the_closed_form() -> None:
    c0, c = _covariances()
    rng = np.random.default_rng(7)
    xp = rng.multivariate_normal(np.zeros(3), c0, 8000)
    xq = rng.multivariate_normal(np.zeros(3), c, 4000)
    doc = posterior_sensitivity(dict(zip(NAMES, xq.T, strict=True)), xq @ A, level="typical subject",
                                prior=dict(zip(NAMES, xp.T, strict=True)), prior_jv=xp @ A)
    block = doc["Jv"]
    for key, cov in (("posterior", c), ("prior", c0)):
        truth = dict(zip(NAMES, _closed_form(cov), strict=True))
        for q, v in block[key].items():
            # 4 standard errors, plus 0.01 for the binning's own bias (common practice for a tolerance)
            assert abs(v["S1"] - truth[q]) < 4 * v["se"] + 0.01, (key, q, v, truth[q])
    # the data identify Pc - Pi: what drives Jv afterwards is pi_i, which led nothing before
    assert block["ranking"][0] == "pi_i" and list(block["prior"])[0] == "Pc"
    assert block["posterior"]["pi_i"]["S1"] > 0.6 and block["prior"]["pi_i"]["S1"] < 0.2
    assert block["se_factor"] == 1.0 and block["draws"] == 4000


def test_indices_are_the_shared_estimator_and_ess_widens_the_errors() -> None:
    rng = np.random.default_rng(3)
    x = rng.standard_normal((2000, 2))
    y = x @ np.array([2.0, 1.0])               # closed form 4/5 and 1/5 (independent, Primer's linear model)
    plain = given_data_indices({"a": x[:, 0], "b": x[:, 1], "fixed": np.full(2000, 3.0)}, y)
    assert list(plain) == ["a", "b"]          # ranked; a quantity that does not vary is left out
    s1, se = first_order_given_data(x[:, 0], y)
    assert plain["a"] == {"S1": s1, "se": se}
    assert plain["a"]["S1"] == pytest.approx(0.8, abs=4 * se + 0.01)
    doc = posterior_sensitivity({"a": x[:, 0], "b": x[:, 1]}, y, level="the study's individual", ess=500.0)
    assert doc["Jv"]["se_factor"] == pytest.approx(2.0)   # sqrt(2000 / 500)
    assert doc["Jv"]["posterior"]["a"]["se"] == pytest.approx(2.0 * se)
    assert any("sqrt(n / ESS)" in n for n in doc["notes"])


def test_a_pure_interaction_leaves_no_first_order_share_and_says_so() -> None:
    # Y = X1 X2, independent zero-mean inputs: E[Y | X1] = X1 E[X2] = 0, so S1 = 0 for both (closed form)
    rng = np.random.default_rng(2)
    x = rng.standard_normal((3000, 2))
    doc = posterior_sensitivity({"a": x[:, 0], "b": x[:, 1]}, x[:, 0] * x[:, 1], level="typical subject")
    for v in doc["Jv"]["posterior"].values():
        assert abs(v["S1"]) < 4 * v["se"] + 0.01, v
    assert any("combinations of quantities" in n for n in doc["notes"])


def test_table_and_report_show_prior_beside_posterior() -> None:
    rng = np.random.default_rng(5)
    x = rng.standard_normal((500, 2))
    y = x @ np.array([2.0, 1.0])
    block = posterior_sensitivity({"Kf": x[:, 0], "Pc": x[:, 1]}, y, level="typical subject",
                                  prior={"Kf": x[:, 1], "Pc": x[:, 0]}, prior_jv=y,
                                  new_post={"Kf": x[:, 0], "Pc": x[:, 1]}, new_jv=y)
    out = text({"posterior_sensitivity": block})
    lines = out.splitlines()
    assert "typical subject" in lines[0] and "prior" in lines[1] and "new subj. post." in lines[1]
    assert lines[3].startswith("Kf") and lines[4].startswith("Pc")   # ranked by the posterior index
    assert "What still drives Jv after the data" in html({"posterior_sensitivity": block})
    assert text({}) == "" and html({"posterior_sensitivity": "x"}) == ""


def _summarised(monkeypatch: pytest.MonkeyPatch, hierarchical: bool) -> tuple[dict, np.ndarray, object]:
    """summarise_run on posterior draws written here: two uncertain pressures, Pc - Pi read once (sd 1),
    Pc with a between-subject sd of 2 mmHg in the hierarchical case (all invented). The chain
    diagnostics are stubbed (tested elsewhere) so that no MCMC library is loaded."""
    import xarray as xr
    from inference_helpers import normal, problem

    from uncertainty.analyses.inference import api
    from uncertainty.analyses.inference.diagnostics import Gate

    ess = 500.0  # stubbed bulk ESS of Jv, of 2000 draws: the posterior errors double
    monkeypatch.setattr(api, "diagnose", lambda idata, names, gate: {
        "passed": True, "failing": [], "per_quantity": {n: {"r_hat": 1.0, "ess_bulk": ess, "ess_tail": ess}
                                                        for n in names}})
    monkeypatch.setattr(api, "summary_mcse", lambda draws: {"ess_bulk": ess, "ess_tail": ess})
    pc = normal("Pc", 20.0, 3.0, between_subject={"sd": 2.0}) if hierarchical else normal("Pc", 20.0, 3.0)
    pr = problem({"Pc": pc, "Pi": normal("Pi", -1.0, 2.0)}, [])
    c0 = np.diag([9.0, 4.0])
    h = np.array([[1.0, -1.0]])
    c = np.linalg.inv(np.linalg.inv(c0) + h.T @ h)
    rng = np.random.default_rng(11)
    z = rng.multivariate_normal([21.0, -1.5], c, (4, 500))
    kf, sigma, dpi = 0.004, 0.9, 25.0 - 8.0  # FIXED of tests/inference_helpers.py (invented)
    jv = kf * (z[..., 0] - z[..., 1] - sigma * dpi)
    cd, cds = ("chain", "draw"), ("chain", "draw", "subject")
    post = xr.Dataset({"Pc": (cd, z[..., 0]), "Pi": (cd, z[..., 1]), "Pc__subject": (cds, z[..., :1]),
                       "Pi__subject": (cds, z[..., 1:]), "Jv__subject": (cds, jv[..., None]),
                       "Jv__typical": (cd, jv)})
    built = SimpleNamespace(problem=pr, quantities=["Pc", "Pi"], spreads={"Pc": ("sd", 2.0)} if hierarchical
                            else {}, extra_params=[], extra_priors={}, hierarchical=hierarchical, subjects=["s1"],
                            subject_group={}, context=None, notes=[], groups=[])
    run = SimpleNamespace(idata=SimpleNamespace(posterior=post), sampler="numpy draws", compile_seconds=0.0,
                          sample_seconds=0.0)
    assert "posterior_sensitivity" not in api.summarise_run(built, run, Gate.coerce(None), seed=1).doc
    return api.summarise_run(built, run, Gate.coerce(None), seed=1, sensitivity=True), c, api


def test_inference_document_carries_the_block(monkeypatch: pytest.MonkeyPatch) -> None:
    from uncertainty.analyses.inference.result import InferenceResult

    res, c, _ = _summarised(monkeypatch, hierarchical=False)
    block = res.doc["posterior_sensitivity"]
    assert block["Jv"]["level"] == "the study's individual" and set(block["Jv"]["posterior"]) == {"Pc", "Pi"}
    assert block["Jv"]["se_factor"] == pytest.approx(2.0)   # sqrt(2000 / 500)
    # Jv = Kf (Pc - Pi) + const: posterior S_i = (C a)_i^2 / (C_ii a^T C a) with a = (1, -1)
    truth = dict(zip(["Pc", "Pi"], _closed_form(c, np.array([1.0, -1.0])), strict=True))
    for q, v in block["Jv"]["posterior"].items():
        assert abs(v["S1"] - truth[q]) < 4 * v["se"] + 0.01, (q, v, truth[q])
    # prior: independent, S_i = sd_i^2 / (9 + 4) (the Primer's linear model)
    for q, v in block["Jv"]["prior"].items():
        assert abs(v["S1"] - {"Pc": 9 / 13, "Pi": 4 / 13}[q]) < 4 * v["se"] + 0.01, (q, v)
    assert set(block["new_subject"]["posterior"]) == {"Pc", "Pi"}
    doc = json.loads(json.dumps(res.to_dict()))
    assert doc["posterior_sensitivity"]["Jv"]["ranking"] == block["Jv"]["ranking"]
    assert "what still drives Jv after the data" in InferenceResult.table(res)


def test_new_subject_adds_the_between_subject_layer(monkeypatch: pytest.MonkeyPatch) -> None:
    res, c, _ = _summarised(monkeypatch, hierarchical=True)
    block = res.doc["posterior_sensitivity"]
    assert block["Jv"]["level"] == "typical subject"
    a = np.array([1.0, -1.0])
    layer = np.diag([4.0, 0.0])  # a new subject's Pc = typical + N(0, 2^2), independent of the rest
    cases = (("Jv", "prior", np.diag([9.0, 4.0])), ("Jv", "posterior", c),
             ("new_subject", "prior", np.diag([9.0, 4.0]) + layer), ("new_subject", "posterior", c + layer))
    for entry, key, cov in cases:
        truth = dict(zip(["Pc", "Pi"], _closed_form(cov, a), strict=True))
        for q, v in block[entry][key].items():
            assert abs(v["S1"] - truth[q]) < 4 * v["se"] + 0.01, (entry, key, q, v, truth[q])
