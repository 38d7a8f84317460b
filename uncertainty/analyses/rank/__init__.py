"""Value of information: which measurement would narrow the Jv interval most.

For a candidate reading X of a quantity theta (noise sd or cv, an optional bias prior, ``n``
repeated readings averaged), the expected posterior variance of the output Y (Jv) after the
reading is E_X[Var(Y | X)] = Var(Y) - Var(E[Y | X]). Two estimators over one set of draws
(theta, Y) from the prior, or, when the study has observations, from the current posterior (thinned
MCMC draws, :func:`posterior_pool`; Var and E are then posterior moments):

- ``regression`` (Strong, Oakley, Brennan & Breeze 2015, Med Decis Making 35:570-583): simulate
  one reading per draw and regress Y on the reading(s) with a penalised cubic B-spline basis
  (additive terms plus pairwise tensor products for several readings; smoothing chosen by GCV).
  E[Var(Y|X)] is the residual mean square (corrected for the fitted degrees of freedom).
- ``importance`` (likelihood reweighting of the draws for J simulated readings): simple, but its
  effective sample size collapses when the noise is much smaller than the prior sd of theta; ``auto``
  uses it only where the noise is at least the prior sd and the likelihood is closed form (no bias,
  or a normal bias with an sd noise), else regression. The inner estimate of each posterior mean uses
  all draws (its self-normalised variance is subtracted from the explained variance, removing the
  nested-sampling bias); the outer readings J start at 800 (relative error sqrt(2/J) = 5% for one
  normal reading) and grow until the Monte Carlo error of the reduction is below 5% of it, up to
  the number of draws (capped at 4000).

The perfect-information bound is Var(Y) S1(theta) (the first-order index, given-data estimate).
The expected 95% interval width after the reading: importance, the mean width of the reweighted
2.5-97.5% quantiles; regression, a location-scale approximation of the posterior: the residual
scale given the reading(s), s(X), is a second regression (of log squared residuals), and the width
is the 2.5-97.5% range of the standardised residuals (Y - E[Y|X]) / s(X) times the mean of s(X)
(exact when the posterior keeps its shape and changes only location and scale with X, e.g. a
lognormal output of a normal reading). Monte Carlo error of every figure: the standard deviation
over independent blocks of the draws (each block a full estimate) divided by sqrt(blocks), or, for
importance, over the outer readings. ``best_pair`` and ``best_set`` (within ``budget``) are fitted
jointly on the candidates' joint readings, never by adding single reductions.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from uncertainty.analyses import sampling
from uncertainty.analyses.inference import infer
from uncertainty.analyses.inference.api import new_subject_values, settings
from uncertainty.analyses.inference.summaries import flat
from uncertainty.analyses.propagate.timeline import values_at
from uncertainty.analyses.rank.result import RankResult
from uncertainty.analyses.sensitivity import first_order_given_data
from uncertainty.core.errors import InputError, QualityGateError
from uncertainty.core.parallel import InProcess, task_seeds
from uncertainty.distributions import is_normal_frozen, log_sd_from_cv
from uncertainty.forms.catalogue import output_unit
from uncertainty.forms.evaluate import evaluate as model_evaluate
from uncertainty.priors import load_instruments
from uncertainty.study.endpoints import parse_time_endpoint

_BLOCKS = 8


def _file(study: Any) -> str | None:
    p = getattr(study, "path", None)
    return str(p) if p else None


@dataclass(frozen=True)
class Reading:
    """A candidate measurement: ``parameter`` read with noise ``sd`` (additive) or ``cv`` (lognormal).

    ``bias``: a scipy-frozen-like object with ``ppf`` (canonical unit of the reading, additive) or None;
    ``n``: readings averaged (noise shrinks by sqrt(n), the bias does not); ``cost`` relative;
    ``instrument``: the :class:`uncertainty.priors.Instrument` taken, whose reading model
    (:meth:`~uncertainty.priors.Instrument.true_reading`: a difference such as pi_i - Pi, or a scaled
    reading such as the escape rate TER from PS) gives the true value read; None: ``parameter`` itself.
    """

    name: str
    parameter: str
    sd: float | None = None
    cv: float | None = None
    bias: Any = None
    cost: float = 1.0
    n: int = 1
    instrument: Any = None

    @property
    def quantities(self) -> tuple[str, ...]:
        """The sampled quantities the reading depends on (``parameter``, and ``minus`` for a difference)."""
        return tuple(self.instrument.quantities) if self.instrument is not None else (self.parameter,)

    def truth(self, values: dict[str, np.ndarray]) -> np.ndarray:
        """The noise- and bias-free reading of each draw (canonical unit of the reading).

        Parameters
        ----------
        values : dict of str to ndarray
            Draws of the quantities in :attr:`quantities` (canonical units).

        Returns
        -------
        ndarray
            ``values[parameter]``, or what the instrument reads from the draws.
        """
        if self.instrument is None:
            return np.asarray(values[self.parameter], dtype=float)
        return np.asarray(self.instrument.true_reading(values.__getitem__), dtype=float)

    def simulate(self, theta: np.ndarray, rng: np.random.Generator) -> np.ndarray:
        """One simulated (averaged) reading per value of ``theta`` (canonical unit)."""
        z = rng.standard_normal(theta.shape)
        if self.sd is not None:
            x = theta + self.sd / math.sqrt(self.n) * z
        else:
            s = log_sd_from_cv(self.cv) / math.sqrt(self.n)
            x = theta * np.exp(s * z)
        if self.bias is not None:
            x = x + self.bias.ppf(rng.uniform(size=theta.shape))
        return x


# --------------------------------------------------------------------------------------------
# regression (nonparametric, GCV-penalised B-splines)


def _bspline_block(x: np.ndarray, interior: int) -> np.ndarray:
    from scipy.interpolate import BSpline

    k = 3
    lo, hi = float(np.min(x)), float(np.max(x))
    if hi <= lo:
        return np.zeros((len(x), 0))
    inner = np.quantile(x, np.linspace(0, 1, interior + 2)[1:-1]) if interior > 0 else np.array([])
    inner = np.unique(inner[(inner > lo) & (inner < hi)])
    t = np.concatenate([[lo] * (k + 1), inner, [hi] * (k + 1)])
    xx = np.clip(x, lo, hi)
    B = BSpline.design_matrix(xx, t, k).toarray()
    return B[:, 1:]  # drop one column: the intercept is separate


def _design_matrix(X: np.ndarray, interior: int) -> np.ndarray:
    n, d = X.shape
    z = (X - X.mean(axis=0)) / np.where(X.std(axis=0) > 0, X.std(axis=0), 1.0)
    cols = [np.ones((n, 1))]
    blocks = [_bspline_block(z[:, j], interior) for j in range(d)]
    cols += blocks
    if d > 1:
        small = [_bspline_block(z[:, j], max(1, min(interior, 3))) for j in range(d)]
        for a, b in itertools.combinations(range(d), 2):
            cols.append((small[a][:, :, None] * small[b][:, None, :]).reshape(n, -1))
    return np.hstack(cols)


def _ridge_path(A: np.ndarray, y: np.ndarray, lams: tuple[float, ...]) -> list[tuple[np.ndarray, float, float]]:
    """Ridge fits of centred y on A for several penalties: [(fit, edf, lam)], one eigendecomposition."""
    AtA = A.T @ A
    evals, Q = np.linalg.eigh(AtA)
    evals = np.clip(evals, 0.0, None)
    qty = Q.T @ (A.T @ y)
    AQ = A @ Q
    scale = float(np.trace(AtA)) / AtA.shape[0]
    out = []
    for lam in lams:
        d = 1.0 / (evals + lam * scale)
        out.append((AQ @ (d * qty), float(np.sum(evals * d)), lam))
    return out


_LAMS = (1e-8, 1e-5, 1e-3, 1e-1)


def regression_fit(X: np.ndarray, y: np.ndarray, choice: tuple[int, float] | None = None
                   ) -> tuple[np.ndarray, float, tuple[int, float]]:
    """Fitted E[y | X] at the draws, its effective degrees of freedom and the (knots, penalty) used.

    X: (n, d) readings, y: (n,) outputs (any units). Spline blocks per column and pairwise tensor
    products; the penalty is a ridge on the coefficients, chosen with the number of knots by
    generalised cross-validation, GCV = n RSS / (n - edf)^2, unless ``choice`` fixes both.
    """
    X = np.asarray(X, dtype=float)
    if X.ndim == 1:
        X = X[:, None]
    n = len(y)
    ym = float(np.mean(y))
    yc = y - ym
    max_knots = max(1, min(10, n // 300))
    if choice is not None:
        grid = [(min(choice[0], max_knots), (choice[1],))]
    else:
        knots = (2, 5, 9) if X.shape[1] == 1 else (3, 6)
        grid = [(k, _LAMS) for k in sorted({min(k, max_knots) for k in knots})]
    best = None
    for interior, lams in grid:
        A = _design_matrix(X, interior)
        for fit, edf, lam in _ridge_path(A, yc, lams):
            rss = float(np.sum((yc - fit) ** 2))
            gcv = n * rss / max(n - edf - 1, 1.0) ** 2
            if best is None or gcv < best[0]:
                best = (gcv, fit + ym, edf + 1, (interior, lam))
    return best[1], best[2], best[3]


def _regression_figures(X: np.ndarray, y: np.ndarray, choice: tuple | None = None
                        ) -> tuple[float, float, tuple]:
    """(E[Var(y|X)], expected 95% width, (mean fit choice, scale fit choice)) by regression.

    The width is the location-scale approximation of the module docstring: a second fit of
    log((y - E[y|X])^2) on X gives the residual scale s(X) up to a constant factor, which cancels.
    """
    c_mean, c_scale = choice if choice is not None else (None, None)
    fit, edf, c_mean = regression_fit(X, y, c_mean)
    resid = y - fit
    n = len(y)
    var_post = float(np.sum(resid**2) / max(n - edf, 1.0))
    r2 = resid**2
    floor = float(np.quantile(r2[r2 > 0], 1e-3)) if np.any(r2 > 0) else 1.0
    g, _, c_scale = regression_fit(X, np.log(np.maximum(r2, floor)), c_scale)
    scale = np.exp(0.5 * (g - np.mean(g)))
    lo, hi = np.quantile(resid / scale, [0.025, 0.975])
    return var_post, float((hi - lo) * np.mean(scale)), (c_mean, c_scale)


# --------------------------------------------------------------------------------------------
# importance reweighting


def _loglik(reading: Reading, x: np.ndarray, theta: np.ndarray) -> np.ndarray:
    """log p(x_j | theta_i), (J, n); closed form for sd noise (+ normal bias) and cv noise."""
    if reading.sd is not None:
        s2 = reading.sd**2 / reading.n
        m = 0.0
        if reading.bias is not None:
            m, sb = float(reading.bias.mean()), float(reading.bias.std())
            s2 = s2 + sb**2
        return -0.5 * (x[:, None] - theta[None, :] - m) ** 2 / s2
    s = log_sd_from_cv(reading.cv) / math.sqrt(reading.n)
    with np.errstate(divide="ignore", invalid="ignore"):
        return -0.5 * (np.log(x)[:, None] - np.log(theta)[None, :]) ** 2 / s**2


_IS_REL_TOL = 0.05  # relative Monte Carlo error asked of the importance estimate (issue 6)
_IS_START, _IS_MAX, _IS_CHUNK = 800, 4000, 250


def importance_figures(reading: Reading, theta: np.ndarray, y: np.ndarray, rng: np.random.Generator,
                       rel_tol: float = _IS_REL_TOL, max_outer: int = _IS_MAX, floor: float = 0.0,
                       give_up: bool = False) -> dict[str, float]:
    """Expected posterior variance and 95% width of y after ``reading``, by likelihood reweighting.

    Outer: J readings simulated from distinct draws (800 at first, more until the MC error of the
    reduction is below ``rel_tol`` of it, at most min(draws, ``max_outer``)); inner: every draw,
    weighted by the reading's likelihood. Per outer reading, (mean - E[y])^2 minus the
    self-normalised variance of the mean, sum w_i^2 (y_i - mean)^2, is an unbiased-to-first-order
    estimate of its share of Var(E[y|X]). Returns ``expected_var_post`` (y's unit squared), ``mc_se``
    (of the reduction, = that of the posterior variance), ``expected_ci95_width`` and
    ``ci95_width_mc_se`` (y's unit; outer spread plus the inner draws' quantile error at each
    reading's effective sample), ``ess_fraction`` (smallest effective-sample fraction),
    ``outer`` and ``rel_error`` (mc_se / reduction). ``floor`` (y's unit squared): a reduction below it is
    held to ``rel_tol`` x ``floor`` instead (default 0: always relative to the reduction). ``give_up``: stop
    as soon as the outer readings the target needs (projected from the error so far) exceed the cap.
    """
    n = len(theta)
    cap = max(2, min(n, int(max_outer)))
    perm = rng.permutation(n)
    order = np.argsort(y)
    ys = y[order]
    ybar = float(np.mean(y))
    expl: list[np.ndarray] = []
    widths: list[np.ndarray] = []
    esss: list[np.ndarray] = []
    used, target = 0, min(cap, _IS_START)
    while True:
        while used < target:
            idx = perm[used:min(target, used + _IS_CHUNK)]
            x = reading.simulate(theta[idx], rng)
            ll = _loglik(reading, x, theta)
            w = np.exp(ll - ll.max(axis=1, keepdims=True))
            w /= w.sum(axis=1, keepdims=True)
            mean = w @ y
            var_mean = np.einsum("ji,ji->j", w**2, (y[None, :] - mean[:, None]) ** 2)
            expl.append((mean - ybar) ** 2 - var_mean)
            cw = np.cumsum(w[:, order], axis=1)
            widths.append(ys[np.argmax(cw >= 0.975, axis=1)] - ys[np.argmax(cw >= 0.025, axis=1)])
            esss.append(1.0 / np.sum(w**2, axis=1))
            used += len(idx)
        e = np.concatenate(expl)
        red, se = float(e.mean()), float(e.std(ddof=1) / math.sqrt(len(e)))
        scale = max(red, floor)
        if used >= cap or (scale > 0 and se <= rel_tol * scale):
            break
        grow = (se / (rel_tol * scale)) ** 2 * 1.1 if scale > 0 else 2.0
        if give_up and used * grow > cap:
            break
        target = min(cap, max(used + _IS_CHUNK, int(math.ceil(used * min(grow, 4.0)))))
    wd, ess = np.concatenate(widths), np.concatenate(esss)
    width = float(wd.mean())
    # every outer reading reuses the same inner draws: add the error of a weighted 95% range from its
    # effective sample, sqrt(2 p (1 - p) / ess) / (phi(z) 2 z) of the width at p = 0.025 (asymptotic
    # variance of a sample quantile, normal shape; common practice), averaged over the readings (an upper
    # bound for the error of their mean: those errors are positively correlated, not identical)
    z = 1.959963984540054
    k = math.sqrt(2 * 0.025 * 0.975) / (math.exp(-z * z / 2) / math.sqrt(2 * math.pi) * 2 * z)
    inner = float(np.mean(wd * k / np.sqrt(ess)))
    width_se = math.hypot(float(wd.std(ddof=1) / math.sqrt(len(wd))), inner)
    return {"expected_var_post": float(np.var(y, ddof=1)) - red, "mc_se": se,
            "expected_ci95_width": width, "ci95_width_mc_se": width_se,
            "ess_fraction": float(ess.min()) / n, "outer": int(used),
            "rel_error": se / red if red > 0 else float("inf")}


def choose_method(reading: Reading, theta: np.ndarray) -> str:
    """``importance`` where the noise is at least the prior sd and the likelihood is closed form."""
    prior_sd = float(np.std(theta))
    if reading.sd is not None:
        noise = reading.sd / math.sqrt(reading.n)
        closed = reading.bias is None or is_normal_frozen(reading.bias)
    else:
        noise = log_sd_from_cv(reading.cv) / math.sqrt(reading.n) * float(np.median(np.abs(theta)))
        closed = reading.bias is None and bool(np.all(theta > 0))
    return "importance" if closed and noise >= prior_sd else "regression"


# --------------------------------------------------------------------------------------------
# figures for one candidate or one set


def _blocks(n: int, rng: np.random.Generator, blocks: int = _BLOCKS) -> list[np.ndarray]:
    return np.array_split(rng.permutation(n), blocks)


def evaluate_set(readings: np.ndarray, y: np.ndarray, rng: np.random.Generator | None) -> dict[str, float]:
    """Expected posterior variance / 95% width of Y given joint readings (n, k), with block MC errors.

    The blocks reuse the full fit's knots and penalties; ``mc_se`` is the error of the expected
    variance reduction (block reductions: block variance of Y minus block residual variance),
    ``var_post_mc_se``, ``ci95_width_mc_se`` and ``narrowing_mc_se`` (block 95% width of Y minus the
    block expected width) those of the other figures.
    """
    var_post, width, choice = _regression_figures(readings, y)
    if rng is None:  # no Monte Carlo error wanted (searching over sets)
        return {"expected_var_post": var_post, "expected_ci95_width": width}
    reps = []
    for b in _blocks(len(y), rng):
        v, w, _ = _regression_figures(readings[b], y[b], choice)
        lo, hi = np.quantile(y[b], [0.025, 0.975])
        reps.append((v, w, float(np.var(y[b], ddof=1)) - v, float(hi - lo) - w))
    v, wd, red, nar = (np.array(col) for col in zip(*reps, strict=True))
    k = math.sqrt(len(reps))
    return {"expected_var_post": var_post, "expected_ci95_width": width,
            "mc_se": float(red.std(ddof=1) / k), "var_post_mc_se": float(v.std(ddof=1) / k),
            "ci95_width_mc_se": float(wd.std(ddof=1) / k), "narrowing_mc_se": float(nar.std(ddof=1) / k)}


def perfect_information(theta: np.ndarray, y: np.ndarray) -> tuple[float, float]:
    """(S1, se): first-order index of theta for y from the draws (given-data estimate)."""
    s1, se = first_order_given_data(theta, y)
    return float(s1), float(se)


def simulate_batches(reading: Reading, theta: np.ndarray, batches: tuple[int, ...] | None,
                     rng: np.random.Generator, ss: np.random.SeedSequence) -> np.ndarray:
    """Simulated readings of ``theta`` (canonical unit) drawn batch by batch, so that a grown sample keeps
    the readings of its earlier draws.

    Parameters
    ----------
    reading : Reading
        The candidate.
    theta : ndarray
        The values it reads, the batches end to end (canonical unit).
    batches : tuple of int or None
        Draws in each batch (summing to ``len(theta)``); None: one batch.
    rng : Generator
        The task's own stream: the first batch's readings (the readings of a ranking without growth).
    ss : SeedSequence
        The task's seed: batch ``b`` >= 1 reads from its child ``b``, a stream no other figure uses.

    Returns
    -------
    ndarray
        One reading per value of ``theta`` (canonical unit).
    """
    if not batches or len(batches) == 1:
        return reading.simulate(theta, rng)
    if sum(batches) != len(theta):
        raise ValueError("the batches do not add up to the draws")
    edges = np.cumsum((0, *batches))
    parts = [reading.simulate(theta[:edges[1]], rng)]
    for b in range(1, len(batches)):
        child = np.random.SeedSequence(ss.entropy, spawn_key=(*ss.spawn_key, b), pool_size=ss.pool_size)
        parts.append(reading.simulate(theta[edges[b]:edges[b + 1]], np.random.default_rng(child)))
    return np.concatenate(parts)


class _CandidateTask:
    """Task function of ranking: one candidate's preposterior figures on the draws (picklable).

    A task is a :class:`Reading`; its simulated readings, the importance outer readings and the
    regression blocks use the task's own random stream (a child of the ranking seed by candidate
    index, never by worker), so the figures are the same on any executor.
    """

    def __init__(self, values: dict[str, np.ndarray], y: np.ndarray, method: str,
                 batches: tuple[int, ...] | None = None, rel_tol: float = _IS_REL_TOL,
                 max_outer: int = _IS_MAX, floor: float = 0.0) -> None:
        self.values, self.y, self.method = values, y, method
        self.batches, self.rel_tol, self.max_outer, self.floor = batches, rel_tol, max_outer, floor

    def __call__(self, c: Reading, ss: np.random.SeedSequence) -> dict[str, Any]:
        rng = np.random.default_rng(ss)
        y = self.y
        theta = c.truth(self.values)
        read = simulate_batches(c, theta, self.batches, rng, ss)
        m = choose_method(c, theta) if self.method == "auto" else self.method
        fig = None
        if m == "importance":
            fig = importance_figures(c, theta, y, rng, rel_tol=self.rel_tol, max_outer=self.max_outer,
                                     floor=self.floor, give_up=self.floor > 0 and self.method == "auto")
            short = fig["mc_se"] > self.rel_tol * max(float(np.var(y, ddof=1)) - fig["expected_var_post"], self.floor)
            if fig["ess_fraction"] * len(theta) < 50:  # too few effective draws: fall back
                m, fig = "regression", None
            elif self.floor > 0 and self.method == "auto" and short:
                # precision on demand: the importance error shrinks with its outer readings (at most
                # max_outer, each weighing every draw), the regression's with the draws; past the cap, regress
                m, fig = "regression", None
            else:
                # the prior width is fixed by the draws here; the narrowing's error is the width's
                fig["var_post_mc_se"] = fig["mc_se"]
                fig["narrowing_mc_se"] = fig["ci95_width_mc_se"]
        if fig is None:
            fig = evaluate_set(read[:, None], y, rng)
        s1, s1_se = perfect_information(theta, y)
        return {"read": read, "method": m, "fig": fig, "s1": s1, "s1_se": s1_se}


class _JointTask:
    """Task function of ranking: the joint regression fit of a set of readings (no Monte Carlo error)."""

    def __init__(self, reads: dict[str, np.ndarray], y: np.ndarray) -> None:
        self.reads, self.y = reads, y

    def __call__(self, names: tuple[str, ...], ss: np.random.SeedSequence) -> dict[str, float]:
        return evaluate_set(np.column_stack([self.reads[n] for n in names]), self.y, None)


def rank_draws(values: dict[str, np.ndarray], y: np.ndarray, candidates: list[Reading], *,
               seed: int = 0, budget: float | None = None, method: str = "auto",
               max_set_size: int = 6, executor: Any = None, batches: tuple[int, ...] | None = None,
               importance_tol: float | None = None, max_outer: int = _IS_MAX, joint: bool = True
               ) -> dict[str, Any]:
    """Rank candidate readings on draws ``values`` (name -> array) of the inputs and ``y`` (output).

    Returns the ``rank`` JSON (DESIGN.md section 5): ``candidates`` sorted by expected variance
    reduction, ``prior`` figures, ``best_pair`` and ``best_set`` (joint fits). Units: those of y
    (variances in y's unit squared); ``per_cost`` is the 95% interval narrowing per unit cost.

    Each candidate's figures (its simulated readings and the preposterior loop over them) are one
    task of ``executor`` (:mod:`uncertainty.core.parallel`, in-process when None) with the random
    stream of its index (child ``i`` of ``seed``); the joint fits of pairs and sets are tasks too and
    the Monte Carlo errors of the best pair and set use child ``len(candidates)``. The numbers are
    the same on any executor and any number of workers.

    Parameters
    ----------
    values : dict of str to ndarray
        Draws of the quantities the candidates read (canonical units).
    y : ndarray
        Draws of the output, aligned with ``values``.
    candidates : list of Reading
        The candidate measurements.
    seed : int
        Seed of the simulated readings and the Monte Carlo error blocks.
    budget : float or None
        Largest total cost of ``best_set`` (relative cost units); no set without it.
    method : str
        ``auto``, ``regression`` or ``importance``.
    max_set_size : int
        Most readings in ``best_set``.
    executor : InProcess or DaskExecutor or None
        Where the candidate and joint-fit tasks run.
    batches : tuple of int or None
        Draws in each batch of a grown sample (the batches end to end make ``values`` and ``y``): each
        batch's simulated readings come from their own stream (:func:`simulate_batches`), so a grown
        sample keeps its earlier readings. None: one batch.
    importance_tol : float or None
        Relative Monte Carlo error the importance estimate grows its outer readings to (dimensionless),
        relative to the reduction or to :data:`SHARE_FLOOR` x Var(Y) when that is larger (precision on
        demand); None: 5 % of the reduction.
    max_outer : int
        Cap on the importance estimate's outer readings.
    joint : bool
        Also the joint fits of ``best_pair`` and ``best_set`` (None when False).

    Returns
    -------
    dict
        The ranking document.

    Raises
    ------
    InputError
        A candidate reads a quantity that is not among ``values``.
    """
    executor = executor if executor is not None else InProcess()
    y = np.asarray(y, dtype=float)
    ok = np.isfinite(y)
    y = y[ok]
    var_y = float(np.var(y, ddof=1))
    lo, hi = np.quantile(y, [0.025, 0.975])
    prior_width = float(hi - lo)
    for c in candidates:
        for q in c.quantities:
            if q not in values:
                raise InputError("candidate reads a quantity that the study does not sample", key="rank.candidates",
                                 value=q)
    read_values = {q: np.asarray(values[q], dtype=float)[ok] for c in candidates for q in c.quantities}
    kept = None
    if batches is not None and len(batches) > 1:  # finite draws in each batch
        kept = tuple(int(np.sum(part)) for part in np.split(ok, np.cumsum(batches)[:-1]))
    task = _CandidateTask(read_values, y, method, kept, max_outer=max_outer,
                          rel_tol=_IS_REL_TOL if importance_tol is None else importance_tol,
                          floor=0.0 if importance_tol is None else SHARE_FLOOR * var_y)
    done = executor.map(task, candidates, seed=seed, label="rank candidates")
    rng = np.random.default_rng(task_seeds(seed, len(candidates) + 1)[len(candidates)])  # joint fits' errors
    # one simulated reading per draw and candidate: shared by singles, pairs and sets
    reads: dict[str, np.ndarray] = {}
    rows = []
    notes: list[str] = []
    for c, got in zip(candidates, done, strict=True):
        reads[c.name] = got["read"]
        m, fig, s1, s1_se = got["method"], got["fig"], got["s1"], got["s1_se"]
        reduction = var_y - fig["expected_var_post"]
        row = {
            "name": c.name, "parameter": c.parameter, "cost": c.cost,
            "expected_var_post": fig["expected_var_post"],
            "expected_var_post_mc_se": fig["var_post_mc_se"],
            "expected_variance_reduction": reduction,
            "expected_ci95_width": fig["expected_ci95_width"],
            "expected_ci95_width_mc_se": fig["ci95_width_mc_se"],
            "ci95_narrowing": prior_width - fig["expected_ci95_width"],
            "ci95_narrowing_mc_se": fig["narrowing_mc_se"],
            "perfect_information_bound": var_y * s1,
            "perfect_information_S1": s1,
            "per_cost": (prior_width - fig["expected_ci95_width"]) / c.cost,
            "per_cost_mc_se": fig["narrowing_mc_se"] / c.cost,
            "mc_se": fig["mc_se"],
            "mc_rel_error": fig["mc_se"] / reduction if reduction > 0 else None,
            "perfect_information_mc_se": var_y * s1_se,
            "method": m,
        }
        # 95% half-width of the reduction: t quantile with the replicates behind its error (blocks or outer
        # readings) less one degree of freedom
        row["mc_df"] = int(fig["outer"]) - 1 if m == "importance" else _BLOCKS - 1
        row["mc_half_width"] = t975(row["mc_df"]) * fig["mc_se"] if math.isfinite(fig["mc_se"]) else math.inf
        if m == "importance":
            row["importance_outer"] = fig["outer"]
            row["importance_ess_fraction"] = fig["ess_fraction"]
        if row["mc_rel_error"] is None:
            notes.append(f"{c.name}: the expected reduction ({reduction:.3g}) is not above zero "
                         f"(Monte Carlo error {fig['mc_se']:.2g}, {m})")
        elif row["mc_rel_error"] > _IS_REL_TOL:
            notes.append(f"{c.name}: Monte Carlo error {100 * row['mc_rel_error']:.0f}% of the expected reduction "
                         f"({m}; above {100 * _IS_REL_TOL:.0f}%, more samples would sharpen it)")
        rows.append(row)
    rows.sort(key=lambda r: -r["expected_variance_reduction"])
    fit_task = _JointTask(reads, y)

    def row_of(names: tuple[str, ...], fig: dict[str, Any]) -> dict[str, Any]:
        cost = sum(c.cost for c in candidates if c.name in names)
        return {"names": list(names), "cost": cost, "expected_var_post": fig["expected_var_post"],
                "expected_variance_reduction": var_y - fig["expected_var_post"],
                "expected_ci95_width": fig["expected_ci95_width"], "mc_se": fig.get("mc_se"),
                "expected_ci95_width_mc_se": fig.get("ci95_width_mc_se")}

    def joints(sets: list[tuple[str, ...]]) -> list[dict[str, Any]]:
        figs = executor.map(fit_task, sets, seed=seed, label="rank sets") if sets else []
        return [row_of(n, f) for n, f in zip(sets, figs, strict=True)]

    def joint(names: tuple[str, ...]) -> dict[str, Any]:  # the chosen set, with its Monte Carlo errors
        return row_of(names, evaluate_set(np.column_stack([reads[n] for n in names]), y, rng))

    names = [c.name for c in candidates]
    cost_of = {c.name: c.cost for c in candidates}
    best_pair = None
    if not joint:
        return {"prior": {"var": var_y, "ci95_width": prior_width, "draws": int(len(y))},
                "candidates": rows, "best_pair": None, "best_set": None, "notes": notes}
    if len(names) >= 2:
        pairs = joints([p for p in itertools.combinations(names, 2)
                        if budget is None or cost_of[p[0]] + cost_of[p[1]] <= budget + 1e-12])
        best_pair = min(pairs, key=lambda r: r["expected_var_post"]) if pairs else None
        if best_pair is not None:
            best_pair = joint(tuple(best_pair["names"]))
    best_set = None
    if budget is not None:
        affordable = [n for n in names if cost_of[n] <= budget + 1e-12]
        subsets = [s for k in range(1, min(len(affordable), max_set_size) + 1)
                   for s in itertools.combinations(affordable, k)
                   if sum(cost_of[n] for n in s) <= budget + 1e-12]
        if len(subsets) <= 64:
            fits = joints(subsets)
            best_set = min(fits, key=lambda r: r["expected_var_post"])
            best_set["search"] = "exhaustive"
        else:  # greedy forward selection, each step a joint fit
            chosen: tuple[str, ...] = ()
            best_set = None
            while True:
                spent = sum(cost_of[n] for n in chosen)
                options = [n for n in affordable if n not in chosen and spent + cost_of[n] <= budget + 1e-12]
                if not options or len(chosen) >= max_set_size:
                    break
                fits = joints([(*chosen, n) for n in options])
                step = min(fits, key=lambda r: r["expected_var_post"])
                if best_set is not None and step["expected_var_post"] >= best_set["expected_var_post"]:
                    break
                best_set, chosen = step, tuple(step["names"])
            if best_set is not None:
                best_set["search"] = "greedy"
        if best_set is not None:
            search = best_set["search"]
            best_set = joint(tuple(best_set["names"]))
            best_set["search"], best_set["budget"] = search, budget
    return {"prior": {"var": var_y, "ci95_width": prior_width, "draws": int(len(y))},
            "candidates": rows, "best_pair": best_pair, "best_set": best_set, "notes": notes}


# --------------------------------------------------------------------------------------------
# on a study


def candidates_of(study: Any) -> list[Reading]:
    """The study's ``[rank]`` candidates, or the instruments that apply to its tissue.

    Instruments (priors/instruments.toml) apply when their ``tissues`` include the study's tissue
    (or list none) and they read uncertain inputs of the study (both quantities of a difference). Bias
    priors and the reading model (:meth:`uncertainty.priors.Instrument.true_reading`) come from the
    instrument a candidate names.

    Parameters
    ----------
    study : Study
        The study (its ``[rank]`` section, tissue, sampled names and derived quantities).

    Returns
    -------
    list of Reading
        The candidates, noise in the canonical unit of each reading.

    Raises
    ------
    InputError
        No candidate, a candidate reading a quantity the study does not sample, or a budget below the
        cheapest candidate.
    """

    file = str(getattr(study, "path", None) or "") or None
    section = getattr(study, "rank", None)
    given = list(getattr(section, "candidates", []) or [])
    instruments = load_instruments()
    names = set(getattr(study, "names", []))
    out = []
    if given:
        for c in given:
            inst = instruments.get(c.instrument) if getattr(c, "instrument", None) else None
            bias = inst.bias.frozen() if inst is not None and inst.bias is not None else None
            out.append(Reading(c.name, c.parameter, sd=c.sd, cv=c.cv if c.sd is None else None, bias=bias,
                               cost=float(c.cost), n=int(getattr(c, "n", 1) or 1), instrument=inst))
    else:
        tissue = getattr(study, "tissue", None)
        for key, inst in instruments.items():
            if inst.tissues and tissue not in inst.tissues:
                continue
            if any(q not in names and q not in (getattr(study, "derived", None) or {}) for q in inst.quantities):
                continue
            bias = inst.bias.frozen() if inst.bias is not None else None
            out.append(Reading(key, inst.measures, sd=inst.sd, cv=inst.cv if inst.sd is None else None,
                               bias=bias, cost=float(inst.cost), instrument=inst))
    if not out:
        raise InputError("no candidate measurements: give [rank] candidates, or no instrument applies to the tissue",
                         file=file, key="rank.candidates", value=getattr(study, "tissue", None))
    readable = names | set(getattr(getattr(study, "derived", None) or {}, "keys", lambda: [])())
    for i, c in enumerate(out):
        if c.parameter not in readable:
            raise InputError("a candidate must read an uncertain or derived quantity of the study", file=file,
                             key=f"rank.candidates[{i}].parameter", value=c.parameter)
        for q in c.quantities[1:]:
            if q not in readable:
                raise InputError(f"instrument {c.instrument.name} reads {c.parameter} - {q}, so {q} must be an "
                                 "uncertain or derived quantity of the study", file=file,
                                 key=f"rank.candidates[{i}].instrument", value=c.instrument.name)
    budget = getattr(section, "budget", None)
    if budget is not None:
        cheapest = min(c.cost for c in out)
        if budget < cheapest:
            raise InputError(f"budget is below the cheapest candidate (cost {cheapest:g})", file=file,
                             key="rank.budget", value=budget)
    return out


def posterior_pool(study: Any, output: str, *, seed: int, samples: int, sampler: str | None = None,
                   chains: int | None = None, tune: int | None = None
                   ) -> tuple[dict[str, np.ndarray], np.ndarray, dict[str, Any]]:
    """Posterior draws of the study's individual from its observations, thinned for autocorrelation.

    Samples with :func:`uncertainty.analyses.inference.infer` (quality gate: QualityGateError, exit 3), about
    ``samples`` draws over ``chains`` chains, then keeps every ``thin``-th draw of each chain with
    thin = total draws / smallest bulk ESS over the uncertain inputs (so the kept draws are close to
    independent, as the regression and the given-data index assume). Without subject labels the
    draws are the study's individual; with subjects they are a new individual of the population (the
    typical posterior plus the between-subject layer), the level a new reading would measure.
    Returns (name -> values, including derived quantities and outputs; ``y`` = ``output`` draws;
    info with ``draws``, ``thin``, ``ess_bulk_min``, ``sampler``). Canonical units.
    """
    import arviz as az


    opts = settings(study, sampler=sampler, chains=chains, tune=tune)  # None: the study's [infer], else defaults
    opts["draws"] = max(250, math.ceil(samples / opts["chains"]))
    res = infer(study, seed=seed, checks=False, **opts)
    idata, built = res.idata, res.built
    problem = built.problem
    names = list(problem.priors)
    n_chain, n_draw = int(idata.posterior.sizes["chain"]), int(idata.posterior.sizes["draw"])
    ess = az.ess(idata, var_names=[n for n in names if n in idata.posterior], method="bulk")
    ess_min = float(min(float(np.min(ess[v].values)) for v in ess.data_vars))
    thin = max(1, int(n_chain * n_draw // max(ess_min, 1.0)))
    rng = np.random.default_rng(seed + 104729)
    if built.hierarchical:  # a new individual: typical posterior plus a fresh between-subject layer
        vals = new_subject_values(built, idata, rng)
    else:  # the study's own individual
        vals = {**problem.fixed, **{name: flat(idata, f"{name}__subject")[:, 0] for name in names}}
    keep = np.arange(n_chain * n_draw).reshape(n_chain, n_draw)[:, ::thin].ravel()
    total = n_chain * n_draw
    vals = {k: (np.asarray(v, dtype=float)[keep] if np.ndim(v) and np.shape(v)[0] == total else v)
            for k, v in vals.items()}
    outputs = problem.evaluate(vals, np)
    point = parse_time_endpoint(output, getattr(study, "timeline", None), file=_file(study), key="rank.output")
    if point is not None:  # a whole_body time course at a time
        outputs = {**outputs, output: values_at(study, point, {k: v for k, v in vals.items() if k in study.priors})}
    y = np.asarray(outputs[output], dtype=float) * np.ones(len(keep))
    pool = {**{k: np.asarray(v, dtype=float) for k, v in outputs.items() if np.shape(v) == y.shape},
            **{k: np.asarray(v, dtype=float) for k, v in vals.items() if np.shape(v) == y.shape}}
    info = {"draws": int(len(keep)), "thin": thin, "ess_bulk_min": ess_min, "sampler": res.doc.get("sampler"),
            "chains": n_chain, "level": "new individual" if built.hierarchical else "the study's individual"}
    return pool, y, info


#: Fewest draws a ranking uses: fewer gave errors of 21-289 % in the expected variance reduction at 10-1000
#: draws (issue 18 review; our measurement), 4096 the prior path's default (common practice: a power of two).
MIN_SAMPLES = 4096
#: Default cap on the draws of the ``tol`` doubling: 16 x the default (four doublings), a bound on memory and
#: time (the same factor as sensitivity's cap; common practice).
DEFAULT_MAX_SAMPLES = 16 * MIN_SAMPLES
#: A candidate that removes less than this share of the output's variance is held to ``tol`` times this share
#: of the variance, not to ``tol`` times its own reduction (a relative tolerance on a reduction near zero
#: could never be met; a share this small does not change which measurement to make; common practice,
#: the 0.01 absolute tolerance on indices of issue 18).
SHARE_FLOOR = 0.01


def t975(df: int) -> float:
    """The 97.5 % quantile of Student's t with ``df`` degrees of freedom (dimensionless).

    Parameters
    ----------
    df : int
        Degrees of freedom (at least 1).

    Returns
    -------
    float
        The factor turning a standard error into a 95 % half-width.
    """
    from scipy.stats import t

    return float(t.ppf(0.975, max(int(df), 1)))


def widest_relative_half_width(doc: dict[str, Any]) -> tuple[float, float, str]:
    """The candidate whose expected variance reduction is least precise, relative to its own size.

    Parameters
    ----------
    doc : dict
        A ranking document (:func:`rank_draws`): each candidate's ``mc_half_width`` (the output's unit
        squared) and ``expected_variance_reduction``; ``prior.var``.

    Returns
    -------
    tuple of (float, float, str)
        The largest ratio of the 95 % half-width to max(reduction, :data:`SHARE_FLOOR` x Var(Y))
        (dimensionless; inf for an error that is not finite), that half-width (the output's unit squared)
        and the candidate's name.
    """
    floor = SHARE_FLOOR * float(doc["prior"]["var"])
    worst, half, where = -1.0, float("nan"), ""
    for row in doc["candidates"]:
        h = float(row.get("mc_half_width", math.inf))
        scale = max(float(row["expected_variance_reduction"]), floor)
        r = h / scale if math.isfinite(h) and scale > 0 else math.inf
        if r > worst:
            worst, half, where = r, h, str(row["name"])
    return worst, half, where


def _check_tol(tol: float | None, max_samples: int | None, start: int, file: str | None) -> int:
    """The cap on the draws of the ``tol`` doubling; InputError for a tolerance or cap that cannot be met."""
    if tol is not None and (isinstance(tol, bool) or not isinstance(tol, int | float | np.floating)
                            or not math.isfinite(tol) or not 0 < tol < 1):
        raise InputError("the tolerance is relative: it must lie between 0 and 1", file=file, key="rank.tol",
                         value=tol)
    if max_samples is None:
        return max(DEFAULT_MAX_SAMPLES, start)
    if isinstance(max_samples, bool) or not isinstance(max_samples, int | np.integer) or max_samples < start:
        raise InputError(f"max-samples is below the starting {start} draws", file=file, key="rank.max_samples",
                         value=max_samples)
    return int(max_samples)


def _prior_batch(study: Any, n: int, seed: Any, output: str, point: Any) -> tuple[dict[str, np.ndarray], np.ndarray]:
    """n prior draws (individual layer) of the study's quantities and outputs, and the output ``y``."""
    values = sampling.draw(study, n, method="mc", seed=seed, layer="individual")
    outputs = model_evaluate(study, values)
    if point is not None:  # a whole_body time course at a time: "infused_retained_fraction at 60 min"
        outputs[output] = values_at(study, point, values)
    y = np.asarray(outputs[output], dtype=float)
    # derived quantities (Pc from Pa, Pv, r; pi_c from protein) can be read too
    pool = {**{k: np.asarray(v) for k, v in outputs.items() if np.shape(v) == y.shape}, **values}
    return {k: np.asarray(v, dtype=float) * np.ones(len(y)) for k, v in pool.items()}, y


def rank(study: Any, seed: int | None = None, samples: int | None = None, method: str = "auto",
         from_prior: bool = False, executor: Any = None, tol: float | None = None,
         max_samples: int | None = None) -> RankResult:
    """Rank candidate measurements for the study's output (``[rank] output``, default Jv).

    Without observations (or with ``from_prior``) draws come from the prior (individual layer: a
    reading measures this individual's value); with observations from the current posterior
    (:func:`posterior_pool`, thinned MCMC draws): simulated readings from the posterior draws and the
    perfect-information bound as the given-data first-order index on them. JSON key ``from`` says
    which. ``samples``: draws (default ``[rank] samples`` or 4096; fewer than :data:`MIN_SAMPLES` are
    raised to it with a note; the posterior path samples about that many and keeps the thinned ones).
    ``executor`` (:mod:`uncertainty.core.parallel`, default in-process): each candidate's figures and
    each joint fit run as one task (:func:`rank_draws`); the numbers do not depend on it.

    Parameters
    ----------
    study : Study
        The study (its ``[rank]`` section, or the tissue's instruments).
    seed : int, optional
        Seed (default the study's).
    samples : int, optional
        Draws to start from (default ``[rank] samples``).
    method : str
        ``auto``, ``regression`` or ``importance``.
    from_prior : bool
        Rank from the prior even when the study has observations.
    executor : InProcess or DaskExecutor, optional
        Where the candidate and joint-fit tasks run.
    tol : float, optional
        Precision on demand (dimensionless, relative; default ``[rank] tol``): the draws double until the
        95 % Monte Carlo half-width (t quantile x standard error, t with the blocks or outer readings
        less one degree of freedom) of every candidate's expected variance reduction is below ``tol``
        times that reduction, or times :data:`SHARE_FLOOR` x Var(Y) for a candidate removing less. On the
        prior path each doubling adds as many new draws as there are (their own stream, child ``k`` of the
        seed; earlier draws, their model runs and their simulated readings are kept); on the posterior
        path the sampler runs again for twice the draws. Pairs and sets are fitted once, at the end. With
        ``method`` auto, a candidate whose importance estimate misses the tolerance at its cap of outer
        readings (4000, each weighing every draw) is estimated by regression, whose error shrinks with the
        draws.
    max_samples : int, optional
        Cap on the draws of the doubling (default ``[rank] max_samples`` or :data:`DEFAULT_MAX_SAMPLES`).

    Returns
    -------
    RankResult
        With ``tol``: JSON keys ``tol``, ``converged`` and ``precision_history`` (one row per size: samples,
        the widest relative half-width, its absolute value in the output's unit squared, which candidate).

    Raises
    ------
    InputError
        A tolerance outside (0, 1) or a cap below the starting draws; bad candidates.
    QualityGateError
        The tolerance is not met when the next doubling would pass the cap (exit 3, result attached), or
        the posterior's chains fail their gate.
    """

    section = getattr(study, "rank", None)
    output = getattr(section, "output", "Jv") or "Jv"
    budget = getattr(section, "budget", None)
    n = int(samples or max(getattr(section, "samples", MIN_SAMPLES) or MIN_SAMPLES, MIN_SAMPLES))
    seed = int(seed if seed is not None else getattr(study, "seed", 0) or 0)
    tol = getattr(section, "tol", None) if tol is None else tol
    max_samples = getattr(section, "max_samples", None) if max_samples is None else max_samples
    cands = candidates_of(study)
    point = parse_time_endpoint(output, getattr(study, "timeline", None), file=_file(study), key="rank.output")
    notes = []
    if n < MIN_SAMPLES:
        notes.append(f"samples raised from {n} to {MIN_SAMPLES}, the fewest that keep the expected variance "
                     "reductions within a few per cent")
        n = MIN_SAMPLES
    cap = _check_tol(tol, max_samples, n, _file(study))
    use_posterior = bool(getattr(study, "observations", None)) and not from_prior
    posterior = None
    batches: list[int] = []
    pool: dict[str, np.ndarray] = {}
    y = np.empty(0)
    history: list[dict[str, Any]] = []
    converged: bool | None = None
    # tolerance mode: the relative error the importance estimate grows its outer readings to (t with the fewest
    # outer readings it uses); with ``auto``, a candidate whose importance error stays above it at the cap on
    # outer readings is estimated by regression, whose error shrinks with the draws
    is_tol = None if tol is None else min(_IS_REL_TOL, tol / t975(_IS_START - 1))
    worst, half, where = math.nan, math.nan, ""
    while True:
        if use_posterior:  # the sampler again, for all the draws (MCMC draws cannot be topped up)
            pool, y, posterior = posterior_pool(study, output, seed=seed, samples=n)
            batches = [len(y)]
        else:
            add = n - sum(batches)
            part_seed: Any = seed if not batches else np.random.SeedSequence(seed, spawn_key=(len(batches),))
            new_pool, new_y = _prior_batch(study, add, part_seed, output, point)
            pool = new_pool if not batches else {k: np.concatenate([pool[k], new_pool[k]]) for k in pool}
            y = np.concatenate([y, new_y])
            batches.append(add)
        if tol is None:
            doc = rank_draws(pool, y, cands, seed=seed + 1, budget=budget, method=method, executor=executor)
            break
        doc = rank_draws(pool, y, cands, seed=seed + 1, budget=budget, method=method, executor=executor,
                         batches=tuple(batches), importance_tol=is_tol, joint=False)
        worst, half, where = widest_relative_half_width(doc)
        history.append({"samples": int(len(y)), "widest_half_width": worst, "widest_half_width_abs": half,
                        "widest": where})
        converged = bool(worst < tol)
        if converged or 2 * n > cap:
            if len(cands) < 2 and budget is None:  # nothing to fit jointly: the document is complete
                break
            doc = rank_draws(pool, y, cands, seed=seed + 1, budget=budget, method=method, executor=executor,
                             batches=tuple(batches), importance_tol=is_tol)
            break
        n *= 2
    if posterior is not None:
        notes.append(f"figures are from the current posterior: {posterior['draws']} MCMC draws of "
                     f"{posterior['level']}, thinned every {posterior['thin']} for autocorrelation")
    elif getattr(study, "observations", None):
        notes.append("figures are from the prior (--from-prior): the observations are not folded in")
    unit = point.unit if point is not None else output_unit(output)
    notes += doc.pop("notes", [])
    if tol is not None:
        notes.append(f"tolerance {tol:g} on the 95% Monte Carlo half-width of every candidate's expected variance "
                     f"reduction, relative to it (or to {SHARE_FLOOR:g} of the output's variance when smaller)"
                     + (f": met at {len(y)} draws" if converged else
                        f": NOT met, the cap max-samples={cap} stopped the doubling at {len(y)} draws "
                        f"(widest relative half-width {worst:.3g}, {where})"))
    doc = {"output": output, "samples": int(len(y)), "seed": seed, "from": "prior" if posterior is None else
           "posterior", **doc, "notes": notes,
           "units": {"expected_var_post": f"({unit})^2", "expected_ci95_width": unit, "per_cost": f"{unit} per cost"}}
    if posterior is not None:
        doc["posterior_draws"] = posterior
    if tol is not None:
        doc["tol"], doc["converged"], doc["precision_history"] = tol, converged, history
    result = RankResult(doc)
    if converged is False:
        raise QualityGateError(f"95% Monte Carlo half-width of {where}'s expected variance reduction is still "
                               f"{worst:.3g} of it, above tol={tol:g}, at {len(y)} draws; the next doubling "
                               f"would exceed max-samples={cap}", result=result)
    return result
