"""Sobol' indices to a requested precision (``tol``): the base sample doubles until the 95% half-width of
every S1 and ST is below the tolerance, or a cap stops it (exit 3, the result attached and flagged).

Check values: a linear function of independent normal inputs, Y = sum c_i X_i, has
S1_i = ST_i = c_i^2 Var(X_i) / sum_j c_j^2 Var(X_j) (Saltelli et al. 2008, Global Sensitivity Analysis:
The Primer, Wiley, ch. 1, the linear model; from memory); the Ishigami function's indices are in
tests/test_sensitivity.py (Ishigami and Homma 1990; from memory)."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from scipy import stats

from uncertainty.analyses.sensitivity import problem_from_functions, sensitivity, sobol_core, widest_half_width
from uncertainty.core.errors import InputError, QualityGateError
from uncertainty.study import Study

COEF = {"x1": 1.0, "x2": 2.0, "x3": 3.0}  # invented coefficients of the linear test function
TOL = 0.01  # the default tolerance for indices (absolute), as the command offers it


def _linear(counter: list[int] | None = None):
    def f(**v: np.ndarray) -> np.ndarray:
        if counter is not None:
            counter.append(v["x1"].size)
        return sum(COEF[k] * v[k] for k in COEF)

    return problem_from_functions(list(COEF), [stats.norm(0.0, 1.0).ppf] * 3, f)


def _linear_indices() -> dict[str, float]:
    """S1 = ST = c_i^2 / sum c_j^2 for unit-variance independent inputs (the Primer's linear model)."""
    total = sum(c**2 for c in COEF.values())
    return {k: c**2 / total for k, c in COEF.items()}


def _ishigami_problem():
    u = stats.uniform(-math.pi, 2 * math.pi).ppf

    def ishigami(x1, x2, x3, a=7.0, b=0.1):  # a, b: the usual test values (Ishigami and Homma 1990)
        return np.sin(x1) + a * np.sin(x2) ** 2 + b * x3**4 * np.sin(x1)

    return problem_from_functions(["x1", "x2", "x3"], [u, u, u], ishigami)


def test_doubles_until_every_half_width_is_below_tol_and_stops() -> None:
    truth = _linear_indices()
    calls: list[int] = []
    r = sobol_core(_linear(calls), 256, seed=3, tol=TOL)
    assert r.converged is True and r.tol == TOL
    sizes = [h["samples"] for h in r.history]
    assert sizes == [256 * 2**i for i in range(len(sizes))] and sizes[-1] == r.samples
    # the loop stops at the first size that meets the tolerance, not before and not after
    assert r.history[-1]["widest_half_width"] < TOL
    assert all(h["widest_half_width"] >= TOL for h in r.history[:-1])
    # the reported half-width is t_{0.975, 15} x se (scipy.stats.t), the widest over S1 and ST
    t15 = stats.t.ppf(0.975, r.replicates - 1)
    widest = max(t15 * r.indices[p][f"{k}_se"] for p in COEF for k in ("S1", "ST"))
    assert widest == pytest.approx(r.history[-1]["widest_half_width"], rel=1e-12)
    assert widest_half_width(r.indices, replicates=r.replicates)[0] == pytest.approx(widest, rel=1e-12)
    # the indices within the tolerance of the closed form
    for p, v in truth.items():
        for key in ("S1", "ST"):
            assert abs(r.indices[p][key] - v) < TOL, (p, key, r.indices[p][key], v)
    # each design was extended, no base point run twice: runs = N (D + 2) at the final N
    assert sum(calls) == r.evaluations == r.samples * (len(COEF) + 2)


def test_grown_design_equals_the_design_of_the_final_size() -> None:
    grown = sobol_core(_linear(), 256, seed=5, tol=TOL)
    once = sobol_core(_linear(), grown.samples, seed=5)
    for p in COEF:
        for key in ("S1", "ST", "S1_se", "ST_se"):
            assert grown.indices[p][key] == pytest.approx(once.indices[p][key], rel=1e-9, abs=1e-12)
    assert once.tol is None and "tol" not in once.to_dict()  # without a tolerance the document is unchanged


def test_cap_stops_the_doubling_and_says_so() -> None:
    with pytest.raises(QualityGateError) as exc:
        sobol_core(_ishigami_problem(), 256, seed=1, tol=1e-4, max_samples=1024)
    res = exc.value.result
    assert exc.value.exit_code == 3 and res is not None and res.converged is False
    assert res.samples == 1024 and [h["samples"] for h in res.history] == [256, 512, 1024]
    assert any("NOT met" in n and "max-samples=1024" in n for n in res.notes)
    doc = res.to_dict()
    assert doc["converged"] is False and doc["tol"] == 1e-4
    assert "tolerance 0.0001" in res.table()


def test_bad_tolerance_cap_or_method_is_refused() -> None:
    with pytest.raises(InputError):
        sobol_core(_linear(), 256, seed=1, tol=0.0)
    with pytest.raises(InputError):
        sobol_core(_linear(), 256, seed=1, tol=float("nan"))
    with pytest.raises(InputError):
        sobol_core(_linear(), 1024, seed=1, tol=TOL, max_samples=512)
    study = Study.from_dict(_study_doc())
    with pytest.raises(InputError, match="max-samples is below"):
        sensitivity(study, method="morris", samples=8, tol=TOL, max_samples=4)


def _study_doc() -> dict:
    # one uncertain input (Pc) in a tissue whose other quantities are fixed here: invented test values
    return {"study": {"tissue": "skeletal_muscle", "seed": 4},
            "parameters": {"Pc": {"dist": "normal", "mean": 20, "sd": 3, "unit": "mmHg"}, "Pi": -1.0,
                           "pi_c": 25.0, "pi_i": 10.0, "sigma": 0.9, "Kf": 0.004},
            "correlations": {"pairs": []}}


def test_command_tol_flag_default_and_cap(tmp_path) -> None:
    from click.testing import CliRunner

    from uncertainty.app.cli import main

    path = tmp_path / "one_input.toml"
    path.write_text('[study]\ntissue = "skeletal_muscle"\nseed = 4\n\n[parameters]\n'
                    'Pc = { dist = "normal", mean = 20, sd = 3, unit = "mmHg" }\nPi = -1.0\npi_c = 25.0\n'
                    'pi_i = 10.0\nsigma = 0.9\nKf = 0.004\n\n[correlations]\npairs = []\n')
    runner = CliRunner()
    # Jv = Kf (Pc - Pi - sigma (pi_c - pi_i)) depends on the one input Pc: S1 = ST = 1 (closed form)
    res = runner.invoke(main, ["sensitivity", str(path), "--method", "sobol", "--samples", "256", "--tol",
                               "--json"])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    assert doc["tol"] == TOL and doc["converged"] is True  # bare --tol means 0.01
    assert doc["samples"] == doc["history"][-1]["samples"] and doc["history"][-1]["widest_half_width"] < TOL
    for key in ("S1", "ST"):
        assert doc["indices"]["Pc"][key] == pytest.approx(1.0, abs=TOL)
    res = runner.invoke(main, ["sensitivity", str(path), "--method", "sobol", "--samples", "256", "--tol",
                               "1e-20", "--max-samples", "512"])
    assert res.exit_code == 3 and "NOT met" in res.stdout and "quality gate failed" in res.stderr


def _correlated_linear():
    """The linear test function with x2, x3 correlated (rho = 0.5, invented): Shapley effects in closed
    form from the Gaussian conditional costs (tests/test_sensitivity.py, linear_gaussian_shapley)."""
    from uncertainty.analyses.sensitivity import Problem

    beta = np.array(list(COEF.values()))
    corr = np.array([[1, 0, 0], [0, 1, 0.5], [0, 0.5, 1.0]])
    return Problem(players=list(COEF), groups=[0, 1, 2], corr=corr, model=lambda z: z @ beta), beta, corr


def test_shapley_orders_double_until_every_effect_is_within_tol() -> None:
    from test_sensitivity import linear_gaussian_shapley

    from uncertainty.analyses.sensitivity import shapley_core

    prob, beta, corr = _correlated_linear()
    r = shapley_core(prob, 64, seed=3, tol=TOL)
    assert r.converged is True
    sizes = [h["samples"] for h in r.history]
    assert sizes == [64 * 2**i for i in range(len(sizes))] and len(sizes) > 1 and sizes[-1] == r.samples
    assert r.history[-1]["widest_half_width"] < TOL <= r.history[-2]["widest_half_width"]
    t15 = stats.t.ppf(0.975, r.replicates - 1)
    assert max(t15 * r.indices[p]["Sh_se"] for p in COEF) == pytest.approx(r.history[-1]["widest_half_width"])
    exact = linear_gaussian_shapley(beta, corr)
    for p, want in zip(COEF, exact, strict=True):
        assert abs(r.indices[p]["Sh"] - want) < TOL, (p, r.indices[p]["Sh"], want)
    assert r.evaluations == r.samples * (len(COEF) + 1)  # no order run twice
    with pytest.raises(QualityGateError) as exc:
        shapley_core(prob, 64, seed=3, tol=1e-5, max_samples=256)
    assert exc.value.result.converged is False and exc.value.result.samples == 256
    assert any("NOT met" in n for n in exc.value.result.notes)


def test_morris_trajectories_double_until_mu_star_is_within_tol_of_the_largest() -> None:
    from uncertainty.analyses.sensitivity import morris_core

    r = morris_core(_ishigami_problem(), 8, seed=3, tol=0.1)
    assert r.converged is True
    sizes = [h["samples"] for h in r.history]
    assert sizes == [8 * 2**i for i in range(len(sizes))] and len(sizes) > 1 and sizes[-1] == r.samples
    top = max(ix["mu_star"] for ix in r.indices.values())
    widest = max(ix["mu_star_ci"][1] - ix["mu_star"] for ix in r.indices.values()) / top
    assert widest == pytest.approx(r.history[-1]["widest_half_width"]) and widest < 0.1
    assert r.history[-2]["widest_half_width"] >= 0.1
    assert r.evaluations == sum(4 * n for n in sizes)  # a new design per size: D + 1 = 4 runs a trajectory
    # a linear function's elementary effects are the same everywhere: zero width at once, mu* ranks the
    # coefficients
    lin = morris_core(_linear(), 8, seed=3, tol=0.05)
    assert lin.converged is True and len(lin.history) == 1 and lin.ranking == ["x3", "x2", "x1"]
    with pytest.raises(QualityGateError) as exc:
        morris_core(_ishigami_problem(), 8, seed=3, tol=1e-4, max_samples=32)
    assert exc.value.result.converged is False and exc.value.result.samples == 32
    assert any("NOT met" in n for n in exc.value.result.notes)
