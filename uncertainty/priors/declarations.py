"""Prior declarations, prior sets, condition modifiers and measurement instruments.

One declaration per quantity (DEVELOPERS.md "priors.py"): a distribution with its parameters, a
unit (converted to the canonical unit of ``uncertainty.core.units`` on reading), an optional
between-subject spread, an origin and a note. From one declaration come

- a scipy.stats frozen distribution (forward work: ``frozen()``, ``ppf(u)``,
  ``from_normal_scores(z)``), and
- a PyMC random variable (inference: ``pymc(name)``).

Distributions and their parameters (all in the declared ``unit``): ``normal`` (mean, sd),
``truncnormal`` (mean, sd, optional lower, upper), ``lognormal`` (median, gsd), ``beta`` (mean, sd),
``gamma`` (mean, sd), ``uniform`` (lower, upper), ``triangular`` (lower, mode, upper), ``fixed``
(value); the families, their checks, scipy and PyMC forms and score maps live in
:mod:`uncertainty.distributions`, the between-subject spread in its ``Spread``.

A bare number, or a string such as ``"12 mmHg"``, is a ``fixed`` declaration.

Between-subject spread (``between_subject = { sd = .. }`` or ``{ cv = .. }``): the distribution
above describes the value for a *typical* subject; ``individual(typical, z)`` adds one subject's
deviation (z a standard normal score): ``sd`` is additive (typical + sd z), ``cv`` is multiplicative
lognormal with its median at the typical value (typical * exp(s z), s^2 = log(1 + cv^2)). The
reflection coefficients (``sigma``, ``sigma_g``), which must stay inside (0, 1), take the spread on
the logit scale instead: logit(individual) = logit(typical) + s z with s = sd / (t (1 - t)) for an sd
and s = cv / (1 - t) for a cv (the delta method at the typical value t), so an individual's median is
the typical value and its sd is close to the stated one when the spread is small.

Sign rules: quantities in :data:`POSITIVE` (Kf, PS, C_tis, L, sigma, pi_c, pi_i, Cp, r, ...) must have
(practically) no probability mass at or below zero: a normal prior is accepted when its mass below
zero is below 1e-6 (:data:`NEGLIGIBLE_MASS`), bounded priors need a lower bound >= 0, fixed values
must be > 0. Quantities in :data:`UNIT_INTERVAL` (sigma, ...) also need their mass above 1 to be
negligible. Pressures such as Pi may be negative.

Numbers in this module are conventions, not physiology, and carry no origin of their own.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from uncertainty.core import units
from uncertainty.core.errors import UnitError, study_error
from uncertainty.distributions import (
    REGISTRY,
    Distribution,
    Fixed,
    ParameterError,
    PointMass,  # noqa: F401 - re-exported (uncertainty.priors.PointMass)
    Spread,
    distribution,
)

#: Distribution name -> (required parameters, optional parameters) (from the family registry).
DISTRIBUTIONS: dict[str, tuple[tuple[str, ...], tuple[str, ...]]] = {
    name: (cls.required, cls.optional) for name, cls in REGISTRY.items()
}


#: Parameters that are locations (converted with the unit, shifted by a condition).
LOCATION_PARAMS = ("mean", "median", "lower", "mode", "upper", "value")


#: Parameters that are scales in the declared unit (converted by the unit's factor only).
SCALE_PARAMS = ("sd",)


#: Dimensionless parameters (no conversion).
PURE_PARAMS = ("gsd",)


#: Keys a declaration may carry besides its distribution parameters.
META_KEYS = ("dist", "unit", "between_subject", "origin", "note")


#: Quantities that must be positive (mass at or below zero negligible).
POSITIVE = frozenset({
    "Kf", "PS", "C_tis", "C_tis_high", "C_v", "L", "sigma", "sigma_g", "sigma_osm", "pi_c", "pi_i",
    "pi_g", "Cp", "Ci", "C_alb", "C_glob", "Ci_alb", "Ci_glob", "r", "JL_max", "JL_reserve", "tissue_mass",
    "density", "Pa", "PAP", "tau_v", "k_clear", "Kf_organ", "transmission", "osmolality", "V_dist",
    "J_epi", "EVLW0", "G_flood", "M_lung", "Osm_p", "Osm_i", "t_el",
})






#: Positive quantities that may still be *fixed* at exactly zero (no protein in Bowman's space, an
#: impermeable barrier).
ZERO_ALLOWED = frozenset({"pi_i", "pi_g", "Ci", "Ci_alb", "Ci_glob", "PS", "PS_large", "J_epi"})


#: Quantities confined to 0..1.
UNIT_INTERVAL = frozenset({"sigma", "sigma_g", "sigma_osm", "sigma_s", "transmission", "FF"})


#: Quantities whose between-subject spread is applied on the logit scale.
LOGIT_LAYER = frozenset({"sigma", "sigma_g", "sigma_osm", "sigma_s", "transmission"})


#: A normal prior on a positive quantity is accepted when its mass below zero is below this.
NEGLIGIBLE_MASS = 1e-6


#: Protein concentration symbols that derive an oncotic pressure: (target, kind) -> inputs.
PROTEIN_INPUTS: dict[tuple[str, str], tuple[str, ...]] = {
    ("pi_c", "total"): ("Cp",),
    ("pi_c", "albumin"): ("C_alb",),
    ("pi_c", "albumin_globulin"): ("C_alb", "C_glob"),
    ("pi_i", "total"): ("Ci",),
    ("pi_i", "albumin"): ("Ci_alb",),
    ("pi_i", "albumin_globulin"): ("Ci_alb", "Ci_glob"),
}


def join_key(key: str | None, sub: str) -> str:
    return f"{key}.{sub}" if key else sub


def is_number(x: Any) -> bool:
    return isinstance(x, int | float) and not isinstance(x, bool)


def frozen_distribution(dist: str, items: tuple[tuple[str, float], ...]) -> Any:
    """The scipy.stats frozen distribution of ``dist`` with parameters ``items`` ((name, value) pairs).

    Raises:
        ValueError: unknown distribution.
    """
    return distribution(dist, items).frozen()


@dataclass(frozen=True)
class Prior:
    """One declared quantity: distribution, parameters in canonical units, spread and provenance.

    Attributes:
        symbol: trade symbol (``"Kf"``, ``"Pc"``, ``"C_alb"``, ...).
        dist: one of :data:`DISTRIBUTIONS`.
        params: distribution parameters in the canonical unit of ``symbol`` (``gsd`` dimensionless).
        unit: the canonical unit string of the parameters (``uncertainty.core.units.CANONICAL``).
        basis: tissue basis of the declared unit (``"100g"``, ``"100mL"``, ``"organ"``) for
            per-tissue quantities, else None; the parameters themselves are always per 100 g.
        between_subject: ``{"sd": x}`` (canonical unit) or ``{"cv": x}`` or None.
        origin: where the numbers come from (published source / common practice / from memory).
        note: free text.
        declared_unit: the unit as written in the file (for display), or None.
    """

    symbol: str
    dist: str
    params: dict[str, float]
    unit: str = ""
    basis: str | None = None
    between_subject: dict[str, float] | None = None
    origin: str = ""
    note: str = ""
    declared_unit: str | None = None

    # ---- the distribution family (uncertainty.distributions) and thin delegations to it
    @property
    def distribution(self) -> Distribution:
        """The family instance of ``dist`` with ``params`` (cached by name and parameters)."""
        return distribution(self.dist, self.params)

    @property
    def spread(self) -> Spread | None:
        """The between-subject spread (on the logit scale for :data:`LOGIT_LAYER`), or None."""
        return Spread.from_declaration(self.between_subject, self.symbol in LOGIT_LAYER)

    def frozen(self) -> Any:
        """The scipy.stats frozen distribution (a :class:`PointMass` for ``fixed``)."""
        return self.distribution.frozen()

    @property
    def is_fixed(self) -> bool:
        """True for a ``fixed`` declaration (a known constant)."""
        return self.distribution.is_fixed

    def ppf(self, u: Any) -> np.ndarray:
        """Values (canonical unit) at probabilities ``u`` in (0, 1): the inverse CDF."""
        return self.distribution.ppf(u)

    def from_normal_scores(self, z: Any) -> np.ndarray:
        """Values (canonical unit) from standard normal scores ``z`` (the exact map).

        Exact and cheap for normal (mean + sd z) and lognormal (median gsd^z); otherwise
        ``ppf(Phi(z))`` evaluated through the survival function for z > 0, so extreme scores
        keep their precision (``Distribution.from_scores``).
        """
        return np.asarray(self.distribution.from_scores(z), dtype=float)

    def mean(self) -> float:
        """Mean of the typical-subject distribution (canonical unit)."""
        return self.distribution.get_mean()

    def sd(self) -> float:
        """Standard deviation of the typical-subject distribution (canonical unit)."""
        return self.distribution.get_sd()

    def median(self) -> float:
        """Median (canonical unit)."""
        return self.distribution.get_median()

    def interval(self, level: float = 0.95) -> tuple[float, float]:
        """Central interval holding ``level`` of the probability (canonical unit)."""
        return self.distribution.interval(level)

    # ---- PyMC side
    def pymc(self, name: str | None = None, **kwargs: Any) -> Any:
        """A PyMC random variable for this prior, created in the current model context.

        ``kwargs`` (``shape``, ``dims``, ...) pass to the PyMC distribution. A ``fixed`` prior gives
        a ``pm.Deterministic`` holding the constant.
        """
        return self.distribution.pymc(name or self.symbol, **kwargs)

    # ---- between-subject layer
    def individual(self, typical: Any, z: Any, xp: Any = np) -> Any:
        """One subject's value (canonical unit) around the ``typical`` value, z a standard normal score.

        sd: typical + sd z; cv: typical exp(s z), s^2 = log(1 + cv^2) (median at the typical value);
        reflection coefficients on the logit scale (see the module docstring). No spread: typical.
        Works for numpy arrays and PyTensor tensors (``xp``).
        """
        spread = self.spread
        return typical if spread is None else spread.individual(typical, z, xp)

    # ---- display
    def describe(self) -> str:
        """Short text such as ``lognormal(median=0.0045, gsd=1.5)`` (canonical unit)."""
        inner = ", ".join(f"{k}={fmt_number(v)}" for k, v in self.params.items())
        return f"{self.dist}({inner})"

    def to_row(self) -> dict[str, Any]:
        """Row for ``priors show --json``: symbol, dist, median, ci95, unit, basis, between_subject, origin."""
        return {
            "symbol": self.symbol,
            "dist": self.dist,
            "params": dict(self.params),
            "median": self.median(),
            "ci95": list(self.interval(0.95)),
            "unit": self.unit,
            "basis": self.basis,
            "between_subject": dict(self.between_subject) if self.between_subject else None,
            "origin": self.origin,
        }

    def replace(self, **changes: Any) -> Prior:
        """A copy with some fields changed."""
        return dataclasses.replace(self, **changes)


def fmt_number(v: float) -> str:
    return f"{v:.4g}"


@dataclass
class Context:
    """Where a declaration is read from and how its units convert."""

    file: Any = None
    density: float = 1.05
    tissue_mass_kg: float | None = None


def convert_unit(symbol: str, value: Any, unit: str | None = None, *, density: float = 1.05,
                 tissue_mass_kg: float | None = None) -> float:
    """``units.to_canonical``, but a unit of the wrong dimension is reported as such even when the
    missing basis suffix would otherwise be read as "per organ" (which needs a tissue mass)."""

    try:
        return units.to_canonical(symbol, value, unit, density=density, tissue_mass_kg=tissue_mass_kg)
    except UnitError as exc:
        if tissue_mass_kg is None and "tissue_mass" in exc.reason:
            units.to_canonical(symbol, value, unit, density=density, tissue_mass_kg=1.0)  # dimension check
        raise


def unit_info(symbol: str, unit: str | None, ctx: Context, key: str) -> tuple[float, str, str | None]:
    """(factor to canonical, canonical unit, basis of the declared unit) for ``symbol`` in ``unit``."""

    try:
        factor = convert_unit(symbol, 1.0, unit, density=ctx.density, tissue_mass_kg=ctx.tissue_mass_kg)
        offset = convert_unit(symbol, 0.0, unit, density=ctx.density, tissue_mass_kg=ctx.tissue_mass_kg)
    except UnitError as exc:
        raise study_error(exc.reason,
                          ctx.file, join_key(key, "unit"), unit if unit is not None else exc.value) from None
    if abs(offset) > 1e-12:  # pragma: no cover (no offset units among our quantities)
        raise study_error("units with an offset are not supported", ctx.file, join_key(key, "unit"), unit)
    basis = None
    if units.takes_basis(symbol):
        basis = units.basis_of(unit) or ("organ" if unit else "100g")
    return factor, units.CANONICAL[symbol], basis


def number_in_unit(symbol: str, raw: Any, unit: str | None, ctx: Context, key: str) -> tuple[float, str | None]:
    """A parameter value as a float in the declared unit, and a unit written inside it, if any."""
    if is_number(raw):
        x = float(raw)
        if not math.isfinite(x):
            raise study_error("must be a finite number", ctx.file, key, raw)
        return x, None
    if isinstance(raw, str):
        try:
            x, text_unit = units.parse(raw, symbol=symbol)
        except UnitError:
            raise study_error("expected a number, optionally followed by a unit", ctx.file, key, raw) from None
        if text_unit and unit and text_unit != unit:
            raise study_error("give the unit once: in the value or in `unit`", ctx.file, key, raw)
        return x, text_unit
    raise study_error("expected a number", ctx.file, key, raw)


def parse_prior(symbol: str, decl: Any, *, ctx: Context | None = None, key: str | None = None,
                unit_symbol: str | None = None, check_sign: bool = True,
                default_origin: str = "") -> Prior:
    """Read one declaration (a mapping, a bare number or ``"12 mmHg"``) into a :class:`Prior`.

    Args:
        symbol: the quantity declared.
        decl: the declaration as read from TOML.
        ctx: file, density (g/mL) and tissue mass (kg) for unit and basis conversion.
        key: dotted key path of the declaration, for error messages.
        unit_symbol: the quantity whose canonical unit applies (defaults to ``symbol``).
        check_sign: apply the sign rules of :data:`POSITIVE` / :data:`UNIT_INTERVAL`.
        default_origin: origin used when the declaration states none.

    Raises:
        StudyError: unknown keys, missing or impossible parameters, wrong units, sign violations.
    """
    ctx = ctx or Context()
    key = key or symbol
    us = unit_symbol or symbol
    if is_number(decl) or isinstance(decl, str):
        value, text_unit = number_in_unit(us, decl, None, ctx, key)
        factor, canon, basis = unit_info(us, text_unit, ctx, key)
        prior = Prior(symbol, Fixed.name, {"value": value * factor}, canon, basis, None, default_origin, "",
                      text_unit)
        if check_sign:
            check_sign_rules(prior, ctx, key, decl)
        return prior
    if not isinstance(decl, Mapping):
        raise study_error("a declaration is a table, a number or a string with a unit", ctx.file, key, decl)

    dist = decl.get("dist")
    if dist is None:
        if "value" in decl:
            dist = Fixed.name
        else:
            raise study_error("missing `dist` (one of " + ", ".join(DISTRIBUTIONS) + ")", ctx.file,
                       join_key(key, "dist"), None)
    if not isinstance(dist, str) or dist not in DISTRIBUTIONS:
        raise study_error("unknown distribution; use one of " + ", ".join(DISTRIBUTIONS), ctx.file,
                   join_key(key, "dist"), dist)
    required, optional = DISTRIBUTIONS[dist]
    allowed = set(required) | set(optional) | set(META_KEYS)
    for k in decl:
        if k not in allowed:
            raise study_error(f"unknown key for a {dist} prior (allowed: {', '.join(sorted(allowed))})",
                       ctx.file, join_key(key, str(k)), decl[k])
    for k in required:
        if k not in decl:
            raise study_error(f"a {dist} prior needs `{k}`", ctx.file, join_key(key, k), None)

    unit = decl.get("unit")
    if unit is not None and not isinstance(unit, str):
        raise study_error("`unit` must be a string", ctx.file, join_key(key, "unit"), unit)
    raw: dict[str, float] = {}
    text_units: set[str] = set()
    for k in (*required, *optional):
        if k in decl:
            x, tu = number_in_unit(us, decl[k], unit, ctx, join_key(key, k))
            if tu and k in PURE_PARAMS:
                raise study_error("a geometric sd is dimensionless", ctx.file, join_key(key, k), decl[k])
            if tu:
                text_units.add(tu)
            raw[k] = x
    if len(text_units) > 1:
        raise study_error("parameters written in different units", ctx.file, key, sorted(text_units))
    unit_used = unit or (text_units.pop() if text_units else None)
    factor, canon, basis = unit_info(us, unit_used, ctx, key)
    params = {k: (v if k in PURE_PARAMS else v * factor) for k, v in raw.items()}
    check_params(dist, params, ctx, key, raw)

    between = _parse_between(decl.get("between_subject"), factor, ctx, join_key(key, "between_subject"))
    origin = decl.get("origin", default_origin)
    note = decl.get("note", "")
    for k, v in (("origin", origin), ("note", note)):
        if not isinstance(v, str):
            raise study_error(f"`{k}` must be a string", ctx.file, join_key(key, k), v)
    prior = Prior(symbol, dist, params, canon, basis, between, origin, note, unit_used)
    if check_sign:
        check_sign_rules(prior, ctx, key, decl)
    return prior


def _parse_between(spec: Any, factor: float, ctx: Context, key: str) -> dict[str, float] | None:
    if spec is None:
        return None
    if not isinstance(spec, Mapping):
        raise study_error("between_subject is a table { sd = .. } or { cv = .. }", ctx.file, key, spec)
    extra = set(spec) - {"sd", "cv", "origin", "note"}
    if extra:
        k = sorted(extra)[0]
        raise study_error("unknown key (allowed: sd or cv, origin, note)", ctx.file, join_key(key, k), spec[k])
    has = [k for k in ("sd", "cv") if k in spec]
    if len(has) != 1:
        raise study_error("give exactly one of sd or cv", ctx.file, key, dict(spec))
    k = has[0]
    v = spec[k]
    if not is_number(v) or not math.isfinite(v) or v <= 0:
        raise study_error(f"between-subject {k} must be a positive number", ctx.file, join_key(key, k), v)
    return {k: float(v) * (factor if k == "sd" else 1.0)}


def check_params(dist: str, p: dict[str, float], ctx: Context, key: str, raw: dict[str, float]) -> None:
    """The family's parameter checks (``Distribution.check``) as a StudyError at ``key.<param>``."""
    try:
        distribution(dist, p).check(raw)
    except ParameterError as exc:
        shown = [raw.get(k) for k in exc.shown] if len(exc.shown) > 1 else raw.get(exc.param)
        raise study_error(exc.reason, ctx.file, join_key(key, exc.param), shown) from None


def check_sign_rules(prior: Prior, ctx: Context, key: str, decl: Any) -> None:
    """The sign rules of :data:`POSITIVE` and :data:`UNIT_INTERVAL` quantities (module docstring) as a
    StudyError at ``key``: negligible mass (below :data:`NEGLIGIBLE_MASS`) at or below zero, or above one."""
    s = prior.symbol
    sign_symbol = s if s in POSITIVE or s in UNIT_INTERVAL else None
    if sign_symbol is None:
        return
    p = prior.params
    fam = prior.distribution
    fr = fam.frozen()
    pkey = fam.shown_param
    shown = decl.get(pkey) if isinstance(decl, Mapping) else decl
    if s in POSITIVE:
        if fam.is_fixed:
            if not (p["value"] > 0 or (p["value"] == 0 and s in ZERO_ALLOWED)):
                raise study_error(f"{s} must be > 0", ctx.file, key if not isinstance(decl, Mapping)
                           else join_key(key, "value"), shown)
        elif fam.bounded and p.get("lower", -math.inf) < 0:
            if fam.hard_bounds or float(fr.cdf(0.0)) >= NEGLIGIBLE_MASS:
                raise study_error(f"{s} must be positive; the lower bound is negative", ctx.file,
                           join_key(key, "lower"), decl.get("lower") if isinstance(decl, Mapping) else None)
        else:
            below = float(fr.cdf(0.0))
            if below >= NEGLIGIBLE_MASS:
                raise study_error(f"{s} must be positive, but this prior puts {below:.2g} of its mass below zero "
                           f"(at most {NEGLIGIBLE_MASS:g} allowed; use a lognormal, gamma or truncnormal)",
                           ctx.file, join_key(key, pkey), shown)
    if s in UNIT_INTERVAL:
        if fam.is_fixed:
            if not 0 <= p["value"] <= 1:
                raise study_error(f"{s} must lie between 0 and 1", ctx.file, key if not isinstance(decl, Mapping)
                           else join_key(key, "value"), shown)
        elif fam.hard_bounds or (fam.bounded and "upper" in p):
            if p["upper"] > 1:
                raise study_error(f"{s} must lie between 0 and 1; the upper bound is above 1", ctx.file,
                           join_key(key, "upper"), decl.get("upper") if isinstance(decl, Mapping) else None)
        else:
            above = float(fr.sf(1.0))
            if above >= NEGLIGIBLE_MASS:
                raise study_error(f"{s} must lie between 0 and 1, but this prior puts {above:.2g} of its mass "
                           "above 1 (use a beta)", ctx.file, join_key(key, pkey), shown)
    bs = prior.between_subject
    if bs and "sd" in bs and s in POSITIVE and s not in LOGIT_LAYER and not fam.is_fixed:
        # an additive spread must not push typical individuals below zero
        med = prior.median()
        if med - 3.719 * bs["sd"] <= 0:  # fewer than 1e-4 of individuals below zero (z = 3.719)
            raise study_error(f"an additive between-subject sd this large would make some {s} values negative; "
                       "give a cv instead", ctx.file, join_key(key, "between_subject.sd"),
                       decl["between_subject"]["sd"] if isinstance(decl, Mapping) else None)
