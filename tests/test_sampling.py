"""Unit cube -> values: layout, open cube, Gaussian copula, between-subject layer, bad input."""

from __future__ import annotations

import math

import numpy as np
import pytest
from fakes_uncertainty import classic_study

from uncertainty.analyses.sampling import (
    cube,
    cube_columns,
    draw,
    from_cube,
    next_power_of_two,
)
from uncertainty.core.errors import InputError


def test_columns_typical_then_between_subject():
    s = classic_study()
    assert cube_columns(s, "typical") == [(n, "typical") for n in s.names]
    assert cube_columns(s, "individual")[len(s.names):] == [("Kf", "between_subject"),
                                                            ("Pc", "between_subject")]


@pytest.mark.parametrize("method", ["qmc", "mc", "lhs"])
def test_cube_is_open_and_uniform(method):
    u = cube(4096, 3, method, seed=5)
    assert u.shape == (4096, 3)
    assert u.min() > 0 and u.max() < 1
    # uniform marginal: mean 1/2, variance 1/12 (closed form); 4 MC standard errors for mc
    assert np.allclose(u.mean(axis=0), 0.5, atol=4 * math.sqrt(1 / 12 / 4096))
    assert np.allclose(u.var(axis=0), 1 / 12, atol=0.005)


def test_typical_marginals_exact_for_normal():
    s = classic_study()
    v = draw(s, 2**14, method="qmc", seed=3, layer="typical")
    for name in s.names:
        p = s.priors[name].params
        assert abs(v[name].mean() - p["mean"]) < 0.01 * p["sd"]
        assert abs(v[name].std() - p["sd"]) < 0.01 * p["sd"]
    assert np.all(v["sigma"] == 0.9)  # fixed prior repeated


def test_copula_correlation_of_normal_inputs():
    # For normal marginals the Pearson correlation of values equals the normal-score rho (closed form).
    s = classic_study(pairs=[("Pc", "Pi", 0.6), ("pi_c", "pi_i", -0.3)])
    v = draw(s, 2**15, method="qmc", seed=11, layer="typical")
    r = np.corrcoef(v["Pc"], v["Pi"])[0, 1]
    r2 = np.corrcoef(v["pi_c"], v["pi_i"])[0, 1]
    assert abs(r - 0.6) < 0.02 and abs(r2 + 0.3) < 0.02
    assert abs(np.corrcoef(v["Pc"], v["Kf"])[0, 1]) < 0.03


def test_between_subject_layer_adds_variance():
    s = classic_study()
    v = draw(s, 2**15, method="qmc", seed=2, layer="individual")
    # additive sd layer: Var = sd_typ^2 + sd_bs^2 = 9 + 9 (closed form for a sum of normals)
    assert abs(v["Pc"].var() - 18.0) / 18.0 < 0.03
    # multiplicative cv layer with median at the typical value: E[Kf] = E[typ] E[exp(s z)],
    # E[exp(s z)] = exp(s^2/2) = sqrt(1 + cv^2) (lognormal mean, closed form)
    assert abs(v["Kf"].mean() / (0.004 * math.sqrt(1 + 0.3**2)) - 1) < 0.01
    typ = draw(s, 2**15, method="qmc", seed=2, layer="typical")
    assert abs(typ["Pc"].var() - 9.0) / 9.0 < 0.03
    u = cube(64, 7, "qmc", seed=4)
    assert np.allclose(from_cube(s, u[:, :5], "typical")["Pi"], from_cube(s, u)["Pi"])  # shared columns


def test_same_seed_same_numbers_and_seeds_differ():
    s = classic_study()
    a = draw(s, 1000, method="qmc", seed=7)
    b = draw(s, 1000, method="qmc", seed=7)
    c = draw(s, 1000, method="qmc", seed=8)
    assert np.array_equal(a["Pc"], b["Pc"]) and not np.array_equal(a["Pc"], c["Pc"])
    assert len(a["Pc"]) == 1000


def test_from_cube_extremes_stay_finite():
    s = classic_study()
    u = np.array([[1e-300] * 7, [1 - 1e-17] * 7, [0.0] * 7, [1.0] * 7])
    from uncertainty.analyses.sampling import open_cube

    v = from_cube(s, open_cube(u))
    assert all(np.all(np.isfinite(x)) for x in v.values())


def test_bad_input():
    s = classic_study()
    with pytest.raises(InputError):
        draw(s, 0)
    with pytest.raises(InputError):
        draw(s, 10, method="sobolish")
    with pytest.raises(InputError):
        draw(s, 10, layer="population")
    with pytest.raises(InputError):
        from_cube(s, np.full((3, 2), 0.5), "typical")
    assert next_power_of_two(1000) == 1024 and next_power_of_two(1024) == 1024


def test_fast_score_map_agrees_with_exact_path():
    from uncertainty.analyses.sampling import scores_to_values
    from uncertainty.priors import parse_prior

    z = np.random.default_rng(0).standard_normal(50000) * 2.5
    z[:3] = [-9.0, 9.5, 0.0]  # beyond the spline grid: exact map
    for decl in ({"dist": "beta", "mean": 0.9, "sd": 0.04}, {"dist": "gamma", "mean": 3.0, "sd": 1.0},
                 {"dist": "beta", "mean": 0.5, "sd": 0.2}, {"dist": "gamma", "mean": 0.01, "sd": 0.008}):
        p = parse_prior("sigma" if decl["dist"] in ("beta", "triangular") else "PS", decl)
        fast, exact = scores_to_values(p, z), scores_to_values(p, z, exact=True)
        assert np.allclose(fast, exact, rtol=1e-9, atol=1e-12), decl["dist"]
