"""Measurement instruments (priors/instruments.toml): noise and bias of each way of reading a quantity.
"""

from __future__ import annotations

import functools
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

from uncertainty.core import units
from uncertainty.core.errors import UnitError, study_error
from uncertainty.core.toml_io import read_toml
from uncertainty.priors.declarations import Context, Prior, is_number, parse_prior
from uncertainty.priors.library import data_dir


@dataclass(frozen=True)
class Instrument:
    """A measurement method (``priors/instruments.toml``).

    Attributes:
        name, label: key and display name.
        measures: the quantity it reads (trade symbol).
        sd / cv: reading noise: sd in the canonical unit of ``measures`` (normal error), or cv
            (lognormal error).
        unit: canonical unit of ``measures``.
        bias: a Prior on the systematic offset (canonical unit), or None.
        tissues: where the method applies (None: anywhere).
        cost: relative cost of one measurement (dimensionless).
        origin, note: provenance and remarks.
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
            if k not in ("label", "measures", "sd", "cv", "unit", "bias", "tissues", "cost", "origin", "note"):
                raise study_error("unknown key", path_str, f"{key}.{k}", spec[k])
        sym = spec.get("measures")
        if not isinstance(sym, str) or sym not in units.CANONICAL:
            raise study_error("measures names a known quantity", path_str, f"{key}.measures", sym)
        sd, cv = spec.get("sd"), spec.get("cv")
        if (sd is None) == (cv is None):
            raise study_error("give exactly one of sd or cv", path_str, key, None)
        for k, v in (("sd", sd), ("cv", cv)):
            if v is not None and (not is_number(v) or not v > 0):
                raise study_error(f"{k} must be a positive number", path_str, f"{key}.{k}", v)
        if sd is not None:
            try:
                sd = units.to_canonical(sym, float(sd), spec.get("unit"))
            except UnitError as exc:
                raise study_error(exc.reason, path_str, f"{key}.unit", spec.get("unit")) from None
        bias = None
        if spec.get("bias") is not None:
            bias = parse_prior(sym, spec["bias"], ctx=Context(path_str), key=f"{key}.bias", check_sign=False,
                               default_origin=str(spec.get("origin", "")))
        cost = spec.get("cost", 1.0)
        if not is_number(cost) or not cost > 0:
            raise study_error("cost must be a positive number", path_str, f"{key}.cost", cost)
        tissues = spec.get("tissues")
        if tissues is not None and not (isinstance(tissues, list) and all(isinstance(t, str) for t in tissues)):
            raise study_error("tissues is a list of tissue names", path_str, f"{key}.tissues", tissues)
        out[name] = Instrument(name, str(spec.get("label", name)), sym, sd, float(cv) if cv is not None else None,
                               units.CANONICAL[sym], bias, tuple(tissues) if tissues is not None else None,
                               float(cost), str(spec.get("origin", "")), str(spec.get("note", "")))
    return out


def load_instruments(directory: str | Path | None = None) -> dict[str, Instrument]:
    """Measurement methods from ``priors/instruments.toml`` (an empty dict when the file is absent)."""
    path = data_dir(directory) / "instruments.toml"
    if not path.is_file():
        return {}
    return dict(_load_instruments_cached(str(path)))
