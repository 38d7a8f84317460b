"""Threshold values of ``[propagate] thresholds``: a number (the output's canonical unit) or a string with a
unit, converted to the output's canonical unit.

Per-tissue outputs (unit ``.../100g``) accept ``/100g``, ``/100mL`` or a whole-organ unit (``"50 mL"`` for
``oedema_volume``); a whole-organ value needs the study's ``tissue_mass``.
"""

from __future__ import annotations

from typing import Any

from uncertainty.core.errors import UnitError
from uncertainty.core.units import CANONICAL, parse, registry, to_canonical
from uncertainty.forms.catalogue import OUTPUT_UNITS, output_unit

DIRECTIONS = ("above", "below")


def threshold_in_unit(output: str, value: float | int | str, *, tissue_mass_kg: float | None = None,
                      key: str = "thresholds") -> float:
    """A threshold of ``output`` in that output's canonical unit.

    Parameters
    ----------
    output : str
        An output name of the form catalogue (e.g. ``Jv``, ``oedema_volume``).
    value : float, int or str
        A number (already in the canonical unit) or a string with a unit (``"0.02 mL/min/100g"``).
    tissue_mass_kg : float, optional
        The organ's mass in kg, for a whole-organ value of a per-tissue output.
    key : str
        The dotted key named in errors.

    Returns
    -------
    float
        The threshold in ``output_unit(output)``.

    Raises
    ------
    UnitError
        Unknown output, an unparseable value, a unit of the wrong dimension, or a whole-organ value without
        a tissue mass.
    """
    if output not in OUTPUT_UNITS:
        raise UnitError(f"no such output; outputs are {', '.join(sorted(OUTPUT_UNITS))}", key=key, value=output)
    if isinstance(value, bool):
        raise UnitError("expected a number or a value with a unit", key=key, value=value)
    if isinstance(value, str):
        number, unit = parse(value, symbol=key)
    else:
        number, unit = float(value), None
    target = output_unit(output)
    if unit is None or unit.strip() in ("", "canonical"):
        return float(number)
    # a quantity with the same canonical unit lends its basis handling (Kf for Kf_lower_bound, ...)
    proxy = output if output in CANONICAL else next((s for s, u in CANONICAL.items() if u == target), None)
    try:
        if proxy is not None:
            return to_canonical(proxy, number, unit, tissue_mass_kg=tissue_mass_kg)
        import pint

        ureg = registry()
        try:
            return float(ureg.Quantity(number, unit).to(target or "dimensionless").magnitude)
        except pint.DimensionalityError:
            raise UnitError(f"unit of the wrong dimension (expects {target})", key=key, value=value) from None
        except Exception:  # pint's parse errors vary by version
            raise UnitError("unknown unit", key=key, value=value) from None
    except UnitError as exc:
        raise UnitError(f"{exc.reason} (the output {output} is in {target})", key=key, value=value) from None


def threshold_label(output: str, direction: str, value: Any, unit: str) -> str:
    """A short label such as ``P(Jv > 0.02 mL/min/100g)`` (the threshold in canonical units).

    Parameters
    ----------
    output : str
        The output name.
    direction : str
        ``above`` or ``below``.
    value : float
        The threshold, in ``unit``.
    unit : str
        The output's canonical unit.

    Returns
    -------
    str
    """
    sign = ">" if direction == "above" else "<"
    unit = "" if unit in ("", "1") else f" {unit}"
    return f"P({output} {sign} {value:.4g}{unit})"
