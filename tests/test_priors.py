"""Prior declarations: parsing, scipy / PyMC agreement, normal scores, between-subject layer, sets.

Check values come from closed forms (normal, lognormal, beta, gamma, uniform and triangular
moments; textbook formulas, common practice) and from scipy.stats itself.
"""

from __future__ import annotations

import math
import textwrap

import numpy as np
import pytest
from scipy import stats

from uncertainty.core.errors import StudyError
from uncertainty.priors import (
    Condition,
    Context,
    Modifier,
    load_conditions,
    load_instruments,
    load_prior_set,
    parse_entry,
    parse_prior,
    prior_medians,
)

# One declaration of every kind (symbol, declaration); the values are arbitrary test inputs.
EVERY_KIND = [
    ("Pi", {"dist": "normal", "mean": -2.0, "sd": 1.5, "unit": "mmHg"}),
    ("Pc", {"dist": "truncnormal", "mean": 20.0, "sd": 6.0, "lower": 12.0, "upper": 35.0, "unit": "mmHg"}),
    ("Kf", {"dist": "lognormal", "median": 0.004, "gsd": 1.5, "unit": "mL/min/mmHg/100g"}),
    ("sigma", {"dist": "beta", "mean": 0.85, "sd": 0.06}),
    ("PS", {"dist": "gamma", "mean": 0.01, "sd": 0.004, "unit": "mL/min/100g"}),
    ("r", {"dist": "uniform", "lower": 0.1, "upper": 0.4}),
    ("pi_i", {"dist": "triangular", "lower": 5.0, "mode": 8.0, "upper": 14.0, "unit": "mmHg"}),
]


@pytest.mark.parametrize("symbol,decl", EVERY_KIND, ids=[d["dist"] for _, d in EVERY_KIND])
def test_scipy_and_pymc_agree(symbol: str, decl: dict) -> None:
    """The frozen scipy distribution and the PyMC RV from one declaration agree within MC error."""
    import pymc as pm

    prior = parse_prior(symbol, decl)
    n = 40_000
    with pm.Model():
        rv = prior.pymc("x")
    draws = np.asarray(pm.draw(rv, draws=n, random_seed=20240601), dtype=float)
    fr = prior.frozen()
    mean, sd = fr.mean(), fr.std()
    # mean within 4 standard errors; sd within 4 s.e. of a sample sd (kurtosis-aware approximation)
    assert abs(draws.mean() - mean) < 4 * sd / math.sqrt(n)
    kurt = stats.kurtosis(draws, fisher=False)
    assert abs(draws.std(ddof=1) - sd) < 4 * sd * math.sqrt((kurt - 1) / (4 * n))
    for q in (0.05, 0.25, 0.5, 0.75, 0.95):
        # the empirical CDF at the scipy quantile is q within 4 binomial s.e.
        frac = np.mean(draws <= fr.ppf(q))
        assert abs(frac - q) < 4 * math.sqrt(q * (1 - q) / n), (q, frac)


def test_moments_match_closed_forms() -> None:
    """Parameterisations: beta / gamma by mean and sd, lognormal by median and gsd (closed forms)."""
    beta = parse_prior("sigma", {"dist": "beta", "mean": 0.85, "sd": 0.06})
    assert beta.mean() == pytest.approx(0.85) and beta.sd() == pytest.approx(0.06)
    gamma = parse_prior("PS", {"dist": "gamma", "mean": 0.01, "sd": 0.004})
    assert gamma.mean() == pytest.approx(0.01) and gamma.sd() == pytest.approx(0.004)
    ln = parse_prior("Kf", {"dist": "lognormal", "median": 0.004, "gsd": 1.5})
    assert ln.median() == pytest.approx(0.004)
    # lognormal mean = median exp(s^2 / 2), s = log gsd (closed form)
    assert ln.mean() == pytest.approx(0.004 * math.exp(math.log(1.5) ** 2 / 2))
    lo, hi = ln.interval(0.95)
    assert lo == pytest.approx(0.004 / 1.5 ** 1.959964, rel=1e-5)
    assert hi == pytest.approx(0.004 * 1.5 ** 1.959964, rel=1e-5)
    tri = parse_prior("pi_i", {"dist": "triangular", "lower": 5, "mode": 8, "upper": 14})
    assert tri.mean() == pytest.approx((5 + 8 + 14) / 3)  # triangular mean (closed form)


@pytest.mark.parametrize("symbol,decl", EVERY_KIND, ids=[d["dist"] for _, d in EVERY_KIND])
def test_normal_scores_match_ppf(symbol: str, decl: dict) -> None:
    """from_normal_scores(z) equals ppf(Phi(z)) and keeps precision far in the upper tail."""
    prior = parse_prior(symbol, decl)
    z = np.linspace(-5, 5, 41)
    np.testing.assert_allclose(prior.from_normal_scores(z), prior.ppf(stats.norm.cdf(z)), rtol=1e-9, atol=1e-12)
    far = prior.from_normal_scores(np.array([9.0]))
    assert np.isfinite(far).all()


def test_normal_scores_exact_normal_lognormal() -> None:
    """Normal: mean + sd z; lognormal: median gsd^z (the exact maps)."""
    n = parse_prior("Pi", {"dist": "normal", "mean": -2, "sd": 1.5})
    assert n.from_normal_scores(np.array([2.0]))[0] == pytest.approx(1.0)
    ln = parse_prior("Kf", {"dist": "lognormal", "median": 0.004, "gsd": 1.5})
    assert ln.from_normal_scores(np.array([-2.0]))[0] == pytest.approx(0.004 / 1.5**2)


def test_units_converted_to_canonical() -> None:
    """kPa -> mmHg (1 kPa = 7.50062 mmHg, common practice); per 100 mL -> per 100 g through density."""
    p = parse_prior("Pc", {"dist": "normal", "mean": 3.0, "sd": 0.4, "unit": "kPa"})
    assert p.params["mean"] == pytest.approx(3.0 * 7.50062, rel=1e-5)
    assert p.params["sd"] == pytest.approx(0.4 * 7.50062, rel=1e-5)
    assert p.unit == "mmHg"
    kf = parse_prior("Kf", {"dist": "lognormal", "median": 0.0042, "gsd": 1.4, "unit": "mL/min/mmHg/100mL"},
                     ctx=Context(density=1.05))
    assert kf.params["median"] == pytest.approx(0.0042 / 1.05)
    assert kf.basis == "100mL"
    fixed = parse_prior("pi_i", "12 mmHg")
    assert fixed.dist == "fixed" and fixed.params["value"] == 12.0
    assert parse_prior("Pc", 3).params["value"] == 3.0


@pytest.mark.parametrize("symbol,decl,key", [
    ("Pc", {"dist": "normal", "mean": 20, "sd": 0}, "Pc.sd"),
    ("Pc", {"dist": "normal", "mean": 20, "sd": -1}, "Pc.sd"),
    ("sigma", {"dist": "beta", "mean": 1.2, "sd": 0.1}, "sigma.mean"),
    ("sigma", {"dist": "beta", "mean": 0.5, "sd": 0.6}, "sigma.sd"),
    ("sigma", {"dist": "normal", "mean": 0.95, "sd": 0.05}, "sigma.mean"),
    ("r", {"dist": "uniform", "lower": 0.4, "upper": 0.1}, "r.lower"),
    ("Kf", {"dist": "normal", "mean": 0.004, "sd": 0.002}, "Kf.mean"),
    ("Kf", -0.004, "Kf"),
    ("Kf", {"dist": "lognormal", "median": 0.004, "gsd": 0.9}, "Kf.gsd"),
    ("Pc", {"dist": "normal", "mean": 20, "sd": 3, "unit": "mL/min"}, "Pc.unit"),
    ("Pc", {"dist": "normal", "mean": 20, "sd": 3, "spread": 2}, "Pc.spread"),
    ("Pc", {"dist": "weibull", "mean": 20}, "Pc.dist"),
    ("Pc", {"dist": "normal", "mean": 20}, "Pc.sd"),
    ("pi_i", {"dist": "triangular", "lower": 5, "mode": 15, "upper": 14}, "pi_i.mode"),
    ("Kf", {"dist": "lognormal", "median": 0.004, "gsd": 1.3, "between_subject": {"sd": 0.002}},
     "Kf.between_subject.sd"),
    ("Pc", {"dist": "normal", "mean": 20, "sd": 3, "between_subject": {"sd": 1, "cv": 0.1}},
     "Pc.between_subject"),
])
def test_impossible_parameters_are_errors(symbol: str, decl: object, key: str) -> None:
    with pytest.raises(StudyError) as info:
        parse_prior(symbol, decl, ctx=Context(file="x.toml"))
    assert info.value.key == key
    assert "x.toml" in str(info.value)


def test_normal_on_positive_quantity_accepted_when_mass_below_zero_negligible() -> None:
    """Mass below zero: Phi(-mean/sd); mean/sd = 5 gives 2.9e-7 < 1e-6 (accepted), 4 gives 3.2e-5."""
    parse_prior("pi_c", {"dist": "normal", "mean": 25, "sd": 5})
    with pytest.raises(StudyError, match="mass below zero"):
        parse_prior("pi_c", {"dist": "normal", "mean": 24, "sd": 6})
    # Pi may be negative
    parse_prior("Pi", {"dist": "normal", "mean": -1, "sd": 3})


def test_individual_layer() -> None:
    """sd additive; cv lognormal with median at the typical value; sigma stays in (0, 1)."""
    z = stats.norm.ppf(np.linspace(0.0005, 0.9995, 2000))
    pc = parse_prior("Pc", {"dist": "normal", "mean": 20, "sd": 2, "between_subject": {"sd": 3}})
    np.testing.assert_allclose(pc.individual(20.0, z), 20.0 + 3.0 * z)
    kf = parse_prior("Kf", {"dist": "lognormal", "median": 0.004, "gsd": 1.3, "between_subject": {"cv": 0.3}})
    ind = kf.individual(0.004, z)
    assert np.median(ind) == pytest.approx(0.004, rel=1e-3)
    # lognormal with s^2 = log(1 + cv^2) has cv exactly 0.3 (closed form); check through scipy
    s = math.sqrt(math.log1p(0.09))
    assert stats.lognorm(s=s, scale=0.004).std() / stats.lognorm(s=s, scale=0.004).mean() == pytest.approx(0.3)
    np.testing.assert_allclose(ind, 0.004 * np.exp(s * z))
    sg = parse_prior("sigma", {"dist": "beta", "mean": 0.9, "sd": 0.03, "between_subject": {"sd": 0.05}})
    vals = sg.individual(0.97, z * 3)
    assert (vals > 0).all() and (vals < 1).all()
    assert np.median(vals) == pytest.approx(0.97, abs=1e-6)
    # small spread: the sd of individuals is close to the stated sd (delta method)
    small = sg.individual(0.5, z)
    assert np.std(small) == pytest.approx(0.05, rel=0.05)


def test_individual_works_in_pytensor() -> None:
    """The between-subject layer traces in PyTensor and gives the numpy numbers."""
    import pytensor
    import pytensor.tensor as pt

    sg = parse_prior("sigma", {"dist": "beta", "mean": 0.9, "sd": 0.03, "between_subject": {"cv": 0.05}})
    t, z = pt.dvector("t"), pt.dvector("z")
    f = pytensor.function([t, z], sg.individual(t, z, xp=pt))
    tv, zv = np.array([0.8, 0.9, 0.95]), np.array([-1.0, 0.5, 2.0])
    np.testing.assert_allclose(f(tv, zv), sg.individual(tv, zv))


def test_from_protein_entry() -> None:
    priors, der = parse_entry("pi_c", {"from_protein": {"dist": "normal", "mean": 7.0, "sd": 0.4, "unit": "g/dL"}})
    assert list(priors) == ["Cp"] and der.formula == "total"
    # Landis & Pappenheimer total protein relation at 7 g/dL: 2.1*7 + 0.16*49 + 0.009*343 = 25.627 mmHg
    assert der.compute({"Cp": 7.0}) == pytest.approx(25.627)
    priors, der = parse_entry("pi_i", {"from_protein": {"albumin": {"dist": "normal", "mean": 2.0, "sd": 0.2},
                                                       "globulin": {"dist": "normal", "mean": 1.0, "sd": 0.2}}})
    assert set(priors) == {"Ci_alb", "Ci_glob"} and der.inputs == ("Ci_alb", "Ci_glob")
    with pytest.raises(StudyError):
        parse_entry("Pc", {"from_protein": {"dist": "normal", "mean": 7.0, "sd": 0.4}})


SET_TOML = textwrap.dedent("""
    [set]
    name = "testtissue"
    description = "fixture"
    basis = "100mL"
    density = { value = 1.06, unit = "g/mL", origin = "test fixture" }

    [priors.Kf]
    dist = "lognormal"
    median = 0.0042
    gsd = 1.4
    unit = "mL/min/mmHg/100mL"
    between_subject = { cv = 0.3 }
    origin = "test fixture"

    [priors.Pa]
    dist = "normal"
    mean = 90
    sd = 5
    unit = "mmHg"
    origin = "test fixture"

    [priors.Pv]
    dist = "normal"
    mean = 10
    sd = 2
    unit = "mmHg"
    origin = "test fixture"

    [priors.r]
    dist = "uniform"
    lower = 0.1
    upper = 0.3
    origin = "test fixture"

    [derived.Pc]
    rule = "resistance_ratio"
    inputs = ["Pa", "Pv", "r"]
    origin = "Pappenheimer and Soto-Rivera 1948"

    [priors.pi_c]
    from_protein = { dist = "normal", mean = 7.0, sd = 0.4, unit = "g/dL", origin = "test fixture" }

    [[correlations]]
    pair = ["Pa", "Pv"]
    rho = 0.3
    origin = "test fixture"
""")

CONDITIONS_TOML = textwrap.dedent("""
    [conditions.congestion]
    label = "venous congestion"
    note = "a cuff raises venous pressure"

    [[conditions.congestion.modify]]
    parameter = "Pv"
    shift = 20
    extra_sd = 1.5
    origin = "test fixture"

    [[conditions.congestion.modify]]
    parameter = "Kf"
    multiply = 2.0
    origin = "test fixture"

    [[conditions.congestion.modify]]
    parameter = "pi_c"
    shift = -3
    origin = "test fixture"
""")


@pytest.fixture()
def data_dir(tmp_path):
    (tmp_path / "testtissue.toml").write_text(SET_TOML)
    (tmp_path / "conditions.toml").write_text(CONDITIONS_TOML)
    (tmp_path / "instruments.toml").write_text(textwrap.dedent("""
        [instruments.osmometer]
        label = "colloid osmometer"
        measures = "pi_c"
        sd = 0.1
        unit = "kPa"
        bias = { dist = "normal", mean = 0, sd = 0.5, unit = "mmHg" }
        cost = 1
        origin = "test fixture"
    """))
    return tmp_path


def test_prior_set_condition_instrument(data_dir) -> None:
    pset = load_prior_set("testtissue", data_dir)
    assert pset.basis == "100mL" and pset.density == pytest.approx(1.06)
    assert pset.priors["Kf"].params["median"] == pytest.approx(0.0042 / 1.06)
    assert "pi_c" in pset.derived and "Cp" in pset.priors
    assert pset.correlations == [("Pa", "Pv", 0.3)]
    cond = load_conditions(data_dir)["congestion"]
    before_pv = pset.priors["Pv"]
    out = cond.apply(pset)
    assert out["Pv"].params["mean"] == pytest.approx(30.0)
    assert out["Pv"].params["sd"] == pytest.approx(math.hypot(2.0, 1.5))
    assert out["Kf"].params["median"] == pytest.approx(2 * 0.0042 / 1.06)
    assert before_pv.params["mean"] == 10.0  # input unchanged
    assert pset.derived["pi_c"].shift == -3.0
    inst = load_instruments(data_dir)["osmometer"]
    assert inst.sd == pytest.approx(0.750062, rel=1e-5)  # 0.1 kPa in mmHg (common practice)
    assert inst.bias is not None and inst.bias.params["sd"] == 0.5
    med = prior_medians("testtissue", data_dir)
    # Pc = (r Pa + Pv)/(1 + r) at the medians r = 0.2, Pa = 90, Pv = 10 (Pappenheimer & Soto-Rivera 1948)
    assert med["Pc"] == pytest.approx((0.2 * 90 + 10) / 1.2)
    assert med["pi_c"] == pytest.approx(25.627)


def test_unknown_tissue(data_dir) -> None:
    with pytest.raises(StudyError) as info:
        load_prior_set("kidney", data_dir)
    assert info.value.key == "tissue" and info.value.value == "kidney"


def test_condition_multiply_then_shift_derived() -> None:
    cond = Condition("c", modify=(Modifier("pi_c", multiply=0.5), Modifier("pi_c", shift=2.0)))
    from uncertainty.priors import Derivation

    derived = {"pi_c": Derivation("pi_c", "total", ("Cp",))}
    cond.apply({}, derived=derived)
    assert derived["pi_c"].compute({"Cp": 7.0}) == pytest.approx(25.627 * 0.5 + 2.0)


def test_fixed_prior_pymc_and_point_mass() -> None:
    import pymc as pm

    p = parse_prior("pi_i", "12 mmHg")
    with pm.Model():
        rv = p.pymc("x")
    assert float(pm.draw(rv, random_seed=1)) == 12.0
    assert p.interval() == (12.0, 12.0) and p.sd() == 0.0
    np.testing.assert_array_equal(p.from_normal_scores(np.array([-3.0, 3.0])), [12.0, 12.0])
