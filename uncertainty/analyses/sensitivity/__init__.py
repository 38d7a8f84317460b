"""Global sensitivity of any model output: Sobol', Morris, Shapley effects and a given-data index.

All methods work on one :class:`Problem`: named factors (players), the cube columns that belong
to each, the normal-score correlation over the columns and a model that maps normal scores to the
output. :func:`sensitivity` builds the problem from a Study; the machinery below is also usable
(and tested) on plain callables.

- Sobol' (independent inputs only): SALib's Saltelli design (``SALib.sample.sobol``, scrambled) and
  estimators (``SALib.analyze.sobol.first_order`` / ``total_order`` / ``second_order``: Saltelli et
  al. 2010, Comput Phys Commun 181:259-270, first order; Jansen total order). Intervals come from R
  independent scrambles of the design (t-based across replicates), never from a bootstrap of one
  QMC design.
- Morris (independent inputs only): SALib's trajectories and mu*, sigma (Campolongo et al. 2007);
  the p grid levels are moved to the cell centres (i + 1/2)/p so that no level lies on a face of
  the cube (a level at 0 or 1 sends a normal marginal to infinity).
- Shapley effects (any Gaussian-copula correlation; Owen 2014, SIAM/ASA JUQ 2:245-251; Song, Nelson
  and Staum 2016, SIAM/ASA JUQ 4:1060-1083): random orders of the players, each walked along a
  coupled chain of d + 1 runs (Goda 2021, Reliab Eng Syst Safety 213:107702, for independent inputs;
  carried here to the Gaussian copula through the Cholesky factor in the order's column order, which
  makes every conditional draw exact).
- :func:`first_order_given_data`: a first-order index from any set of draws (binning estimator
  with an ANOVA bias correction).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from uncertainty.analyses.given_data import first_order_given_data as first_order_given_data
from uncertainty.analyses.propagate import available_outputs, model_evaluator, section_settings, study_meta
from uncertainty.analyses.propagate.timeline import timepoint_evaluator, values_over_time
from uncertainty.analyses.sampling import (
    between_correlation_of,
    correlation_of,
    cube_columns,
    from_scores,
    is_power_of_two,
    next_power_of_two,
    open_cube,
    replicate_seeds,
)
from uncertainty.analyses.sensitivity.result import SensitivityResult
from uncertainty.core.errors import InputError, QualityGateError
from uncertainty.core.parallel import ChunkedModel, InProcess
from uncertainty.forms.catalogue import output_unit
from uncertainty.study.endpoints import parse_time_endpoint

METHODS = ("sobol", "morris", "shapley")
DEFAULT_SAMPLES = {"sobol": 8192, "morris": 64, "shapley": 8192}
REPLICATES = 16
#: default cap on the Sobol' base sample of the ``tol`` doubling: 16 x the default N, a bound on memory and
#: run time chosen here (about 10^6 model runs for six inputs), not a statistical figure
DEFAULT_MAX_SAMPLES = 2**17
MORRIS_LEVELS = 4
#: most model runs of one Shapley model call: the replicates' runs go to the model together up to this many rows
#: (64 row chunks of the executor; a bound on memory chosen here, about 40 MB of points for 20 columns)
CHAIN_CALL_ROWS = 2**18


# --------------------------------------------------------------------------------------------
# Problem
# --------------------------------------------------------------------------------------------

@dataclass
class Problem:
    """A sensitivity problem over normal scores.

    ``players``: factor names; ``groups[c]``: the player that cube column c belongs to;
    ``corr``: (k, k) normal-score correlation over the columns; ``model(z)``: correlated normal
    scores (n, k) -> output array (n,). ``unit``: the output's unit.
    """

    players: list[str]
    groups: list[int]
    corr: np.ndarray
    model: Callable[[np.ndarray], np.ndarray]
    output: str = "y"
    unit: str = ""

    @property
    def k(self) -> int:
        """Number of cube columns."""
        return len(self.groups)

    def columns_of(self, players: Sequence[int]) -> list[int]:
        """Cube columns of a set of player indices."""
        s = set(players)
        return [c for c, g in enumerate(self.groups) if g in s]

    def independent(self) -> bool:
        """True when the columns are uncorrelated."""
        return bool(np.allclose(self.corr, np.eye(self.k), atol=1e-12, rtol=0))

    def correlated_pairs(self) -> list[tuple[str, str, float]]:
        """Pairs of players whose columns are correlated, with the largest |rho|."""
        out = []
        for a, b in itertools.combinations(range(len(self.players)), 2):
            block = self.corr[np.ix_(self.columns_of([a]), self.columns_of([b]))]
            if block.size and np.max(np.abs(block)) > 1e-12:
                out.append((self.players[a], self.players[b], float(block.flat[np.argmax(np.abs(block))])))
        return out

    def evaluate_cube(self, u: np.ndarray) -> np.ndarray:
        """Model at points of the open cube (independent columns only)."""
        from scipy.special import ndtri

        return np.asarray(self.model(ndtri(u)), dtype=float)


def problem_from_functions(names: Sequence[str], ppfs: Sequence[Callable[[np.ndarray], np.ndarray]],
                           func: Callable[..., np.ndarray], corr: np.ndarray | None = None,
                           output: str = "y", unit: str = "") -> Problem:
    """A problem from marginal inverse CDFs, a function of keyword arrays and a score correlation."""
    from scipy.special import ndtr

    names = list(names)
    k = len(names)
    corr = np.eye(k) if corr is None else np.asarray(corr, dtype=float)

    def model(z: np.ndarray) -> np.ndarray:
        u = ndtr(z)
        return func(**{n: ppfs[i](u[:, i]) for i, n in enumerate(names)})

    return Problem(players=names, groups=list(range(k)), corr=corr, model=model, output=output, unit=unit)


def problem_from_study(study: Any, output: str = "Jv", layer: str = "individual",
                       evaluate: Callable | None = None) -> Problem:
    """A problem over a study's quantities for one output.

    ``output`` is a model output or, for a ``whole_body`` study, a time course at a time
    (``"infused_retained_fraction at 60 min"``, ``uncertainty.study.endpoints``; ``evaluate`` is then not used).
    Players are the study's uncertain inputs (``study.names``) and, in the ``individual`` layer,
    every quantity with a between-subject spread; a quantity's typical and between-subject columns
    form one group (the individual's value of that quantity).
    """

    point = parse_time_endpoint(output, getattr(study, "timeline", None), file=_file(study),
                                key="sensitivity.output")
    if point is not None:  # a whole_body time course at a time: "infused_retained_fraction at 60 min"
        evaluate = timepoint_evaluator(point)
    else:
        evaluate = model_evaluator(evaluate)
        have = available_outputs(study, evaluate)
        if output not in have:
            raise InputError(f"no such output; the model gives {', '.join(have)}",
                             file=_file(study), key="sensitivity.output", value=output)
    cols = cube_columns(study, layer)
    players: list[str] = []
    for s, _ in cols:
        if s not in players:
            players.append(s)
    groups = [players.index(s) for s, _ in cols]
    d = len(study.names)
    corr = np.eye(len(cols))
    corr[:d, :d] = correlation_of(study)
    between = between_correlation_of(study) if layer == "individual" else None
    if between is not None:
        corr[d:, d:] = between

    def model(z: np.ndarray) -> np.ndarray:
        return np.asarray(evaluate(study, from_scores(study, z, layer))[output], dtype=float)

    unit = point.unit if point is not None else output_unit(output)
    return Problem(players=players, groups=groups, corr=corr, model=model, output=output, unit=unit)


# --------------------------------------------------------------------------------------------
# Helpers
# --------------------------------------------------------------------------------------------

def _t975(df: int) -> float:
    from scipy.stats import t

    return float(t.ppf(0.975, df))


def _replicate_ci(point: np.ndarray, reps: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(se, low, high) from R replicate estimates (axis 0), t-based, centred on the point estimate."""
    R = reps.shape[0]
    se = np.std(reps, axis=0, ddof=1) / math.sqrt(R)
    h = _t975(R - 1) * se
    return se, point - h, point + h


def _ranking(indices: dict[str, dict[str, Any]], key: str) -> list[str]:
    return sorted(indices, key=lambda p: -(indices[p][key] if np.isfinite(indices[p][key]) else -np.inf))


def _index_warnings(indices: dict[str, dict[str, Any]], keys: Sequence[str]) -> list[str]:
    """Warnings where an interval is wider than its index, or an index is clearly negative.

    Intervals lying wholly within +-0.02 (a negligible index either way) are not flagged.
    """
    out = []
    for p, ix in indices.items():
        for key in keys:
            if key not in ix or f"{key}_ci" not in ix:
                continue
            v, (lo, hi) = ix[key], ix[f"{key}_ci"]
            if not np.isfinite(v):
                continue
            if hi < 0:
                out.append(f"{key} of {p} is clearly negative ({v:.3g}, interval [{lo:.3g}, {hi:.3g}]): "
                           "the sample is too small or the model output is degenerate")
            elif (hi - lo) > abs(v) and max(abs(lo), abs(hi)) > 0.02:
                out.append(f"the interval of {key} of {p} ([{lo:.3g}, {hi:.3g}]) is wider than the "
                           f"index ({v:.3g}): increase the sample")
    return out


def negative_index_notes(indices: dict[str, dict[str, Any]], keys: Sequence[str]) -> list[str]:
    """Notes for indices whose estimate is below zero although the index cannot be.

    The full first-order index Var(E[Y | X_i]) / Var(Y) and the total index E[Var(Y | X_-i)] / Var(Y)
    are ratios of variances, never negative, with or without dependence among the inputs; a negative
    estimate is Monte Carlo error.

    Parameters
    ----------
    indices : dict
        Per input, the index values and their ``<key>_ci`` intervals (dimensionless).
    keys : sequence of str
        The index names to look at (e.g. ``("S1", "ST")``).

    Returns
    -------
    list of str
        One note per negative estimate.
    """
    out = []
    for p, ix in indices.items():
        for key in keys:
            v = ix.get(key)
            if v is None or not np.isfinite(v) or v >= 0:
                continue
            lo, hi = ix.get(f"{key}_ci", [float("nan"), float("nan")])
            out.append(f"{key} of {p} is estimated at {v:.3g} (interval [{lo:.3g}, {hi:.3g}]), below zero, "
                       "which a ratio of variances cannot be, correlated inputs or not: this is Monte Carlo "
                       "error, so read it as about zero, or raise the samples to narrow it")
    return out


def _per_replicate_size(samples: int, replicates: int, notes: list[str], key: str) -> int:
    if isinstance(samples, bool) or not isinstance(samples, int | np.integer):
        raise InputError("the number of samples must be a whole number", key=key, value=samples)
    if samples <= 0:
        raise InputError("the number of samples must be positive", key=key, value=samples)
    per = max(2, math.ceil(samples / replicates))
    if not is_power_of_two(per):
        per = next_power_of_two(per)
    if per * replicates != samples:
        notes.append(f"sample size {samples} rounded up to {per * replicates} ({replicates} independent "
                     f"scrambles of {per} base points; the Sobol' design needs a power of two)")
    return per


# --------------------------------------------------------------------------------------------
# Sobol'
# --------------------------------------------------------------------------------------------

def _refuse_correlated(problem: Problem, method: str) -> None:
    pairs = problem.correlated_pairs()
    if pairs:
        shown = ", ".join(f"{a}-{b} (rho={r:.2g})" for a, b, r in pairs)
        raise InputError(f"{method} indices assume independent inputs, but this study correlates "
                         f"{shown}; use method = \"shapley\"", key="sensitivity.method",
                         value=method.lower().rstrip("'"))


def _sobol_estimates(Y: np.ndarray, D: int, second: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """S1, ST (and the S2 matrix) from Saltelli-ordered outputs, SALib's estimators."""
    from SALib.analyze.sobol import first_order, second_order, separate_output_values, total_order

    step = 2 * D + 2 if second else D + 2
    N = Y.size // step
    A, B, AB, BA = separate_output_values(Y, D, N, second)
    A2, B2 = np.repeat(A[:, None], D, axis=1), np.repeat(B[:, None], D, axis=1)
    S1 = first_order(A2, AB, B2)
    ST = total_order(A2, AB, B2)
    S2 = None
    if second:
        S2 = np.full((D, D), np.nan)
        for j in range(D):
            for m in range(j + 1, D):
                S2[j, m] = second_order(A, AB[:, j], AB[:, m], BA[:, j], B)
    return S1, ST, S2


def _sobol_fit(problem: Problem, Y: np.ndarray, second_order: bool, convergence: bool
               ) -> tuple[dict[str, dict[str, Any]], dict[str, dict[str, Any]] | None, list[dict[str, Any]],
                          list[str], int]:
    """Indices, second order, convergence rows, warnings and the dropped base points from Saltelli-ordered
    outputs ``Y`` of shape (replicates, base points, runs per point)."""
    replicates, per, _ = Y.shape
    D = len(problem.players)
    ok = np.all(np.isfinite(Y), axis=2)  # (R, per)
    nan_draws = int((~ok).sum())
    warnings: list[str] = []
    if nan_draws:
        warnings.append(f"{nan_draws} of {replicates * per} base points gave a non-finite {problem.output} "
                        "in at least one run; they are left out of the estimates")
    finite = Y[ok]
    if finite.size == 0:
        raise InputError(f"the model gave no finite {problem.output}", key="sensitivity.output",
                         value=problem.output)
    mu, sd = finite.mean(), finite.std()
    sd = sd if sd > 0 else 1.0
    Yc = (Y - mu) / sd  # centring as SALib's analyze does (estimators are not shift invariant)

    def estimate(prefix: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, Any]:
        reps = [_sobol_estimates(Yc[r, :prefix][ok[r, :prefix]].ravel(), D, second_order)
                for r in range(replicates)]
        pooled = _sobol_estimates(np.concatenate([Yc[r, :prefix][ok[r, :prefix]].ravel()
                                                  for r in range(replicates)]), D, second_order)
        S1r = np.array([x[0] for x in reps])
        STr = np.array([x[1] for x in reps])
        return pooled[0], pooled[1], np.stack([S1r, STr]), (
            (pooled[2], np.array([x[2] for x in reps])) if second_order else None)

    S1, ST, reps, s2 = estimate(per)
    s1_se, s1_lo, s1_hi = _replicate_ci(S1, reps[0])
    st_se, st_lo, st_hi = _replicate_ci(ST, reps[1])
    indices = {p: {"S1": float(S1[j]), "S1_ci": [float(s1_lo[j]), float(s1_hi[j])],
                   "ST": float(ST[j]), "ST_ci": [float(st_lo[j]), float(st_hi[j])],
                   "S1_se": float(s1_se[j]), "ST_se": float(st_se[j])}
               for j, p in enumerate(problem.players)}
    S2d = None
    if s2 is not None:
        S2p, S2r = s2
        se2, lo2, hi2 = _replicate_ci(S2p, S2r)
        S2d = {f"{problem.players[j]}:{problem.players[m]}":
               {"S2": float(S2p[j, m]), "S2_ci": [float(lo2[j, m]), float(hi2[j, m])]}
               for j in range(D) for m in range(j + 1, D)}
    conv = []
    if convergence:
        step = Y.shape[2]
        prefix = per
        sizes = []
        while prefix >= 16 and len(sizes) < 6:
            sizes.append(prefix)
            prefix //= 2
        for pre in reversed(sizes):
            c1, ct, cr, _ = estimate(pre)
            _, l1, h1 = _replicate_ci(c1, cr[0])
            _, lt, ht = _replicate_ci(ct, cr[1])
            conv.append({"samples": pre * replicates, "evaluations": pre * replicates * step,
                         "indices": {p: {"S1": float(c1[j]), "S1_ci": [float(l1[j]), float(h1[j])],
                                         "ST": float(ct[j]), "ST_ci": [float(lt[j]), float(ht[j])]}
                                     for j, p in enumerate(problem.players)}})
    warnings += _index_warnings(indices, ("S1", "ST"))
    return indices, S2d, conv, warnings, nan_draws


def widest_half_width(indices: dict[str, dict[str, Any]], keys: Sequence[str] = ("S1", "ST"),
                      replicates: int = REPLICATES) -> tuple[float, str]:
    """The widest 95% half-width t_{0.975, R-1} x se among the headline indices, and which index it is.

    Parameters
    ----------
    indices : dict
        Per input, the indices and their replicate standard errors ``<key>_se`` (dimensionless).
    keys : sequence of str
        The headline indices (Sobol': ``S1`` and ``ST``).
    replicates : int
        Number of independent replicates R behind each standard error.

    Returns
    -------
    tuple of (float, str)
        The half-width (dimensionless; inf when a standard error is not finite) and ``"<key> of <input>"``.
    """
    t = _t975(replicates - 1)
    worst, where = -1.0, ""
    for p, ix in indices.items():
        for key in keys:
            se = ix.get(f"{key}_se", float("nan"))
            h = t * se if np.isfinite(se) else float("inf")
            if h > worst:
                worst, where = h, f"{key} of {p}"
    return worst, where


def _check_tol(tol: float | None, max_samples: int | None, start: int) -> int:
    """The cap on base points for the ``tol`` doubling (default :data:`DEFAULT_MAX_SAMPLES`, never below
    the start); InputError for a tolerance or cap that cannot be met."""
    if tol is not None and (isinstance(tol, bool) or not isinstance(tol, int | float | np.floating)
                            or not math.isfinite(tol) or not tol > 0):
        raise InputError("the tolerance must be a positive number", key="tol", value=tol)
    if max_samples is None:
        return max(DEFAULT_MAX_SAMPLES, start)
    if isinstance(max_samples, bool) or not isinstance(max_samples, int | np.integer) or max_samples < start:
        raise InputError(f"max-samples is below the starting sample size {start}", key="max_samples",
                         value=max_samples)
    return int(max_samples)


def sobol_core(problem: Problem, samples: int = 8192, *, seed: Any = None, replicates: int = REPLICATES,
               second_order: bool = False, convergence: bool = True, tol: float | None = None,
               max_samples: int | None = None) -> SensitivityResult:
    """Sobol' first-order and total indices (and optionally second order) of ``problem``.

    Parameters
    ----------
    problem : Problem
        Independent inputs only (correlated ones are refused).
    samples : int
        Base points N over all replicates (total model runs N (D + 2), or N (2D + 2) with second order).
        R scrambled Saltelli designs of N / R points each (a power of two, rounded up with a note) give
        the point estimate (pooled) and a t-based 95% interval (spread across replicates). Base points
        where any run is not finite are dropped and counted.
    seed : int or SeedSequence, optional
        Seed of the R scrambles.
    replicates : int
        Independent scrambles R.
    second_order : bool
        Also the second-order indices.
    convergence : bool
        Re-analyse the prefixes of each design (doubling sizes) for the convergence table.
    tol : float, optional
        Precision on demand (dimensionless, absolute): the base sample doubles, each design extended by its
        next points (a scrambled Sobol' design's first N points are the design of size N, so no run is
        repeated), until the 95% half-width t_{0.975, R-1} x se of every S1 and ST is below ``tol``.
    max_samples : int, optional
        Cap on the base points for the doubling (default :data:`DEFAULT_MAX_SAMPLES`).

    Returns
    -------
    SensitivityResult
        With ``tol``: ``converged`` and a ``history`` row per size (samples, evaluations, widest
        half-width and which index it is).

    Raises
    ------
    InputError
        Correlated inputs, a bad sample size, tolerance or cap.
    QualityGateError
        ``tol`` still not met when the next doubling would exceed ``max_samples`` (exit 3; the result,
        flagged, is attached).
    """
    from SALib.sample import sobol as sobol_sample

    _refuse_correlated(problem, "Sobol'")
    notes: list[str] = []
    per = _per_replicate_size(samples, replicates, notes, "sensitivity.samples")
    cap = _check_tol(tol, max_samples, per * replicates)
    D = len(problem.players)
    salib = {"num_vars": problem.k, "names": [f"c{c}" for c in range(problem.k)],
             "bounds": [[0.0, 1.0]] * problem.k}
    if D != problem.k:
        salib["groups"] = [problem.players[g] for g in problem.groups]
    step = 2 * D + 2 if second_order else D + 2
    seeds = replicate_seeds(seed, replicates)

    def design(n: int) -> np.ndarray:
        """The R scrambled designs of n base points each, (R, n, runs per point, k). Each call seeds from
        unspent copies of the replicate seeds (the sampler spawns from the seed it is given), so the same
        scrambles come back and a larger design starts with the smaller one."""
        return np.stack([sobol_sample.sample(salib, n, calc_second_order=second_order, scramble=True,
                                             seed=np.random.default_rng(np.random.SeedSequence(
                                                 s.entropy, spawn_key=s.spawn_key, pool_size=s.pool_size))
                                             ).reshape(n, step, problem.k)
                         for s in seeds])

    Y = np.empty((replicates, 0, step))
    history: list[dict[str, Any]] = []
    converged: bool | None = None
    worst, where = float("nan"), ""
    while True:
        X = design(per)[:, Y.shape[1]:]  # only the new base points of each design
        new = problem.evaluate_cube(open_cube(X.reshape(-1, problem.k)))
        Y = np.concatenate([Y, new.reshape(replicates, -1, step)], axis=1)
        if tol is None:
            break
        indices, *_ = _sobol_fit(problem, Y, second_order, convergence=False)
        worst, where = widest_half_width(indices, replicates=replicates)
        history.append({"samples": per * replicates, "evaluations": int(Y.size), "widest_half_width": worst,
                        "widest": where})
        if worst < tol:
            converged = True
            break
        if 2 * per * replicates > cap:
            converged = False
            break
        per *= 2
    indices, S2d, conv, warnings, nan_draws = _sobol_fit(problem, Y, second_order, convergence)
    if tol is not None:
        notes.append(f"tolerance {tol:g} on the 95% half-width of every S1 and ST "
                     + (f"met at {per * replicates} base samples" if converged else
                        f"NOT met: the cap max-samples={cap} stopped the doubling at {per * replicates} base "
                        f"samples (widest half-width {worst:.3g}, {where})"))
    result = SensitivityResult(method="sobol", output=problem.output, unit=problem.unit,
                               players=list(problem.players), indices=indices,
                               ranking=_ranking(indices, "ST"), samples=per * replicates,
                               evaluations=int(Y.size), replicates=replicates, convergence=conv,
                               second_order=S2d, warnings=warnings, notes=notes, nan_draws=nan_draws,
                               seed=seed if isinstance(seed, int | type(None)) else str(seed),
                               tol=tol, converged=converged, history=history)
    if converged is False:
        raise QualityGateError(
            f"95% half-width of {where} ({worst:.3g}) is still above tol={tol:g} at {per * replicates} base "
            f"samples; the next doubling would exceed max-samples={cap}", result=result)
    return result


# --------------------------------------------------------------------------------------------
# Morris
# --------------------------------------------------------------------------------------------

def morris_levels_inside(u: np.ndarray, levels: int) -> np.ndarray:
    """Map SALib's Morris grid {0, 1/(p-1), ..., 1} to cell centres {(i + 1/2)/p}, inside (0, 1)."""
    return (np.round(u * (levels - 1)) + 0.5) / levels


def morris_trajectories(problem: Problem, trajectories: int, levels: int, seed: int) -> np.ndarray:
    """Morris trajectories over the players on the cube's p-level grid, one row per run.

    SALib's one-at-a-time trajectories over the players (Morris 1991, as SALib samples them); a player
    with several columns (a quantity's typical value and its between-subject score, both raising the
    individual's value) moves all of them together *in the same direction*, so that its signed
    elementary effect, mu and sigma are defined. Its other columns start from levels drawn in the same
    half of the grid as the first (each column's marginal stays uniform over the levels).
    """
    from SALib.sample import morris as morris_sample

    G = len(problem.players)
    spec = {"num_vars": G, "names": list(problem.players), "bounds": [[0.0, 1.0]] * G}
    Xp = morris_sample.sample(spec, trajectories, num_levels=levels, seed=seed)
    first = {g: problem.groups.index(g) for g in range(G)}
    if len(problem.groups) == G:
        return Xp[:, problem.groups]
    rng = np.random.default_rng(seed)
    Xp3 = Xp.reshape(trajectories, G + 1, G)
    X = np.empty((trajectories, G + 1, problem.k))
    half = levels // 2
    for c, g in enumerate(problem.groups):
        moves = Xp3[:, :, g] - Xp3[:, :1, g]  # each trajectory's one move of player g (0 before it)
        if c == first[g]:
            X[:, :, c] = Xp3[:, :, g]
            continue
        lower = np.round(Xp3[:, 0, g] * (levels - 1)) < half  # the first column starts in the lower half
        start = rng.integers(0, half, trajectories) + np.where(lower, 0, half)
        X[:, :, c] = start[:, None] / (levels - 1) + moves
    return X.reshape(-1, problem.k)


def _elementary_effects(problem: Problem, X: np.ndarray, Y: np.ndarray, steps: int) -> np.ndarray:
    """Signed elementary effects (trajectories, players): the output change over the player's signed step,
    in output units per unit of the cube."""
    T = X.shape[0] // steps
    X3, Y2 = X.reshape(T, steps, -1), Y.reshape(T, steps)
    first = [problem.groups.index(g) for g in range(len(problem.players))]
    dX = np.diff(X3[:, :, first], axis=1)  # (T, steps - 1, players): one non-zero per step
    dY = np.diff(Y2, axis=1)
    moved = np.argmax(np.abs(dX), axis=2)
    ee = np.empty((T, len(first)))
    rows = np.arange(T)[:, None]
    ee[rows, moved] = dY / dX[rows, np.arange(steps - 1)[None, :], moved]
    return ee


def _halvings(n: int, smallest: int = 4, most: int = 6) -> list[int]:
    """Doubling sizes ending at ``n`` (n, n/2, n/4, ... down to ``smallest``, at most ``most``), ascending:
    the prefixes a convergence table re-analyses."""
    sizes = []
    while n >= smallest and len(sizes) < most:
        sizes.append(n)
        n //= 2
    return sizes[::-1]


def morris_core(problem: Problem, trajectories: int = 64, *, seed: Any = None,
                levels: int = MORRIS_LEVELS, tol: float | None = None,
                max_samples: int | None = None) -> SensitivityResult:
    """Morris screening: mu*, sigma and mu per player (output units per unit of the cube).

    SALib's trajectories on a p-level grid, the levels moved to cell centres inside the open cube;
    the elementary effects are rescaled to the moved step (p/(p-1) times SALib's). mu* intervals are
    SALib's bootstrap over the independent trajectories; the convergence table re-analyses the
    first T/2^k trajectories (at least 4). Refuses correlated inputs (InputError).

    ``tol`` (dimensionless, relative): precision on demand, the trajectories double (a new design of
    twice the size each time) until the widest mu* half-width is below ``tol`` times the largest mu*;
    ``max_samples`` caps the trajectories (default :data:`DEFAULT_MAX_SAMPLES`). When the cap comes
    first, QualityGateError (exit 3) carries the flagged result.
    """
    cap = _check_tol(tol, max_samples, trajectories if isinstance(trajectories, int) else 0)
    history: list[dict[str, Any]] = []
    while True:
        res = _morris_once(problem, trajectories, seed=seed, levels=levels)
        if tol is None:
            return res
        top = max(ix["mu_star"] for ix in res.indices.values())
        worst, where = max(((ix["mu_star_ci"][1] - ix["mu_star"]) / top if top > 0 else float("inf"), p)
                           for p, ix in res.indices.items())
        history.append({"samples": int(trajectories), "evaluations": res.evaluations,
                        "widest_half_width": float(worst), "widest": f"mu_star of {where}"})
        converged = bool(worst < tol)
        if converged or 2 * trajectories > cap:
            break
        trajectories *= 2
    res.tol, res.converged, res.history = tol, converged, history
    res.evaluations = sum(h["evaluations"] for h in history)
    res.notes.append(f"tolerance {tol:g} on the widest mu* half-width over the largest mu* "
                     + (f"met at {trajectories} trajectories" if converged else
                        f"NOT met: the cap max-samples={cap} stopped the doubling at {trajectories} "
                        f"trajectories (widest {worst:.3g} of the largest mu*, {where})"))
    if not converged:
        raise QualityGateError(f"the mu* half-width of {where} is still {worst:.3g} of the largest mu*, above "
                               f"tol={tol:g}, at {trajectories} trajectories; the next doubling would exceed "
                               f"max-samples={cap}", result=res)
    return res


def _morris_once(problem: Problem, trajectories: int, *, seed: Any, levels: int) -> SensitivityResult:
    """One Morris design of ``trajectories`` trajectories, analysed (see :func:`morris_core`)."""
    from SALib.analyze import morris as morris_analyze

    _refuse_correlated(problem, "Morris")
    if isinstance(trajectories, bool) or not isinstance(trajectories, int | np.integer) or trajectories < 2:
        raise InputError("Morris needs at least 2 trajectories", key="sensitivity.samples",
                         value=trajectories)
    if levels < 2 or levels % 2:
        raise InputError("Morris levels must be an even number >= 2", key="sensitivity.levels", value=levels)
    salib = {"num_vars": problem.k, "names": [f"c{c}" for c in range(problem.k)],
             "bounds": [[0.0, 1.0]] * problem.k}
    if len(problem.players) != problem.k:
        salib["groups"] = [problem.players[g] for g in problem.groups]
    rng_seed = int(np.random.SeedSequence(seed).generate_state(1)[0])
    X = morris_trajectories(problem, int(trajectories), levels, rng_seed)
    Y = problem.evaluate_cube(morris_levels_inside(X, levels))
    bad = ~np.isfinite(Y)
    if bad.any():
        raise InputError(f"{int(bad.sum())} Morris runs gave a non-finite {problem.output}; Morris "
                         "trajectories cannot drop runs", key="sensitivity.output", value=problem.output)
    scale = levels / (levels - 1)
    steps = len(problem.players) + 1  # runs per trajectory
    effects = _elementary_effects(problem, X, Y, steps)  # (trajectories, players), per unit of the cube

    def analyse(t: int) -> dict[str, dict[str, Any]]:
        """mu*, its bootstrap interval (SALib), sigma and mu from the first t trajectories."""
        Si = morris_analyze.analyze(salib, X[: t * steps], Y[: t * steps], num_levels=levels, seed=rng_seed)
        names = list(Si["names"])
        ee = effects[:t] * scale
        out = {}
        for j, p in enumerate(problem.players):
            ms = float(np.mean(np.abs(ee[:, j])))
            conf = float(Si["mu_star_conf"][names.index(p) if p in names else j]) * scale
            out[p] = {"mu_star": ms, "mu_star_ci": [ms - conf, ms + conf],
                      "sigma": float(np.std(ee[:, j], ddof=1)) if t > 1 else None, "mu": float(np.mean(ee[:, j]))}
        return out

    indices = analyse(int(trajectories))
    # convergence: the first T/2^k trajectories (doubling sizes, at least 4 trajectories each)
    sizes = _halvings(int(trajectories))
    conv = [{"samples": t, "evaluations": t * steps, "indices": analyse(t)} for t in sizes] \
        if len(sizes) > 1 else []
    return SensitivityResult(method="morris", output=problem.output, unit=problem.unit,
                             players=list(problem.players), indices=indices,
                             ranking=_ranking(indices, "mu_star"), samples=int(trajectories),
                             evaluations=int(Y.size), replicates=1, convergence=conv,
                             notes=["Morris elementary effects are in output units per unit of the "
                                    "cube (per quantile step), a screening measure, not a variance share"],
                             seed=seed if isinstance(seed, int | type(None)) else str(seed))


# --------------------------------------------------------------------------------------------
# Shapley effects (Song, Nelson & Staum 2016)
# --------------------------------------------------------------------------------------------

def _chain_design(problem: Problem, per: int, rng: np.random.Generator) -> tuple[np.ndarray, np.ndarray]:
    """One replicate of the random-permutation estimator along a coupled chain (d + 1 runs per order).

    For a random order pi of the players, two independent innovation vectors u, u' ~ N(0, I) and the
    Cholesky factor L of the correlation with its columns in that order, run m (m = 0..d) is the model
    at z = L [u over the columns of the first m players, u' over the rest]. As L is lower triangular,
    run m keeps the first m players of the base run d and redraws the others exactly from their
    Gaussian conditional given them, and runs m - 1 and m differ in one player's innovations only.
    The increment of the closed cost Var(E[Y | X_J]) when player pi_m joins is then estimated by
    0.5 [(y_d - y_{m-1})^2 - (y_d - y_m)^2] (a Jansen-type difference), which telescopes to
    0.5 (y_d - y_0)^2, an estimate of Var(Y), in every order: the effects sum to one exactly. This is
    the estimator of Goda (2021, Reliab Eng Syst Safety 213:107702) for independent inputs, carried to
    a Gaussian copula by ordering the Cholesky factor along the permutation. The full first-order index
    of i comes from the orders that start with i (first increment), the total index from those that end
    with i (last increment).

    Returns the points of the runs, (per * (d + 1), k), and the orders, (per, d); :func:`_chain_sums` turns
    the model's outputs at those points into the replicate's sums.
    """
    d, k = len(problem.players), problem.k
    perms = np.argsort(rng.random((per, d)), axis=1)  # uniform random orders
    groups = np.asarray(problem.groups)
    # column order of each permutation, and the step m (1..d) at which each column's player joins
    rank = np.empty_like(perms)
    rank[np.arange(per)[:, None], perms] = np.arange(1, d + 1)
    joins = rank[:, groups]  # (per, k): the step at which column c's player joins
    order = np.argsort(joins, axis=1, kind="stable")  # columns in permutation order
    C = problem.corr[order[:, :, None], order[:, None, :]]
    try:
        L = np.linalg.cholesky(C)
    except np.linalg.LinAlgError as exc:
        raise InputError("correlation matrix is not positive definite", key="correlations") from exc
    u = rng.standard_normal((per, k))
    u2 = rng.standard_normal((per, k))
    joins_sorted = np.take_along_axis(joins, order, axis=1)  # (per, k), non-decreasing
    steps = np.arange(d + 1)
    # innovations of run m: u where the column's player joined by step m, else u'
    w = np.where(joins_sorted[:, None, :] <= steps[None, :, None], u[:, None, :], u2[:, None, :])
    z_sorted = np.einsum("pij,pmj->pmi", L, w)  # (per, d + 1, k)
    z = np.empty_like(z_sorted)
    z[np.arange(per)[:, None, None], steps[None, :, None], order[:, None, :]] = z_sorted
    return z.reshape(-1, k), perms


def _chain_sums(y: np.ndarray, perms: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Sums of one batch of :func:`_chain_design` orders from the model's outputs ``y`` (per * (d + 1),),
    so that batches add up: (5, d) per player (the increments, the first increments and their count per
    starting player, the last increments and their count per ending player) and (4,) totals (sum of
    0.5 (y_d - y_0)^2, finite orders, non-finite runs, runs)."""
    per, d = perms.shape
    y = np.asarray(y, dtype=float).reshape(per, d + 1)
    ok = np.all(np.isfinite(y), axis=1)
    bad = int((~np.isfinite(y)).sum())
    y, perms = y[ok], perms[ok]
    gap = 0.5 * (y[:, -1:] - y) ** 2  # 0.5 (y_d - y_m)^2, m = 0..d
    inc = gap[:, :-1] - gap[:, 1:]  # increment of player pi_m, m = 1..d
    sums = np.zeros((5, d))
    np.add.at(sums[0], perms, inc)
    np.add.at(sums[1], perms[:, 0], inc[:, 0])
    np.add.at(sums[2], perms[:, 0], 1.0)
    np.add.at(sums[3], perms[:, -1], inc[:, -1])
    np.add.at(sums[4], perms[:, -1], 1.0)
    return sums, np.array([gap[:, 0].sum(), len(y), bad, per * (d + 1)])


def shapley_core(problem: Problem, samples: int = 8192, *, seed: Any = None, replicates: int = REPLICATES,
                 tol: float | None = None, max_samples: int | None = None) -> SensitivityResult:
    """Shapley effects Sh_i = sum over J not containing i of |J|!(d-|J|-1)!/d! [v(J+i) - v(J)] / Var(Y)
    (Owen 2014; Song, Nelson & Staum 2016), with the full first-order index S1_i = Var(E[Y | X_i]) / V
    and the total index ST_i = E[Var(Y | X_-i)] / V under the correlation.

    Parameters
    ----------
    problem : Problem
        Inputs under any Gaussian-copula correlation (positive definite).
    samples : int
        Random orders of the players over all replicates, d + 1 model runs each (see
        :func:`_chain_design`).
    seed : int or SeedSequence, optional
        Seed of the R replicates.
    replicates : int
        Independent replicates R: point = their mean, t-based 95% interval from their spread; the
        convergence table uses the first R/4, R/2 and R replicates.
    tol : float, optional
        Precision on demand (dimensionless, absolute): each replicate adds as many new orders again
        (no run is repeated) until the 95% half-width t_{0.975, R-1} x se of every Sh is below ``tol``.
    max_samples : int, optional
        Cap on the orders for the doubling (default :data:`DEFAULT_MAX_SAMPLES`).

    Returns
    -------
    SensitivityResult
        ``Sh``, ``S1`` and ``ST`` per player (dimensionless), their standard errors and intervals; with
        ``tol``, ``converged`` and a ``history`` row per size.

    Raises
    ------
    InputError
        A sample size, tolerance or cap that is not usable, or a correlation that is not positive definite.
    QualityGateError
        ``tol`` still not met when the next doubling would exceed ``max_samples`` (exit 3, result attached).
    """
    if isinstance(samples, bool) or not isinstance(samples, int | np.integer) or samples <= 0:
        raise InputError("the number of samples must be a positive whole number", key="sensitivity.samples",
                         value=samples)
    notes: list[str] = []
    per = max(2, math.ceil(samples / replicates))
    if per * replicates != samples:
        notes.append(f"samples rounded up from {samples} to {per * replicates} ({replicates} replicates)")
    cap = _check_tol(tol, max_samples, per * replicates)
    d = len(problem.players)
    rngs = [np.random.default_rng(ss) for ss in replicate_seeds(seed, replicates)]
    player_sums = np.zeros((replicates, 5, d))
    totals = np.zeros((replicates, 4))
    history: list[dict[str, Any]] = []
    converged: bool | None = None
    done, batch = 0, per
    while True:
        # the replicates' runs go to the model together (up to CHAIN_CALL_ROWS a call), so that an executor
        # has row chunks to spread over its workers
        group: list[tuple[int, np.ndarray, np.ndarray]] = []
        for r, rng in enumerate(rngs):
            group.append((r, *_chain_design(problem, batch, rng)))
            if r == replicates - 1 or sum(len(g[1]) for g in group) >= CHAIN_CALL_ROWS:
                y = problem.model(np.concatenate([g[1] for g in group]))
                at = 0
                for rr, z, perms in group:
                    ps, tot = _chain_sums(y[at:at + len(z)], perms)
                    at += len(z)
                    player_sums[rr] += ps
                    totals[rr] += tot
                group = []
        done += batch
        with np.errstate(invalid="ignore", divide="ignore"):
            V = totals[:, 0] / totals[:, 1]
            Sh_r = player_sums[:, 0] / totals[:, 1:2] / V[:, None]
            S1_r = player_sums[:, 1] / player_sums[:, 2] / V[:, None]
            ST_r = player_sums[:, 3] / player_sums[:, 4] / V[:, None]
        if tol is None:
            break
        se = np.nanstd(Sh_r, axis=0, ddof=1) / math.sqrt(replicates)
        worst_j = int(np.nanargmax(np.where(np.isfinite(se), se, np.inf)))
        worst = _t975(replicates - 1) * float(se[worst_j]) if np.isfinite(se[worst_j]) else float("inf")
        history.append({"samples": done * replicates, "evaluations": int(totals[:, 3].sum()),
                        "widest_half_width": worst, "widest": f"Sh of {problem.players[worst_j]}"})
        if worst < tol:
            converged = True
            break
        if 2 * done * replicates > cap:
            converged = False
            break
        batch = done  # double: as many new orders again
    per = done
    evaluations, nan_runs = int(totals[:, 3].sum()), int(totals[:, 2].sum())

    def summarise(r: int, with_se: bool) -> dict[str, dict[str, Any]]:
        """Indices from the first r replicates: point = their mean, t-based 95% interval."""
        out: dict[str, dict[str, Any]] = {}
        for key, reps in (("Sh", Sh_r[:r]), ("S1", S1_r[:r]), ("ST", ST_r[:r])):
            point = np.nanmean(reps, axis=0)
            se, lo, hi = _replicate_ci(point, reps)
            for j, p in enumerate(problem.players):
                ix = out.setdefault(p, {})
                ix[key], ix[f"{key}_ci"] = float(point[j]), [float(lo[j]), float(hi[j])]
                if with_se:
                    ix[f"{key}_se"] = float(se[j])
        return out

    indices = summarise(replicates, True)
    # convergence: the first R/4, R/2, R replicates (doubling sample sizes, at least 4 replicates each)
    sizes = _halvings(replicates)
    conv = [{"samples": per * r, "evaluations": evaluations // replicates * r, "indices": summarise(r, False)}
            for r in sizes] if len(sizes) > 1 else []
    warnings = _index_warnings(indices, ("Sh",))
    if nan_runs:
        warnings.append(f"{nan_runs} model runs gave a non-finite {problem.output}; the orders they "
                        "belong to are left out")
    notes += negative_index_notes(indices, ("S1", "ST"))
    notes.append("Shapley effects share the variance among correlated inputs and sum to 1; S1 and ST "
                 "here are the full first-order and total indices under the correlation; "
                 f"random-permutation estimator on a coupled chain ({per * replicates} orders)")
    if tol is not None:
        last = history[-1]
        notes.append(f"tolerance {tol:g} on the 95% half-width of every Sh "
                     + (f"met at {per * replicates} orders" if converged else
                        f"NOT met: the cap max-samples={cap} stopped the doubling at {per * replicates} orders "
                        f"(widest half-width {last['widest_half_width']:.3g}, {last['widest']})"))
    result = SensitivityResult(method="shapley", output=problem.output, unit=problem.unit,
                               players=list(problem.players), indices=indices,
                               ranking=_ranking(indices, "Sh"), samples=per * replicates,
                               evaluations=evaluations, replicates=replicates, convergence=conv,
                               warnings=warnings, notes=notes, nan_draws=nan_runs,
                               seed=seed if isinstance(seed, int | type(None)) else str(seed),
                               tol=tol, converged=converged, history=history)
    if converged is False:
        last = history[-1]
        raise QualityGateError(
            f"95% half-width of {last['widest']} ({last['widest_half_width']:.3g}) is still above tol={tol:g} "
            f"at {per * replicates} orders; the next doubling would exceed max-samples={cap}", result=result)
    return result


# --------------------------------------------------------------------------------------------
# Study layer
# --------------------------------------------------------------------------------------------

def _file(study: Any) -> str | None:
    p = getattr(study, "path", None)
    return str(p) if p else None


def sensitivity(study: Any, method: str | None = None, samples: int | None = None, output: str | None = None,
                seed: int | None = None, *, layer: str | None = None, second_order: bool | None = None,
                evaluate: Callable | None = None, replicates: int = REPLICATES,
                executor: Any = None, tol: float | None = None,
                max_samples: int | None = None) -> SensitivityResult:
    """Global sensitivity of one study output (default Jv) to the study's quantities.

    Arguments override the study's ``[sensitivity]`` section (``method``, ``samples``, ``output``,
    ``layer``, ``second_order``). Without a method: Sobol' for independent inputs, Shapley when the
    study correlates inputs (with a note). Sobol' or Morris on correlated inputs refuse
    (InputError, exit 2). ``layer`` ``individual`` (default) treats each quantity's typical and
    between-subject parts as one factor; ``typical`` uses the typical-subject uncertainty only.
    ``executor`` (:mod:`uncertainty.core.parallel`, default in-process): the model runs go through it
    in row chunks of a fixed size (the samples are drawn here and the split never depends on the
    executor, so the numbers are identical in-process and on any number of workers).
    ``tol`` (dimensionless) and ``max_samples``: precision on demand as in :func:`sobol_core` (absolute,
    on S1 and ST), :func:`shapley_core` (absolute, on Sh) and :func:`morris_core` (relative to the largest
    mu*); QualityGateError (exit 3, the result attached) when the cap stops the doubling first.
    """
    sec = section_settings(study, "sensitivity")
    method = method or sec.get("method")
    output = output or sec.get("output") or "Jv"
    layer = layer or sec.get("layer") or "individual"
    second_order = sec.get("second_order", False) if second_order is None else second_order
    seed = getattr(study, "seed", None) if seed is None else seed
    if layer not in ("individual", "typical"):
        raise InputError("layer must be individual or typical", file=_file(study), key="sensitivity.layer",
                         value=layer)
    point = parse_time_endpoint(output, getattr(study, "timeline", None), file=_file(study),
                                key="sensitivity.output", over_time=True)
    replay: _Replay | None = None
    if point is not None and point.time_min is None:  # "NAME over time": one set of runs, indices per time
        problem = problem_from_study(study, output=f"{point.name} at {study.timeline.end:g} min", layer=layer)
        replay = _Replay(ChunkedModel(_course_model(study, point.name, layer), executor or InProcess(),
                                      label="sensitivity"), over_time_indices(study.timeline))
        problem = replace(problem, output=output, model=replay.column(0))
    else:
        problem = problem_from_study(study, output=output, layer=layer, evaluate=evaluate)
        # model runs in fixed row chunks through the executor (also in-process: a matrix product's last
        # bits depend on the rows it is given, so every executor sees the same chunks)
        problem = replace(problem, model=ChunkedModel(problem.model, executor or InProcess(), label="sensitivity"))
    notes = []
    if method is None:
        method = "sobol" if problem.independent() else "shapley"
        if method == "shapley":
            notes.append("the study correlates inputs, so Shapley effects are computed (Sobol' indices "
                         "assume independence)")
    if method not in METHODS:
        raise InputError(f"unknown method; use one of {', '.join(METHODS)}", file=_file(study),
                         key="sensitivity.method", value=method)
    if samples is None:
        samples = sec.get("samples", DEFAULT_SAMPLES[method])
    if replay is not None and (tol is not None or max_samples is not None):
        raise InputError("a tolerance (tol, max-samples) is not offered over time; give a sample size",
                         file=_file(study), key="sensitivity.output", value=output)

    def run(prob: Problem) -> SensitivityResult:
        if method == "sobol":
            return sobol_core(prob, samples, seed=seed, replicates=replicates, second_order=second_order,
                              tol=tol, max_samples=max_samples, convergence=replay is None)
        if method == "morris":
            return morris_core(prob, samples, seed=seed, levels=sec.get("levels", MORRIS_LEVELS), tol=tol,
                               max_samples=max_samples)
        return shapley_core(prob, samples, seed=seed, replicates=replicates, tol=tol, max_samples=max_samples)

    try:
        res = run(problem)
        if replay is not None:
            res = _over_time(res, replay, problem, float(study.timeline.report_every), run)
    except QualityGateError as exc:
        if isinstance(exc.result, SensitivityResult):
            _finish(exc.result, notes, layer, study)
        raise
    except InputError as exc:
        if exc.file is None and _file(study):
            raise InputError(exc.reason, file=_file(study), key=exc.key, value=exc.value) from exc
        raise
    return _finish(res, notes, layer, study)


#: Most report times at which ``NAME over time`` gives indices (every k-th report time, the last one always).
MAX_TIMES = 24


def over_time_indices(plan: Any) -> list[int]:
    """Which report times (indices into the times after 0) ``NAME over time`` analyses: every k-th, at most
    :data:`MAX_TIMES`, ending with the timeline's last.

    Parameters
    ----------
    plan : TimelinePlan
        The study's timeline (``end``, ``report_every`` in min).

    Returns
    -------
    list of int
    """
    n = max(1, math.ceil(plan.end / plan.report_every - 1e-9))
    k = math.ceil(n / MAX_TIMES)
    return list(range(n - 1, -1, -k))[::-1]


def _course_model(study: Any, name: str, layer: str) -> Callable[[np.ndarray], np.ndarray]:
    """Normal scores (n, k) -> the time course ``name`` at every report time after 0, (n, times)."""
    def model(z: np.ndarray) -> np.ndarray:
        return values_over_time(study, name, from_scores(study, z, layer))[1]

    return model


class _Replay:
    """One set of model runs for every report time: the first pass (column 0) evaluates the whole time course
    and keeps it, and the later passes, which draw the same points in the same order (same seed), read their
    column from what was kept (refused if the points differ)."""

    def __init__(self, full: Callable[[np.ndarray], np.ndarray], columns: list[int]) -> None:
        self.full, self.columns = full, columns
        self.kept: list[tuple[tuple[int, ...], int, np.ndarray]] = []
        self.pos = 0

    def column(self, j: int) -> Callable[[np.ndarray], np.ndarray]:
        """The model at the ``j``-th analysed time (0: evaluate and keep)."""
        self.pos = 0
        col = self.columns[j]

        def model(z: np.ndarray) -> np.ndarray:
            z = np.asarray(z)
            if j == 0:
                Y = np.asarray(self.full(z), dtype=float)
                self.kept.append((z.shape, hash(z.tobytes()), Y[:, self.columns]))
                return Y[:, col]
            shape, h, Y = self.kept[self.pos]
            self.pos += 1
            if shape != z.shape or h != hash(z.tobytes()):
                raise RuntimeError("sensitivity over time: the design was not drawn again in the same order")
            return Y[:, j]

        return model


def _over_time(first: SensitivityResult, replay: _Replay, problem: Problem, every: float,
               run: Callable[[Problem], SensitivityResult]) -> SensitivityResult:
    """The indices at every analysed report time (``over_time`` of the result: ``times_min``, ``key`` and per
    player each index and its interval per time); the headline indices are those at the last time."""
    results = [first] + [run(replace(problem, model=replay.column(j))) for j in range(1, len(replay.columns))]
    last = results[-1]
    keys = [k for k in ("S1", "ST", "Sh", "mu_star") if k in next(iter(last.indices.values()))]
    series: dict[str, dict[str, list[Any]]] = {}
    for p in last.players:
        series[p] = {}
        for key in keys:
            series[p][key] = [r.indices[p][key] for r in results]
            series[p][f"{key}_ci"] = [r.indices[p].get(f"{key}_ci") for r in results]
    times = [(c + 1) * every for c in replay.columns]
    last.over_time = {"times_min": times, "key": last.rank_key, "indices": series}
    last.warnings = sorted({w for r in results for w in r.warnings})
    last.notes.append(f"indices at {len(times)} report times from {times[0]:g} to {times[-1]:g} min on one set of "
                      f"model runs; the table and ranking are those at {times[-1]:g} min")
    return last


def _finish(res: SensitivityResult, notes: list[str], layer: str, study: Any) -> SensitivityResult:
    """The study-level notes, layer and study record added to a core result."""
    res.notes = notes + res.notes
    res.layer = layer
    res.study = study_meta(study)
    return res
