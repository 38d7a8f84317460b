"""Oncotic-pressure relations against published values and the inverse relation."""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from uncertainty.core.errors import InputError
from uncertainty.physiology import oncotic


def test_landis_pappenheimer_normal_plasma():
    # Normal plasma total protein 7 g/dL gives about 25-28 mmHg (Guyton & Hall, from memory;
    # Landis & Pappenheimer 1963 polynomial, from memory): 2.1*7 + 0.16*49 + 0.009*343 = 25.627.
    pi = oncotic.pi_total_protein(7.0)
    assert 25.0 <= pi <= 28.0
    assert pi == pytest.approx(25.627)


def test_albumin_polynomial_closed_form():
    # Landis & Pappenheimer 1963 (from memory) albumin at 4.5 g/dL: 12.6 + 3.645 + 1.0935 mmHg.
    assert oncotic.pi_albumin(4.5) == pytest.approx(17.3385)


def test_albumin_share_of_plasma_oncotic_pressure():
    # Normal plasma about 4.5 g/dL albumin + 2.5 g/dL globulin, albumin giving about 80% of the
    # plasma colloid osmotic pressure (Guyton & Hall, from memory: 21.8 of 28 mmHg).
    pi = oncotic.pi_albumin_globulin(4.5, 2.5)
    alb, glob = oncotic.pi_albumin_globulin_parts(4.5, 2.5)
    assert alb + glob == pytest.approx(pi)
    share = alb / pi
    assert 0.70 <= share <= 0.85
    # With the albumin-globulin cross terms the route agrees with the total-protein relation for
    # plasma within about 15 % (it used to sum the pure cubics and fall 16 % short).
    total = oncotic.pi_total_protein(7.0)
    assert 0.85 * total < pi < 1.15 * total


def test_albumin_globulin_mixture_closed_form():
    # Geometric-mean combining rule (common practice): sum_k (a_Ak^(1/k) A + a_Gk^(1/k) G)^k.
    A, G = 4.2, 2.8
    (a1, a2, a3), (g1, g2, g3) = oncotic.COEFFICIENTS["albumin"], oncotic.COEFFICIENTS["globulin"]
    expected = (a1 * A + g1 * G) + (a2 ** 0.5 * A + g2 ** 0.5 * G) ** 2 + (a3 ** (1 / 3) * A + g3 ** (1 / 3) * G) ** 3
    assert oncotic.pi_albumin_globulin(A, G) == pytest.approx(expected)
    # Cross terms are positive: the mixture exceeds the sum of the pure-species pressures.
    assert oncotic.pi_albumin_globulin(A, G) > oncotic.pi_albumin(A) + oncotic.pi_globulin(G)
    # Either protein alone gives its own cubic exactly.
    C = np.linspace(0.0, 8.0, 9)
    np.testing.assert_allclose(oncotic.pi_albumin_globulin(C, 0.0 * C), oncotic.pi_albumin(C))
    np.testing.assert_allclose(oncotic.pi_albumin_globulin(0.0 * C, C), oncotic.pi_globulin(C))


def test_albumin_exerts_more_per_gram_than_globulin():
    # Smaller molecule, more particles per gram (common practice).
    C = np.linspace(0.5, 8, 16)
    assert np.all(oncotic.pi_albumin(C) > oncotic.pi_globulin(C))


def test_van_t_hoff_underestimates_real_plasma():
    # Ideal value: c R T; 4 g/dL albumin at 37 degC -> 0.6015 mol/m^3 * 8.314 * 310.15 / 133.322
    # = 11.63 mmHg (closed form). Real albumin solutions exceed the ideal value.
    ideal = oncotic.pi_van_t_hoff(4.0, molar_mass=66_500.0, T=310.15)
    assert ideal == pytest.approx(40.0 / 66_500.0 * 1000 * 8.314462618 * 310.15 / 133.322387415)
    assert ideal < oncotic.pi_albumin(4.0)
    # Dilute limit: the empirical albumin slope 2.8 mmHg per g/dL is close to van 't Hoff's
    # 2.9 mmHg per g/dL at 37 degC (closed form), i.e. real behaviour tends to ideal as C -> 0.
    assert oncotic.pi_van_t_hoff(1e-6) / 1e-6 == pytest.approx(2.8, rel=0.06)


@pytest.mark.parametrize("kind", ["total", "albumin", "globulin"])
def test_inverse_roundtrip(kind):
    C = np.array([0.0, 0.5, 2.0, 4.5, 7.0, 10.0])
    pi = oncotic.pi_cubic(C, kind)
    np.testing.assert_allclose(oncotic.protein_from_pi(pi, kind), C, atol=1e-10)


@given(st.floats(min_value=0.0, max_value=80.0))
def test_inverse_roundtrip_property(p):
    C = oncotic.protein_from_pi(p, "total")
    assert C >= 0
    assert oncotic.pi_total_protein(C) == pytest.approx(p, abs=1e-9)


def test_inverse_scalar_returns_float():
    assert isinstance(oncotic.protein_from_pi(25.627), float)
    assert oncotic.protein_from_pi(25.627) == pytest.approx(7.0)


def test_inverse_rejects_bad_input():
    with pytest.raises(InputError):
        oncotic.protein_from_pi(-1.0)
    with pytest.raises(InputError):
        oncotic.protein_from_pi(10.0, kind="fibrinogen")
