"""Condition modifiers (priors/conditions.toml): what a disease or intervention does to a tissue's priors.
"""

from __future__ import annotations

import dataclasses
import functools
import math
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from uncertainty.core import units
from uncertainty.core.errors import StudyError, UnitError, study_error
from uncertainty.core.toml_io import read_toml
from uncertainty.distributions import distribution
from uncertainty.priors.declarations import (
    Context,
    Prior,
    check_params,
    check_sign_rules,
    is_number,
    parse_prior,
)
from uncertainty.priors.derived import WIDENED_INPUT, Derivation
from uncertainty.priors.library import PriorSet, data_dir


@dataclass(frozen=True)
class Modifier:
    """One row of a condition: change ``parameter`` by shift / multiply / set, optionally widened."""

    parameter: str
    shift: float | None = None
    multiply: float | None = None
    set: Any = None
    extra_sd: float | None = None
    extra_gsd: float | None = None
    origin: str = ""
    note: str = ""
    per_cm: float | None = None   # shift per cm of height below the heart (posture rows), canonical unit
    tissues: tuple[str, ...] | None = None  # the row applies only to these tissues (None: every tissue)


@dataclass(frozen=True)
class Condition:
    """A condition modifier (``priors/conditions.toml``): label, plain-language note, rows."""

    name: str
    label: str = ""
    note: str = ""
    applies_to: tuple[str, ...] | None = None
    modify: tuple[Modifier, ...] = ()
    path: str | None = None

    def apply(self, prior_set: PriorSet | Mapping[str, Prior], *, tissue: str | None = None,
              notes: list[str] | None = None, derived: dict[str, Derivation] | None = None,
              density: float | None = None, height_cm: float | None = None) -> dict[str, Prior]:
        """The priors after this condition's modifiers (a new dict; the input is not changed).

        ``height_cm`` (cm below the heart) rescales the rows that carry ``per_cm`` (posture): their
        shift becomes ``per_cm * height_cm`` instead of the file's default-height shift.

        Shifts are in the parameter's canonical unit and move the location (mean, median, bounds,
        mode, value); ``multiply`` scales the location (mean or median; bounds and mode for uniform /
        triangular); ``set`` replaces the declaration (keeping the between-subject spread unless the
        new one states its own); ``extra_sd`` / ``extra_gsd`` widen the prior by the uncertainty about
        the size of the change (variances added). A modifier of a derived quantity (pi_c from protein,
        Pc from pressures) changes the derivation's result (multiply / shift), its extra uncertainty going to
        the input that carries the derived quantity's own spread (``derived.WIDENED_INPUT``: JL_reserve for
        the lymph capacity) or, where there is none, left out with a note; a modifier of a quantity
        absent from the set is skipped with a note in ``notes``. A row with ``tissues`` applies only to
        those tissues (the same parameter may then change by different amounts in different tissues).
        """
        if isinstance(prior_set, PriorSet):
            priors = dict(prior_set.priors)
            derived = prior_set.derived if derived is None else derived
            density = prior_set.density if density is None else density
            tissue = tissue or prior_set.name
        else:
            priors = dict(prior_set)
        derived = derived if derived is not None else {}
        density = density or 1.05
        for i, m in enumerate(self.modify):
            key = f"conditions.{self.name}.modify[{i}]"
            sym = m.parameter
            if m.tissues is not None and tissue not in m.tissues:
                continue  # a row for other tissues (``tissues`` in the file)
            if height_cm is not None and m.per_cm is not None:
                m = dataclasses.replace(m, shift=m.per_cm * height_cm)
            if sym in priors and sym not in derived:
                priors[sym] = _modify_prior(priors[sym], m, self.path, key, density)
            elif sym in derived:
                d = derived[sym]
                widened = WIDENED_INPUT.get(d.formula)
                if widened in priors and m.set is None and (m.extra_sd or m.extra_gsd):
                    # the extra uncertainty goes to the input that carries the derived quantity's own spread
                    priors[widened] = _modify_prior(priors[widened], Modifier(parameter=widened,
                                                    extra_sd=m.extra_sd, extra_gsd=m.extra_gsd, origin=m.origin),
                                                    self.path, key, density)
                elif m.set is not None or m.extra_sd or m.extra_gsd:
                    if notes is not None:
                        notes.append(f"condition {self.name}: {sym} is derived ({d.describe()}); only its "
                                     "shift / multiply applies, the extra uncertainty is not added")
                derived[sym] = dataclasses.replace(
                    d, shift=d.shift * (m.multiply or 1.0) + (m.shift or 0.0),
                    multiply=d.multiply * (m.multiply or 1.0))
            elif m.set is not None:
                priors[sym] = parse_prior(sym, m.set, ctx=Context(self.path, density), key=f"{key}.set",
                                          default_origin=m.origin)
            elif notes is not None:
                notes.append(f"condition {self.name}: no prior for {sym} in this tissue; its change is skipped")
        return priors


def _modify_prior(prior: Prior, m: Modifier, file: Any, key: str, density: float) -> Prior:
    if m.set is not None:
        new = parse_prior(prior.symbol, m.set, ctx=Context(file, density), key=f"{key}.set",
                          default_origin=m.origin)
        if new.between_subject is None and prior.between_subject:
            new = new.replace(between_subject=prior.between_subject)
        return new
    p = dict(prior.params)
    dist = prior.dist
    if m.multiply is not None:
        for k in prior.distribution.multiplied:
            if k in p:
                p[k] *= m.multiply
    if m.shift is not None:
        for k in ("mean", "median", "lower", "mode", "upper", "value"):
            if k in p:
                p[k] += m.shift
    if m.extra_sd:
        # the family adds the spread (fixed -> normal; an sd in quadrature; lognormal as a cv at the
        # median; uniform / triangular widened about the mode / centre so the variance grows by e^2)
        wide = distribution(dist, p).widened(m.extra_sd)
        dist, p = wide.name, wide.params()
    if m.extra_gsd:
        g = math.log(m.extra_gsd)
        wide_log = distribution(dist, p).widened_log(m.extra_gsd)  # lognormal, fixed -> lognormal
        if wide_log is not None:
            dist, p = wide_log.name, wide_log.params()
        else:
            # convert the multiplicative uncertainty to an sd at the location
            loc = prior.median()
            return _modify_prior(Prior(prior.symbol, dist, p, prior.unit, prior.basis, prior.between_subject,
                                       prior.origin, prior.note, prior.declared_unit),
                                 Modifier(m.parameter, extra_sd=abs(loc) * math.sqrt(math.expm1(g * g))),
                                 file, key, density)
    new = prior.replace(dist=dist, params=p, note=(prior.note + f" [modified by condition: {m.origin}]").strip())
    try:
        check_params(dist, p, Context(file, density), key, p)
        check_sign_rules(new, Context(file, density), key, p)
    except StudyError as exc:
        raise study_error(f"after the condition, {prior.symbol}: {exc.reason}", file, key, exc.value) from None
    return new


@functools.lru_cache(maxsize=8)
def _load_conditions_cached(path_str: str) -> dict[str, Condition]:
    path = Path(path_str)
    doc = read_toml(path)
    out: dict[str, Condition] = {}
    for k in doc:
        if k != "conditions":
            raise study_error("unknown section (allowed: conditions)", path_str, k, None)
    for name, spec in doc.get("conditions", {}).items():
        key = f"conditions.{name}"
        if not isinstance(spec, Mapping):
            raise study_error("a condition is a table", path_str, key, spec)
        for k in spec:
            if k not in ("label", "note", "applies_to", "modify", "origin", "height"):
                raise study_error("unknown key", path_str, f"{key}.{k}", spec[k])
        rows = []
        for i, row in enumerate(spec.get("modify", [])):
            rkey = f"{key}.modify[{i}]"
            if not isinstance(row, Mapping):
                raise study_error("a modify row is a table", path_str, rkey, row)
            for k in row:
                if k not in ("parameter", "shift", "multiply", "set", "extra_sd", "extra_gsd", "origin", "note",
                             "unit", "per_cm", "tissues"):
                    raise study_error("unknown key", path_str, f"{rkey}.{k}", row[k])
            if not isinstance(row.get("parameter"), str):
                raise study_error("a modify row names its parameter",
                                  path_str, f"{rkey}.parameter", row.get("parameter"))
            sym = row["parameter"]
            if sum(k in row for k in ("shift", "multiply", "set")) != 1 and not (
                    "extra_sd" in row or "extra_gsd" in row):
                raise study_error("give one of shift, multiply or set", path_str, rkey, None)
            vals: dict[str, float | None] = {}
            for k in ("shift", "multiply", "extra_sd", "extra_gsd", "per_cm"):
                v = row.get(k)
                if v is None:
                    vals[k] = None
                    continue
                if not is_number(v):
                    raise study_error("expected a number", path_str, f"{rkey}.{k}", v)
                v = float(v)
                if k in ("shift", "extra_sd", "per_cm") and row.get("unit"):
                    try:
                        v = units.to_canonical(sym, v, row["unit"])
                    except UnitError as exc:
                        raise study_error(exc.reason, path_str, f"{rkey}.unit", row["unit"]) from None
                if k == "multiply" and not v > 0:
                    raise study_error("multiply must be > 0", path_str, f"{rkey}.{k}", v)
                if k == "extra_sd" and not v > 0:
                    raise study_error("extra_sd must be > 0", path_str, f"{rkey}.{k}", v)
                if k == "extra_gsd" and not v > 1:
                    raise study_error("extra_gsd must be > 1", path_str, f"{rkey}.{k}", v)
                vals[k] = v
            tissues = row.get("tissues")
            if tissues is not None and not (isinstance(tissues, list) and tissues
                                            and all(isinstance(t, str) for t in tissues)):
                raise study_error("tissues is a list of tissue names", path_str, f"{rkey}.tissues", tissues)
            rows.append(Modifier(sym, vals["shift"], vals["multiply"], row.get("set"), vals["extra_sd"],
                                 vals["extra_gsd"], str(row.get("origin", "")), str(row.get("note", "")),
                                 vals["per_cm"], tuple(tissues) if tissues is not None else None))
        applies = spec.get("applies_to")
        if applies is not None and not (isinstance(applies, list) and all(isinstance(a, str) for a in applies)):
            raise study_error("applies_to is a list of tissue names", path_str, f"{key}.applies_to", applies)
        out[name] = Condition(name, str(spec.get("label", name)), str(spec.get("note", "")),
                              tuple(applies) if applies is not None else None, tuple(rows), path_str)
    return out


def load_conditions(directory: str | Path | None = None) -> dict[str, Condition]:
    """Condition modifiers from ``priors/conditions.toml`` (an empty dict when the file is absent)."""
    path = data_dir(directory) / "conditions.toml"
    if not path.is_file():
        return {}
    return dict(_load_conditions_cached(str(path)))
