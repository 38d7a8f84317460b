"""Numbers as the report and the one-screen summary show them: rounded, '-' when missing."""

from __future__ import annotations

import math
from typing import Any


def fmt(x: Any, digits: int = 4) -> str:
    """A value as text with ``digits`` significant figures.

    Parameters
    ----------
    x : Any
        A number (any unit; the unit is printed beside it by the caller), bool, list or other value.
    digits : int
        Significant figures of a float.

    Returns
    -------
    str
        '-' for None and non-finite floats, 'yes'/'no' for bools, ints as they are, lists as
        '[a, b]', anything else its ``str``.
    """
    if x is None:
        return "-"
    if isinstance(x, bool):
        return "yes" if x else "no"
    if isinstance(x, int):
        return str(x)
    if isinstance(x, float):
        if not math.isfinite(x):
            return "-"
        return f"{x:.{digits}g}"
    if isinstance(x, list | tuple):
        return "[" + ", ".join(fmt(v, digits) for v in x) + "]"
    return str(x)


def interval(ci: Any, digits: int = 3) -> str:
    """An interval ``[low, high]`` as 'low to high' (same unit as its ends).

    Parameters
    ----------
    ci : Any
        A pair of numbers, or anything else (shown with :func:`fmt`).
    digits : int
        Significant figures of each end.

    Returns
    -------
    str
        The interval as text.
    """
    if isinstance(ci, list | tuple) and len(ci) == 2:
        return f"{fmt(ci[0], digits)} to {fmt(ci[1], digits)}"
    return fmt(ci, digits)


def cell(v: Any, digits: int = 4) -> str:
    """A table cell: numbers rounded, empty lists as 'none', nested mappings as 'key value; ...'.

    Parameters
    ----------
    v : Any
        The value (any unit).
    digits : int
        Significant figures of numbers.

    Returns
    -------
    str
        The cell text.
    """
    if isinstance(v, dict):
        return "; ".join(f"{a} {cell(b, digits)}" for a, b in v.items()) or "none"
    if isinstance(v, list | tuple) and not v:
        return "none"
    if isinstance(v, list | tuple) and not all(isinstance(x, int | float) and not isinstance(x, bool) for x in v):
        return ", ".join(cell(x, digits) for x in v)
    return fmt(v, digits)
