"""Units: one lazily built pint registry, the canonical unit of every quantity, and tissue bases.

Canonical units follow DESIGN.md section 2: pressures in mmHg, protein in g/dL, flows per 100 g
of tissue per minute. Filtration-type quantities (Kf, Jv, JL, PS, C_tis, L, ...) carry a *basis*
in their unit string:

- ``/100g``  per 100 g of tissue (the canonical basis),
- ``/100mL`` per 100 mL of tissue (limb plethysmography); converted through the tissue density
  (g/mL),
- no basis suffix: per organ (the whole limb or organ); converted through ``tissue_mass_kg``.

Conversions between bases: 100 mL of tissue weighs ``100 * density`` g, so ``x per 100 mL`` is
``x / density per 100 g``; a whole-organ value ``X`` for an organ of ``M`` kg is ``X / (10 M)``
per 100 g.

pint is imported only when a unit string has to be parsed, so commands that take plain numbers
in canonical units never pay its start-up cost.
"""

from __future__ import annotations

import functools
import math
import re
from typing import Any

from uncertainty.core.errors import UnitError

BASES = ("100g", "100mL", "organ")

#: Canonical unit of each quantity, with the basis suffix for per-tissue quantities.
CANONICAL: dict[str, str] = {
    # pressures (mmHg)
    "Pc": "mmHg", "Pi": "mmHg", "pi_c": "mmHg", "pi_i": "mmHg", "pi_g": "mmHg",
    "Pa": "mmHg", "Pv": "mmHg", "Pvi": "mmHg", "LAP": "mmHg", "PAP": "mmHg",
    "TPG": "mmHg", "P_imb": "mmHg", "Pi_early": "mmHg",
    "Pi_L0": "mmHg", "Pi_break": "mmHg", "P_flood": "mmHg", "safety_margin": "mmHg", "net_pressure": "mmHg",
    "force_osm": "mmHg",
    "Pcuff": "mmHg",
    "Pgc": "mmHg", "Pbs": "mmHg", "pi_bs": "mmHg", "pi_e": "mmHg", "dP": "mmHg",
    "bias": "mmHg", "osmotic_pressure": "mmHg",
    # dimensionless
    "sigma": "1", "r": "1", "transmission": "1", "FF": "1", "sigma_osm": "1", "ratio": "1",
    "sigma_g": "1", "sigma_s": "1", "alpha_L": "1", "sigma_eff": "1",
    # concentrations
    "Cp": "g/dL", "Hb": "g/dL", "Ci": "g/dL", "C_alb": "g/dL", "C_glob": "g/dL", "Ci_alb": "g/dL", "Ci_glob": "g/dL",
    "osmolality": "mOsm/kg", "d_osmolality": "mOsm/kg", "Osm_p": "mOsm/kg", "Osm_i": "mOsm/kg",
    # per-tissue quantities (basis suffix)
    "Kf": "mL/min/mmHg/100g",
    "Jv": "mL/min/100g", "JL": "mL/min/100g", "JL_max": "mL/min/100g", "JL_reserve": "mL/min/100g",
    "swelling_rate": "mL/min/100g",
    "J_epi": "mL/min/100g", "Jv_large": "mL/min/100g",
    "PS": "mL/min/100g",
    "C_tis": "mL/mmHg/100g", "C_tis_high": "mL/mmHg/100g", "C_v": "mL/mmHg/100g",
    "L": "mL/min/mmHg/100g", "G_flood": "mL/min/mmHg/100g", "flooding": "mL/min/100g",
    "volume": "mL/100g", "oedema_volume": "mL/100g", "V_dist": "mL/100g", "EVLW": "mL/100g", "EVLW0": "mL/100g",
    # whole-organ quantities
    "GFR": "mL/min", "RPF": "mL/min", "Kf_organ": "mL/min/mmHg", "Jv_organ": "mL/min",
    # other
    "r_S": "nm", "r_L": "nm",
    "tissue_mass": "kg", "density": "g/mL", "height": "cm", "tau_v": "min", "time": "min", "t_el": "min",
    "M_lung": "g/kg", "EVLWI": "mL/kg",
    "k_clear": "1/min", "k_AFC": "1/min",
    # whole-body albumin transcapillary escape rate: % of the plasma albumin mass leaving per hour
    "TER": "%/h",
    "body_weight": "kg", "fluid_balance": "L", "organ_share": "1", "urine_volume": "mL",
    # whole_body readings: haematocrit as a fraction of blood volume, urine flow (mean over an interval)
    "Hct": "1", "urine_flow": "mL/min",
}

_BASIS_RE = re.compile(r"\s*(?:/|\bper\b)\s*\(?\s*100\s*(g|mL|ml)\s*\)?\s*(?:tissue)?\s*$")


@functools.lru_cache(maxsize=1)
def registry() -> Any:
    """The one pint registry (built on first use): mmHg, cmH2O, kPa, g/dL, mOsm and the rest."""
    import pint

    ureg: Any = pint.UnitRegistry(autoconvert_offset_to_baseunit=True)
    ureg.define("osmole = mole = Osm")
    ureg.define("mOsm = 1e-3 * osmole")
    return ureg


def basis_of(unit: str | None) -> str | None:
    """The tissue basis written in a unit string: ``"100g"``, ``"100mL"``, ``"organ"`` or None.

    ``None`` means the string has no basis suffix; whether that means "per organ" depends on the
    quantity (see :func:`takes_basis`).
    """
    if not unit:
        return None
    m = _BASIS_RE.search(unit)
    if m is None:
        return None
    return "100g" if m.group(1) == "g" else "100mL"


def takes_basis(symbol: str) -> bool:
    """Whether a quantity is expressed per amount of tissue (Kf, Jv, PS, C_tis, ...)."""
    return CANONICAL.get(symbol, "").endswith("/100g")


def canonical_unit(symbol: str, basis: str = "100g") -> str:
    """Canonical unit string of ``symbol`` on a given basis (``"100g"``, ``"100mL"``, ``"organ"``)."""
    if symbol not in CANONICAL:
        raise UnitError(f"unknown quantity '{symbol}'", key=symbol)
    unit = CANONICAL[symbol]
    if takes_basis(symbol):
        stem = unit[: -len("/100g")]
        return {"100g": unit, "100mL": stem + "/100mL", "organ": stem}[basis]
    return unit


def _split_basis(symbol: str, unit: str) -> tuple[str, str]:
    """Split a unit string into (unit without basis, basis) for a per-tissue quantity."""
    m = _BASIS_RE.search(unit)
    if m is None:
        return unit.strip(), "organ"
    return unit[: m.start()].strip(), ("100g" if m.group(1) == "g" else "100mL")


def basis_factor(from_basis: str, to_basis: str, *, density: float = 1.05,
                 tissue_mass_kg: float | None = None, symbol: str = "value") -> float:
    """Multiplier taking a per-tissue value from one basis to another.

    Args:
        from_basis, to_basis: ``"100g"``, ``"100mL"`` or ``"organ"``.
        density: tissue density in g/mL (per 100 mL <-> per 100 g).
        tissue_mass_kg: mass of the organ in kg (per organ <-> per 100 g).
    """
    if from_basis == to_basis:
        return 1.0
    # express everything per 100 g first
    def per100g(basis: str) -> float:  # multiplier from `basis` to per 100 g
        if basis == "100g":
            return 1.0
        if basis == "100mL":
            if not density > 0:
                raise UnitError("tissue density must be positive", key=symbol, value=density)
            return 1.0 / density
        if tissue_mass_kg is None:
            raise UnitError("a per-organ value (a unit without /100g or /100mL) needs the study's tissue_mass "
                            "to convert to another basis", key=symbol)
        if not tissue_mass_kg > 0:
            raise UnitError("tissue_mass must be positive", key="tissue_mass", value=tissue_mass_kg)
        return 1.0 / (10.0 * tissue_mass_kg)

    return per100g(from_basis) / per100g(to_basis)


def to_canonical(symbol: str, value: float | int | str, unit: str | None = None, *,
                 basis: str = "100g", density: float = 1.05,
                 tissue_mass_kg: float | None = None) -> float:
    """Convert a value of quantity ``symbol`` to its canonical unit on ``basis``.

    Args:
        symbol: trade symbol (``"Pc"``, ``"Kf"``, ...), a key of :data:`CANONICAL`.
        value: a number, or a string with a unit such as ``"2.5 kPa"`` or ``"0.004 mL/min/mmHg/100mL"``.
        unit: the unit of a numeric ``value``; None means it is already canonical on ``basis``.
        basis: target basis for per-tissue quantities: ``"100g"`` (default), ``"100mL"``, ``"organ"``.
        density: tissue density in g/mL, for per 100 mL <-> per 100 g.
        tissue_mass_kg: organ mass in kg, for per organ <-> per 100 g.

    Returns:
        The value as a float in the canonical unit.

    Raises:
        UnitError: unknown quantity, unparseable value, wrong dimension, or impossible basis.
    """
    if symbol not in CANONICAL:
        raise UnitError(f"unknown quantity '{symbol}'", key=symbol, value=value)
    given = value if unit is None else f"{value} {unit}"
    if isinstance(value, bool):
        raise UnitError("expected a number or a value with a unit", key=symbol, value=value)
    if isinstance(value, str):
        number, text_unit = parse(value, symbol=symbol)
        if text_unit and unit:
            raise UnitError("give the unit once: in the value or in `unit`", key=symbol, value=value)
        value, unit = number, (text_unit or unit)
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise UnitError("expected a number", key=symbol, value=value) from None
    if math.isnan(number):
        raise UnitError("value is NaN", key=symbol, value=value)
    if unit is not None and not unit.strip():
        raise UnitError(f"empty unit for '{symbol}' (leave the unit out for {CANONICAL[symbol]})", key=symbol,
                        value=unit)
    if unit is None or unit.strip() == "canonical":
        return number

    target = canonical_unit(symbol, basis)
    if takes_basis(symbol):
        stem, from_basis = _split_basis(symbol, unit)
        target_stem = canonical_unit(symbol, "organ")
        try:
            factor = basis_factor(from_basis, basis, density=density, tissue_mass_kg=tissue_mass_kg,
                                  symbol=symbol)
        except UnitError as exc:  # name the value given, not only the quantity
            if exc.value is not None:
                raise
            raise UnitError(exc.reason, key=exc.key, value=given) from None
        return _finite(symbol, _convert(symbol, number, stem, target_stem) * factor, given)
    if basis_of(unit) is not None:
        raise UnitError(f"'{symbol}' is not a per-tissue quantity; its unit takes no basis", key=symbol,
                        value=unit)
    return _finite(symbol, _convert(symbol, number, unit, target), given)


def _finite(symbol: str, x: float, given: Any) -> float:
    """``x``, or UnitError when the conversion overflowed (``1e308 kPa`` is infinite in mmHg)."""
    if not math.isfinite(x):
        raise UnitError(f"'{symbol}' is out of range once converted to {CANONICAL[symbol]}", key=symbol,
                        value=given)
    return x


def _convert(symbol: str, number: float, unit: str, target: str) -> float:
    """Convert with pint, mapping pint's errors to UnitError naming the quantity."""
    if unit == target:
        return number
    if target == "1" and unit.strip() in ("1", "", "dimensionless"):
        return number
    ureg = registry()
    import pint

    try:
        q = ureg.Quantity(number, unit.replace("cmH2O", "cm_H2O"))
        return float(q.to(target if target != "1" else "dimensionless").magnitude)
    except pint.DimensionalityError:
        raise UnitError(f"unit of the wrong dimension for '{symbol}' (expects {target})", key=symbol,
                        value=unit) from None
    except Exception:  # noqa: BLE001 - any unit text pint cannot read: "mmHg/0" (ZeroDivisionError),
        # "(((" (tokenize.TokenError), "mmHg**1e9" (OverflowError), undefined names, syntax errors
        raise UnitError(f"unknown unit for '{symbol}'", key=symbol, value=unit) from None


_NUMBER_RE = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")


def parse(text: str, symbol: str = "value") -> tuple[float, str | None]:
    """Split ``"2.5 kPa"`` into ``(2.5, "kPa")``; a bare number gives ``(x, None)``.

    Raises:
        UnitError: the text does not start with a number.
    """
    m = _NUMBER_RE.match(text)
    if m is None:
        raise UnitError("expected a number, optionally followed by a unit", key=symbol, value=text)
    number = float(m.group(1))
    if not math.isfinite(number):  # e.g. "1e999" overflows to inf
        raise UnitError("number out of range", key=symbol, value=text)
    unit = m.group(2) or None
    return number, unit
