"""Unit conversions both ways and across tissue bases."""

import pytest

from uncertainty.core.errors import UnitError
from uncertainty.core.units import basis_factor, basis_of, canonical_unit, parse, to_canonical

# 1 mmHg = 133.322387415 Pa (conventional millimetre of mercury; BIPM SI Brochure, 8th ed., Table 9)
MMHG_PA = 133.322387415
# 1 cmH2O = 98.0665 Pa (conventional, standard gravity times 1 g/cm3 times 1 cm; common practice)
CMH2O_PA = 98.0665


def test_kpa_to_mmhg():
    assert to_canonical("Pc", "2.5 kPa") == pytest.approx(2500 / MMHG_PA, rel=1e-9)


def test_cmh2o_to_mmhg_and_back():
    mmhg = to_canonical("Pi", 3, "cmH2O")
    assert mmhg == pytest.approx(3 * CMH2O_PA / MMHG_PA, rel=1e-9)
    # back: the same pressure given in mmHg is unchanged
    assert to_canonical("Pi", f"{mmhg} mmHg") == pytest.approx(mmhg, rel=1e-12)


def test_negative_pressure_parses():
    assert to_canonical("Pi", "-4 mmHg") == -4.0


def test_protein_g_per_l():
    # 70 g/L is 7 g/dL (definition of the litre and decilitre)
    assert to_canonical("Cp", "70 g/L") == pytest.approx(7.0)


def test_bare_number_is_canonical():
    assert to_canonical("Kf", 0.004) == 0.004
    assert to_canonical("sigma", "0.9") == 0.9


def test_per_100ml_to_per_100g_uses_density():
    # 100 mL of tissue of density 1.05 g/mL weighs 105 g, so per 100 g is smaller by 1.05
    kf = to_canonical("Kf", "0.0042 mL/min/mmHg/100mL", density=1.05)
    assert kf == pytest.approx(0.004, rel=1e-12)
    # and back again
    assert to_canonical("Kf", f"{kf} mL/min/mmHg/100g", basis="100mL", density=1.05) == pytest.approx(0.0042)


def test_per_organ_needs_tissue_mass():
    with pytest.raises(UnitError, match="tissue_mass"):
        to_canonical("Jv", "1 mL/min")
    # 60 mL/h from a 3 kg limb = 1 mL/min over 30 units of 100 g
    assert to_canonical("Jv", "60 mL/h", tissue_mass_kg=3.0) == pytest.approx(1 / 30)


def test_time_units_convert():
    assert to_canonical("Jv", "6 mL/h/100g") == pytest.approx(0.1)


@pytest.mark.parametrize("symbol,text", [("Pc", "3 g/dL"), ("sigma", "1 mmHg"), ("Kf", "1 mL/min/100g"),
                                         ("Cp", "5 mmHg")])
def test_wrong_dimension_names_the_quantity(symbol, text):
    with pytest.raises(UnitError) as err:
        to_canonical(symbol, text)
    assert symbol in str(err.value)


def test_basis_on_a_pressure_is_refused():
    with pytest.raises(UnitError, match="per-tissue"):
        to_canonical("Pc", "20 mmHg/100g")


@pytest.mark.parametrize("text", ["abc", "", "nan", "kPa 3"])
def test_unparseable(text):
    with pytest.raises(UnitError):
        to_canonical("Pc", text)


def test_unknown_quantity_and_unit():
    with pytest.raises(UnitError, match="unknown quantity"):
        to_canonical("Pq", 3)
    with pytest.raises(UnitError, match="unknown unit"):
        to_canonical("Pc", "3 blorps")


def test_helpers():
    assert basis_of("mL/min/mmHg/100mL") == "100mL"
    assert basis_of("mL/min per 100 g") == "100g"
    assert basis_of("mmHg") is None
    assert canonical_unit("Kf", "100mL") == "mL/min/mmHg/100mL"
    assert canonical_unit("Kf", "organ") == "mL/min/mmHg"
    assert parse("2.5 kPa") == (2.5, "kPa")
    assert basis_factor("organ", "100g", tissue_mass_kg=2.0) == pytest.approx(1 / 20)


def test_overflowing_number_is_refused():
    # "1e999" is not a pressure: float() makes it inf, which must not reach a formula
    with pytest.raises(UnitError, match="out of range") as err:
        to_canonical("Pc", "1e999 mmHg")
    assert "Pc" in str(err.value) and "1e999" in str(err.value)


def test_per_organ_error_names_the_value():
    with pytest.raises(UnitError, match="tissue_mass") as err:
        to_canonical("Kf", "0.004 mL/min/mmHg")
    assert "Kf" in str(err.value) and "0.004 mL/min/mmHg" in str(err.value)
