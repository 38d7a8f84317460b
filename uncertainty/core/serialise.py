"""The one JSON serialiser: results documents, command output and the run's bundle all go through it.

:func:`jsonable` makes a JSON-safe copy of any result value (numpy scalars and arrays to Python
numbers and lists, tuples and sets to lists, NaN and infinities to ``None``, mapping keys to
strings, paths to strings, dataclasses and pydantic models to mappings); :func:`to_json` prints it.
"""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path
from typing import Any


def jsonable(obj: Any) -> Any:
    """A JSON-safe copy of ``obj``.

    Parameters
    ----------
    obj : Any
        A result value: mappings, sequences, numbers (Python or numpy), numpy arrays, strings,
        paths, dataclasses, pydantic models; units are kept as they are (the values are
        already in canonical units).

    Returns
    -------
    Any
        Only dict (string keys), list, str, int, float, bool and None: NaN and +-inf become
        None, tuples and sets lists, numpy scalars and arrays Python numbers and lists,
        dataclasses and pydantic models dicts of their fields; anything else its ``str``.
    """
    if isinstance(obj, dict):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple | set | frozenset):
        return [jsonable(v) for v in obj]
    if isinstance(obj, bool | str | int) or obj is None:
        return obj
    if isinstance(obj, float):
        return float(obj) if math.isfinite(obj) else None
    if isinstance(obj, Path):
        return str(obj)
    tolist = getattr(obj, "tolist", None)  # numpy arrays and scalars
    if callable(tolist):
        return jsonable(tolist())
    item = getattr(obj, "item", None)
    if callable(item):
        return jsonable(item())
    if hasattr(obj, "model_dump"):
        return jsonable(obj.model_dump())
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: jsonable(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
    return str(obj)


def to_json(obj: Any, *, indent: int | None = 2) -> str:
    """``obj`` as JSON text: :func:`jsonable` first, then ``json.dumps`` (keys in their order).

    Parameters
    ----------
    obj : Any
        A result document or any value :func:`jsonable` accepts.
    indent : int or None
        Spaces per level (2, as every command prints); None for one line.

    Returns
    -------
    str
        The JSON text, without a trailing newline; NaN never appears (it is null).
    """
    return json.dumps(jsonable(obj), indent=indent, sort_keys=False, allow_nan=False)
