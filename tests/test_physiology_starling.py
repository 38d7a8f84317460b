"""Starling force sums against standard textbook numbers, and the direction labels."""

import numpy as np
import pytest

from uncertainty.physiology.starling import direction, filtration, forces, net_pressure

# Guyton & Hall, Textbook of Medical Physiology (ch. "The microcirculation and lymphatic system"),
# from memory: systemic capillary with Pi = -3, pi_i = 8, pi_c = 28 mmHg (sigma = 1 implicitly);
# arterial end Pc = 30 -> net +13 mmHg outward; venous end Pc = 10 -> net -7 mmHg (inward).
TEXTBOOK_PI, TEXTBOOK_PI_I, TEXTBOOK_PI_C = -3.0, 8.0, 28.0


def test_arterial_end_force_sum():
    net = net_pressure(30.0, TEXTBOOK_PI, TEXTBOOK_PI_C, TEXTBOOK_PI_I, 1.0)
    assert net == pytest.approx(13.0)  # Guyton & Hall, from memory


def test_venous_end_force_sum():
    net = net_pressure(10.0, TEXTBOOK_PI, TEXTBOOK_PI_C, TEXTBOOK_PI_I, 1.0)
    assert net == pytest.approx(-7.0)  # Guyton & Hall, from memory


def test_mean_functional_pressure_near_balance():
    # Guyton & Hall, from memory: mean functional Pc 17.3 mmHg gives a net of +0.3 mmHg.
    net = net_pressure(17.3, TEXTBOOK_PI, TEXTBOOK_PI_C, TEXTBOOK_PI_I, 1.0)
    assert net == pytest.approx(0.3)


def test_glomerular_filtration_sum():
    # Guyton & Hall, from memory: glomerular Pc 60, Bowman's capsule pressure 18, glomerular
    # oncotic 32, Bowman's oncotic ~0 mmHg -> net 10 mmHg; Kf 12.5 mL/min/mmHg -> GFR 125 mL/min.
    net = net_pressure(60.0, 18.0, 32.0, 0.0, 1.0)
    assert net == pytest.approx(10.0)
    assert filtration(12.5, 60.0, 18.0, 32.0, 0.0, 1.0) == pytest.approx(125.0)


def test_forces_signed_and_sum_to_net():
    f = forces(30.0, -3.0, 28.0, 8.0, 0.9)
    assert f["Pc"] == 30.0 and f["Pi"] == 3.0
    assert f["pi_c"] == pytest.approx(-0.9 * 28.0)
    assert f["pi_i"] == pytest.approx(0.9 * 8.0)
    assert sum(f.values()) == pytest.approx(net_pressure(30.0, -3.0, 28.0, 8.0, 0.9))


def test_forces_broadcast_arrays():
    Pc = np.array([20.0, 25.0, 30.0])
    f = forces(Pc, -2.0, 25.0, 8.0, 0.9)
    assert all(np.shape(v) == (3,) for v in f.values())
    np.testing.assert_allclose(sum(f.values()), net_pressure(Pc, -2.0, 25.0, 8.0, 0.9))


def test_sigma_zero_removes_oncotic_terms():
    # Closed form: with sigma = 0 the oncotic terms vanish and Jv = Kf (Pc - Pi).
    assert filtration(0.01, 25.0, -2.0, 28.0, 8.0, 0.0) == pytest.approx(0.01 * 27.0)


def test_direction_labels():
    assert direction(0.1) == "filtration"
    assert direction(-0.1) == "absorption"
    assert direction(0.0) == "balance"
    assert direction(1e-13) == "balance"
    out = direction(np.array([1.0, -1.0, 0.0]))
    assert list(out) == ["filtration", "absorption", "balance"]
