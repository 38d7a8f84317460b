"""What a Bayesian model is built from: priors, fixed values, a forward map and observations.

A :class:`Problem` is the sampler-free description of an inference task. It is normally made from
a :class:`uncertainty.study.Study` by :func:`problem_from_study` (priors, correlations and
``model.evaluate`` of the study's model form), optionally with an overriding observation list, so
that callers such as trial simulation can refit the same study to simulated data in a loop.

Observations are normalised into :class:`Observation` records (canonical units, key paths such as
``observations[2].sd`` for error messages) whatever form the study layer hands them in.
"""

from __future__ import annotations

import dataclasses
import os
from collections.abc import Callable, Mapping, Sequence
from typing import Any

import numpy as np

from uncertainty.core import units
from uncertainty.core.errors import InputError
from uncertainty.forms import evaluate as model_mod
from uncertainty.priors import load_instruments

#: fields an observation record may carry (study files spell them the same way)
_FIELDS = ("kind", "parameter", "value", "sd", "cv", "unit", "instrument", "subject", "group",
           "file", "step", "steps", "volume", "lymph", "effects", "site", "data", "share")


@dataclasses.dataclass
class Rows:
    """The readings of one observation's data file (long format), in canonical units.

    One entry per reading: ``subject`` labels, ``group`` labels (None where not given), ``value``,
    ``sd`` (per-reading normal error; nan where the file gives none, so the observation's own applies),
    ``time_min`` (nan where the file has no time) and ``line`` (the reading's line in ``source``).
    """

    subject: list[str | None]
    group: list[str | None]
    value: np.ndarray
    sd: np.ndarray
    time_min: np.ndarray
    line: list[int]
    source: str = ""
    headers: dict[str, str] = dataclasses.field(default_factory=dict)


@dataclasses.dataclass
class Observation:
    """One normalised observation (values, sd in canonical units of the observed quantity).

    ``index`` is the position in the study's ``[[observations]]`` list, used for key paths (and, as
    ``obs<index>__<kind>``, for the names of its model variables). ``extra`` keeps every other field
    of the source record (e.g. a time-course ``file``). An observation with a data file carries its
    readings in ``rows`` (``value`` and ``subject`` are then None): one likelihood term covers them all.
    """

    kind: str
    index: int
    value: float | None = None
    sd: float | None = None
    cv: float | None = None
    unit: str | None = None
    parameter: str | None = None
    instrument: str | None = None
    subject: str | None = None
    group: str | None = None
    extra: dict[str, Any] = dataclasses.field(default_factory=dict)
    file: str | None = None
    rows: Rows | None = None
    notes: list[str] = dataclasses.field(default_factory=list)

    @property
    def key(self) -> str:
        """Dotted key path of this observation in the study file, e.g. ``observations[1]``."""
        return f"observations[{self.index}]"

    def error(self, message: str, field: str | None = None, value: Any = None) -> InputError:
        """An InputError naming the study file, this observation's key path and the value."""
        key = self.key + (f".{field}" if field else "")
        return InputError(message, file=self.file, key=key, value=value)

    @property
    def values(self) -> np.ndarray:
        """The reading(s) in canonical units: a 0-d array for a single value, else one per row."""
        if self.rows is not None:
            return self.rows.value
        return np.asarray(np.nan if self.value is None else self.value, dtype=float)

    @property
    def sds(self) -> np.ndarray | float | None:
        """Normal error of each reading (canonical unit): the row's sd where given, else ``sd``; None for a
        cv (lognormal) error. A 0-d value for a single reading."""
        if self.rows is None or not np.any(np.isfinite(self.rows.sd)):
            return self.sd
        default = np.nan if self.sd is None else self.sd
        return np.where(np.isfinite(self.rows.sd), self.rows.sd, default)

    def readings(self) -> list[Observation]:
        """One single-value Observation per reading (itself when it has no rows), with the same index."""
        if self.rows is None:
            return [self]
        sds = None if self.sds is None else np.broadcast_to(np.asarray(self.sds, dtype=float), self.rows.value.shape)
        out = []
        for k, subject in enumerate(self.rows.subject):
            sd = None if sds is None else float(sds[k])
            out.append(dataclasses.replace(self, rows=None, subject=subject, group=self.rows.group[k],
                                           value=float(self.rows.value[k]), sd=sd))
        return out

    def subject_groups(self) -> list[tuple[str, str | None]]:
        """(subject, group) of each labelled reading."""
        if self.rows is not None:
            return [(s, g) for s, g in zip(self.rows.subject, self.rows.group, strict=True) if s is not None]
        return [(self.subject, self.group)] if self.subject is not None else []

    def check_values(self, ok: np.ndarray | bool, message: str, field: str = "value") -> None:
        """Raise ``message`` for the first reading where ``ok`` is False, naming its data-file line.

        Parameters
        ----------
        ok : array of bool or bool
            One flag per reading (as ``values``).
        message : str
            What is wrong.
        field : str
            The observation's key for a single value.

        Raises
        ------
        InputError
            Naming the key path, and the file, line and column of a data-file reading.
        """
        bad = np.flatnonzero(~np.atleast_1d(np.asarray(ok, dtype=bool)))
        if not bad.size:
            return
        if self.rows is None:
            raise self.error(message, field, self.value)
        k = int(bad[0])
        col = self.rows.headers.get("value", "value")
        raise self.error(f"{self.rows.source} line {self.rows.line[k]}, column {col}: {message}", "file",
                         float(self.rows.value[k]))


@dataclasses.dataclass
class Problem:
    """Priors over the uncertain quantities, fixed values, the forward map and the observations.

    ``evaluate(values, xp)`` maps a dict of quantity values (floats, numpy arrays or PyTensor
    tensors, canonical units) to a dict of outputs that contains at least ``Jv`` (mL/min per basis).
    ``priors`` maps each uncertain quantity to a Prior-like object (``dist``, ``params`` in
    canonical units, ``between_subject``, ``pymc(name)``, ``mean()``, ``sd()``, ``frozen()``).
    """

    priors: dict[str, Any]
    fixed: dict[str, float]
    evaluate: Callable[[Mapping[str, Any], Any], Mapping[str, Any]]
    observations: list[Observation]
    correlation: np.ndarray | None = None
    file: str | None = None
    #: (a, b, rho) normal-score correlations of the between-subject layer (``Study.between_correlations``).
    between_correlations: list[tuple[str, str, float]] = dataclasses.field(default_factory=list)
    model_form: str = "classic"
    basis: str = "100g"
    density: float = 1.05
    study: Any = None
    tissue_mass_kg: float | None = None
    base_dir: str | None = None
    notes: list[str] = dataclasses.field(default_factory=list)

    @property
    def names(self) -> list[str]:
        """The uncertain quantities, in order."""
        return list(self.priors)

    def quantity_known(self, name: str) -> bool:
        """True when ``name`` is an uncertain or fixed quantity of the problem."""
        return name in self.priors or name in self.fixed


def _get(record: Any, field: str, default: Any = None) -> Any:
    if isinstance(record, Mapping):
        return record.get(field, default)
    value = getattr(record, field, default)
    return default if value is None else value


def _as_dict(record: Any) -> dict[str, Any]:
    if isinstance(record, Mapping):
        return dict(record)
    if hasattr(record, "model_dump"):
        return dict(record.model_dump())
    return {f: getattr(record, f) for f in _FIELDS if hasattr(record, f)}


def _symbol_for(kind: str, parameter: str | None, how: str | None = None) -> str | None:
    """The quantity whose canonical unit an observation's value is expressed in (``how``: urine read as a
    ``rate`` is a flow, ``urine_flow``)."""
    if kind == "urine" and how == "rate":
        return "urine_flow"
    return {
        "measurement": parameter,
        "lymph_flow": "JL",
        "swelling_rate": "swelling_rate",
        "clearance_rate": "k_clear",
        "protein_ratio": "ratio",
        "GFR": "GFR",
        "RPF": "RPF",
        "filtration_fraction": "FF",
        "body_weight": "body_weight",
        "fluid_balance": "fluid_balance",
        "urine": "urine_volume",
        "haemoglobin": "Hb",
        "haematocrit": "Hct",
        "plasma_protein": "Cp",
    }.get(kind)


def _converts(symbol: str, unit: str) -> bool:
    try:
        units.to_canonical(symbol, 1.0, unit)
    except InputError:
        return False
    return True


def _canonical_factor(symbol: str | None, unit: str | None, obs: Observation,
                      density: float, tissue_mass_kg: float | None = None) -> float:
    """Multiplicative factor from ``unit`` to the canonical unit of ``symbol`` (1 without a unit); a
    per-organ unit converts through ``tissue_mass_kg`` (kg)."""
    if not unit or symbol is None:
        return 1.0
    try:
        return float(units.to_canonical(symbol, 1.0, unit, density=density, tissue_mass_kg=tissue_mass_kg))
    except InputError as exc:
        raise obs.error(exc.reason, "unit", unit) from None


def normalise_observations(records: Sequence[Any] | None, *, file: str | None = None,
                           density: float = 1.05, tissue_mass_kg: float | None = None) -> list[Observation]:
    """Turn study observation records (pydantic models or dicts) into :class:`Observation` records.

    Values and sd are converted to the canonical unit of the observed quantity (cv is unitless);
    records that come from a validated Study (they carry ``declared_unit``) are canonical already.
    A record with a data file (columns subject, value; optional group, time, sd) keeps all its readings
    in ``rows`` (one record, one likelihood term). Raises InputError (file, key, value) for an sd or cv
    that is not positive. ``density`` (g/mL) and ``tissue_mass_kg`` (kg) convert per-100-mL and
    per-organ units to the per-100-g canonical ones.
    """
    out: list[Observation] = []
    for i, rec in enumerate(records or []):
        raw = _as_dict(rec)
        canonical = "declared_unit" in raw
        data = getattr(rec, "data", None) if not isinstance(rec, Mapping) else rec.get("data")
        kind = raw.get("kind")
        obs = Observation(kind=str(kind), index=i, file=file,
                          parameter=raw.get("parameter"), instrument=raw.get("instrument"),
                          subject=None if raw.get("subject") is None else str(raw.get("subject")),
                          group=None if raw.get("group") is None else str(raw.get("group")),
                          unit=raw.get("unit"))
        obs.extra = {k: v for k, v in raw.items()
                     if k not in ("kind", "parameter", "instrument", "subject", "group", "unit",
                                  "value", "sd", "cv") and v is not None}
        if data is not None:
            obs.extra["data"] = data
        unit = raw.get("declared_unit") if canonical else obs.unit
        symbol = _symbol_for(obs.kind, obs.parameter, raw.get("how"))
        if obs.kind == "measurement" and obs.instrument is not None:
            inst = load_instruments().get(obs.instrument)
            symbol = inst.reading_symbol if inst is not None else symbol  # TER (%/h) for the escape rate
        if obs.kind == "clearance_rate" and unit and not _converts("k_clear", unit):
            symbol = "JL"  # a clearance given as a flow (mL/min per basis)
            obs.extra["as_flow"] = True
        factor = _canonical_factor(symbol, unit, obs, density, tissue_mass_kg)
        for name in ("value", "sd", "cv"):
            v = raw.get(name)
            if v is None:
                continue
            try:
                v = float(v)
            except (TypeError, ValueError):
                raise obs.error("must be a number", name, v) from None
            if name in ("sd", "cv") and not v > 0:
                raise obs.error(f"{name} must be positive", name, v)
            if name in ("value", "sd") and not canonical:
                v *= factor
            setattr(obs, name, v)
        if data is not None:
            obs.notes = list(getattr(data, "notes", []) or [])
        if data is not None and obs.kind != "volume_time_course" and "value" in data:
            n = len(data["value"])
            sd_col = data.get("sd")
            obs.rows = Rows(
                subject=[None if x is None else str(x) for x in (data.get("subject") or [obs.subject] * n)],
                group=[obs.group if g is None else str(g) for g in (data.get("group") or [obs.group] * n)],
                value=np.asarray(data["value"], dtype=float) * factor,
                sd=(np.full(n, np.nan) if sd_col is None else np.asarray(sd_col, dtype=float) * factor),
                time_min=np.asarray(data.get("time_min") or [np.nan] * n, dtype=float),
                line=list(data.get("line") or range(2, n + 2)),
                source=str(getattr(data, "source", "") or obs.extra.get("file", "")),
                headers=dict(getattr(data, "headers", {}) or {}))
            obs.extra.pop("data", None)
            obs.value = None
            obs.subject = None
        out.append(obs)
    return out


def problem_from_study(study: Any, observations: Sequence[Any] | None = None,
                       model: str | None = None) -> Problem:
    """A :class:`Problem` from a validated Study (optionally another model form or observations).

    ``observations`` overrides the study's own ``[[observations]]`` (records in the study-file
    form, e.g. simulated readings); ``model`` overrides ``[study] model`` (``classic``,
    ``steady_state``, ``revised``), used by model comparison: the study is resolved again for
    that form by ``Study.with_model``.
    """
    names = list(study.names)
    priors = {n: study.priors[n] for n in names}
    fixed: dict[str, float] = {}
    for name, prior in study.priors.items():
        if name in priors:
            continue
        if getattr(prior, "is_fixed", False):
            fixed[name] = float(prior.params.get("value", prior.mean()))
    form = model or study.model
    target = study.with_model(model) if model is not None and model != study.model else study

    def evaluate(values: Mapping[str, Any], xp: Any) -> Mapping[str, Any]:
        return model_mod.evaluate(target, dict(values), xp=xp)

    file = str(study.path) if getattr(study, "path", None) else None
    density = float(getattr(study, "density", 1.05) or 1.05)
    records = study.observations if observations is None else observations
    base_dir = None
    if file:
        base_dir = os.path.dirname(os.path.abspath(file))
    corr = getattr(study, "correlation", None)
    mass = getattr(study, "tissue_mass_kg", None)
    return Problem(priors=priors, fixed=fixed, evaluate=evaluate,
                   observations=normalise_observations(records, file=file, density=density, tissue_mass_kg=mass),
                   correlation=None if corr is None else np.asarray(corr, dtype=float),
                   file=file, model_form=form, basis=getattr(study, "basis", "100g"),
                   density=density, study=target, base_dir=base_dir, tissue_mass_kg=mass,
                   notes=list(getattr(study, "notes", []) or []),
                   between_correlations=list(getattr(study, "between_correlations", None) or []))
