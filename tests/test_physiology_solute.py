"""Patlak convection-diffusion flux and steady-state ratio: limits and consistency."""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from uncertainty.physiology.solute import (
    peclet,
    protein_flux,
    steady_state_ratio,
    steady_state_ratio_slope,
)


def patlak_direct(Jv, s, PS, Cp, Ci):
    """Textbook form, Patlak et al. 1963 (as in Michel 1997 Exp Physiol 82:1), for moderate Pe."""
    pe = Jv * (1 - s) / PS
    return Jv * (1 - s) * (Cp - Ci * np.exp(-pe)) / (1 - np.exp(-pe))


def test_ratio_matches_textbook_form():
    for Jv, s, PS in [(0.002, 0.9, 0.001), (0.01, 0.5, 0.003), (0.0005, 0.95, 0.0002)]:
        pe = peclet(Jv, s, PS)
        direct = (1 - s) / (1 - s * np.exp(-pe))  # Patlak et al. 1963 steady state
        assert steady_state_ratio(Jv, s, PS) == pytest.approx(direct, rel=1e-13)


def test_ratio_sigma_one_limit():
    # Closed-form limit sigma -> 1: Ci/Cp = PS / (PS + Jv) (pure diffusion against filtrate dilution).
    Jv, PS = 0.002, 0.001
    assert steady_state_ratio(Jv, 1.0, PS) == pytest.approx(PS / (PS + Jv), rel=1e-14)
    assert steady_state_ratio(Jv, 1.0 - 1e-12, PS) == pytest.approx(PS / (PS + Jv), rel=1e-9)


def test_ratio_low_flow_and_no_barrier_limits():
    assert steady_state_ratio(1e-15, 0.9, 0.001) == pytest.approx(1.0, abs=1e-11)  # Jv -> 0
    assert steady_state_ratio(0.002, 0.0, 0.001) == 1.0  # sigma = 0: filtrate equals plasma


def test_ratio_high_peclet_limit():
    # Closed-form limit Pe -> infinity: Ci/Cp -> 1 - sigma (pure sieving).
    assert steady_state_ratio(10.0, 0.9, 1e-4) == pytest.approx(0.1, rel=1e-10)


def test_ratio_no_steady_state_for_absorption():
    out = steady_state_ratio(np.array([-0.01, 0.0]), 0.9, 0.001)
    np.testing.assert_array_equal(out, [1.0, 1.0])
    assert np.all(steady_state_ratio_slope(np.array([-0.01, 0.0]), 0.9, 0.001) == 0.0)


@given(
    st.floats(min_value=1e-9, max_value=1.0),
    st.floats(min_value=0.0, max_value=1.0),
    st.floats(min_value=1e-6, max_value=1.0),
)
def test_ratio_in_unit_interval(Jv, s, PS):
    r = steady_state_ratio(Jv, s, PS)
    assert 0.0 < r <= 1.0
    assert r >= 1.0 - s - 1e-12  # never below the pure-sieving value (Patlak closed form)


def test_ratio_slope_matches_finite_difference():
    Jv, s, PS, h = 0.003, 0.85, 0.002, 1e-7
    fd = (steady_state_ratio(Jv + h, s, PS) - steady_state_ratio(Jv - h, s, PS)) / (2 * h)
    assert steady_state_ratio_slope(Jv, s, PS) == pytest.approx(fd, rel=1e-6)


def test_flux_matches_textbook_form_both_signs():
    for Jv in (0.004, -0.004, 0.0007):
        assert protein_flux(Jv, 0.8, 0.002, 7.0, 3.0) == pytest.approx(
            patlak_direct(Jv, 0.8, 0.002, 7.0, 3.0), rel=1e-12)


def test_flux_limits():
    # Jv -> 0: pure diffusion PS (Cp - Ci) (Fick, closed form).
    assert protein_flux(0.0, 0.9, 0.002, 7.0, 3.0) == pytest.approx(0.002 * 4.0)
    assert protein_flux(1e-14, 0.9, 0.002, 7.0, 3.0) == pytest.approx(0.002 * 4.0)
    # sigma = 1: no convection, diffusion only.
    assert protein_flux(0.01, 1.0, 0.002, 7.0, 3.0) == pytest.approx(0.002 * 4.0)
    # Large |Pe|: pure convection, upwind concentration; finite, no overflow.
    assert protein_flux(1.0, 0.5, 1e-4, 7.0, 3.0) == pytest.approx(0.5 * 7.0)
    assert protein_flux(-1.0, 0.5, 1e-4, 7.0, 3.0) == pytest.approx(-0.5 * 3.0)


def test_flux_at_steady_state_ratio_is_filtrate_flux():
    # Steady state: Js = Jv Ci with Ci = ratio * Cp (the definition of the Patlak steady state).
    Jv, s, PS, Cp = np.array([1e-4, 0.001, 0.01]), 0.9, 0.001, 7.0
    Ci = steady_state_ratio(Jv, s, PS) * Cp
    np.testing.assert_allclose(protein_flux(Jv, s, PS, Cp, Ci), Jv * Ci, rtol=1e-12)
