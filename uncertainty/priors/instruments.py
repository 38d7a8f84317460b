"""Measurement instruments (priors/instruments.toml): what each way of reading a quantity reads, its noise
and its bias.

What an instrument reads (its *reading model*, :meth:`Instrument.true_reading`) is written here once and
used by the ``measurement`` observation kind (the prediction of a reading, PyTensor) and by ``rank`` (the
simulated readings of a candidate, numpy)::

    reading = scale x (measures - minus) + bias + noise

- ``measures``: the quantity read (a trade symbol);
- ``minus`` (optional): a quantity in the same canonical unit subtracted from it, for a method that reads a
  difference (the implanted colloid osmometer reads pi_i - Pi);
- ``reads`` and ``scale`` (optional, together): the reading is a different quantity with its own
  canonical unit (``reads``, e.g. ``TER`` in %/h) obtained from ``measures`` by a stated factor
  (``scale = { value = .., origin = ".." }``, in the canonical unit of ``reads`` per canonical unit of
  ``measures``); without them the scale is 1 and the reading is in the unit of ``measures``;
- ``bias`` and the noise (``sd`` or ``cv``) are in the unit of the reading.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from uncertainty.core import units
from uncertainty.core.errors import UnitError, study_error
from uncertainty.core.toml_io import read_toml
from uncertainty.priors.declarations import Context, Prior, is_number, parse_prior
from uncertainty.priors.library import data_dir

#: Keys an ``[instruments.<name>]`` table may carry.
KEYS = ("label", "measures", "minus", "reads", "scale", "sd", "cv", "unit", "bias", "tissues", "cost", "origin",
        "note")


@dataclass(frozen=True)
class Instrument:
    """A measurement method (``priors/instruments.toml``).

    Attributes:
        name, label: key and display name.
        measures: the quantity it reads (trade symbol).
        sd / cv: reading noise: sd in the canonical unit of the reading (normal error), or cv
            (lognormal error).
        unit: canonical unit of the reading (that of ``reads``, else of ``measures``).
        bias: a Prior on the systematic offset (canonical unit of the reading), or None.
        tissues: where the method applies (None: anywhere).
        cost: relative cost of one measurement (dimensionless).
        origin, note: provenance and remarks.
        minus: a quantity (same canonical unit as ``measures``) subtracted from it, or None.
        reads: the quantity of the reading when it differs from ``measures`` (trade symbol), or None.
        scale: canonical unit of the reading per canonical unit of ``measures`` (1 without ``reads``).
        scale_origin: where ``scale`` comes from (empty without ``reads``).
    """

    name: str
    label: str
    measures: str
    sd: float | None = None
    cv: float | None = None
    unit: str = ""
    bias: Prior | None = None
    tissues: tuple[str, ...] | None = None
    cost: float = 1.0
    origin: str = ""
    note: str = ""
    minus: str | None = None
    reads: str | None = None
    scale: float = 1.0
    scale_origin: str = ""

    @property
    def reading_symbol(self) -> str:
        """The quantity whose canonical unit the readings, their sd and the bias are in."""
        return self.reads or self.measures

    @property
    def quantities(self) -> tuple[str, ...]:
        """The model quantities a reading depends on: ``measures`` and, for a difference, ``minus``."""
        return (self.measures,) if self.minus is None else (self.measures, self.minus)

    def describe(self) -> str:
        """What the instrument reads, as text (e.g. ``"pi_i - Pi (mmHg)"``, ``"TER = 1354 x PS (%/h)"``)."""
        what = self.measures if self.minus is None else f"{self.measures} - {self.minus}"
        if self.reads is None:
            return f"{what} ({self.unit})"
        inner = what if self.minus is None else f"({what})"
        return f"{self.reads} = {self.scale:.4g} x {inner} ({self.unit})"

    def true_reading(self, value: Callable[[str], Any]) -> Any:
        """The noise- and bias-free reading, ``scale x (measures - minus)``.

        Parameters
        ----------
        value : callable
            ``value(symbol)``: the quantity's value (canonical unit) as a float, a numpy array or a PyTensor
            variable; only arithmetic is applied, so the result has the same kind.

        Returns
        -------
        float, ndarray or TensorVariable
            The reading in the canonical unit of :attr:`reading_symbol`.
        """
        x = value(self.measures)
        if self.minus is not None:
            x = x - value(self.minus)
        if self.scale != 1.0:
            x = self.scale * x
        return x


def _scale(spec: Mapping[str, Any], path: str, key: str) -> tuple[str | None, float, str]:
    """(reads, scale, scale origin) of one instrument table; (None, 1.0, "") without ``reads``."""
    reads, scale = spec.get("reads"), spec.get("scale")
    if reads is None and scale is None:
        return None, 1.0, ""
    if reads is None:
        raise study_error("scale converts to the quantity the instrument reads: give reads = \"<symbol>\" too",
                          path, f"{key}.scale", scale)
    if not isinstance(reads, str) or reads not in units.CANONICAL:
        raise study_error("reads names a known quantity", path, f"{key}.reads", reads)
    if not isinstance(scale, Mapping):
        raise study_error("a reading of another quantity needs scale = { value = <number>, origin = \"..\" }",
                          path, f"{key}.scale", scale)
    for k in scale:
        if k not in ("value", "origin"):
            raise study_error("unknown key (allowed: value, origin)", path, f"{key}.scale.{k}", scale[k])
    value, origin = scale.get("value"), scale.get("origin")
    if not is_number(value) or not math.isfinite(value) or not value > 0:
        raise study_error("scale value must be a positive number", path, f"{key}.scale.value", value)
    if not isinstance(origin, str) or not origin.strip():
        raise study_error("scale needs its origin", path, f"{key}.scale.origin", origin)
    return reads, float(value), origin


@functools.lru_cache(maxsize=8)
def _load_instruments_cached(path_str: str) -> dict[str, Instrument]:
    path = Path(path_str)
    doc = read_toml(path)
    for k in doc:
        if k != "instruments":
            raise study_error("unknown section (allowed: instruments)", path_str, k, None)
    out: dict[str, Instrument] = {}
    for name, spec in doc.get("instruments", {}).items():
        key = f"instruments.{name}"
        if not isinstance(spec, Mapping):
            raise study_error("an instrument is a table", path_str, key, spec)
        for k in spec:
            if k not in KEYS:
                raise study_error("unknown key", path_str, f"{key}.{k}", spec[k])
        sym = spec.get("measures")
        if not isinstance(sym, str) or sym not in units.CANONICAL:
            raise study_error("measures names a known quantity", path_str, f"{key}.measures", sym)
        minus = spec.get("minus")
        if minus is not None and (not isinstance(minus, str) or minus not in units.CANONICAL or minus == sym
                                  or units.CANONICAL[minus] != units.CANONICAL[sym]):
            raise study_error(f"minus names a known quantity other than {sym} in its unit ({units.CANONICAL[sym]})",
                              path_str, f"{key}.minus", minus)
        reads, scale, scale_origin = _scale(spec, path_str, key)
        read_sym = reads or sym
        sd, cv = spec.get("sd"), spec.get("cv")
        if (sd is None) == (cv is None):
            raise study_error("give exactly one of sd or cv", path_str, key, None)
        for k, v in (("sd", sd), ("cv", cv)):
            if v is not None and (not is_number(v) or not v > 0):
                raise study_error(f"{k} must be a positive number", path_str, f"{key}.{k}", v)
        if sd is not None:
            try:
                sd = units.to_canonical(read_sym, float(sd), spec.get("unit"))
            except UnitError as exc:
                raise study_error(exc.reason, path_str, f"{key}.unit", spec.get("unit")) from None
        elif spec.get("unit") is not None:
            try:
                units.to_canonical(read_sym, 1.0, spec.get("unit"))
            except UnitError as exc:
                raise study_error(exc.reason, path_str, f"{key}.unit", spec.get("unit")) from None
        bias = None
        if spec.get("bias") is not None:
            bias = parse_prior(read_sym, spec["bias"], ctx=Context(path_str), key=f"{key}.bias", check_sign=False,
                               default_origin=str(spec.get("origin", "")))
        cost = spec.get("cost", 1.0)
        if not is_number(cost) or not cost > 0:
            raise study_error("cost must be a positive number", path_str, f"{key}.cost", cost)
        tissues = spec.get("tissues")
        if tissues is not None and not (isinstance(tissues, list) and all(isinstance(t, str) for t in tissues)):
            raise study_error("tissues is a list of tissue names", path_str, f"{key}.tissues", tissues)
        out[name] = Instrument(name, str(spec.get("label", name)), sym, sd, float(cv) if cv is not None else None,
                               units.CANONICAL[read_sym], bias, tuple(tissues) if tissues is not None else None,
                               float(cost), str(spec.get("origin", "")), str(spec.get("note", "")),
                               minus=minus, reads=reads, scale=scale, scale_origin=scale_origin)
    return out


def load_instruments(directory: str | Path | None = None) -> dict[str, Instrument]:
    """Measurement methods from ``priors/instruments.toml`` (an empty dict when the file is absent).

    Parameters
    ----------
    directory : str or Path, optional
        The priors folder (default: the installed ``priors/``).

    Returns
    -------
    dict of str to Instrument
        By name, in file order; sd, bias and unit in the canonical unit of each reading.

    Raises
    ------
    StudyError
        A malformed instrument (unknown key or quantity, a ``minus`` in another unit, a ``reads`` without a
        stated ``scale``, a bad noise, unit, bias or cost), naming the file and key.
    """
    path = data_dir(directory) / "instruments.toml"
    if not path.is_file():
        return {}
    return dict(_load_instruments_cached(str(path)))
