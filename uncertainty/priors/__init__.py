"""Prior declarations, prior sets, condition modifiers and measurement instruments.

One declaration per quantity (DEVELOPERS.md "priors.py"): a distribution with its parameters, a
unit (converted to the canonical unit of ``uncertainty.core.units`` on reading), an optional
between-subject spread, an origin and a note. From one declaration come

- a scipy.stats frozen distribution (forward work: ``frozen()``, ``ppf(u)``,
  ``from_normal_scores(z)``), and
- a PyMC random variable (inference: ``pymc(name)``).

Distributions and their parameters (all in the declared ``unit``):

=============  =======================================  =========================================
dist           parameters                               meaning
=============  =======================================  =========================================
normal         mean, sd                                 Normal(mean, sd)
truncnormal    mean, sd, lower, upper                   Normal(mean, sd) cut to [lower, upper];
                                                        mean and sd are the *parent* normal's;
                                                        either bound may be left out (infinite)
lognormal      median, gsd                              log X ~ Normal(log median, log gsd), gsd > 1
beta           mean, sd                                 Beta with that mean and sd (0 < mean < 1,
                                                        sd^2 < mean (1 - mean))
gamma          mean, sd                                 Gamma with shape (mean/sd)^2, mean > 0
uniform        lower, upper                             Uniform(lower, upper)
triangular     lower, mode, upper                       triangular on [lower, upper]
fixed          value                                    a known constant
=============  =======================================  =========================================

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
import functools
import math
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from uncertainty.core.errors import StudyError, UnitError

#: Distribution name -> (required parameters, optional parameters).
DISTRIBUTIONS: dict[str, tuple[tuple[str, ...], tuple[str, ...]]] = {
    "normal": (("mean", "sd"), ()),
    "truncnormal": (("mean", "sd"), ("lower", "upper")),
    "lognormal": (("median", "gsd"), ()),
    "beta": (("mean", "sd"), ()),
    "gamma": (("mean", "sd"), ()),
    "uniform": (("lower", "upper"), ()),
    "triangular": (("lower", "mode", "upper"), ()),
    "fixed": (("value",), ()),
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
    "pi_g", "Cp", "Ci", "C_alb", "C_glob", "Ci_alb", "Ci_glob", "r", "JL_max", "tissue_mass",
    "density", "Pa", "PAP", "tau_v", "k_clear", "Kf_organ", "transmission", "osmolality", "V_dist",
    "J_epi", "EVLW0",
})

#: Model forms (``[study] model``). ``glomerular`` is organ-specific: a prior set offers it only when its
#: ``[set] models`` lists it (the default is the three general forms).
MODEL_FORMS = ("classic", "steady_state", "revised", "glomerular")
GENERAL_FORMS = ("classic", "steady_state", "revised")

#: Positive quantities that may still be *fixed* at exactly zero (no protein in Bowman's space, an
#: impermeable barrier).
ZERO_ALLOWED = frozenset({"pi_i", "pi_g", "Ci", "Ci_alb", "Ci_glob", "PS", "PS_large", "J_epi"})

#: Quantities confined to 0..1.
UNIT_INTERVAL = frozenset({"sigma", "sigma_g", "sigma_osm", "transmission", "FF"})

#: Quantities whose between-subject spread is applied on the logit scale.
LOGIT_LAYER = frozenset({"sigma", "sigma_g", "sigma_osm", "transmission"})

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


def _err(message: str, file: Any, key: str | None, value: Any = None) -> StudyError:
    return StudyError(message, file=str(file) if file else None, key=key, value=value)


def _join(key: str | None, sub: str) -> str:
    return f"{key}.{sub}" if key else sub


def _is_number(x: Any) -> bool:
    return isinstance(x, int | float) and not isinstance(x, bool)


# --------------------------------------------------------------------------- point mass


class PointMass:
    """A degenerate distribution at ``value`` with the scipy.stats frozen-distribution methods."""

    def __init__(self, value: float) -> None:
        self.value = float(value)

    def ppf(self, q: Any) -> np.ndarray:
        """Quantile: ``value`` everywhere."""
        return np.full(np.shape(q), self.value)

    isf = ppf

    def cdf(self, x: Any) -> np.ndarray:
        """Cumulative probability: 0 below ``value``, 1 from it on."""
        return (np.asarray(x, dtype=float) >= self.value).astype(float)

    def sf(self, x: Any) -> np.ndarray:
        """Survival function 1 - cdf."""
        return 1.0 - self.cdf(x)

    def rvs(self, size: Any = None, random_state: Any = None) -> Any:
        """Draws: ``value`` repeated."""
        return self.value if size is None else np.full(size, self.value)

    def mean(self) -> float:
        return self.value

    def median(self) -> float:
        return self.value

    def std(self) -> float:
        return 0.0

    def var(self) -> float:
        return 0.0

    def interval(self, confidence: float) -> tuple[float, float]:
        return (self.value, self.value)

    def support(self) -> tuple[float, float]:
        return (self.value, self.value)


# --------------------------------------------------------------------------- Prior


@functools.lru_cache(maxsize=4096)
def _frozen(dist: str, items: tuple[tuple[str, float], ...]) -> Any:
    from scipy import stats

    p = dict(items)
    if dist == "normal":
        return stats.norm(loc=p["mean"], scale=p["sd"])
    if dist == "truncnormal":
        lo, hi = p.get("lower", -math.inf), p.get("upper", math.inf)
        return stats.truncnorm((lo - p["mean"]) / p["sd"], (hi - p["mean"]) / p["sd"],
                               loc=p["mean"], scale=p["sd"])
    if dist == "lognormal":
        return stats.lognorm(s=math.log(p["gsd"]), scale=p["median"])
    if dist == "beta":
        a, b = _beta_ab(p["mean"], p["sd"])
        return stats.beta(a, b)
    if dist == "gamma":
        k, theta = _gamma_k_theta(p["mean"], p["sd"])
        return stats.gamma(k, scale=theta)
    if dist == "uniform":
        return stats.uniform(loc=p["lower"], scale=p["upper"] - p["lower"])
    if dist == "triangular":
        w = p["upper"] - p["lower"]
        return stats.triang((p["mode"] - p["lower"]) / w, loc=p["lower"], scale=w)
    if dist == "fixed":
        return PointMass(p["value"])
    raise ValueError(f"unknown distribution {dist!r}")  # pragma: no cover (validated earlier)


def _beta_ab(mean: float, sd: float) -> tuple[float, float]:
    """Beta shape parameters (a, b) from mean and sd (method of moments)."""
    nu = mean * (1.0 - mean) / sd**2 - 1.0
    return mean * nu, (1.0 - mean) * nu


def _gamma_k_theta(mean: float, sd: float) -> tuple[float, float]:
    """Gamma shape k and scale theta from mean and sd."""
    return (mean / sd) ** 2, sd**2 / mean


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

    # ---- scipy side
    def frozen(self) -> Any:
        """The scipy.stats frozen distribution (a :class:`PointMass` for ``fixed``)."""
        return _frozen(self.dist, tuple(sorted(self.params.items())))

    @property
    def is_fixed(self) -> bool:
        """True for a ``fixed`` declaration (a known constant)."""
        return self.dist == "fixed"

    def ppf(self, u: Any) -> np.ndarray:
        """Values (canonical unit) at probabilities ``u`` in (0, 1): the inverse CDF."""
        return np.asarray(self.frozen().ppf(np.asarray(u, dtype=float)), dtype=float)

    def from_normal_scores(self, z: Any) -> np.ndarray:
        """Values (canonical unit) from standard normal scores ``z``.

        Exact and cheap for normal (mean + sd z) and lognormal (median gsd^z); otherwise
        ``ppf(Phi(z))`` evaluated through the survival function for z > 0, so extreme scores
        keep their precision.
        """
        z = np.asarray(z, dtype=float)
        p = self.params
        if self.dist == "normal":
            return p["mean"] + p["sd"] * z
        if self.dist == "lognormal":
            return p["median"] * np.exp(math.log(p["gsd"]) * z)
        if self.dist == "fixed":
            return np.full(z.shape, p["value"])
        from scipy.special import ndtr

        fr = self.frozen()
        lower = fr.ppf(ndtr(np.minimum(z, 0.0)))
        upper = fr.isf(ndtr(-np.maximum(z, 0.0)))
        return np.where(z <= 0.0, lower, upper)

    def mean(self) -> float:
        """Mean of the typical-subject distribution (canonical unit)."""
        return float(self.frozen().mean())

    def sd(self) -> float:
        """Standard deviation of the typical-subject distribution (canonical unit)."""
        return float(self.frozen().std())

    def median(self) -> float:
        """Median (canonical unit)."""
        return float(self.frozen().median())

    def interval(self, level: float = 0.95) -> tuple[float, float]:
        """Central interval holding ``level`` of the probability (canonical unit)."""
        lo, hi = self.frozen().interval(level)
        return float(lo), float(hi)

    # ---- PyMC side
    def pymc(self, name: str | None = None, **kwargs: Any) -> Any:
        """A PyMC random variable for this prior, created in the current model context.

        ``kwargs`` (``shape``, ``dims``, ...) pass to the PyMC distribution. A ``fixed`` prior gives
        a ``pm.Deterministic`` holding the constant.
        """
        import pymc as pm

        name = name or self.symbol
        p = self.params
        if self.dist == "normal":
            return pm.Normal(name, mu=p["mean"], sigma=p["sd"], **kwargs)
        if self.dist == "truncnormal":
            return pm.TruncatedNormal(name, mu=p["mean"], sigma=p["sd"], lower=p.get("lower"),
                                      upper=p.get("upper"), **kwargs)
        if self.dist == "lognormal":
            return pm.LogNormal(name, mu=math.log(p["median"]), sigma=math.log(p["gsd"]), **kwargs)
        if self.dist == "beta":
            a, b = _beta_ab(p["mean"], p["sd"])
            return pm.Beta(name, alpha=a, beta=b, **kwargs)
        if self.dist == "gamma":
            k, theta = _gamma_k_theta(p["mean"], p["sd"])
            return pm.Gamma(name, alpha=k, beta=1.0 / theta, **kwargs)
        if self.dist == "uniform":
            return pm.Uniform(name, lower=p["lower"], upper=p["upper"], **kwargs)
        if self.dist == "triangular":
            return pm.Triangular(name, lower=p["lower"], c=p["mode"], upper=p["upper"], **kwargs)
        import pytensor.tensor as pt

        value = pt.as_tensor_variable(np.float64(p["value"]))
        if "shape" in kwargs:
            value = pt.full(kwargs["shape"], p["value"])
        return pm.Deterministic(name, value, dims=kwargs.get("dims"))

    # ---- between-subject layer
    def individual(self, typical: Any, z: Any, xp: Any = np) -> Any:
        """One subject's value (canonical unit) around the ``typical`` value, z a standard normal score.

        sd: typical + sd z; cv: typical exp(s z), s^2 = log(1 + cv^2) (median at the typical value);
        reflection coefficients on the logit scale (see the module docstring). No spread: typical.
        Works for numpy arrays and PyTensor tensors (``xp``).
        """
        bs = self.between_subject
        if not bs:
            return typical
        if self.symbol in LOGIT_LAYER:
            t = typical
            s = bs["sd"] / (t * (1.0 - t)) if "sd" in bs else bs["cv"] / (1.0 - t)
            x = xp.log(t) - xp.log1p(-t) + s * z
            return 1.0 / (1.0 + xp.exp(-x))
        if "sd" in bs:
            return typical + bs["sd"] * z
        s = math.sqrt(math.log1p(bs["cv"] ** 2))
        return typical * xp.exp(s * z)

    # ---- display
    def describe(self) -> str:
        """Short text such as ``lognormal(median=0.0045, gsd=1.5)`` (canonical unit)."""
        inner = ", ".join(f"{k}={_fmt(v)}" for k, v in self.params.items())
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


def _fmt(v: float) -> str:
    return f"{v:.4g}"


# --------------------------------------------------------------------------- parsing


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
    from uncertainty.core import units

    try:
        return units.to_canonical(symbol, value, unit, density=density, tissue_mass_kg=tissue_mass_kg)
    except UnitError as exc:
        if tissue_mass_kg is None and "tissue_mass" in exc.reason:
            units.to_canonical(symbol, value, unit, density=density, tissue_mass_kg=1.0)  # dimension check
        raise


def _unit_info(symbol: str, unit: str | None, ctx: Context, key: str) -> tuple[float, str, str | None]:
    """(factor to canonical, canonical unit, basis of the declared unit) for ``symbol`` in ``unit``."""
    from uncertainty.core import units

    try:
        factor = convert_unit(symbol, 1.0, unit, density=ctx.density, tissue_mass_kg=ctx.tissue_mass_kg)
        offset = convert_unit(symbol, 0.0, unit, density=ctx.density, tissue_mass_kg=ctx.tissue_mass_kg)
    except UnitError as exc:
        raise _err(exc.reason, ctx.file, _join(key, "unit"), unit if unit is not None else exc.value) from None
    if abs(offset) > 1e-12:  # pragma: no cover (no offset units among our quantities)
        raise _err("units with an offset are not supported", ctx.file, _join(key, "unit"), unit)
    basis = None
    if units.takes_basis(symbol):
        basis = units.basis_of(unit) or ("organ" if unit else "100g")
    return factor, units.CANONICAL[symbol], basis


def _number(symbol: str, raw: Any, unit: str | None, ctx: Context, key: str) -> tuple[float, str | None]:
    """A parameter value as a float in the declared unit, and a unit written inside it, if any."""
    if _is_number(raw):
        x = float(raw)
        if not math.isfinite(x):
            raise _err("must be a finite number", ctx.file, key, raw)
        return x, None
    if isinstance(raw, str):
        from uncertainty.core import units

        try:
            x, text_unit = units.parse(raw, symbol=symbol)
        except UnitError:
            raise _err("expected a number, optionally followed by a unit", ctx.file, key, raw) from None
        if text_unit and unit and text_unit != unit:
            raise _err("give the unit once: in the value or in `unit`", ctx.file, key, raw)
        return x, text_unit
    raise _err("expected a number", ctx.file, key, raw)


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
    if _is_number(decl) or isinstance(decl, str):
        value, text_unit = _number(us, decl, None, ctx, key)
        factor, canon, basis = _unit_info(us, text_unit, ctx, key)
        prior = Prior(symbol, "fixed", {"value": value * factor}, canon, basis, None, default_origin, "",
                      text_unit)
        if check_sign:
            _check_sign(prior, ctx, key, decl)
        return prior
    if not isinstance(decl, Mapping):
        raise _err("a declaration is a table, a number or a string with a unit", ctx.file, key, decl)

    dist = decl.get("dist")
    if dist is None:
        if "value" in decl:
            dist = "fixed"
        else:
            raise _err("missing `dist` (one of " + ", ".join(DISTRIBUTIONS) + ")", ctx.file,
                       _join(key, "dist"), None)
    if not isinstance(dist, str) or dist not in DISTRIBUTIONS:
        raise _err("unknown distribution; use one of " + ", ".join(DISTRIBUTIONS), ctx.file,
                   _join(key, "dist"), dist)
    required, optional = DISTRIBUTIONS[dist]
    allowed = set(required) | set(optional) | set(META_KEYS)
    for k in decl:
        if k not in allowed:
            raise _err(f"unknown key for a {dist} prior (allowed: {', '.join(sorted(allowed))})",
                       ctx.file, _join(key, str(k)), decl[k])
    for k in required:
        if k not in decl:
            raise _err(f"a {dist} prior needs `{k}`", ctx.file, _join(key, k), None)

    unit = decl.get("unit")
    if unit is not None and not isinstance(unit, str):
        raise _err("`unit` must be a string", ctx.file, _join(key, "unit"), unit)
    raw: dict[str, float] = {}
    text_units: set[str] = set()
    for k in (*required, *optional):
        if k in decl:
            x, tu = _number(us, decl[k], unit, ctx, _join(key, k))
            if tu and k in PURE_PARAMS:
                raise _err("a geometric sd is dimensionless", ctx.file, _join(key, k), decl[k])
            if tu:
                text_units.add(tu)
            raw[k] = x
    if len(text_units) > 1:
        raise _err("parameters written in different units", ctx.file, key, sorted(text_units))
    unit_used = unit or (text_units.pop() if text_units else None)
    factor, canon, basis = _unit_info(us, unit_used, ctx, key)
    params = {k: (v if k in PURE_PARAMS else v * factor) for k, v in raw.items()}
    _check_params(dist, params, ctx, key, raw)

    between = _parse_between(decl.get("between_subject"), factor, ctx, _join(key, "between_subject"))
    origin = decl.get("origin", default_origin)
    note = decl.get("note", "")
    for k, v in (("origin", origin), ("note", note)):
        if not isinstance(v, str):
            raise _err(f"`{k}` must be a string", ctx.file, _join(key, k), v)
    prior = Prior(symbol, dist, params, canon, basis, between, origin, note, unit_used)
    if check_sign:
        _check_sign(prior, ctx, key, decl)
    return prior


def _parse_between(spec: Any, factor: float, ctx: Context, key: str) -> dict[str, float] | None:
    if spec is None:
        return None
    if not isinstance(spec, Mapping):
        raise _err("between_subject is a table { sd = .. } or { cv = .. }", ctx.file, key, spec)
    extra = set(spec) - {"sd", "cv", "origin", "note"}
    if extra:
        k = sorted(extra)[0]
        raise _err("unknown key (allowed: sd or cv, origin, note)", ctx.file, _join(key, k), spec[k])
    has = [k for k in ("sd", "cv") if k in spec]
    if len(has) != 1:
        raise _err("give exactly one of sd or cv", ctx.file, key, dict(spec))
    k = has[0]
    v = spec[k]
    if not _is_number(v) or not math.isfinite(v) or v <= 0:
        raise _err(f"between-subject {k} must be a positive number", ctx.file, _join(key, k), v)
    return {k: float(v) * (factor if k == "sd" else 1.0)}


def _check_params(dist: str, p: dict[str, float], ctx: Context, key: str, raw: dict[str, float]) -> None:
    def bad(msg: str, k: str) -> StudyError:
        return _err(msg, ctx.file, _join(key, k), raw.get(k))

    if "sd" in p and not p["sd"] > 0:
        raise bad("sd must be > 0", "sd")
    if dist == "lognormal":
        if not p["median"] > 0:
            raise bad("a lognormal median must be > 0", "median")
        if not p["gsd"] > 1:
            raise bad("a geometric sd (gsd) must be > 1", "gsd")
    elif dist == "beta":
        if not 0 < p["mean"] < 1:
            raise bad("a beta mean must lie strictly between 0 and 1", "mean")
        if not p["sd"] ** 2 < p["mean"] * (1 - p["mean"]):
            raise bad(f"sd too large for a beta with mean {raw['mean']:g} (needs sd^2 < mean (1 - mean))",
                      "sd")
    elif dist == "gamma":
        if not p["mean"] > 0:
            raise bad("a gamma mean must be > 0", "mean")
    elif dist in ("uniform", "triangular", "truncnormal"):
        lo, hi = p.get("lower", -math.inf), p.get("upper", math.inf)
        if not lo < hi:
            raise _err("lower must be below upper", ctx.file, _join(key, "lower"),
                       [raw.get("lower"), raw.get("upper")])
        if dist == "triangular" and not lo <= p["mode"] <= hi:
            raise bad("the mode must lie between lower and upper", "mode")
        if dist == "truncnormal":
            from scipy.special import ndtr

            mass = ndtr((hi - p["mean"]) / p["sd"]) - ndtr((lo - p["mean"]) / p["sd"])
            if not mass > 1e-12:
                raise bad("the truncation interval holds no probability of the parent normal", "mean")


def _check_sign(prior: Prior, ctx: Context, key: str, decl: Any) -> None:
    s = prior.symbol
    sign_symbol = s if s in POSITIVE or s in UNIT_INTERVAL else None
    if sign_symbol is None:
        return
    p = prior.params
    fr = prior.frozen()
    pkey = {"normal": "mean", "truncnormal": "lower", "lognormal": "median", "beta": "mean",
            "gamma": "mean", "uniform": "lower", "triangular": "lower", "fixed": "value"}[prior.dist]
    shown = decl.get(pkey) if isinstance(decl, Mapping) else decl
    if s in POSITIVE:
        if prior.dist == "fixed":
            if not (p["value"] > 0 or (p["value"] == 0 and s in ZERO_ALLOWED)):
                raise _err(f"{s} must be > 0", ctx.file, key if not isinstance(decl, Mapping)
                           else _join(key, "value"), shown)
        elif prior.dist in ("uniform", "triangular", "truncnormal") and p.get("lower", -math.inf) < 0:
            if prior.dist != "truncnormal" or float(fr.cdf(0.0)) >= NEGLIGIBLE_MASS:
                raise _err(f"{s} must be positive; the lower bound is negative", ctx.file,
                           _join(key, "lower"), decl.get("lower") if isinstance(decl, Mapping) else None)
        else:
            below = float(fr.cdf(0.0))
            if below >= NEGLIGIBLE_MASS:
                raise _err(f"{s} must be positive, but this prior puts {below:.2g} of its mass below zero "
                           f"(at most {NEGLIGIBLE_MASS:g} allowed; use a lognormal, gamma or truncnormal)",
                           ctx.file, _join(key, pkey), shown)
    if s in UNIT_INTERVAL:
        if prior.dist == "fixed":
            if not 0 <= p["value"] <= 1:
                raise _err(f"{s} must lie between 0 and 1", ctx.file, key if not isinstance(decl, Mapping)
                           else _join(key, "value"), shown)
        elif prior.dist in ("uniform", "triangular") or (prior.dist == "truncnormal" and "upper" in p):
            if p["upper"] > 1:
                raise _err(f"{s} must lie between 0 and 1; the upper bound is above 1", ctx.file,
                           _join(key, "upper"), decl.get("upper") if isinstance(decl, Mapping) else None)
        else:
            above = float(fr.sf(1.0))
            if above >= NEGLIGIBLE_MASS:
                raise _err(f"{s} must lie between 0 and 1, but this prior puts {above:.2g} of its mass "
                           "above 1 (use a beta)", ctx.file, _join(key, pkey), shown)
    bs = prior.between_subject
    if bs and "sd" in bs and s in POSITIVE and s not in LOGIT_LAYER and prior.dist != "fixed":
        # an additive spread must not push typical individuals below zero
        med = prior.median()
        if med - 3.719 * bs["sd"] <= 0:  # fewer than 1e-4 of individuals below zero (z = 3.719)
            raise _err(f"an additive between-subject sd this large would make some {s} values negative; "
                       "give a cv instead", ctx.file, _join(key, "between_subject.sd"),
                       decl["between_subject"]["sd"] if isinstance(decl, Mapping) else None)


# --------------------------------------------------------------------------- derivations


@dataclass(frozen=True)
class Derivation:
    """How a quantity is computed from sampled ones, with physiology functions unchanged.

    Attributes:
        target: the derived quantity (``pi_c``, ``pi_i``, ``Pc``).
        formula: ``total`` / ``albumin`` / ``albumin_globulin`` (oncotic pressure from protein,
            Landis & Pappenheimer relations), ``resistance_ratio`` (Pc from Pa, Pv, r;
            Pappenheimer & Soto-Rivera 1948) or ``gaar`` (lung Pc from LAP, PAP; Gaar et al. 1967).
        inputs: the quantities it reads, in the order the formula takes them.
        shift: added after the formula (canonical unit of the target), from a condition.
        multiply: multiplies the result of the formula, from a condition.
        origin: provenance of the derivation's declaration.
    """

    target: str
    formula: str
    inputs: tuple[str, ...]
    shift: float = 0.0
    multiply: float = 1.0
    origin: str = ""
    fraction: float = 0.4

    def compute(self, values: Mapping[str, Any], xp: Any = np) -> Any:
        """The derived value (canonical unit) from ``values`` of its inputs (numpy or PyTensor)."""
        from uncertainty.physiology import capillary, oncotic

        args = [values[k] for k in self.inputs]
        if self.formula == "total":
            out = oncotic.pi_total_protein(*args)
        elif self.formula == "albumin":
            out = oncotic.pi_albumin(*args)
        elif self.formula == "albumin_globulin":
            out = oncotic.pi_albumin_globulin(*args)
        elif self.formula == "resistance_ratio":
            out = capillary.mean_capillary_pressure(*args)
        elif self.formula == "gaar":
            out = capillary.pulmonary_capillary_pressure(*args, fraction=self.fraction)
        else:  # pragma: no cover
            raise ValueError(self.formula)
        if self.multiply != 1.0:
            out = out * self.multiply
        if self.shift != 0.0:
            out = out + self.shift
        return out

    def describe(self) -> str:
        """Short text, e.g. ``pi_c = oncotic total protein(Cp)``."""
        names = {"total": "oncotic pressure of total protein", "albumin": "oncotic pressure of albumin",
                 "albumin_globulin": "oncotic pressure of albumin + globulin",
                 "resistance_ratio": "(r Pa + Pv)/(1 + r)",
                 "gaar": f"LAP + {self.fraction:g} (PAP - LAP)"}
        text = f"{self.target} = {names[self.formula]} from {', '.join(self.inputs)}"
        if self.multiply != 1.0:
            text += f", x {self.multiply:g}"
        if self.shift != 0.0:
            text += f", {self.shift:+g}"
        return text


#: Rule -> (target, inputs) of the pressure derivations of a prior file's ``[derived.Pc]``.
PRESSURE_DERIVATIONS: dict[str, tuple[str, tuple[str, ...]]] = {
    "resistance_ratio": ("Pc", ("Pa", "Pv", "r")),
    "gaar": ("Pc", ("LAP", "PAP")),
}


def parse_derived(symbol: str, spec: Any, *, file: Any = None, key: str | None = None) -> Derivation:
    """Read a prior file's ``[derived.<symbol>]`` table (``rule``, ``inputs``, rule parameters, origin)."""
    key = key or f"derived.{symbol}"
    if not isinstance(spec, Mapping):
        raise _err("a derived entry is a table with rule and inputs", file, key, spec)
    for k in spec:
        if k not in ("rule", "inputs", "fraction", "origin", "note"):
            raise _err("unknown key (allowed: rule, inputs, fraction, origin, note)", file, _join(key, k), spec[k])
    rule = spec.get("rule")
    if rule not in PRESSURE_DERIVATIONS:
        raise _err("unknown rule (" + ", ".join(PRESSURE_DERIVATIONS) + ")", file, _join(key, "rule"), rule)
    target, inputs = PRESSURE_DERIVATIONS[rule]
    if symbol != target:
        raise _err(f"rule {rule} derives {target}", file, key, symbol)
    given = spec.get("inputs", list(inputs))
    if list(given) != list(inputs):
        raise _err(f"rule {rule} reads inputs {list(inputs)}", file, _join(key, "inputs"), given)
    fraction = spec.get("fraction", 0.4)
    if not _is_number(fraction) or not 0 < fraction < 1:
        raise _err("fraction lies between 0 and 1", file, _join(key, "fraction"), fraction)
    return Derivation(symbol, rule, inputs, origin=str(spec.get("origin", "")), fraction=float(fraction))


def parse_entry(symbol: str, decl: Any, *, ctx: Context | None = None, key: str | None = None,
                default_origin: str = "") -> tuple[dict[str, Prior], Derivation | None]:
    """Read one ``[parameters]`` / ``[priors]`` entry: a plain declaration or a ``from_protein`` one.

    Returns the priors it declares (one, or the protein concentrations) and the derivation, if any.
    """
    ctx = ctx or Context()
    key = key or symbol
    if isinstance(decl, Mapping) and "from_protein" in decl:
        extra = set(decl) - {"from_protein", "origin", "note"}
        if extra:
            k = sorted(extra)[0]
            raise _err("a from_protein entry takes only from_protein, origin and note", ctx.file,
                       _join(key, k), decl[k])
        if symbol not in ("pi_c", "pi_i"):
            raise _err("from_protein derives pi_c or pi_i only", ctx.file, _join(key, "from_protein"), symbol)
        spec = decl["from_protein"]
        fkey = _join(key, "from_protein")
        origin = decl.get("origin", default_origin)
        if not isinstance(spec, Mapping):
            raise _err("from_protein is a table (a declaration in g/dL)", ctx.file, fkey, spec)
        if "albumin" in spec or "globulin" in spec:
            extra = set(spec) - {"albumin", "globulin"}
            if extra:
                k = sorted(extra)[0]
                raise _err("with albumin/globulin, from_protein takes only those two tables", ctx.file,
                           _join(fkey, k), spec[k])
            if not ("albumin" in spec and "globulin" in spec):
                raise _err("give both albumin and globulin (or a total-protein declaration with kind)",
                           ctx.file, fkey, sorted(spec))
            kind = "albumin_globulin"
            inputs = PROTEIN_INPUTS[(symbol, kind)]
            priors = {inputs[0]: parse_prior(inputs[0], spec["albumin"], ctx=ctx, key=_join(fkey, "albumin"),
                                             default_origin=origin),
                      inputs[1]: parse_prior(inputs[1], spec["globulin"], ctx=ctx, key=_join(fkey, "globulin"),
                                             default_origin=origin)}
        else:
            kind = spec.get("kind", "total")
            if kind not in ("total", "albumin"):
                raise _err("kind is total or albumin", ctx.file, _join(fkey, "kind"), kind)
            inner = {k: v for k, v in spec.items() if k != "kind"}
            (inp,) = PROTEIN_INPUTS[(symbol, kind)]
            priors = {inp: parse_prior(inp, inner, ctx=ctx, key=fkey, default_origin=origin)}
        if not origin:
            inner_origins = [spec.get("origin")] + [spec[k].get("origin") for k in ("albumin", "globulin")
                                                    if isinstance(spec.get(k), Mapping)]
            origin = next((o for o in inner_origins if isinstance(o, str) and o), "")
        return priors, Derivation(symbol, kind, PROTEIN_INPUTS[(symbol, kind)], origin=origin or "")
    return {symbol: parse_prior(symbol, decl, ctx=ctx, key=key, default_origin=default_origin)}, None


# --------------------------------------------------------------------------- prior sets


@dataclass
class PriorSet:
    """A tissue's priors (``priors/<name>.toml``).

    Attributes:
        name, description: the set's name (the tissue) and a sentence about it.
        basis: the basis its per-tissue values are quoted on (``"100g"`` or ``"100mL"``); values are
            stored per 100 g whatever the basis.
        density: tissue density in g/mL (with ``density_origin``).
        priors: symbol -> Prior (canonical units), including the protein concentrations that derive
            pi_c / pi_i and the pressures that derive Pc.
        derived: target -> Derivation (from_protein entries).
        correlations: (a, b, rho) normal-score correlations with their origins in ``correlation_origins``.
        path: the file read.
    """

    name: str
    description: str = ""
    basis: str = "100g"
    density: float = 1.05
    density_origin: str = ""
    priors: dict[str, Prior] = field(default_factory=dict)
    derived: dict[str, Derivation] = field(default_factory=dict)
    correlations: list[tuple[str, str, float]] = field(default_factory=list)
    correlation_origins: list[str] = field(default_factory=list)
    path: str | None = None
    models: tuple[str, ...] = ("classic", "steady_state", "revised")

    def copy(self) -> PriorSet:
        """A copy whose dictionaries and lists may be changed freely."""
        return dataclasses.replace(self, priors=dict(self.priors), derived=dict(self.derived),
                                   correlations=list(self.correlations),
                                   correlation_origins=list(self.correlation_origins))


def _data_dir(directory: str | Path | None) -> Path:
    if directory is not None:
        return Path(directory)
    from uncertainty.core.resources import priors_dir

    return priors_dir()


def read_toml(path: Path, *, file_label: str | None = None) -> dict[str, Any]:
    """Parse a TOML file; syntax errors become StudyError naming the line and its key."""
    label = file_label or str(path)
    try:
        data = path.read_bytes()
    except OSError as exc:
        raise _err(f"cannot read the file ({exc.strerror})", label, None, None) from None
    return parse_toml_bytes(data, label)


def parse_toml_bytes(data: bytes, label: str) -> dict[str, Any]:
    """Parse TOML bytes; syntax errors (duplicate keys included) become StudyError with the key path."""
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise _err("the file is not UTF-8 text", label, None, None) from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        line_no = getattr(exc, "lineno", None)
        if line_no is None:
            import re

            m = re.search(r"at line (\d+)", str(exc))
            line_no = int(m.group(1)) if m else None
        msg = str(exc).split(" (at ")[0]
        key, shown = _key_at_line(text, line_no)
        if "overwrite" in msg or "Cannot declare" in msg:
            msg = "duplicate key (" + msg + ")"
        raise _err(f"TOML syntax error on line {line_no}: {msg}", label, key, shown) from None


def _key_at_line(text: str, line_no: int | None) -> tuple[str | None, str | None]:
    """Best-effort dotted key of the line ``line_no`` (1-based) and the line's text."""
    if not line_no:
        return None, None
    lines = text.splitlines()
    if line_no > len(lines):
        return None, None
    line = lines[line_no - 1].strip()
    section = ""
    for prev in reversed(lines[: line_no - 1]):
        s = prev.strip()
        if s.startswith("["):
            section = s.strip("[] ")
            break
    if line.startswith("["):
        return line.strip("[] "), line
    name = line.split("=", 1)[0].strip().strip('"') if "=" in line else line
    return (f"{section}.{name}" if section else name), line


@functools.lru_cache(maxsize=64)
def _load_prior_set_cached(path_str: str) -> PriorSet:
    path = Path(path_str)
    doc = read_toml(path)
    return prior_set_from_dict(doc, file=path_str)


def prior_set_from_dict(doc: Mapping[str, Any], *, file: Any = None, name: str | None = None) -> PriorSet:
    """Build a PriorSet from a parsed prior file (layout in DEVELOPERS.md)."""
    for k in doc:
        if k not in ("set", "priors", "derived", "correlations"):
            raise _err("unknown section (allowed: set, priors, derived, correlations)", file, str(k), None)
    head = doc.get("set", {})
    if not isinstance(head, Mapping):
        raise _err("[set] must be a table", file, "set", head)
    for k in head:
        if k not in ("name", "description", "basis", "density", "models", "origin", "note"):
            raise _err("unknown key", file, f"set.{k}", head[k])
    models = head.get("models", list(GENERAL_FORMS))
    if not (isinstance(models, list) and models and all(m in MODEL_FORMS for m in models)):
        raise _err("models lists model forms (" + ", ".join(MODEL_FORMS) + ")", file, "set.models", models)
    basis = head.get("basis", "100g")
    if basis not in ("100g", "100mL"):
        raise _err("basis is 100g or 100mL", file, "set.basis", basis)
    dens = head.get("density", 1.05)
    density_origin = ""
    if isinstance(dens, Mapping):
        density_origin = str(dens.get("origin", ""))
        from uncertainty.core import units

        try:
            density = units.to_canonical("density", dens.get("value"), dens.get("unit"))
        except UnitError as exc:
            raise _err(exc.reason, file, "set.density", dens.get("value")) from None
    elif _is_number(dens):
        density = float(dens)
    else:
        raise _err("density is a number (g/mL) or { value, unit, origin }", file, "set.density", dens)
    if not 0.5 < density < 3:
        raise _err("tissue density (g/mL) out of range", file, "set.density", density)
    pset = PriorSet(name=str(head.get("name", name or "")), description=str(head.get("description", "")),
                    basis=basis, density=density, density_origin=density_origin, path=str(file) if file else None,
                    models=tuple(models))
    ctx = Context(file=file, density=density)
    entries = doc.get("priors", {})
    if not isinstance(entries, Mapping):
        raise _err("[priors] must be a table", file, "priors", None)
    for sym, decl in entries.items():
        new, der = parse_entry(sym, decl, ctx=ctx, key=f"priors.{sym}")
        for s in new:
            if s in pset.priors:
                raise _err("quantity declared twice", file, f"priors.{sym}", s)
        pset.priors.update(new)
        if der is not None:
            pset.derived[der.target] = der
    dsec = doc.get("derived", {})
    if not isinstance(dsec, Mapping):
        raise _err("[derived] must be a table", file, "derived", None)
    for sym, spec in dsec.items():
        if sym in pset.priors or sym in pset.derived:
            raise _err("a derived quantity has no prior of its own", file, f"derived.{sym}", sym)
        pset.derived[sym] = parse_derived(sym, spec, file=file, key=f"derived.{sym}")
    for sym, d in pset.derived.items():
        for inp in d.inputs:
            if inp not in pset.priors:
                raise _err(f"input {inp} of derived {sym} has no prior in this set", file,
                           f"derived.{sym}.inputs", inp)
    rows = doc.get("correlations", [])
    if not isinstance(rows, list):
        raise _err("[[correlations]] rows: pair = [a, b], rho, origin", file, "correlations", rows)
    for i, row in enumerate(rows):
        k = f"correlations[{i}]"
        if not isinstance(row, Mapping) or set(row) - {"pair", "rho", "origin", "note"}:
            raise _err("a correlation row has pair = [a, b], rho and origin", file, k, row)
        pair, rho = row.get("pair"), row.get("rho")
        if not (isinstance(pair, list) and len(pair) == 2 and all(isinstance(p, str) for p in pair)):
            raise _err("pair is two quantity names", file, f"{k}.pair", pair)
        if not _is_number(rho) or not -1 < rho < 1:
            raise _err("rho must lie strictly between -1 and 1", file, f"{k}.rho", rho)
        pset.correlations.append((pair[0], pair[1], float(rho)))
        pset.correlation_origins.append(str(row.get("origin", "")))
    return pset


def list_prior_sets(directory: str | Path | None = None) -> list[str]:
    """Names of the shipped prior sets (tissues), sorted."""
    d = _data_dir(directory)
    return sorted(p.stem for p in d.glob("*.toml") if p.stem not in ("conditions", "instruments"))


def load_prior_set(name: str, directory: str | Path | None = None) -> PriorSet:
    """The prior set of tissue ``name`` (``priors/<name>.toml``), as a fresh copy.

    Raises:
        StudyError: unknown tissue (key ``tissue``) or a malformed prior file.
    """
    d = _data_dir(directory)
    if not isinstance(name, str) or not name or "/" in name or "\\" in name or name.startswith("."):
        raise _err("unknown tissue", None, "tissue", name)
    path = d / f"{name}.toml"
    if name in ("conditions", "instruments") or not path.is_file():
        known = ", ".join(list_prior_sets(d)) or "none installed"
        raise _err(f"unknown tissue (known: {known})", None, "tissue", name)
    pset = _load_prior_set_cached(str(path)).copy()
    if not pset.name:
        pset.name = name
    return pset


# --------------------------------------------------------------------------- conditions


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
        Pc from pressures) changes the derivation's result (multiply / shift); a modifier of a quantity
        absent from the set is skipped with a note in ``notes``.
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
            if height_cm is not None and m.per_cm is not None:
                m = dataclasses.replace(m, shift=m.per_cm * height_cm)
            if sym in priors and sym not in derived:
                priors[sym] = _modify_prior(priors[sym], m, self.path, key, density)
            elif sym in derived:
                d = derived[sym]
                if m.set is not None or m.extra_sd or m.extra_gsd:
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
        locs = {"normal": ("mean",), "truncnormal": ("mean", "lower", "upper"), "lognormal": ("median",),
                "beta": ("mean",), "gamma": ("mean", "sd"), "uniform": ("lower", "upper"),
                "triangular": ("lower", "mode", "upper"), "fixed": ("value",)}[dist]
        for k in locs:
            if k in p:
                p[k] *= m.multiply
    if m.shift is not None:
        for k in ("mean", "median", "lower", "mode", "upper", "value"):
            if k in p:
                p[k] += m.shift
    if m.extra_sd:
        e = m.extra_sd
        if dist == "fixed":
            dist, p = "normal", {"mean": p["value"], "sd": e}
        elif dist in ("normal", "truncnormal", "beta", "gamma"):
            p["sd"] = math.hypot(p["sd"], e)
        elif dist == "lognormal":
            p["gsd"] = math.exp(math.hypot(math.log(p["gsd"]), e / p["median"]))
        else:  # uniform / triangular: widen about the mode / centre so the variance grows by e^2
            var = _frozen(dist, tuple(sorted(p.items()))).var()
            f = math.sqrt((var + e * e) / var)
            c = p.get("mode", 0.5 * (p["lower"] + p["upper"]))
            p["lower"] = c - f * (c - p["lower"])
            p["upper"] = c + f * (p["upper"] - c)
            if "mode" in p:
                p["mode"] = c
    if m.extra_gsd:
        g = math.log(m.extra_gsd)
        if dist == "lognormal":
            p["gsd"] = math.exp(math.hypot(math.log(p["gsd"]), g))
        elif dist == "fixed":
            dist, p = "lognormal", {"median": p["value"], "gsd": m.extra_gsd}
        else:
            # convert the multiplicative uncertainty to an sd at the location
            loc = prior.median()
            return _modify_prior(Prior(prior.symbol, dist, p, prior.unit, prior.basis, prior.between_subject,
                                       prior.origin, prior.note, prior.declared_unit),
                                 Modifier(m.parameter, extra_sd=abs(loc) * math.sqrt(math.expm1(g * g))),
                                 file, key, density)
    new = prior.replace(dist=dist, params=p, note=(prior.note + f" [modified by condition: {m.origin}]").strip())
    try:
        _check_params(dist, p, Context(file, density), key, p)
        _check_sign(new, Context(file, density), key, p)
    except StudyError as exc:
        raise _err(f"after the condition, {prior.symbol}: {exc.reason}", file, key, exc.value) from None
    return new


@functools.lru_cache(maxsize=8)
def _load_conditions_cached(path_str: str) -> dict[str, Condition]:
    path = Path(path_str)
    doc = read_toml(path)
    out: dict[str, Condition] = {}
    for k in doc:
        if k != "conditions":
            raise _err("unknown section (allowed: conditions)", path_str, k, None)
    for name, spec in doc.get("conditions", {}).items():
        key = f"conditions.{name}"
        if not isinstance(spec, Mapping):
            raise _err("a condition is a table", path_str, key, spec)
        for k in spec:
            if k not in ("label", "note", "applies_to", "modify", "origin", "height"):
                raise _err("unknown key", path_str, f"{key}.{k}", spec[k])
        rows = []
        for i, row in enumerate(spec.get("modify", [])):
            rkey = f"{key}.modify[{i}]"
            if not isinstance(row, Mapping):
                raise _err("a modify row is a table", path_str, rkey, row)
            for k in row:
                if k not in ("parameter", "shift", "multiply", "set", "extra_sd", "extra_gsd", "origin", "note",
                             "unit", "per_cm"):
                    raise _err("unknown key", path_str, f"{rkey}.{k}", row[k])
            if not isinstance(row.get("parameter"), str):
                raise _err("a modify row names its parameter", path_str, f"{rkey}.parameter", row.get("parameter"))
            sym = row["parameter"]
            if sum(k in row for k in ("shift", "multiply", "set")) != 1 and not (
                    "extra_sd" in row or "extra_gsd" in row):
                raise _err("give one of shift, multiply or set", path_str, rkey, None)
            vals: dict[str, float | None] = {}
            for k in ("shift", "multiply", "extra_sd", "extra_gsd", "per_cm"):
                v = row.get(k)
                if v is None:
                    vals[k] = None
                    continue
                if not _is_number(v):
                    raise _err("expected a number", path_str, f"{rkey}.{k}", v)
                v = float(v)
                if k in ("shift", "extra_sd", "per_cm") and row.get("unit"):
                    from uncertainty.core import units

                    try:
                        v = units.to_canonical(sym, v, row["unit"])
                    except UnitError as exc:
                        raise _err(exc.reason, path_str, f"{rkey}.unit", row["unit"]) from None
                if k == "multiply" and not v > 0:
                    raise _err("multiply must be > 0", path_str, f"{rkey}.{k}", v)
                if k == "extra_sd" and not v > 0:
                    raise _err("extra_sd must be > 0", path_str, f"{rkey}.{k}", v)
                if k == "extra_gsd" and not v > 1:
                    raise _err("extra_gsd must be > 1", path_str, f"{rkey}.{k}", v)
                vals[k] = v
            rows.append(Modifier(sym, vals["shift"], vals["multiply"], row.get("set"), vals["extra_sd"],
                                 vals["extra_gsd"], str(row.get("origin", "")), str(row.get("note", "")),
                                 vals["per_cm"]))
        applies = spec.get("applies_to")
        if applies is not None and not (isinstance(applies, list) and all(isinstance(a, str) for a in applies)):
            raise _err("applies_to is a list of tissue names", path_str, f"{key}.applies_to", applies)
        out[name] = Condition(name, str(spec.get("label", name)), str(spec.get("note", "")),
                              tuple(applies) if applies is not None else None, tuple(rows), path_str)
    return out


def load_conditions(directory: str | Path | None = None) -> dict[str, Condition]:
    """Condition modifiers from ``priors/conditions.toml`` (an empty dict when the file is absent)."""
    path = _data_dir(directory) / "conditions.toml"
    if not path.is_file():
        return {}
    return dict(_load_conditions_cached(str(path)))


# --------------------------------------------------------------------------- instruments


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
    from uncertainty.core import units

    path = Path(path_str)
    doc = read_toml(path)
    for k in doc:
        if k != "instruments":
            raise _err("unknown section (allowed: instruments)", path_str, k, None)
    out: dict[str, Instrument] = {}
    for name, spec in doc.get("instruments", {}).items():
        key = f"instruments.{name}"
        if not isinstance(spec, Mapping):
            raise _err("an instrument is a table", path_str, key, spec)
        for k in spec:
            if k not in ("label", "measures", "sd", "cv", "unit", "bias", "tissues", "cost", "origin", "note"):
                raise _err("unknown key", path_str, f"{key}.{k}", spec[k])
        sym = spec.get("measures")
        if not isinstance(sym, str) or sym not in units.CANONICAL:
            raise _err("measures names a known quantity", path_str, f"{key}.measures", sym)
        sd, cv = spec.get("sd"), spec.get("cv")
        if (sd is None) == (cv is None):
            raise _err("give exactly one of sd or cv", path_str, key, None)
        for k, v in (("sd", sd), ("cv", cv)):
            if v is not None and (not _is_number(v) or not v > 0):
                raise _err(f"{k} must be a positive number", path_str, f"{key}.{k}", v)
        if sd is not None:
            try:
                sd = units.to_canonical(sym, float(sd), spec.get("unit"))
            except UnitError as exc:
                raise _err(exc.reason, path_str, f"{key}.unit", spec.get("unit")) from None
        bias = None
        if spec.get("bias") is not None:
            bias = parse_prior(sym, spec["bias"], ctx=Context(path_str), key=f"{key}.bias", check_sign=False,
                               default_origin=str(spec.get("origin", "")))
        cost = spec.get("cost", 1.0)
        if not _is_number(cost) or not cost > 0:
            raise _err("cost must be a positive number", path_str, f"{key}.cost", cost)
        tissues = spec.get("tissues")
        if tissues is not None and not (isinstance(tissues, list) and all(isinstance(t, str) for t in tissues)):
            raise _err("tissues is a list of tissue names", path_str, f"{key}.tissues", tissues)
        out[name] = Instrument(name, str(spec.get("label", name)), sym, sd, float(cv) if cv is not None else None,
                               units.CANONICAL[sym], bias, tuple(tissues) if tissues is not None else None,
                               float(cost), str(spec.get("origin", "")), str(spec.get("note", "")))
    return out


def load_instruments(directory: str | Path | None = None) -> dict[str, Instrument]:
    """Measurement methods from ``priors/instruments.toml`` (an empty dict when the file is absent)."""
    path = _data_dir(directory) / "instruments.toml"
    if not path.is_file():
        return {}
    return dict(_load_instruments_cached(str(path)))


# --------------------------------------------------------------------------- conveniences


def prior_medians(tissue: str, directory: str | Path | None = None) -> dict[str, float]:
    """Median of every quantity of a tissue's prior set (canonical units), derived ones included.

    Derived quantities (pi_c from protein, Pc from Pa/Pv/r or LAP/PAP when Pc has no prior of its
    own) are evaluated at the medians of their inputs. Used by ``fluidshift filtration --tissue``.
    """
    pset = load_prior_set(tissue, directory)
    out = {s: p.median() for s, p in pset.priors.items()}
    for target, d in pset.derived.items():
        out[target] = float(d.compute(out))
    return out


def prior_rows(priors: Mapping[str, Prior], derived: Mapping[str, Derivation] | None = None
               ) -> list[dict[str, Any]]:
    """Table rows (``Prior.to_row``) for each prior, then one row per derived quantity."""
    rows = [p.to_row() for p in priors.values()]
    for d in (derived or {}).values():
        rows.append({"symbol": d.target, "dist": "derived", "median": None, "ci95": None,
                     "unit": _canonical_unit(d.target), "basis": None, "between_subject": None,
                     "origin": d.origin, "derivation": d.describe()})
    return rows


def _canonical_unit(symbol: str) -> str:
    from uncertainty.core import units

    return units.CANONICAL.get(symbol, "")


def correlation_matrix(names: Sequence[str], pairs: Sequence[tuple[str, str, float]]) -> np.ndarray:
    """The symmetric correlation matrix over ``names`` with the given off-diagonal pairs."""
    idx = {n: i for i, n in enumerate(names)}
    c = np.eye(len(names))
    for a, b, rho in pairs:
        c[idx[a], idx[b]] = c[idx[b], idx[a]] = rho
    return c
