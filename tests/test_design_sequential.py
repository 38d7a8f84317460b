"""Group-sequential boundaries by Lan-DeMets alpha spending: published boundary values and simulated
Brownian motion."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from uncertainty.analyses.design import group_sequential as gs

T5 = np.arange(1, 6) / 5


def test_spending_functions_spend_alpha_by_the_end() -> None:
    # Lan & DeMets 1983 (Biometrika 70:659): both shapes spend exactly alpha at t = 1 and nothing at t = 0
    for f in (gs.obf_spending, gs.pocock_spending):
        assert float(f(1.0, 0.05)) == pytest.approx(0.05, rel=1e-12)
        assert float(f(0.0, 0.05)) == 0.0


@pytest.mark.parametrize(("shape", "published"), [
    # from memory: five equally spaced looks, two-sided 0.05 (0.025 per side), Lan-DeMets spending, as tabulated
    # by the ld98 programs (Reboussin, DeMets, Kim & Lan 2000, Control Clin Trials 21:190)
    ("obrien_fleming", [4.877, 3.357, 2.680, 2.290, 2.031]),
    ("pocock", [2.438, 2.427, 2.410, 2.397, 2.386]),
])
def test_boundaries_match_published_values(shape: str, published: list[float]) -> None:
    c = gs.boundaries(T5, 0.05, shape)
    np.testing.assert_allclose(c, published, atol=2e-3)


def test_type_one_error_and_power_against_simulated_brownian_motion() -> None:
    # S(t) = Z(t) sqrt(t) is Brownian motion with drift theta (independent increments; common practice):
    # 100000 simulated paths must cross the boundaries with the computed probabilities (MC se about 0.0007)
    rng = np.random.default_rng(3)
    c = gs.boundaries(T5, 0.05, "obrien_fleming")
    summary = gs.design_summary(T5, 0.05, 0.9, "obrien_fleming", n_fixed=100.0)
    theta = (stats.norm.ppf(0.975) + stats.norm.ppf(0.9)) * np.sqrt(summary["inflation"])
    for drift, expect in ((0.0, 0.05), (theta, None)):
        inc = rng.standard_normal((100_000, 5)) * np.sqrt(0.2) + drift * 0.2
        z = np.cumsum(inc, axis=1) / np.sqrt(T5)
        hit = np.abs(z) >= c
        crossed = hit.any(axis=1)
        if expect is not None:
            assert abs(crossed.mean() - expect) < 4 * np.sqrt(expect * (1 - expect) / 100_000)
        else:
            first = np.where(crossed, hit.argmax(axis=1), 4)
            up = crossed & (z[np.arange(len(z)), first] > 0)
            assert abs(up.mean() - 0.9) < 4 * np.sqrt(0.09 / 100_000) + 1e-3
            n_sim = (T5[first] * summary["n_max"]).mean()
            assert n_sim == pytest.approx(summary["expected_n_alternative"], rel=0.01)
    # the O'Brien-Fleming shape costs little maximum n and saves n on average under the alternative
    assert 1.0 < summary["inflation"] < 1.05
    assert summary["expected_n_alternative"] < 100.0


def test_bad_information_fractions_are_refused() -> None:
    with pytest.raises(ValueError):
        gs.boundaries([0.5, 0.4, 1.0])
