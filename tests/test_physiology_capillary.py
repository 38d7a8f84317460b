"""Capillary pressure relations: two-resistance mean, posture, lung, axial profile."""

import numpy as np
import pytest
from scipy.integrate import quad

from uncertainty.physiology import capillary as cap
from uncertainty.physiology.starling import filtration


def test_two_resistance_mean_balances_flows():
    # Closed form (Pappenheimer & Soto-Rivera 1948): Pc = (r Pa + Pv)/(1 + r) is the pressure at
    # which flow through Ra equals flow through Rv = r Ra. Check that directly.
    Pa, Pv, Ra = 90.0, 12.0, 1.0
    for r in (0.1, 0.25, 1.0, 4.0):
        Pc = cap.mean_capillary_pressure(Pa, Pv, r)
        assert (Pa - Pc) / Ra == pytest.approx((Pc - Pv) / (r * Ra))
    assert cap.mean_capillary_pressure(100.0, 10.0, 0.25) == pytest.approx(28.0)


def test_two_resistance_limits():
    assert cap.mean_capillary_pressure(100.0, 10.0, 0.0) == 10.0  # no Rv: Pc follows Pv
    assert cap.mean_capillary_pressure(100.0, 10.0, 1e12) == pytest.approx(100.0)


def test_venous_pressure_transmission_to_capillary():
    # dPc/dPv = 1/(1 + r) (derivative of the closed form).
    r = 0.2
    dPc = cap.mean_capillary_pressure(90.0, 30.0, r) - cap.mean_capillary_pressure(90.0, 10.0, r)
    assert dPc == pytest.approx(20.0 / 1.2)


def test_hydrostatic_offset_per_cm():
    # About 0.77 mmHg per cm of blood (common practice; 1 cmH2O = 0.7356 mmHg, density 1.05).
    assert cap.hydrostatic_offset(1.0) == pytest.approx(0.77, abs=0.005)
    # 1 cm of water = 0.7356 mmHg (common practice): rho g h / 133.322 Pa.
    assert cap.hydrostatic_offset(1.0, density=1.0) == pytest.approx(1000 * 9.80665 * 0.01 / 133.322, rel=1e-4)
    assert cap.hydrostatic_offset(-10.0) == pytest.approx(-7.72, abs=0.05)


def test_pulmonary_capillary_pressure_gaar():
    # Gaar et al. 1967: Pc = LAP + 0.4 (PAP - LAP); LAP 8, PAP 15 -> 10.8 mmHg (closed form).
    assert cap.pulmonary_capillary_pressure(8.0, 15.0) == pytest.approx(10.8)
    assert cap.pulmonary_capillary_pressure(8.0, 15.0, fraction=0.0) == 8.0


def test_length_average_equals_integral():
    args = (0.01, 32.0, 12.0, -2.0, 25.0, 8.0, 0.9)
    integral, _ = quad(lambda x: cap.axial_filtration(x, *args), 0.0, 1.0)
    assert cap.mean_axial_filtration(*args) == pytest.approx(integral, rel=1e-12)
    assert cap.mean_axial_filtration(*args) == pytest.approx(filtration(0.01, 22.0, -2.0, 25.0, 8.0, 0.9))


def test_absorbing_fraction_textbook_profile():
    # Guyton & Hall (from memory): net +13 mmHg at the arterial end, -7 at the venous end; with a
    # linear fall the net pressure crosses zero at 13/20 of the length -> 35% absorbing.
    f = cap.absorbing_fraction(30.0, 10.0, -3.0, 28.0, 8.0, 1.0)
    assert f == pytest.approx(0.35)
    # Independent check on a dense grid.
    x = np.linspace(0, 1, 200001)
    local = cap.axial_pressure(x, 30.0, 10.0) + 3.0 - (28.0 - 8.0)
    assert f == pytest.approx(np.mean(local < 0), abs=1e-4)


def test_absorbing_fraction_edge_cases():
    assert cap.absorbing_fraction(40.0, 30.0, 0.0, 25.0, 8.0, 1.0) == 0.0  # filters everywhere
    assert cap.absorbing_fraction(12.0, 8.0, 0.0, 25.0, 8.0, 1.0) == 1.0  # absorbs everywhere
    assert cap.absorbing_fraction(15.0, 15.0, 0.0, 25.0, 8.0, 1.0) == 1.0  # flat, absorbing
    assert cap.absorbing_fraction(30.0, 30.0, 0.0, 25.0, 8.0, 1.0) == 0.0  # flat, filtering
    # Rising profile: absorbing part at the arterial end.
    assert cap.absorbing_fraction(10.0, 30.0, -3.0, 28.0, 8.0, 1.0) == pytest.approx(0.35)
