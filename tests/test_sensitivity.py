"""Sensitivity: Sobol' against closed forms, scipy and Ishigami; Morris; Shapley against the
linear-Gaussian closed form; the given-data index; refusal with correlated inputs; bad input."""

from __future__ import annotations

import itertools
import math
from pathlib import Path

import numpy as np
import pytest
from fakes_uncertainty import CLASSIC, SIGMA, classic_study, evaluate
from scipy import stats

from uncertainty.analyses.sensitivity import (
    Problem,
    _index_warnings,
    first_order_given_data,
    morris_core,
    morris_levels_inside,
    morris_trajectories,
    problem_from_functions,
    sensitivity,
    shapley_core,
    sobol_core,
)
from uncertainty.core.errors import InputError
from uncertainty.forms.general import SAFETY_INPUTS
from uncertainty.study import Study


def product_indices():
    """Closed-form Sobol' indices of Y = K D, D = Pc - Pi - sigma (pi_c - pi_i) (sigma fixed), all
    inputs independent, derived here:
      V = (VK + mK^2)(VD + mD^2) - mK^2 mD^2
      first order: V_K = mD^2 VK; V_Xi = mK^2 c_i^2 V_i for the linear terms (c = 1, -1, -s, s)
      total:  T_K = E[D^2] VK = (VD + mD^2) VK; T_Xi = E[K^2] c_i^2 V_i = (VK + mK^2) c_i^2 V_i
    (Var(E[Y|K]) = Var(K mD); E[Var(Y|X_-K)] = VK E[D^2]; E[Var(Y|X_-i)] = E[K^2] c_i^2 V_i.)"""
    mK, sK = CLASSIC["Kf"]
    lin = {"Pc": 1.0, "Pi": -1.0, "pi_c": -SIGMA, "pi_i": SIGMA}
    mD = sum(c * CLASSIC[k][0] for k, c in lin.items())
    VD = sum(c**2 * CLASSIC[k][1] ** 2 for k, c in lin.items())
    VK = sK**2
    V = (VK + mK**2) * (VD + mD**2) - mK**2 * mD**2
    S1 = {"Kf": mD**2 * VK / V} | {k: mK**2 * c**2 * CLASSIC[k][1] ** 2 / V for k, c in lin.items()}
    ST = {"Kf": (VD + mD**2) * VK / V} | {k: (VK + mK**2) * c**2 * CLASSIC[k][1] ** 2 / V
                                           for k, c in lin.items()}
    return S1, ST


def _within(est, ci, truth, slack=0.01):
    lo, hi = ci
    return lo - slack <= truth <= hi + slack, (est, ci, truth)


def test_sobol_product_form_matches_closed_form():
    S1, ST = product_indices()
    r = sensitivity(classic_study(), method="sobol", samples=8192, layer="typical", seed=4,
                    evaluate=evaluate)
    for p in S1:
        ok, info = _within(r.indices[p]["S1"], r.indices[p]["S1_ci"], S1[p])
        assert ok, (p, "S1", info)
        ok, info = _within(r.indices[p]["ST"], r.indices[p]["ST_ci"], ST[p])
        assert ok, (p, "ST", info)
    assert r.ranking[0] == max(ST, key=ST.get)
    assert r.to_dict()["ranking"] == r.ranking


def test_sobol_agrees_with_scipy_sobol_indices():
    # scipy.stats.sobol_indices (Saltelli 2010 / Jansen estimators) on the same function and marginals.
    names = ["Kf", "Pc", "Pi", "pi_c", "pi_i"]
    dists = [stats.norm(*CLASSIC[k]) for k in names]

    def jv(**v):
        return v["Kf"] * (v["Pc"] - v["Pi"] - SIGMA * (v["pi_c"] - v["pi_i"]))

    prob = problem_from_functions(names, [d.ppf for d in dists], jv)
    ours = sobol_core(prob, 8192, seed=2)

    def f(x):  # scipy passes (d, n)
        return jv(**{k: x[i] for i, k in enumerate(names)})

    # scipy's error from 8 independent runs (its own bootstrap is slow): mean and se of the mean
    runs = [stats.sobol_indices(func=f, n=2**12, dists=dists, rng=np.random.default_rng(100 + k))
            for k in range(8)]
    for key, attr in (("S1", "first_order"), ("ST", "total_order")):
        vals = np.array([getattr(run, attr) for run in runs])
        theirs, se_theirs = vals.mean(axis=0), vals.std(axis=0, ddof=1) / math.sqrt(len(runs))
        for i, p in enumerate(names):
            se_ours = ours.indices[p][f"{key}_se"]
            assert abs(ours.indices[p][key] - theirs[i]) < 4 * math.hypot(se_ours, se_theirs[i]) + 0.005, \
                (p, key, ours.indices[p][key], theirs[i])


def ishigami(x1, x2, x3, a=7.0, b=0.1):
    return np.sin(x1) + a * np.sin(x2) ** 2 + b * x3**4 * np.sin(x1)


def ishigami_indices(a=7.0, b=0.1):
    """Closed forms (Ishigami & Homma 1990; tabulated e.g. in Saltelli et al. 2008, Global Sensitivity
    Analysis: The Primer, Wiley; from memory): V1 = 1/2 (1 + b pi^4/5)^2, V2 = a^2/8,
    V13 = b^2 pi^8 (1/18 - 1/50), V = V1 + V2 + V13."""
    pi = math.pi
    V1 = 0.5 * (1 + b * pi**4 / 5) ** 2
    V2 = a**2 / 8
    V13 = b**2 * pi**8 * (1 / 18 - 1 / 50)
    V = V1 + V2 + V13
    return {"x1": V1 / V, "x2": V2 / V, "x3": 0.0}, {"x1": (V1 + V13) / V, "x2": V2 / V, "x3": V13 / V}


def _ishigami_problem():
    u = stats.uniform(-math.pi, 2 * math.pi).ppf
    return problem_from_functions(["x1", "x2", "x3"], [u, u, u], ishigami)


def test_ishigami_through_the_pipeline():
    S1, ST = ishigami_indices()
    # published tabulated values a=7, b=0.1: S1 = 0.3139, 0.4424, 0; ST = 0.5576, 0.4424, 0.2437
    assert S1["x1"] == pytest.approx(0.3139, abs=1e-4) and ST["x3"] == pytest.approx(0.2437, abs=1e-4)
    r = sobol_core(_ishigami_problem(), 8192, seed=11, second_order=True)
    for p in S1:
        assert _within(r.indices[p]["S1"], r.indices[p]["S1_ci"], S1[p])[0], p
        assert _within(r.indices[p]["ST"], r.indices[p]["ST_ci"], ST[p])[0], p
    # the only interaction is x1:x3 (closed form V13 / V)
    assert r.second_order["x1:x3"]["S2"] == pytest.approx(ST["x3"], abs=0.05)
    assert abs(r.second_order["x1:x2"]["S2"]) < 0.05
    # convergence table: doubling sample sizes, the last row the full sample
    sizes = [row["samples"] for row in r.convergence]
    assert sizes == sorted(sizes) and sizes[-1] == r.samples
    assert all(b == 2 * a for a, b in itertools.pairwise(sizes))


def test_replicate_intervals_are_honest():
    # Across independent runs the t-interval of ST(x1) covers the closed form most of the time.
    _, ST = ishigami_indices()
    cover = [sobol_core(_ishigami_problem(), 2048, seed=s, convergence=False) for s in range(10)]
    hits = sum(r.indices["x1"]["ST_ci"][0] <= ST["x1"] <= r.indices["x1"]["ST_ci"][1] for r in cover)
    assert hits >= 7


def test_sobol_and_morris_refuse_correlated_inputs_and_default_is_shapley():
    s = classic_study(between=False, pairs=[("Pc", "Pi", 0.4)])
    for method in ("sobol", "morris"):
        with pytest.raises(InputError, match="shapley"):
            sensitivity(s, method=method, samples=256, evaluate=evaluate)
    r = sensitivity(s, samples=512, evaluate=evaluate)
    assert r.method == "shapley" and any("Shapley" in n for n in r.notes)


def linear_gaussian_shapley(beta, cov):
    """Shapley effects of Y = beta' X, X ~ N(0, cov), from the exact cost
    c(J) = E[Var(Y | X_-J)] = beta_J' (S_JJ - S_J,-J S_-J,-J^-1 S_-J,J) beta_J (Gaussian conditioning,
    closed form) and the Shapley weights |J|!(d-|J|-1)!/d!."""
    d = len(beta)
    V = beta @ cov @ beta

    def c(J):
        J = list(J)
        if not J:
            return 0.0
        K = [k for k in range(d) if k not in J]
        S = cov[np.ix_(J, J)]
        if K:
            S = S - cov[np.ix_(J, K)] @ np.linalg.solve(cov[np.ix_(K, K)], cov[np.ix_(K, J)])
        return float(beta[J] @ S @ beta[J])

    sh = np.zeros(d)
    for i in range(d):
        others = [j for j in range(d) if j != i]
        for s in range(d):
            for J in itertools.combinations(others, s):
                sh[i] += math.factorial(s) * math.factorial(d - s - 1) / math.factorial(d) * (c(J + (i,)) - c(J))
    return sh / V


def test_shapley_linear_gaussian_closed_form():
    beta = np.array([1.0, 1.0, 2.0])
    rho = 0.5
    cov = np.array([[1, 0, 0], [0, 1, rho], [0, rho, 1.0]])
    # Iooss & Prieur (2019, Int J Uncertainty Quantification 9:493-514), three-input linear model
    # with X2, X3 correlated (from memory): Sh1 = b1^2/V, Sh2 = (b2^2(1 - rho^2/2) + rho b2 b3
    # + b3^2 rho^2/2)/V, V = b1^2 + b2^2 + b3^2 + 2 rho b2 b3
    V = 1 + 1 + 4 + 2 * rho * 2
    published = np.array([1 / V, (1 * (1 - rho**2 / 2) + rho * 2 + 4 * rho**2 / 2) / V,
                          (4 * (1 - rho**2 / 2) + rho * 2 + 1 * rho**2 / 2) / V])
    exact = linear_gaussian_shapley(beta, cov)
    assert np.allclose(published, exact, atol=1e-12)
    prob = Problem(players=["a", "b", "c"], groups=[0, 1, 2], corr=cov, model=lambda z: z @ beta)
    r = shapley_core(prob, 8192, seed=3)
    sh = np.array([r.indices[p]["Sh"] for p in "abc"])
    se = np.array([r.indices[p]["Sh_se"] for p in "abc"])
    assert np.all(np.abs(sh - exact) < 4 * se + 0.01), (sh, exact, se)
    assert sh.sum() == pytest.approx(1.0, abs=0.03)  # efficiency
    # full first-order index of input a (independent of the others): beta_a^2 / V (closed form)
    assert r.indices["a"]["S1"] == pytest.approx(1 / V, abs=0.03)
    assert r.ranking == ["c", "b", "a"]
    # convergence table: the first 4, 8, 16 replicates (doubling), the last row the full estimate
    sizes = [row["samples"] for row in r.convergence]
    assert sizes == [r.samples // 4, r.samples // 2, r.samples]
    assert r.convergence[-1]["indices"]["c"]["Sh"] == pytest.approx(r.indices["c"]["Sh"], rel=1e-12)
    widths = [np.diff(row["indices"]["c"]["Sh_ci"])[0] for row in r.convergence]
    assert widths[-1] < widths[0]  # t-intervals narrow with more replicates


def test_shapley_equals_sobol_split_for_independent_product():
    # With independent inputs Shapley effects lie between S1 and ST (Owen 2014, SIAM/ASA JUQ 2:245-251).
    S1, ST = product_indices()
    r = sensitivity(classic_study(), method="shapley", samples=4096, layer="typical", seed=5,
                    evaluate=evaluate)
    for p in S1:
        assert S1[p] - 0.02 <= r.indices[p]["Sh"] <= ST[p] + 0.02, p


def test_morris_levels_inside_and_linear_effects():
    u = np.array([0.0, 1 / 3, 2 / 3, 1.0])
    inside = morris_levels_inside(u, 4)
    assert np.allclose(inside, [0.125, 0.375, 0.625, 0.875])
    # y = sum c_i u_i on the unit cube: every elementary effect equals c_i exactly (closed form)
    c = np.array([3.0, -1.0, 0.5])
    prob2 = Problem(players=["a", "b", "c"], groups=[0, 1, 2], corr=np.eye(3),
                    model=lambda z: stats.norm.cdf(z) @ c)
    r = morris_core(prob2, 20, seed=1)
    for p, ci in zip("abc", c, strict=True):
        assert r.indices[p]["mu_star"] == pytest.approx(abs(ci), rel=1e-6)
        assert r.indices[p]["mu"] == pytest.approx(ci, rel=1e-6)
        assert r.indices[p]["sigma"] == pytest.approx(0.0, abs=1e-6)
    assert r.ranking == ["a", "b", "c"]
    # convergence table over the first 5, 10, 20 trajectories; a linear model gives c_i at every size
    assert [row["samples"] for row in r.convergence] == [5, 10, 20]
    assert all(row["indices"]["a"]["mu_star"] == pytest.approx(3.0, rel=1e-6) for row in r.convergence)


def test_morris_moves_a_players_columns_together():
    # a quantity with a typical and a between-subject column (player "a"): y = u0 + u1 + 0.5 u2 on the cube,
    # so moving a's two columns together by the same signed step gives the elementary effect 2 exactly
    # (closed form); SALib's grouped sampler moved them in opposite directions a quarter of the time,
    # which left sigma undefined and mu below mu* for a monotone input.
    prob = Problem(players=["a", "b"], groups=[0, 0, 1], corr=np.eye(3),
                   model=lambda z: stats.norm.cdf(z) @ np.array([1.0, 1.0, 0.5]))
    r = morris_core(prob, 40, seed=2)
    assert r.indices["a"]["mu"] == pytest.approx(2.0, rel=1e-6)
    assert r.indices["a"]["mu_star"] == pytest.approx(2.0, rel=1e-6)
    assert r.indices["a"]["sigma"] == pytest.approx(0.0, abs=1e-6)
    assert r.indices["b"]["mu"] == pytest.approx(0.5, rel=1e-6)
    X = morris_trajectories(prob, 400, 4, seed=5)
    steps = np.diff(X.reshape(400, 3, 3), axis=1)
    assert np.all(np.sign(steps[:, :, 0]) == np.sign(steps[:, :, 1]))  # the two columns move together
    levels, counts = np.unique(np.round(X[:, 1] * 3), return_counts=True)
    assert list(levels) == [0, 1, 2, 3] and counts.min() > 0.15 * counts.sum()  # every level used, near 1/4 each


def test_morris_on_a_prior_set_reports_sigma_for_every_input():
    # the myocardium set has no correlations and seven quantities with a between-subject spread
    s = Study.from_dict({"study": {"tissue": "myocardium", "model": "classic"}})
    r = sensitivity(s, method="morris", samples=16, output="Jv", layer="individual")
    assert all(v["sigma"] is not None and np.isfinite(v["sigma"]) for v in r.indices.values())
    assert all(v["mu_star"] >= abs(v["mu"]) - 1e-12 for v in r.indices.values())


def test_given_data_index_matches_closed_forms():
    rng = np.random.default_rng(1)
    x = rng.uniform(-math.pi, math.pi, (20000, 3))
    y = ishigami(*x.T)
    S1, _ = ishigami_indices()
    for j, p in enumerate(["x1", "x2", "x3"]):
        s1, se = first_order_given_data(x[:, j], y)
        assert abs(s1 - S1[p]) < 4 * se + 0.01, (p, s1, se)
    # linear Gaussian, independent: S1_i = b_i^2 / sum b^2 (closed form)
    z = rng.standard_normal((10000, 2))
    s1, se = first_order_given_data(z[:, 0], 2 * z[:, 0] + z[:, 1])
    assert abs(s1 - 0.8) < 4 * se and se < 0.02
    with pytest.raises(InputError):
        first_order_given_data(z[:5, 0], z[:5, 1])


def test_warnings_and_ranking_flags():
    ix = {"a": {"ST": 0.1, "ST_ci": [-0.2, 0.4]}, "b": {"ST": -0.2, "ST_ci": [-0.3, -0.1]},
          "c": {"ST": 0.5, "ST_ci": [0.45, 0.55]}, "d": {"ST": 0.001, "ST_ci": [-0.004, 0.006]}}
    w = _index_warnings(ix, ["ST"])
    assert any("ST of a" in m and "wider" in m for m in w)
    assert any("ST of b" in m and "negative" in m for m in w)
    assert not any(" of c" in m or " of d" in m for m in w)


def test_sobol_nan_runs_are_dropped_and_counted():
    prob = _ishigami_problem()
    base = prob.model
    prob.model = lambda z: np.where(z[:, 0] > 2.0, np.nan, base(z))
    r = sobol_core(prob, 1024, seed=1)
    assert r.nan_draws > 0 and any("non-finite" in w for w in r.warnings)
    assert all(np.isfinite(r.indices[p]["ST"]) for p in r.players)


def test_bad_input_and_rounding():
    s = classic_study()
    with pytest.raises(InputError, match="no such output"):
        sensitivity(s, output="Jw", evaluate=evaluate)
    with pytest.raises(InputError):
        sensitivity(s, method="sobol", samples=0, evaluate=evaluate)
    with pytest.raises(InputError):
        sensitivity(s, method="fast", evaluate=evaluate)
    r = sensitivity(s, method="sobol", samples=1000, evaluate=evaluate)
    assert r.samples == 1024 and any("power of two" in n for n in r.notes)
    # individual layer: Kf and Pc carry between-subject columns, grouped with their typical column
    assert r.players == s.names and r.layer == "individual"


def test_result_tables_and_figures(tmp_path):
    r = sensitivity(classic_study(), method="sobol", samples=512, evaluate=evaluate)
    d = r.to_dict()
    assert set(d) >= {"method", "output", "indices", "ranking"}
    assert set(d["indices"]["Pc"]) >= {"S1", "S1_ci", "ST", "ST_ci"}
    assert list(r.to_dataframe().index) == r.ranking
    paths = r.plot(str(tmp_path))
    assert sum(p.endswith(".png") for p in paths) == 2 and sum(p.endswith(".svg") for p in paths) == 2
    # Shapley: bars and the convergence figure too
    sh = sensitivity(classic_study(), method="shapley", samples=512, evaluate=evaluate)
    assert any(p.endswith("_convergence.png") for p in sh.plot(str(tmp_path / "sh")))


def test_shapley_chain_estimator_closed_form_six_correlated_inputs():
    # six inputs in three correlated pairs (invented test values), linear model: exact effects from the
    # Gaussian conditional costs (linear_gaussian_shapley above)
    beta = np.array([1.0, 1.0, 2.0, 0.5, 1.5, 0.3])
    cov = np.eye(6)
    for i, j, rho in ((1, 2, 0.5), (3, 4, -0.6), (0, 5, 0.8)):
        cov[i, j] = cov[j, i] = rho
    exact = linear_gaussian_shapley(beta, cov)
    prob = Problem(players=list("abcdef"), groups=list(range(6)), corr=cov, model=lambda z: z @ beta)
    r = shapley_core(prob, 16384, seed=8)
    sh = np.array([r.indices[p]["Sh"] for p in "abcdef"])
    se = np.array([r.indices[p]["Sh_se"] for p in "abcdef"])
    assert np.all(np.abs(sh - exact) < 4 * se + 0.005), (sh, exact, se)
    assert sh.sum() == pytest.approx(1.0, abs=1e-9)  # efficiency holds in every order (telescoping)
    assert r.evaluations == 16384 * 7  # d + 1 runs per order
    assert "coupled chain" in r.notes[-1]
    # full first-order and total indices: Var(E[Y|X_i]) = (cov beta)_i^2 and E[Var(Y|X_-i)] =
    # beta_i^2 / (cov^-1)_ii for a Gaussian linear model (closed form)
    V = beta @ cov @ beta
    S1 = (cov @ beta) ** 2 / V
    ST = beta**2 / np.diag(np.linalg.inv(cov)) / V
    for key, want in (("S1", S1), ("ST", ST)):
        got = np.array([r.indices[p][key] for p in "abcdef"])
        err = np.array([r.indices[p][f"{key}_se"] for p in "abcdef"])
        assert np.all(np.abs(got - want) < 4 * err + 0.005), (key, got, want, err)


def test_shapley_ishigami_shares_the_interaction_equally():
    # independent inputs: Sh_i = S_i + half of each pairwise interaction it takes part in (Owen 2014,
    # SIAM/ASA JUQ 2:245-251). Ishigami (a = 7, b = 0.1) partial variances in closed form (Ishigami &
    # Homma 1990; also SALib's test function): V1 = (1 + b pi^4 / 5)^2 / 2, V2 = a^2 / 8,
    # V13 = 8 b^2 pi^8 / 225, V = V1 + V2 + V13.
    from SALib.test_functions import Ishigami
    from scipy import stats

    a, b = 7.0, 0.1
    V1, V2, V13 = (1 + b * np.pi**4 / 5) ** 2 / 2, a**2 / 8, 8 * b**2 * np.pi**8 / 225
    V = V1 + V2 + V13
    want = np.array([V1 + V13 / 2, V2, V13 / 2]) / V

    def model(z):
        return Ishigami.evaluate(-np.pi + 2 * np.pi * stats.norm.cdf(z))

    prob = Problem(players=["x1", "x2", "x3"], groups=[0, 1, 2], corr=np.eye(3), model=model)
    r = shapley_core(prob, 32768, seed=2)
    sh = np.array([r.indices[p]["Sh"] for p in ("x1", "x2", "x3")])
    se = np.array([r.indices[p]["Sh_se"] for p in ("x1", "x2", "x3")])
    assert np.all(np.abs(sh - want) < 4 * se + 0.005), (sh, want, se)


def _steady(tissue="skeletal_muscle"):
    from uncertainty.study import Study

    # PS restated so that the prior set's Kf-PS correlation is dropped: independent inputs for Sobol'
    # (PS lognormal median 0.002 mL/min/100g, gsd 1.6: invented for this test)
    return Study.from_dict({"study": {"title": "steady-state check (invented)", "tissue": tissue,
                                      "model": "steady_state", "seed": 5},
                            "parameters": {"PS": {"dist": "lognormal", "median": 0.002, "gsd": 1.6,
                                                  "unit": "mL/min/100g"}}})


def test_steady_state_sobol_ranks_only_causes():
    s = _steady()
    for k in SAFETY_INPUTS:  # the linear lymph line, where C_tis is structurally absent from Jv
        s.priors.pop(k, None)
    r = sensitivity(s, method="sobol", samples=2048, layer="typical")
    # the solved quantities are consequences: never factors
    assert not {"Pi", "pi_i", "JL"} & set(r.players)
    # C_tis enters only the oedema volume, not Jv: its total index is zero (structural, exact)
    assert abs(r.indices["C_tis"]["ST"]) < 1e-9
    assert r.ranking[-1] == "C_tis" or r.indices[r.ranking[-1]]["ST"] < 1e-9
    top = r.ranking[0]
    assert r.indices[top]["ST_ci"][0] > 0.05


def test_sensitivity_json_from_a_study_and_other_outputs():
    s = _steady()
    r = sensitivity(s, method="morris", samples=16, output="oedema_volume", layer="typical")
    assert r.output == "oedema_volume" and r.indices["C_tis"]["mu_star"] > 0


def test_command_refuses_sobol_on_correlated_study_and_runs_shapley():
    import json

    from click.testing import CliRunner

    from uncertainty.app.cli import main

    demo = str(Path(__file__).resolve().parents[1] / "studies" / "demo.toml")
    runner = CliRunner()
    res = runner.invoke(main, ["sensitivity", demo, "--method", "sobol"])
    assert res.exit_code == 2 and "shapley" in res.stderr and len(res.stderr.strip().splitlines()) == 1
    res = runner.invoke(main, ["sensitivity", demo, "--samples", "512", "--json"])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    assert doc["method"] == "shapley" and set(doc["ranking"]) == set(doc["indices"])
    assert [row["samples"] for row in doc["convergence"]] == [128, 256, 512]  # 4, 8, 16 replicates of 32
    res = runner.invoke(main, ["sensitivity", demo, "--output", "nope"])
    assert res.exit_code == 2


def test_study_section_asks_for_second_order_indices() -> None:
    # [sensitivity] second_order = true reaches sobol_core; for Jv = Kf * net pressure (a product) the
    # interaction of Kf with the pressures is positive (closed form of a product of independent factors:
    # Var = E[Kf]^2 Var[net] + Var[Kf] E[net]^2 + Var[Kf] Var[net], the last term the interaction)
    from uncertainty.analyses.sensitivity import sensitivity
    from uncertainty.study import Study

    doc = {"study": {"tissue": "skeletal_muscle", "seed": 4},
           "parameters": {"Pc": {"dist": "normal", "mean": 20, "sd": 3, "unit": "mmHg"}, "Pi": -1.0,
                          "pi_c": 25.0, "pi_i": 10.0, "sigma": 0.9},
           "correlations": {"pairs": []},
           "sensitivity": {"method": "sobol", "samples": 2048, "second_order": True}}
    r = sensitivity(Study.from_dict(doc)).to_dict()
    # individual layer: Kf log-sd sqrt(ln(1.35)^2 + ln(1 + 0.38^2)) (priors/skeletal_muscle.toml), so
    # Var[Kf]/E[Kf]^2 = exp(s^2) - 1; net pressure Pc - 12.5 has mean 7.5, variance 9
    s2 = math.log(1.35) ** 2 + math.log1p(0.38**2)
    v = math.expm1(s2)
    expected = v * 9 / (9 + v * 7.5**2 + v * 9)
    lo, hi = r["second_order"]["Kf:Pc"]["S2_ci"]
    assert lo - 0.02 <= expected <= hi + 0.02, (expected, lo, hi)
