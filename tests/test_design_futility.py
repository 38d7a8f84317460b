"""Non-binding beta-spending futility bounds for group-sequential designs: closed forms (one look is the
fixed design; the beta spent under the alternative follows the spending function) and directly simulated
Brownian motion through the boundaries (no PyMC)."""

from __future__ import annotations

import importlib
import math
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from uncertainty.analyses.design import group_sequential as gs
from uncertainty.analyses.design.report_section import protocol_markdown
from uncertainty.core.errors import InputError

sys.path.insert(0, str(Path(__file__).parent))
from test_design_tests import BASE, _study  # noqa: E402

dz = importlib.import_module("uncertainty.analyses.design")
T3 = np.arange(1, 4) / 3


def test_one_look_is_the_fixed_design() -> None:
    # closed form: with a single analysis there is nothing to spend early, so theta = z_{1-a/2} + z_{power}
    # and the inflation factor is 1 (common practice)
    for shape in ("obrien_fleming", "pocock"):
        s = gs.futility_design([1.0], 0.05, 0.9, shape, shape, 100.0)
        assert s["inflation"] == pytest.approx(1.0, abs=1e-6)
        assert s["futility_z"][0] == pytest.approx(stats.norm.ppf(0.975), abs=1e-9)


def test_efficacy_bounds_are_the_lan_demets_ones() -> None:
    # from memory: Lan-DeMets O'Brien-Fleming-shaped bounds for three equally spaced looks at one-sided 0.025:
    # 3.710, 2.511, 1.993; non-binding futility leaves them unchanged
    s = gs.futility_design(T3, 0.05, 0.9, "obrien_fleming", "obrien_fleming", 100.0)
    np.testing.assert_allclose(s["boundaries"], [3.710, 2.511, 1.993], atol=2e-3)


@pytest.mark.parametrize("shape", ["obrien_fleming", "pocock"])
def test_beta_spent_under_the_alternative_follows_the_spending_function(shape: str) -> None:
    # closed form: the cumulative futility-stopping probability under H1 at look k is the beta-spending
    # function at t_k (Lan & DeMets 1983 shapes used for beta: Pampallona, Tsiatis & Kim 2001, Drug Inf J
    # 35:1113), wherever the bound lies above the harm boundary; power with the rule followed is the target
    t5 = np.arange(1, 6) / 5
    s = gs.futility_design(t5, 0.05, 0.9, shape, shape, 100.0)
    cum = np.cumsum(s["stop_alternative"]["futility"])
    free = s["futility_z"][:-1] > -s["boundaries"][:-1] + 1e-6
    np.testing.assert_allclose(cum[:-1][free], gs.beta_spending(t5[:-1][free], 0.1, shape), atol=2e-4)
    assert s["power"] == pytest.approx(0.9, abs=1e-4)
    assert s["power_ignoring_futility"] > 0.9  # the futility rule costs power, paid for by a larger n
    assert s["inflation"] > gs.design_summary(t5, 0.05, 0.9, shape, 100.0)["inflation"]


@pytest.mark.parametrize("shape", ["obrien_fleming", "pocock"])
def test_stopping_probabilities_and_expected_n_against_simulated_brownian_motion(shape: str) -> None:
    # S(t) = Z(t) sqrt(t) is Brownian motion with drift theta (independent increments; common practice):
    # 200000 simulated paths through the bounds, the futility rule followed; MC se of a probability <= 0.0012
    s = gs.futility_design(T3, 0.05, 0.9, shape, shape, 100.0)
    c, b = np.asarray(s["boundaries"]), np.asarray(s["futility_z"])
    rng = np.random.default_rng(11)
    m = 200_000
    for drift, key in ((0.0, "stop_null"), (s["theta"], "stop_alternative")):
        z = np.cumsum(rng.standard_normal((m, 3)) * math.sqrt(1 / 3) + drift / 3, axis=1) / np.sqrt(T3)
        out = (z >= c) | (z < b)
        look = out.argmax(axis=1)  # the last look always ends the trial (b_3 = c_3)
        zk = z[np.arange(m), look]
        for k in range(3):
            eff = np.mean((look == k) & (zk >= c[k]))
            fut = np.mean((look == k) & (zk < b[k]))
            for sim, calc in ((eff, s[key]["efficacy"][k]), (fut, s[key]["futility"][k])):
                assert abs(sim - calc) < 4 * math.sqrt(max(calc * (1 - calc), 1e-4) / m)
        n_sim = float(np.mean(T3[look] * s["n_max"]))
        assert n_sim == pytest.approx(s["expected_n_null" if drift == 0 else "expected_n_alternative"], rel=0.005)
        if drift == 0:
            # non-binding: ignoring the futility rule, the type I error in the direction of benefit is alpha/2
            up = np.any(z >= c, axis=1).mean()
            assert abs(up - 0.025) < 4 * math.sqrt(0.025 * 0.975 / m)


def test_futility_in_the_result_table_and_protocol() -> None:
    res = dz.design(_study(dict(BASE, looks=3, futility="obrien_fleming", n_points=2, trials=200))).to_dict()
    gsq = res["group_sequential"]
    assert gsq["futility"] == "obrien_fleming" and len(gsq["futility_z"]) == 3
    assert gsq["futility_z"][-1] == pytest.approx(gsq["boundaries_z"][-1])
    assert sum(gsq["stop_null"]["any"]) == pytest.approx(1.0)
    plain = dz.design(_study(dict(BASE, looks=3, n_points=2, trials=200))).to_dict()["group_sequential"]
    # a futility rule cuts the expected n under no effect (it stops trials going nowhere)
    assert gsq["expected_n_per_arm_null"] < plain["expected_n_per_arm_null"]
    assert plain["futility_z"] is None and len(plain["stop_alternative"]["efficacy"]) == 3
    md = protocol_markdown(res)
    assert "non-binding" in md and "| look |" in md
    assert any(a["what"] == "futility rule" for a in res["assumptions"])


@pytest.mark.parametrize(("patch", "value"), [({"looks": 3, "futility": "conditional"}, "conditional"),
                                              ({"futility": "pocock"}, "pocock")])
def test_bad_futility_names_the_key(patch: dict, value: str) -> None:
    with pytest.raises(InputError) as err:
        dz.parse_design(_study(dict(BASE, **patch)))
    assert (err.value.key, err.value.value) == ("design.futility", value)


def test_report_section_has_the_per_look_table() -> None:
    from uncertainty.analyses.design.report_section import section_html

    res = dz.design(_study(dict(BASE, looks=3, futility="pocock", n_points=2, trials=200))).to_dict()
    html = section_html(res)
    assert "beta-spending futility bound" in html and "H1 stop: futility" in html
