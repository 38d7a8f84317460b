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
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

from uncertainty.core.errors import StudyError, UnitError, study_error

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


def join_key(key: str | None, sub: str) -> str:
    return f"{key}.{sub}" if key else sub


def is_number(x: Any) -> bool:
    return isinstance(x, int | float) and not isinstance(x, bool)


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


@functools.lru_cache(maxsize=4096)
def frozen_distribution(dist: str, items: tuple[tuple[str, float], ...]) -> Any:
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
        return frozen_distribution(self.dist, tuple(sorted(self.params.items())))

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
    from uncertainty.core import units

    try:
        return units.to_canonical(symbol, value, unit, density=density, tissue_mass_kg=tissue_mass_kg)
    except UnitError as exc:
        if tissue_mass_kg is None and "tissue_mass" in exc.reason:
            units.to_canonical(symbol, value, unit, density=density, tissue_mass_kg=1.0)  # dimension check
        raise


def unit_info(symbol: str, unit: str | None, ctx: Context, key: str) -> tuple[float, str, str | None]:
    """(factor to canonical, canonical unit, basis of the declared unit) for ``symbol`` in ``unit``."""
    from uncertainty.core import units

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
        from uncertainty.core import units

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
        prior = Prior(symbol, "fixed", {"value": value * factor}, canon, basis, None, default_origin, "",
                      text_unit)
        if check_sign:
            _check_sign(prior, ctx, key, decl)
        return prior
    if not isinstance(decl, Mapping):
        raise study_error("a declaration is a table, a number or a string with a unit", ctx.file, key, decl)

    dist = decl.get("dist")
    if dist is None:
        if "value" in decl:
            dist = "fixed"
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
    _check_params(dist, params, ctx, key, raw)

    between = _parse_between(decl.get("between_subject"), factor, ctx, join_key(key, "between_subject"))
    origin = decl.get("origin", default_origin)
    note = decl.get("note", "")
    for k, v in (("origin", origin), ("note", note)):
        if not isinstance(v, str):
            raise study_error(f"`{k}` must be a string", ctx.file, join_key(key, k), v)
    prior = Prior(symbol, dist, params, canon, basis, between, origin, note, unit_used)
    if check_sign:
        _check_sign(prior, ctx, key, decl)
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


def _check_params(dist: str, p: dict[str, float], ctx: Context, key: str, raw: dict[str, float]) -> None:
    def bad(msg: str, k: str) -> StudyError:
        return study_error(msg, ctx.file, join_key(key, k), raw.get(k))

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
            raise study_error("lower must be below upper", ctx.file, join_key(key, "lower"),
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
                raise study_error(f"{s} must be > 0", ctx.file, key if not isinstance(decl, Mapping)
                           else join_key(key, "value"), shown)
        elif prior.dist in ("uniform", "triangular", "truncnormal") and p.get("lower", -math.inf) < 0:
            if prior.dist != "truncnormal" or float(fr.cdf(0.0)) >= NEGLIGIBLE_MASS:
                raise study_error(f"{s} must be positive; the lower bound is negative", ctx.file,
                           join_key(key, "lower"), decl.get("lower") if isinstance(decl, Mapping) else None)
        else:
            below = float(fr.cdf(0.0))
            if below >= NEGLIGIBLE_MASS:
                raise study_error(f"{s} must be positive, but this prior puts {below:.2g} of its mass below zero "
                           f"(at most {NEGLIGIBLE_MASS:g} allowed; use a lognormal, gamma or truncnormal)",
                           ctx.file, join_key(key, pkey), shown)
    if s in UNIT_INTERVAL:
        if prior.dist == "fixed":
            if not 0 <= p["value"] <= 1:
                raise study_error(f"{s} must lie between 0 and 1", ctx.file, key if not isinstance(decl, Mapping)
                           else join_key(key, "value"), shown)
        elif prior.dist in ("uniform", "triangular") or (prior.dist == "truncnormal" and "upper" in p):
            if p["upper"] > 1:
                raise study_error(f"{s} must lie between 0 and 1; the upper bound is above 1", ctx.file,
                           join_key(key, "upper"), decl.get("upper") if isinstance(decl, Mapping) else None)
        else:
            above = float(fr.sf(1.0))
            if above >= NEGLIGIBLE_MASS:
                raise study_error(f"{s} must lie between 0 and 1, but this prior puts {above:.2g} of its mass "
                           "above 1 (use a beta)", ctx.file, join_key(key, pkey), shown)
    bs = prior.between_subject
    if bs and "sd" in bs and s in POSITIVE and s not in LOGIT_LAYER and prior.dist != "fixed":
        # an additive spread must not push typical individuals below zero
        med = prior.median()
        if med - 3.719 * bs["sd"] <= 0:  # fewer than 1e-4 of individuals below zero (z = 3.719)
            raise study_error(f"an additive between-subject sd this large would make some {s} values negative; "
                       "give a cv instead", ctx.file, join_key(key, "between_subject.sd"),
                       decl["between_subject"]["sd"] if isinstance(decl, Mapping) else None)
