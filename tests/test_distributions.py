"""Distribution families and the between-subject spread (uncertainty.distributions).

Every family is checked against scipy.stats built here from the family's own definition (ppf, cdf,
mean, sd at a few points), its score map against ppf(Phi(z)), its PyTensor score map against
numpy, and the spread against its closed forms. Parameters are arbitrary test inputs (no
physiology); tolerances are our numerical choices. Check values come from scipy.stats, from the
moments of each family (textbook formulas, common practice) and, for the lognormal cv, from
cv^2 = exp(s^2) - 1 (Aitchison J, Brown JAC 1957, The Lognormal Distribution, Cambridge
University Press; common practice).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from uncertainty import distributions as D
from uncertainty.priors import DISTRIBUTIONS, parse_prior

# family instance, the scipy.stats distribution it must equal (arbitrary test parameters)
_A, _B = 0.9 * (0.9 * 0.1 / 0.05**2 - 1), 0.1 * (0.9 * 0.1 / 0.05**2 - 1)  # beta by moments
CASES = [
    (D.Normal(3.0, 0.7), stats.norm(3.0, 0.7)),
    (D.TruncNormal(1.0, 2.0, lower=0.0), stats.truncnorm(-0.5, np.inf, loc=1.0, scale=2.0)),
    (D.TruncNormal(0.3, 0.2, lower=0.0, upper=1.0), stats.truncnorm(-1.5, 3.5, loc=0.3, scale=0.2)),
    (D.LogNormal(0.0045, 1.5), stats.lognorm(s=math.log(1.5), scale=0.0045)),
    (D.Beta(0.9, 0.05), stats.beta(_A, _B)),
    (D.Gamma(2.0, 0.8), stats.gamma((2.0 / 0.8) ** 2, scale=0.8**2 / 2.0)),
    (D.Uniform(-2.0, 5.3), stats.uniform(-2.0, 7.3)),
    (D.Triangular(1.0, 2.5, 7.0), stats.triang(1.5 / 6.0, loc=1.0, scale=6.0)),
]
IDS = [f"{d.name}{i}" for i, (d, _) in enumerate(CASES)]
U = np.array([0.001, 0.025, 0.3, 0.5, 0.8, 0.975, 0.999])
Z = np.array([-4.0, -1.96, -0.5, 0.0, 0.3, 1.0, 2.5, 4.0])


@pytest.mark.parametrize(("dist", "ref"), CASES, ids=IDS)
def test_family_matches_scipy(dist, ref):
    x = ref.ppf(U)
    np.testing.assert_allclose(dist.ppf(U), x, rtol=1e-12)
    np.testing.assert_allclose(dist.cdf(x), U, rtol=1e-9)
    assert dist.get_mean() == pytest.approx(float(ref.mean()), rel=1e-12)
    assert dist.get_sd() == pytest.approx(float(ref.std()), rel=1e-12)
    assert dist.get_median() == pytest.approx(float(ref.median()), rel=1e-12)
    assert dist.interval(0.95) == pytest.approx(tuple(ref.interval(0.95)), rel=1e-12)


def test_moment_families_have_their_declared_mean_and_sd():
    for dist in (D.Beta(0.9, 0.05), D.Gamma(2.0, 0.8), D.Normal(3.0, 0.7)):
        assert dist.get_mean() == pytest.approx(dist.mean, rel=1e-12)
        assert dist.get_sd() == pytest.approx(dist.sd, rel=1e-12)
    ln = D.LogNormal(0.0045, 1.5)
    assert ln.get_median() == pytest.approx(0.0045, rel=1e-12)


def test_fixed_is_a_point_mass():
    f = D.Fixed(12.0)
    assert isinstance(f.frozen(), D.PointMass)
    np.testing.assert_array_equal(f.ppf(U), np.full(U.shape, 12.0))
    np.testing.assert_array_equal(f.from_scores(Z), np.full(Z.shape, 12.0))
    assert (f.get_mean(), f.get_sd(), f.get_median(), f.interval(0.95)) == (12.0, 0.0, 12.0, (12.0, 12.0))


@pytest.mark.parametrize(("dist", "ref"), CASES, ids=IDS)
def test_from_scores_is_ppf_of_phi(dist, ref):
    np.testing.assert_allclose(dist.from_scores(Z), ref.ppf(stats.norm.cdf(Z)), rtol=1e-9, atol=1e-12)
    # far in the upper tail the survival function keeps the precision ppf(Phi(z)) loses
    far = dist.from_scores(np.array([9.0]))[0]
    assert far == pytest.approx(float(ref.isf(stats.norm.sf(9.0))), rel=1e-9)


def test_spline_path_for_large_beta_and_gamma_batches():
    z = np.random.default_rng(3).standard_normal(D.SPLINE_MIN_N)
    z[:2] = [-9.0, 9.5]  # beyond the spline's grid: the exact map
    for dist in (D.Beta(0.9, 0.05), D.Gamma(2.0, 0.8)):
        exact, fast = dist.from_scores(z), dist.from_scores(z, fast=True)
        np.testing.assert_allclose(fast, exact, rtol=1e-9)
        assert fast[0] == exact[0] and fast[1] == exact[1]


def test_numpy_and_pytensor_score_maps_agree():
    pt = pytest.importorskip("pytensor.tensor")
    z = np.linspace(-3.5, 3.5, 29)
    zt = pt.as_tensor_variable(z)
    for dist, _ in CASES + [(D.Fixed(12.0), None)]:
        if dist.spline:  # beta, gamma: no closed-form inverse CDF in PyTensor
            with pytest.raises(NotImplementedError):
                dist.from_scores(zt, pt)
            continue
        np.testing.assert_allclose(dist.from_scores(zt, pt).eval(), dist.from_scores(z), rtol=1e-9, atol=1e-12)


def test_registry_is_the_one_name_table():
    assert list(D.REGISTRY) == ["normal", "truncnormal", "lognormal", "beta", "gamma", "uniform",
                                "triangular", "fixed"]
    for name, cls in D.REGISTRY.items():
        assert D.family(name) is cls and cls.name == name
        assert DISTRIBUTIONS[name] == (cls.required, cls.optional)
    with pytest.raises(ValueError, match="unknown distribution"):
        D.family("weibull")
    assert D.distribution("normal", {"mean": 1.0, "sd": 2.0}) is D.distribution("normal", {"sd": 2.0, "mean": 1.0})


@pytest.mark.parametrize(("dist", "param", "text"), [
    (D.Normal(1.0, 0.0), "sd", "sd must be > 0"),
    (D.LogNormal(0.0, 1.5), "median", "median must be > 0"),
    (D.LogNormal(1.0, 1.0), "gsd", "gsd) must be > 1"),
    (D.Beta(1.2, 0.1), "mean", "strictly between 0 and 1"),
    (D.Beta(0.5, 0.6), "sd", "sd too large for a beta with mean 0.5"),
    (D.Gamma(-1.0, 0.5), "mean", "gamma mean must be > 0"),
    (D.Uniform(2.0, 1.0), "lower", "lower must be below upper"),
    (D.Triangular(0.0, 3.0, 2.0), "mode", "the mode must lie between"),
    (D.TruncNormal(0.0, 1.0, lower=50.0, upper=60.0), "mean", "holds no probability"),
])
def test_impossible_parameters_are_named(dist, param, text):
    with pytest.raises(D.ParameterError, match=text.replace("(", r"\(").replace(")", r"\)")) as info:
        dist.check()
    assert info.value.param == param


def test_parse_prior_reports_the_family_message_at_the_parameter():
    from uncertainty.core.errors import StudyError

    with pytest.raises(StudyError) as info:
        parse_prior("r", {"dist": "uniform", "lower": 0.5, "upper": 0.2})
    assert info.value.key == "r.lower" and info.value.value == [0.5, 0.2]


def test_widening_for_conditions():
    assert D.Normal(1.0, 3.0).widened(4.0) == D.Normal(1.0, 5.0)
    assert D.Fixed(2.0).widened(0.5) == D.Normal(2.0, 0.5)
    assert D.Fixed(2.0).widened_log(1.5) == D.LogNormal(2.0, 1.5)
    assert D.Normal(1.0, 3.0).widened_log(1.5) is None
    ln = D.LogNormal(2.0, 1.5).widened_log(1.2)
    assert math.log(ln.gsd) == pytest.approx(math.hypot(math.log(1.5), math.log(1.2)), rel=1e-12)
    for dist in (D.Uniform(0.0, 3.0), D.Triangular(0.0, 1.0, 4.0)):
        wide = dist.widened(0.5)
        assert wide.get_var() == pytest.approx(dist.get_var() + 0.25, rel=1e-12)
    assert D.Triangular(0.0, 1.0, 4.0).widened(0.5).mode == 1.0
    assert D.Gamma(2.0, 0.8).scaled(3.0) == D.Gamma(6.0, 2.4000000000000004)
    assert D.Normal(2.0, 0.8).scaled(3.0) == D.Normal(6.0, 0.8)


def test_normal_scale():
    assert D.Normal(3.0, 0.7).normal_scale() == (3.0, 0.7, False)
    assert D.LogNormal(2.0, 1.5).normal_scale() == (math.log(2.0), math.log(1.5), True)
    assert D.Gamma(2.0, 0.8).normal_scale() is None


def test_pymc_forms_match_scipy():
    pm = pytest.importorskip("pymc")
    for dist, ref in CASES:
        x = ref.ppf(np.array([0.1, 0.5, 0.9]))
        logcdf = pm.logcdf(dist.pymc_dist(), x).eval()
        np.testing.assert_allclose(np.exp(logcdf), ref.cdf(x), rtol=1e-6)
    with pm.Model():
        rv = D.Gamma(2.0, 0.8).pymc("g")
        assert rv.name == "g"
        c = D.Fixed(3.0).pymc("c", shape=2)
        np.testing.assert_array_equal(c.eval(), [3.0, 3.0])
    with pytest.raises(NotImplementedError):
        D.Fixed(3.0).pymc_dist()


# ---- the between-subject spread

def test_log_sd_from_cv_closed_form_and_backends():
    for cv in (0.05, 0.3, 1.0):
        s = D.log_sd_from_cv(cv)
        assert isinstance(s, float)
        assert math.expm1(s * s) == pytest.approx(cv * cv, rel=1e-12)  # cv^2 = exp(s^2) - 1
    cvs = np.array([0.05, 0.3, 1.0])
    np.testing.assert_array_equal(D.log_sd_from_cv(cvs), [D.log_sd_from_cv(c) for c in cvs])
    pt = pytest.importorskip("pytensor.tensor")
    np.testing.assert_allclose(D.log_sd_from_cv(pt.as_tensor_variable(cvs), pt).eval(), D.log_sd_from_cv(cvs),
                               rtol=1e-15)


def test_spread_closed_forms():
    z = np.linspace(-3.0, 3.0, 13)
    sd = D.Spread.from_declaration({"sd": 2.0})
    np.testing.assert_allclose(sd.individual(10.0, z), 10.0 + 2.0 * z)
    cv = D.Spread.from_declaration({"cv": 0.3})
    np.testing.assert_allclose(cv.individual(5.0, z), 5.0 * np.exp(math.sqrt(math.log(1.09)) * z))
    # a lognormal around the typical value: median there, cv as declared (closed-form moments)
    ln = stats.lognorm(s=cv.log_sd(), scale=5.0)
    assert ln.median() == pytest.approx(5.0) and ln.std() / ln.mean() == pytest.approx(0.3, rel=1e-12)
    assert D.Spread.from_declaration(None) is None and D.Spread.from_declaration({}) is None


def test_logit_spread_median_and_delta_method_slope():
    h = 1e-6
    for decl, t, slope in (({"sd": 0.02}, 0.9, 0.02), ({"cv": 0.05}, 0.8, 0.05 * 0.8)):
        sp = D.Spread.from_declaration(decl, logit=True)
        assert sp.individual(t, 0.0) == pytest.approx(t, rel=1e-14)
        d = (sp.individual(t, h) - sp.individual(t, -h)) / (2 * h)
        assert d == pytest.approx(slope, rel=1e-6)  # sd of the individual at small spread
        vals = sp.individual(t, np.array([-8.0, 8.0]))
        assert np.all((vals > 0) & (vals < 1))


def test_spread_numpy_and_pytensor_agree():
    pt = pytest.importorskip("pytensor.tensor")
    z = np.linspace(-3.0, 3.0, 13)
    typical = np.full(13, 0.85)
    for decl, logit in (({"sd": 0.05}, False), ({"cv": 0.3}, False), ({"sd": 0.05}, True), ({"cv": 0.1}, True)):
        sp = D.Spread.from_declaration(decl, logit=logit)
        got = sp.individual(pt.as_tensor_variable(typical), pt.as_tensor_variable(z), pt).eval()
        np.testing.assert_allclose(got, sp.individual(typical, z), rtol=1e-12)


def test_spread_ratio_and_normal_scale():
    cv = D.Spread("cv", 0.3)
    assert cv.ratio(0.3) == pytest.approx(1.0)
    assert cv.ratio(0.6) == pytest.approx(D.log_sd_from_cv(0.6) / D.log_sd_from_cv(0.3))
    assert D.Spread("sd", 2.0).ratio(3.0) == 1.5
    assert cv.on_normal_scale(True) == D.log_sd_from_cv(0.3) and cv.on_normal_scale(False) is None
    assert D.Spread("sd", 2.0).on_normal_scale(False) == 2.0
    assert D.Spread("sd", 0.02, logit=True).on_normal_scale(False) is None


def test_prior_delegates_to_its_family():
    p = parse_prior("Kf", {"dist": "lognormal", "median": 0.004, "gsd": 1.5, "unit": "mL/min/mmHg/100g",
                           "between_subject": {"cv": 0.3}})
    assert p.distribution == D.LogNormal(0.004, 1.5)
    assert p.spread == D.Spread("cv", 0.3, False)
    np.testing.assert_array_equal(p.from_normal_scores(Z), p.distribution.from_scores(Z))
    sg = parse_prior("sigma", {"dist": "beta", "mean": 0.9, "sd": 0.03, "between_subject": {"sd": 0.02}})
    assert sg.spread is not None and sg.spread.logit


@pytest.mark.parametrize("sd", [5e-324, 1e-170])  # sd^2 underflows to 0, or to a subnormal that overflows nu
def test_beta_with_an_underflowing_sd_is_refused_not_divided_by_zero(sd: float) -> None:
    with pytest.raises(D.ParameterError, match="too small"):
        D.Beta(0.4, sd).check()
