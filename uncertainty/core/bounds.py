"""Plausible magnitudes of each physical quantity: one table, used by the one validation path.

These are absurdity bounds, not reference ranges: a value outside them cannot describe a living
tissue (a pressure of 1e300 mmHg, a lymph flow of 1e308 mL/min/100 g), and letting it through gives
infinite spreads, overflowing samplers or a crash inside a compiled library. Each range is in the
quantity's canonical unit (:data:`uncertainty.core.units.CANONICAL`) and is wide on purpose: many
times the largest value in the physiological literature, so that no real study is refused. A
quantity without its own row takes the row of its dimension (its canonical unit).

The study resolution (``uncertainty.study.resolve``) checks against this table every prior after
tissue, conditions and overrides, every observation value and sd (data-file rows included), rank
candidates' noise, design effects and spreads, and venous-cuff steps.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from uncertainty.core.units import CANONICAL


@dataclass(frozen=True)
class Plausible:
    """A plausible range of one quantity, in its canonical unit.

    Attributes
    ----------
    low, high : float
        Smallest and largest plausible value (canonical unit).
    origin : str
        Where the bound comes from.
    """

    low: float
    high: float
    origin: str

    @property
    def width(self) -> float:
        """``high - low``: the largest plausible sd or shift of the quantity (canonical unit)."""
        return self.high - self.low


_ABSURD = "common practice: an absurdity bound, many times any value a living tissue shows"

#: Range of each dimension, by canonical unit.
BY_UNIT: dict[str, Plausible] = {
    # pressures: systolic pressure rarely passes 300 mmHg; a cuff is not inflated past 300 mmHg; the
    # most negative interstitial pressures reported are tens of mmHg below atmospheric
    "mmHg": Plausible(-300.0, 1000.0, _ABSURD + " (pressures: body pressures lie within -50 to 300 mmHg, "
                                              "from memory)"),
    "1": Plausible(-1e3, 1e3, _ABSURD + " (dimensionless ratios)"),
    "g/dL": Plausible(0.0, 50.0, _ABSURD + " (protein: plasma total protein about 7 g/dL, common practice)"),
    "mOsm/kg": Plausible(0.0, 5000.0, _ABSURD + " (plasma osmolality about 290 mOsm/kg, common practice)"),
    "mL/min/mmHg/100g": Plausible(0.0, 100.0, _ABSURD + " (conductances: muscle Kf about 0.004 mL/min/mmHg/100 g, "
                                                         "from memory)"),
    "mL/min/100g": Plausible(-1e4, 1e4, _ABSURD + " (flows per 100 g: renal blood flow, the largest, is about "
                                                  "400 mL/min/100 g, from memory)"),
    "mL/mmHg/100g": Plausible(0.0, 1e4, _ABSURD + " (compliances per 100 g)"),
    "mL/100g": Plausible(-1e4, 1e5, _ABSURD + " (volumes per 100 g of tissue)"),
    "mL/min": Plausible(0.0, 1e5, _ABSURD + " (whole-organ flows: cardiac output about 5,000 mL/min, common "
                                             "practice)"),
    "mL/min/mmHg": Plausible(0.0, 1e4, _ABSURD + " (whole-organ conductances)"),
    "kg": Plausible(0.0, 1000.0, _ABSURD + " (tissue masses)"),
    "g/mL": Plausible(0.5, 3.0, _ABSURD + " (tissue densities about 1.05 g/mL, from memory)"),
    "cm": Plausible(0.0, 300.0, _ABSURD + " (heights below the heart)"),
    "min": Plausible(0.0, 1e7, _ABSURD + " (times: 1e7 min is about 19 years)"),
    "1/min": Plausible(0.0, 1e3, _ABSURD + " (rate constants)"),
    "%/h": Plausible(0.0, 1e4, _ABSURD + " (fractional escape rates: albumin escape about 5 %/h, Fleck A et al. "
                                         "1985 Lancet 1:781)"),
}

#: Quantities narrower than their dimension.
BY_SYMBOL: dict[str, Plausible] = {
    "sigma": Plausible(0.0, 1.0, "common practice: a reflection coefficient lies between 0 and 1"),
    "sigma_g": Plausible(0.0, 1.0, "common practice: a reflection coefficient lies between 0 and 1"),
    "sigma_osm": Plausible(0.0, 1.0, "common practice: a reflection coefficient lies between 0 and 1"),
    "transmission": Plausible(0.0, 1.0, "common practice: a pressure-transmission fraction lies between 0 and 1"),
    "FF": Plausible(0.0, 1.0, "common practice: a filtration fraction lies between 0 and 1"),
    "ratio": Plausible(0.0, 10.0, _ABSURD + " (interstitial-to-plasma protein ratios lie below about 1)"),
    "r": Plausible(0.0, 100.0, _ABSURD + " (post- to precapillary resistance ratios about 0.1-0.3, from memory)"),
    "pi_c": Plausible(0.0, 300.0, _ABSURD + " (plasma colloid osmotic pressure about 25 mmHg, common practice)"),
    "pi_i": Plausible(0.0, 300.0, _ABSURD + " (interstitial colloid osmotic pressure about 10 mmHg, from memory)"),
    "pi_g": Plausible(0.0, 300.0, _ABSURD + " (glycocalyx colloid osmotic pressure)"),
}


def plausible(symbol: str) -> Plausible | None:
    """The plausible range of ``symbol`` (canonical unit), or None for a quantity without one.

    Parameters
    ----------
    symbol : str
        A trade symbol (a key of :data:`uncertainty.core.units.CANONICAL`).

    Returns
    -------
    Plausible or None
        Its own row, else the row of its canonical unit, else None.
    """
    if symbol in BY_SYMBOL:
        return BY_SYMBOL[symbol]
    return BY_UNIT.get(CANONICAL.get(symbol, ""))


def _g(x: float) -> str:
    return f"{x:.4g}"


def magnitude_problem(symbol: str, x: float, *, spread: bool = False) -> str | None:
    """Why ``x`` is not a plausible value (or sd, or shift) of ``symbol``, or None when it is.

    Parameters
    ----------
    symbol : str
        A trade symbol.
    x : float
        A value in the canonical unit of ``symbol``; with ``spread`` an sd or a shift (its absolute value
        is compared with the range's width).
    spread : bool
        Check ``x`` as an sd or a shift rather than as a value.

    Returns
    -------
    str or None
        A message naming the plausible range and its unit (the origin is in the table); None when ``x``
        is plausible (or the quantity has no range).
    """
    rng = plausible(symbol)
    unit = CANONICAL.get(symbol, "")
    if not math.isfinite(x):
        return f"{symbol} must be a finite number"
    if rng is None:
        return None
    shown_unit = "" if unit == "1" else f" {unit}"
    if spread:
        if abs(x) > rng.width:
            return (f"a spread or shift of {symbol} of {_g(x)}{shown_unit} is implausible: its plausible range "
                    f"{_g(rng.low)} to {_g(rng.high)}{shown_unit} is narrower")
        return None
    if not rng.low <= x <= rng.high:
        return (f"{symbol} = {_g(x)}{shown_unit} is outside its plausible range {_g(rng.low)} to "
                f"{_g(rng.high)}{shown_unit}")
    return None
