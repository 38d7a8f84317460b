"""Distribution families and the between-subject spread: the one place that knows each shape.

One class per family (the name a study file writes in ``dist``):

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
fixed          value                                    a known constant (:class:`PointMass`)
=============  =======================================  =========================================

Each family gives its parameters (``params()``, ``check()`` with the study-file messages), its
scipy.stats frozen form (``frozen()``; :class:`PointMass` for ``fixed``), its PyMC form
(``pymc(name)``, ``pymc_dist()``; pymc is imported only there), the map from standard normal
scores to values (``from_scores(z, xp)``: one formula for numpy and PyTensor where the family has a
closed form) and the summaries ``get_median()``, ``interval(level)``, ``get_mean()``,
``get_sd()`` (named apart from the parameters ``mean``, ``sd``, ``median``).
:data:`REGISTRY` maps the study-file name to the class; :func:`family` and :func:`distribution`
are the only dispatch on a distribution name in the package.

:class:`Spread` is the between-subject spread (an sd, a cv, either on the logit scale for
quantities inside (0, 1)), applied the same way in numpy and PyTensor; :func:`log_sd_from_cv` is
the one cv -> log-sd conversion.

All values are in the unit the parameters are given in (the canonical unit of the quantity);
``gsd`` and ``cv`` are dimensionless.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Mapping
from dataclasses import dataclass, fields
from typing import Any, ClassVar

import numpy as np

__all__ = [
    "REGISTRY", "SPLINE_MIN_N", "SPLINE_Z", "Beta", "Distribution", "Fixed", "Gamma", "LogNormal",
    "Normal", "ParameterError", "PointMass", "Spread", "TruncNormal", "Triangular", "Uniform",
    "distribution", "family", "is_normal_frozen", "log_sd_from_cv", "normal_cdf", "normal_quantile",
]


class ParameterError(ValueError):
    """An impossible parameter value of a family.

    Attributes
    ----------
    reason : str
        The message, as the study-file checks print it.
    param : str
        The parameter the message is about (the key reported).
    shown : tuple of str
        Parameters whose declared values the message shows (``(param,)`` unless told).
    """

    def __init__(self, reason: str, param: str, shown: tuple[str, ...] | None = None) -> None:
        super().__init__(reason)
        self.reason = reason
        self.param = param
        self.shown = shown if shown is not None else (param,)


# ---------------------------------------------------------------------------------------------
# helpers shared by numpy and PyTensor


def log_sd_from_cv(cv: Any, xp: Any = None) -> Any:
    """Standard deviation of log X for a lognormal X with coefficient of variation ``cv``.

    s = sqrt(log(1 + cv^2)), from the lognormal's moments: variance (exp(s^2) - 1) exp(2 mu + s^2)
    and mean exp(mu + s^2 / 2), so cv^2 = exp(s^2) - 1 (common practice).

    References
    ----------
    Aitchison J, Brown JAC 1957. The Lognormal Distribution. Cambridge University Press.

    Parameters
    ----------
    cv : float, array or PyTensor tensor
        Coefficient of variation (dimensionless, > 0).
    xp : module, optional
        ``numpy`` (default) or ``pytensor.tensor``; a Python or numpy scalar gives a float.

    Returns
    -------
    float, array or tensor
        The sd of the natural log (dimensionless).
    """
    if xp is None or xp is np:
        if np.ndim(cv) == 0 and not hasattr(cv, "owner"):
            c = float(cv)
            return math.sqrt(math.log1p(c * c))
        c_arr = np.asarray(cv, dtype=float)
        return np.sqrt(np.log1p(c_arr * c_arr))
    return xp.sqrt(xp.log1p(cv * cv))


def normal_cdf(z: Any, xp: Any = np) -> Any:
    """Standard normal CDF Phi(z) (dimensionless), numpy (scipy's ``ndtr``) or PyTensor.

    Parameters
    ----------
    z : array or tensor
        Standard normal scores.
    xp : module
        ``numpy`` or ``pytensor.tensor``.

    Returns
    -------
    array or tensor
        Probabilities in [0, 1].
    """
    if xp is np:
        from scipy.special import ndtr

        return ndtr(z)
    return 0.5 * xp.erfc(-z / math.sqrt(2.0))


def normal_quantile(u: Any, xp: Any = np) -> Any:
    """Standard normal quantile Phi^-1(u), numpy (scipy's ``ndtri``) or PyTensor.

    Parameters
    ----------
    u : array or tensor
        Probabilities in (0, 1).
    xp : module
        ``numpy`` or ``pytensor.tensor``.

    Returns
    -------
    array or tensor
        Standard normal scores.
    """
    if xp is np:
        from scipy.special import ndtri

        return ndtri(u)
    return math.sqrt(2.0) * xp.erfinv(2.0 * u - 1.0)


def is_normal_frozen(frozen: Any) -> bool:
    """True when ``frozen`` is a scipy.stats frozen normal distribution.

    Parameters
    ----------
    frozen : object
        A scipy.stats frozen distribution (or a :class:`PointMass`, or anything else).

    Returns
    -------
    bool
    """
    return getattr(getattr(frozen, "dist", None), "name", "") == "norm"


class PointMass:
    """A degenerate distribution at ``value`` with the scipy.stats frozen-distribution methods.

    Parameters
    ----------
    value : float
        The one value (the declared unit).
    """

    def __init__(self, value: float) -> None:
        self.value = float(value)

    def ppf(self, q: Any) -> np.ndarray:
        """Quantile: ``value`` everywhere (shape of ``q``)."""
        return np.full(np.shape(q), self.value)

    isf = ppf

    def cdf(self, x: Any) -> np.ndarray:
        """Cumulative probability: 0 below ``value``, 1 from it on."""
        return (np.asarray(x, dtype=float) >= self.value).astype(float)

    def sf(self, x: Any) -> np.ndarray:
        """Survival function 1 - cdf."""
        return 1.0 - self.cdf(x)

    def rvs(self, size: Any = None, random_state: Any = None) -> Any:
        """Draws: ``value`` repeated (a float when ``size`` is None)."""
        return self.value if size is None else np.full(size, self.value)

    def mean(self) -> float:
        """The value."""
        return self.value

    def median(self) -> float:
        """The value."""
        return self.value

    def std(self) -> float:
        """Zero."""
        return 0.0

    def var(self) -> float:
        """Zero."""
        return 0.0

    def interval(self, confidence: float) -> tuple[float, float]:
        """(value, value) for any confidence."""
        return (self.value, self.value)

    def support(self) -> tuple[float, float]:
        """(value, value)."""
        return (self.value, self.value)


# ---------------------------------------------------------------------------------------------
# fast numpy score maps of beta and gamma (a cubic spline of the exact map)

#: Batches at least this large use the spline of the exact score map (``from_scores(fast=True)``).
SPLINE_MIN_N = 4096
#: Grid of the spline in standard-normal scores: (first, last, points). Outside it the exact map.
SPLINE_Z = (-8.0, 8.0, 4001)
_splines: dict[Distribution, np.ndarray] = {}


def _spline_for(dist: Distribution) -> np.ndarray:
    """Cubic-spline coefficients (4, m) of a family's exact score map on the uniform grid (cached)."""
    from scipy.interpolate import CubicSpline

    if dist not in _splines:
        grid = np.linspace(SPLINE_Z[0], SPLINE_Z[1], int(SPLINE_Z[2]))
        cs = CubicSpline(grid, np.asarray(dist.from_scores(grid), dtype=float))
        _splines[dist] = np.ascontiguousarray(cs.c)
        if len(_splines) > 256:  # keep the cache small
            _splines.pop(next(iter(_splines)))
    return _splines[dist]


def _spline_eval(c: np.ndarray, z: np.ndarray) -> np.ndarray:
    """Evaluate uniform-grid spline coefficients at z (|z| <= 8): direct interval index, Horner."""
    lo, hi, m = SPLINE_Z
    h = (hi - lo) / (m - 1)
    idx = np.clip(((z - lo) / h).astype(np.intp), 0, int(m) - 2)
    t = z - (lo + idx * h)
    out: np.ndarray = ((c[0, idx] * t + c[1, idx]) * t + c[2, idx]) * t + c[3, idx]
    return out


# ---------------------------------------------------------------------------------------------
# the families


@dataclass(frozen=True)
class Distribution:
    """Base of the families: parameters as dataclass fields (the declared unit).

    Class attributes
    ----------------
    name : the study-file name (``dist = "..."``).
    required, optional : parameter names (optional ones default to None, meaning absent).
    multiplied : parameters a multiplying condition scales.
    shown_param : the parameter a sign message quotes.
    non_centred : PyMC samples it through a standard-normal score (``from_scores(z, pt)``).
    positive_support : support is (0, inf) and its natural scale is the log.
    bounded : declares lower/upper bounds; ``hard_bounds``: the bounds are the support's ends.
    is_fixed : a known constant.
    spline : numpy batches may use the spline of the exact score map (``fast=True``).
    """

    name: ClassVar[str] = ""
    required: ClassVar[tuple[str, ...]] = ()
    optional: ClassVar[tuple[str, ...]] = ()
    multiplied: ClassVar[tuple[str, ...]] = ()
    shown_param: ClassVar[str] = ""
    non_centred: ClassVar[bool] = False
    positive_support: ClassVar[bool] = False
    bounded: ClassVar[bool] = False
    hard_bounds: ClassVar[bool] = False
    is_fixed: ClassVar[bool] = False
    spline: ClassVar[bool] = False

    # ---- construction
    @classmethod
    def from_params(cls, params: Mapping[str, float]) -> Distribution:
        """An instance from a parameter mapping (unknown keys ignored, values as floats).

        Parameters
        ----------
        params : mapping
            Parameter name -> value (declared unit).

        Returns
        -------
        Distribution

        Raises
        ------
        KeyError
            A required parameter is missing.
        """
        kw = {k: float(params[k]) for k in cls.required}
        kw.update({k: float(params[k]) for k in cls.optional if params.get(k) is not None})
        return cls(**kw)

    def params(self) -> dict[str, float]:
        """The parameters given (absent optional ones left out), in declaration order."""
        return {f.name: getattr(self, f.name) for f in fields(self) if getattr(self, f.name) is not None}

    def replace(self, **changes: float) -> Distribution:
        """A copy of the same family with some parameters changed."""
        return type(self).from_params({**self.params(), **changes})

    def check(self, shown: Mapping[str, Any] | None = None) -> None:
        """Raise :class:`ParameterError` for impossible parameters.

        Parameters
        ----------
        shown : mapping, optional
            The values as declared (for messages that quote them); defaults to the parameters.

        Raises
        ------
        ParameterError
            With the study-file message and the parameter concerned.
        """
        sd = getattr(self, "sd", None)
        if sd is not None and not sd > 0:
            raise ParameterError("sd must be > 0", "sd")

    # ---- scipy side
    @functools.cached_property
    def _frozen(self) -> Any:
        return self._make_frozen()

    def _make_frozen(self) -> Any:
        from scipy import stats

        return self._scipy(stats)

    def _scipy(self, stats: Any) -> Any:
        """The family's scipy.stats frozen distribution, ``stats`` the scipy.stats module."""
        raise NotImplementedError

    def frozen(self) -> Any:
        """The scipy.stats frozen distribution (cached; a :class:`PointMass` for ``fixed``)."""
        return self._frozen

    def ppf(self, u: Any) -> np.ndarray:
        """Values (declared unit) at probabilities ``u`` in (0, 1): the inverse CDF."""
        return np.asarray(self.frozen().ppf(np.asarray(u, dtype=float)), dtype=float)

    def cdf(self, x: Any) -> np.ndarray:
        """Probability of a value at or below ``x`` (declared unit)."""
        return np.asarray(self.frozen().cdf(np.asarray(x, dtype=float)), dtype=float)

    def get_mean(self) -> float:
        """Mean (declared unit)."""
        return float(self.frozen().mean())

    def get_sd(self) -> float:
        """Standard deviation (declared unit)."""
        return float(self.frozen().std())

    def get_var(self) -> float:
        """Variance (declared unit squared)."""
        return float(self.frozen().var())

    def get_median(self) -> float:
        """Median (declared unit)."""
        return float(self.frozen().median())

    def interval(self, level: float = 0.95) -> tuple[float, float]:
        """Central interval holding ``level`` of the probability (declared unit)."""
        lo, hi = self.frozen().interval(level)
        return float(lo), float(hi)

    # ---- normal scores -> values
    def _closed_scores(self, z: Any, xp: Any) -> Any:
        """The closed-form score map (numpy and PyTensor); None where the family has none."""
        return None

    def _pytensor_scores(self, z: Any, xp: Any) -> Any:
        """A PyTensor score map for families whose numpy map goes through scipy."""
        raise NotImplementedError(f"a {self.name} prior has no closed-form inverse CDF for PyTensor; "
                                  "use pymc(name)")

    def from_scores(self, z: Any, xp: Any = np, *, fast: bool = False) -> Any:
        """Values (declared unit) at standard normal scores ``z``: ``ppf(Phi(z))``.

        Closed forms (normal, lognormal, uniform, triangular, fixed) serve numpy and PyTensor
        alike; other families use scipy's inverse CDF in numpy, through the survival function
        for z > 0 so extreme scores keep their precision.

        Parameters
        ----------
        z : array or tensor
            Standard normal scores (dimensionless).
        xp : module
            ``numpy`` or ``pytensor.tensor``.
        fast : bool
            numpy only: let beta and gamma batches of at least :data:`SPLINE_MIN_N` scores use a
            cubic spline of the exact map (within 1e-9 relative, tests/test_sampling.py); scores
            beyond :data:`SPLINE_Z` keep the exact map.

        Returns
        -------
        array or tensor
            Values in the declared unit, shaped like ``z``.

        Raises
        ------
        NotImplementedError
            PyTensor scores for beta and gamma (no closed-form inverse CDF).
        """
        if xp is not np:
            out = self._closed_scores(z, xp)
            return self._pytensor_scores(z, xp) if out is None else out
        z = np.asarray(z, dtype=float)
        out = self._closed_scores(z, np)
        if out is not None:
            return out
        if fast and self.spline and z.size >= SPLINE_MIN_N:
            vals = _spline_eval(_spline_for(self), np.clip(z, SPLINE_Z[0], SPLINE_Z[1]))
            outside = np.abs(z) > SPLINE_Z[1]
            if outside.any():
                vals[outside] = self.from_scores(z[outside])
            return vals
        fr = self.frozen()
        lower = fr.ppf(normal_cdf(np.minimum(z, 0.0)))
        upper = fr.isf(normal_cdf(-np.maximum(z, 0.0)))
        return np.where(z <= 0.0, lower, upper)

    def normal_scale(self) -> tuple[float, float, bool] | None:
        """(location, sd, log scale) when the family is normal on the natural or the log scale."""
        return None

    # ---- PyMC side
    def _pymc_args(self) -> tuple[str, dict[str, Any]]:
        raise NotImplementedError(f"a {self.name} prior has no PyMC distribution")

    def pymc(self, name: str, **kwargs: Any) -> Any:
        """A PyMC random variable ``name`` in the current model context.

        Parameters
        ----------
        name : str
            The PyMC variable name.
        **kwargs
            ``shape``, ``dims``, ... passed to the PyMC distribution.

        Returns
        -------
        pymc random variable (a ``pm.Deterministic`` constant for ``fixed``)
        """
        import pymc as pm

        cls, args = self._pymc_args()
        return getattr(pm, cls)(name, **args, **kwargs)

    def pymc_dist(self) -> Any:
        """An unnamed PyMC distribution (``pm.X.dist``), e.g. for its log CDF.

        Raises
        ------
        NotImplementedError
            For ``fixed``.
        """
        import pymc as pm

        cls, args = self._pymc_args()
        return getattr(pm, cls).dist(**args)

    # ---- what conditions do to a prior
    def scaled(self, factor: float) -> Distribution:
        """The family with its :attr:`multiplied` parameters times ``factor`` (a condition's multiply)."""
        p = self.params()
        return type(self).from_params({k: (v * factor if k in self.multiplied else v) for k, v in p.items()})

    def widened(self, extra_sd: float) -> Distribution:
        """The distribution with ``extra_sd`` (declared unit) of independent spread added.

        Families with an sd: sd -> hypot(sd, extra). Others override.
        """
        sd = getattr(self, "sd", None)
        if sd is None:  # pragma: no cover (every family without an sd overrides this)
            raise NotImplementedError(self.name)
        return self.replace(sd=math.hypot(sd, extra_sd))

    def widened_log(self, extra_gsd: float) -> Distribution | None:
        """The distribution with a multiplicative spread ``extra_gsd`` (> 1) added; None where the
        family has no log scale (the caller adds the equivalent sd at the location)."""
        return None


@dataclass(frozen=True)
class Normal(Distribution):
    """Normal(mean, sd), sd > 0 (declared unit)."""

    mean: float
    sd: float

    name = "normal"
    required = ("mean", "sd")
    multiplied = ("mean",)
    shown_param = "mean"
    non_centred = True

    def _scipy(self, stats: Any) -> Any:
        return stats.norm(loc=self.mean, scale=self.sd)

    def _closed_scores(self, z: Any, xp: Any) -> Any:
        return self.mean + self.sd * z

    def normal_scale(self) -> tuple[float, float, bool] | None:
        """(mean, sd, False)."""
        return self.mean, self.sd, False

    def _pymc_args(self) -> tuple[str, dict[str, Any]]:
        return "Normal", {"mu": self.mean, "sigma": self.sd}


@dataclass(frozen=True)
class TruncNormal(Distribution):
    """Normal(mean, sd) of the parent, cut to [lower, upper]; either bound may be None (infinite)."""

    mean: float
    sd: float
    lower: float | None = None
    upper: float | None = None

    name = "truncnormal"
    required = ("mean", "sd")
    optional = ("lower", "upper")
    multiplied = ("mean", "lower", "upper")
    shown_param = "lower"
    bounded = True

    @property
    def bounds(self) -> tuple[float, float]:
        """(lower, upper) with absent bounds infinite."""
        lo = -math.inf if self.lower is None else self.lower
        hi = math.inf if self.upper is None else self.upper
        return lo, hi

    def check(self, shown: Mapping[str, Any] | None = None) -> None:
        """Raise :class:`ParameterError` unless sd > 0, lower < upper and the interval holds mass."""
        super().check(shown)
        lo, hi = self.bounds
        if not lo < hi:
            raise ParameterError("lower must be below upper", "lower", ("lower", "upper"))
        from scipy.special import ndtr

        mass = ndtr((hi - self.mean) / self.sd) - ndtr((lo - self.mean) / self.sd)
        if not mass > 1e-12:
            raise ParameterError("the truncation interval holds no probability of the parent normal", "mean")

    def _scipy(self, stats: Any) -> Any:
        lo, hi = self.bounds
        return stats.truncnorm((lo - self.mean) / self.sd, (hi - self.mean) / self.sd,
                               loc=self.mean, scale=self.sd)

    def _pytensor_scores(self, z: Any, xp: Any) -> Any:
        lo, hi = self.bounds
        pa = 0.0 if lo == -math.inf else float(normal_cdf((lo - self.mean) / self.sd))
        pb = 1.0 if hi == math.inf else float(normal_cdf((hi - self.mean) / self.sd))
        return self.mean + self.sd * normal_quantile(pa + normal_cdf(z, xp) * (pb - pa), xp)

    def _pymc_args(self) -> tuple[str, dict[str, Any]]:
        return "TruncatedNormal", {"mu": self.mean, "sigma": self.sd, "lower": self.lower, "upper": self.upper}


@dataclass(frozen=True)
class LogNormal(Distribution):
    """log X ~ Normal(log median, log gsd); median > 0, gsd > 1 (gsd dimensionless)."""

    median: float
    gsd: float

    name = "lognormal"
    required = ("median", "gsd")
    multiplied = ("median",)
    shown_param = "median"
    non_centred = True
    positive_support = True

    def check(self, shown: Mapping[str, Any] | None = None) -> None:
        """Raise :class:`ParameterError` unless median > 0 and gsd > 1."""
        if not self.median > 0:
            raise ParameterError("a lognormal median must be > 0", "median")
        if not self.gsd > 1:
            raise ParameterError("a geometric sd (gsd) must be > 1", "gsd")

    def _scipy(self, stats: Any) -> Any:
        return stats.lognorm(s=math.log(self.gsd), scale=self.median)

    def _closed_scores(self, z: Any, xp: Any) -> Any:
        return self.median * xp.exp(math.log(self.gsd) * z)

    def normal_scale(self) -> tuple[float, float, bool] | None:
        """(log median, log gsd, True)."""
        return math.log(self.median), math.log(self.gsd), True

    def widened(self, extra_sd: float) -> Distribution:
        """gsd -> exp(hypot(log gsd, extra_sd / median)) (the extra sd as a cv at the median)."""
        return self.replace(gsd=math.exp(math.hypot(math.log(self.gsd), extra_sd / self.median)))

    def widened_log(self, extra_gsd: float) -> Distribution | None:
        """gsd -> exp(hypot(log gsd, log extra_gsd))."""
        return self.replace(gsd=math.exp(math.hypot(math.log(self.gsd), math.log(extra_gsd))))

    def _pymc_args(self) -> tuple[str, dict[str, Any]]:
        return "LogNormal", {"mu": math.log(self.median), "sigma": math.log(self.gsd)}


@dataclass(frozen=True)
class Beta(Distribution):
    """Beta with mean in (0, 1) and sd, sd^2 < mean (1 - mean) (method of moments)."""

    mean: float
    sd: float

    name = "beta"
    required = ("mean", "sd")
    multiplied = ("mean",)
    shown_param = "mean"
    spline = True

    @property
    def shapes(self) -> tuple[float, float]:
        """Shape parameters (a, b) by the method of moments (dimensionless)."""
        nu = self.mean * (1.0 - self.mean) / self.sd**2 - 1.0
        return self.mean * nu, (1.0 - self.mean) * nu

    def check(self, shown: Mapping[str, Any] | None = None) -> None:
        """Raise :class:`ParameterError` unless sd > 0, 0 < mean < 1 and sd^2 < mean (1 - mean)."""
        super().check(shown)
        if not 0 < self.mean < 1:
            raise ParameterError("a beta mean must lie strictly between 0 and 1", "mean")
        if not self.sd ** 2 < self.mean * (1 - self.mean):
            m = (shown or {}).get("mean", self.mean)
            raise ParameterError(f"sd too large for a beta with mean {m:g} (needs sd^2 < mean (1 - mean))", "sd")
        var = self.sd ** 2
        if var == 0 or not math.isfinite(self.mean * (1 - self.mean) / var):
            # sd^2 underflows (e.g. sd = 5e-324): the shape parameters would divide by zero or overflow
            raise ParameterError("sd too small for a beta (its shape parameters overflow); give a fixed value", "sd")

    def _scipy(self, stats: Any) -> Any:
        a, b = self.shapes
        return stats.beta(a, b)

    def _pymc_args(self) -> tuple[str, dict[str, Any]]:
        a, b = self.shapes
        return "Beta", {"alpha": a, "beta": b}


@dataclass(frozen=True)
class Gamma(Distribution):
    """Gamma with mean > 0 and sd: shape (mean/sd)^2, scale sd^2/mean (declared unit)."""

    mean: float
    sd: float

    name = "gamma"
    required = ("mean", "sd")
    multiplied = ("mean", "sd")
    shown_param = "mean"
    positive_support = True
    spline = True

    @property
    def shape_scale(self) -> tuple[float, float]:
        """Shape k (dimensionless) and scale theta (declared unit)."""
        return (self.mean / self.sd) ** 2, self.sd**2 / self.mean

    def check(self, shown: Mapping[str, Any] | None = None) -> None:
        """Raise :class:`ParameterError` unless sd > 0 and mean > 0."""
        super().check(shown)
        if not self.mean > 0:
            raise ParameterError("a gamma mean must be > 0", "mean")

    def _scipy(self, stats: Any) -> Any:
        k, theta = self.shape_scale
        return stats.gamma(k, scale=theta)

    def _pymc_args(self) -> tuple[str, dict[str, Any]]:
        k, theta = self.shape_scale
        return "Gamma", {"alpha": k, "beta": 1.0 / theta}


def _widen_bounds(dist: Uniform | Triangular, extra_sd: float) -> Distribution:
    """Widen a bounded family about its mode (or centre) so that its variance grows by extra_sd^2."""
    p = dist.params()
    var = dist.get_var()
    f = math.sqrt((var + extra_sd * extra_sd) / var)
    c = p.get("mode", 0.5 * (p["lower"] + p["upper"]))
    p["lower"] = c - f * (c - p["lower"])
    p["upper"] = c + f * (p["upper"] - c)
    if "mode" in p:
        p["mode"] = c
    return type(dist).from_params(p)


@dataclass(frozen=True)
class Uniform(Distribution):
    """Uniform(lower, upper), lower < upper (declared unit)."""

    lower: float
    upper: float

    name = "uniform"
    required = ("lower", "upper")
    multiplied = ("lower", "upper")
    shown_param = "lower"
    bounded = True
    hard_bounds = True

    def check(self, shown: Mapping[str, Any] | None = None) -> None:
        """Raise :class:`ParameterError` unless lower < upper."""
        if not self.lower < self.upper:
            raise ParameterError("lower must be below upper", "lower", ("lower", "upper"))

    def _scipy(self, stats: Any) -> Any:
        return stats.uniform(loc=self.lower, scale=self.upper - self.lower)

    def _closed_scores(self, z: Any, xp: Any) -> Any:
        # written as scipy evaluates ppf(q) = q w + lower and isf(q) = (1 - q) w + lower, so the
        # numpy values are scipy's to the bit
        w = self.upper - self.lower
        q_lo = normal_cdf(xp.minimum(z, 0.0), xp)
        q_hi = normal_cdf(-xp.maximum(z, 0.0), xp)
        return xp.where(z <= 0.0, q_lo * w + self.lower, (1.0 - q_hi) * w + self.lower)

    def widened(self, extra_sd: float) -> Distribution:
        """Wider about the centre so that the variance grows by ``extra_sd``^2."""
        return _widen_bounds(self, extra_sd)

    def _pymc_args(self) -> tuple[str, dict[str, Any]]:
        return "Uniform", {"lower": self.lower, "upper": self.upper}


@dataclass(frozen=True)
class Triangular(Distribution):
    """Triangular on [lower, upper] with its mode inside (declared unit)."""

    lower: float
    mode: float
    upper: float

    name = "triangular"
    required = ("lower", "mode", "upper")
    multiplied = ("lower", "mode", "upper")
    shown_param = "lower"
    bounded = True
    hard_bounds = True

    def check(self, shown: Mapping[str, Any] | None = None) -> None:
        """Raise :class:`ParameterError` unless lower < upper and lower <= mode <= upper."""
        if not self.lower < self.upper:
            raise ParameterError("lower must be below upper", "lower", ("lower", "upper"))
        if not self.lower <= self.mode <= self.upper:
            raise ParameterError("the mode must lie between lower and upper", "mode")

    def _scipy(self, stats: Any) -> Any:
        w = self.upper - self.lower
        return stats.triang((self.mode - self.lower) / w, loc=self.lower, scale=w)

    def _closed_scores(self, z: Any, xp: Any) -> Any:
        # scipy's triangular ppf on the standard [0, 1] (isf(q) = ppf(1 - q)), scaled by w: the
        # numpy values are scipy's to the bit
        w = self.upper - self.lower
        c = (self.mode - self.lower) / w

        def std_ppf(q: Any) -> Any:
            return xp.where(q < c, xp.sqrt(c * q), 1 - xp.sqrt((1 - c) * (1 - q)))

        q_lo = normal_cdf(xp.minimum(z, 0.0), xp)
        q_hi = 1.0 - normal_cdf(-xp.maximum(z, 0.0), xp)
        return xp.where(z <= 0.0, std_ppf(q_lo) * w + self.lower, std_ppf(q_hi) * w + self.lower)

    def widened(self, extra_sd: float) -> Distribution:
        """Wider about the mode (which stays) so that the variance grows by ``extra_sd``^2."""
        return _widen_bounds(self, extra_sd)

    def _pymc_args(self) -> tuple[str, dict[str, Any]]:
        return "Triangular", {"lower": self.lower, "c": self.mode, "upper": self.upper}


@dataclass(frozen=True)
class Fixed(Distribution):
    """A known constant ``value`` (declared unit); its frozen form is a :class:`PointMass`."""

    value: float

    name = "fixed"
    required = ("value",)
    multiplied = ("value",)
    shown_param = "value"
    is_fixed = True

    def _make_frozen(self) -> Any:
        return PointMass(self.value)

    def _closed_scores(self, z: Any, xp: Any) -> Any:
        if xp is np:
            return np.full(np.shape(z), self.value)
        return xp.full_like(z, self.value)

    def widened(self, extra_sd: float) -> Distribution:
        """Normal(value, extra_sd)."""
        return Normal(self.value, extra_sd)

    def widened_log(self, extra_gsd: float) -> Distribution | None:
        """LogNormal(value, extra_gsd)."""
        return LogNormal(self.value, extra_gsd)

    def pymc(self, name: str, **kwargs: Any) -> Any:
        """A ``pm.Deterministic`` holding the constant (shaped by ``shape``, named dims by ``dims``)."""
        import pymc as pm
        import pytensor.tensor as pt

        value = pt.as_tensor_variable(np.float64(self.value))
        if "shape" in kwargs:
            value = pt.full(kwargs["shape"], self.value)
        return pm.Deterministic(name, value, dims=kwargs.get("dims"))


#: Study-file name -> family, in the order the messages list them.
REGISTRY: dict[str, type[Distribution]] = {
    cls.name: cls for cls in (Normal, TruncNormal, LogNormal, Beta, Gamma, Uniform, Triangular, Fixed)
}


def family(name: str) -> type[Distribution]:
    """The family class of a study-file distribution name.

    Parameters
    ----------
    name : str
        ``normal``, ``truncnormal``, ``lognormal``, ``beta``, ``gamma``, ``uniform``,
        ``triangular`` or ``fixed``.

    Returns
    -------
    type
        The :class:`Distribution` subclass.

    Raises
    ------
    ValueError
        Unknown name.
    """
    try:
        return REGISTRY[name]
    except (KeyError, TypeError):
        raise ValueError(f"unknown distribution {name!r}") from None


@functools.lru_cache(maxsize=4096)
def _cached(name: str, items: tuple[tuple[str, float], ...]) -> Distribution:
    return family(name).from_params(dict(items))


def distribution(name: str, params: Mapping[str, float] | tuple[tuple[str, float], ...]) -> Distribution:
    """A (cached) family instance from a name and its parameters.

    Parameters
    ----------
    name : str
        The study-file distribution name.
    params : mapping or tuple of (name, value) pairs
        The parameters (declared unit).

    Returns
    -------
    Distribution

    Raises
    ------
    ValueError
        Unknown name.
    KeyError
        A required parameter is missing.
    """
    items = tuple(sorted(params.items())) if isinstance(params, Mapping) else params
    return _cached(name, items)


# ---------------------------------------------------------------------------------------------
# the between-subject spread


@dataclass(frozen=True)
class Spread:
    """Between-subject spread around a typical value: one subject is ``individual(typical, z)``.

    ``sd``: additive, typical + sd z (the quantity's unit). ``cv``: multiplicative lognormal with
    its median at the typical value, typical exp(s z), s = :func:`log_sd_from_cv` (cv). ``logit``
    (quantities inside (0, 1)): logit(individual) = logit(t) + s z with s = sd / (t (1 - t)) or
    s = cv / (1 - t) (the delta method at the typical value t), so the median is the typical value
    and the sd about the stated one when the spread is small.

    Attributes
    ----------
    kind : str
        ``"sd"`` or ``"cv"``.
    value : float
        The sd (the quantity's unit) or the cv (dimensionless), > 0.
    logit : bool
        Apply it on the logit scale.
    """

    kind: str
    value: float
    logit: bool = False

    @classmethod
    def from_declaration(cls, between_subject: Mapping[str, Any] | None, logit: bool = False) -> Spread | None:
        """A spread from ``{"sd": x}`` or ``{"cv": x}`` (other keys ignored); None when absent.

        Parameters
        ----------
        between_subject : mapping or None
            The declaration (sd in the quantity's unit).
        logit : bool
            The quantity lives in (0, 1) and takes its spread on the logit scale.

        Returns
        -------
        Spread or None
        """
        if not between_subject:
            return None
        for kind in ("sd", "cv"):
            v = between_subject.get(kind)
            if v is not None:
                return cls(kind, float(v), logit)
        return None

    def log_sd(self) -> float:
        """sd of the log of a cv spread: sqrt(log(1 + cv^2)) (dimensionless)."""
        return float(log_sd_from_cv(self.value))

    def individual(self, typical: Any, z: Any, xp: Any = np) -> Any:
        """One subject's value around ``typical`` (numpy arrays or PyTensor tensors).

        Parameters
        ----------
        typical : float, array or tensor
            Typical value(s) (the quantity's unit).
        z : float, array or tensor
            Standard normal score(s) of the subject.
        xp : module
            ``numpy`` or ``pytensor.tensor``.

        Returns
        -------
        array or tensor
            The subject's value(s) (the quantity's unit).
        """
        if self.logit:
            t = typical
            s = self.value / (t * (1.0 - t)) if self.kind == "sd" else self.value / (1.0 - t)
            x = xp.log(t) - xp.log1p(-t) + s * z
            return 1.0 / (1.0 + xp.exp(-x))
        if self.kind == "sd":
            return typical + self.value * z
        return typical * xp.exp(self.log_sd() * z)

    def ratio(self, spread: Any, xp: Any = np) -> Any:
        """Factor on the score that turns this spread into ``spread`` (same kind, numpy or PyTensor).

        sd: spread / sd; cv: log_sd(spread) / log_sd(cv).
        """
        if self.kind == "sd":
            return spread / self.value
        return log_sd_from_cv(spread, xp) / self.log_sd()

    def on_normal_scale(self, log: bool) -> float | None:
        """sd of the spread on the scale a normal (``log`` False) or lognormal (``log`` True)
        family is normal on; None when it is not normal there (logit layer, sd on the log scale,
        cv on the natural scale)."""
        if self.logit:
            return None
        if log:
            return self.log_sd() if self.kind == "cv" else None
        return self.value if self.kind == "sd" else None

