"""The muscle lymph capacity JL_max = resting filtrate + JL_reserve (``priors.derived.lymph_capacity``): the
resting filtrate against an independent root of the classic balance (scipy's brentq on Starling's sum with
Patlak's steady ratio), the held capacity under conditions that change the forces, a condition's extra
uncertainty on the reserve, and an override that replaces the derivation.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from click.testing import CliRunner
from scipy.optimize import brentq

from uncertainty.app.cli import main
from uncertainty.priors import load_prior_set, prior_medians
from uncertainty.priors.derived import lymph_capacity
from uncertainty.study import Study


def _classic_filtrate(Kf: float, Pc: float, sigma: float, PS: float, pi_c: float, L: float, Pi_L0: float) -> float:
    """Jv solving Kf [(Pc - Pi) - sigma (pi_c - pi_i)] = Jv with Pi = Pi_L0 + Jv/L (linear lymph balance) and
    pi_i = pi_c (1 - sigma)/(1 - sigma exp(-Pe)), Pe = Jv (1 - sigma)/PS (Patlak CS et al. 1963 Bull Math Biophys
    25:81, the steady solute ratio; common practice), by bracketing between 0 and the no-protein root."""
    def f(jv: float) -> float:
        pe = jv * (1.0 - sigma) / PS
        ratio = (1.0 - sigma) / (1.0 - sigma * math.exp(-pe))
        return Kf * ((Pc - Pi_L0 - jv / L) - sigma * (pi_c - ratio * pi_c)) - jv
    return brentq(f, 1e-12, Kf * (Pc - Pi_L0) / (1.0 + Kf / L), xtol=1e-14)


@pytest.mark.parametrize("scale", [{}, {"Kf": 2.0, "PS": 0.5}, {"L": 0.4, "sigma": 1.05}])
def test_the_resting_filtrate_is_the_classic_balance_root(scale: dict[str, float]) -> None:
    m = prior_medians("skeletal_muscle")
    v = {k: m[k] * scale.get(k, 1.0) for k in ("Kf", "Pc", "sigma", "PS", "pi_c", "L", "Pi_L0")}
    want = _classic_filtrate(**v)
    got = float(lymph_capacity(0.0, *v.values()))
    assert got == pytest.approx(want, rel=1e-9)
    assert float(lymph_capacity(0.013, *v.values())) == pytest.approx(want + 0.013, rel=1e-9)


@pytest.mark.parametrize("tissue", ["skeletal_muscle", "skin_subcutis"])
def test_the_set_derives_its_capacity_from_the_resting_filtrate(tissue: str) -> None:
    pset = load_prior_set(tissue)
    assert "JL_max" not in pset.priors and pset.derived["JL_max"].formula == "lymph_capacity"
    m = prior_medians(tissue)
    # at the medians: the classic root (muscle about 0.006 mL/min/100 g, skin 0.012) plus the reserve's median
    filtrate = _classic_filtrate(*(m[k] for k in ("Kf", "Pc", "sigma", "PS", "pi_c", "L", "Pi_L0")))
    assert m["JL_max"] == pytest.approx(filtrate + m["JL_reserve"], rel=1e-9)


def _study(conditions: list[str], **extra: object) -> Study:
    return Study.from_dict({"study": {"tissue": "skeletal_muscle", "model": "steady_state", "seed": 3,
                                      "conditions": conditions}, **extra})


def test_a_condition_that_changes_the_forces_holds_the_capacity_at_the_healthy_filtrate() -> None:
    m = prior_medians("skeletal_muscle")
    healthy = m["JL_max"] - m["JL_reserve"]
    s = _study(["sepsis"])
    d = s.derived["JL_max"]
    assert d.healthy_filtrate == pytest.approx(healthy, rel=1e-9)
    assert any("lymph capacity JL_max is the healthy set's resting filtrate" in n for n in s.notes)
    values = {"JL_reserve": np.array([0.001, 0.02]), "Kf": np.array([1.0, 1.0])}  # the forces are not read
    np.testing.assert_allclose(d.compute({**m, **values}), [0.001 + healthy, 0.02 + healthy])
    assert _study([]).derived["JL_max"].healthy_filtrate is None


def test_a_condition_on_the_capacity_scales_it_and_widens_the_reserve() -> None:
    # heart_failure_right (priors/conditions.toml): JL_max x 0.7 with extra_gsd 1.4; Pv +10 mmHg moves the forces
    s = _study(["heart_failure_right"])
    d = s.derived["JL_max"]
    assert d.multiply == pytest.approx(0.7) and d.healthy_filtrate is not None
    before = load_prior_set("skeletal_muscle").priors["JL_reserve"]
    after = s.priors["JL_reserve"]
    widened = math.hypot(math.log(before.params["gsd"]), math.log(1.4))  # variances added on the log scale
    assert math.log(after.params["gsd"]) == pytest.approx(widened, rel=1e-9)
    assert after.median() == pytest.approx(before.median(), rel=1e-12)


def test_a_declared_capacity_replaces_the_derivation() -> None:
    s = _study([], parameters={"JL_max": {"dist": "lognormal", "median": 0.02, "gsd": 2.0, "unit": "mL/min/100g",
                                          "origin": "invented for a test"}})
    assert "JL_max" not in s.derived and "JL_max" in s.priors and "JL_reserve" not in s.priors


def test_priors_show_gives_the_capacity_its_implied_range() -> None:
    # the classic form (the set's first) does not read JL_max; the range comes from the first form that does
    res = CliRunner().invoke(main, ["priors", "show", "skeletal_muscle", "--json"])
    assert res.exit_code == 0, res.output
    (row,) = [r for r in json.loads(res.output) if r["symbol"] == "JL_max"]
    m = prior_medians("skeletal_muscle")
    lo, hi = row["ci95"]
    assert lo < m["JL_max"] < hi and lo > 0.0
    assert row["median"] == pytest.approx(m["JL_max"], rel=0.25)  # the median of the sum is near the sum of medians


def test_an_override_of_a_force_keeps_the_capacity_per_draw_and_says_so() -> None:
    # [parameters] most often declares healthy subjects' own values (studies/forearm_volunteers.toml: Kf), so the
    # capacity keeps each draw's filtrate; the note says a disease state belongs in a condition
    s = _study([], parameters={"Pv": 25.0})
    assert s.derived["JL_max"].healthy_filtrate is None
    assert any(n.startswith("parameters.Pv: the lymph capacity JL_max") for n in s.notes)
    classic = Study.from_dict({"study": {"tissue": "skeletal_muscle", "model": "classic"}, "parameters": {"Pv": 25.0}})
    assert not any("lymph capacity" in n for n in classic.notes)  # (the classic form has no lymph)
