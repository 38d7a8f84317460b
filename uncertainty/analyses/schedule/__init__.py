"""Measurement schedule for the venous-cuff protocol: which cuff pressures and which K reading times.

The limb-volume time course after cumulative cuff steps is ``physiology.interstitium.volume_time_course``
(linear tissue, closed form), a function of Kf, C_tis, L, the venous compliance C_v, the resting
venous pressure Pv0, the venous filling time constant tau_v and r = Rv/Ra. Readings are
y_j = V(t_j) + e_j with e_j ~ N(0, noise_sd^2). For a schedule (cuff pressure of each step, reading
times) the linearised (Laplace) posterior covariance of the parameters phi is

    Sigma_post = (J^T J / noise_sd^2 + Sigma_prior^{-1})^{-1},    J = dV(t_j)/dphi

(the Fisher information of the readings plus the prior precision: Bayesian optimal design, Chaloner
& Verdinelli 1995, Statistical Science 10:273). phi is log for positive (lognormal / gamma) priors and
the value itself otherwise; the prior moments of phi are those of the study's individual (typical
uncertainty and between-subject spread). J is taken by central finite differences at
``linearisation_draws`` points (the prior median and further prior draws) and the criterion is
averaged over them (pseudo-Bayesian design), so "expected posterior sd" is an average over the prior.

Pvi: in this linear model the limb is at steady state before the first step and the cuff changes
nothing below Pv0 / transmission, so the slow-phase slope is Kf (T P_cuff - Pv0) / (1 + r) and its
zero, the isovolumetric venous pressure, is Pv0: sd(Pvi) is the posterior sd of Pv0 (the resting
venous pressure, prior ``Pv``).

Criteria over the targets (Kf, Pvi): ``A`` = mean over the linearisation points of
sum_k Var_post(phi_k) / Var_prior(phi_k) (prior-standardised trace, Bayesian A-optimal);
``D`` = mean of log det of the targets' posterior block over the prior block (Bayesian D_s-optimal).

Search: reading times by greedy forward selection on the time grid followed by exchange (Fedorov
style: swap a chosen time for an unchosen one while the criterion falls), started both from the
greedy set and from equal spacing; cuff pressures by coordinate exchange over the pressure grid (one
step at a time, times re-optimised for each trial value), started from the equal-spacing protocol.
Every move is accepted only when it lowers the criterion, so the result is never worse than equal
spacing. :func:`brute_force` enumerates a small grid exactly (for checks).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from uncertainty.analyses.schedule.result import ScheduleResult
from uncertainty.core.errors import InputError
from uncertainty.physiology.interstitium import volume_time_course
from uncertainty.priors import load_prior_set, parse_prior
from uncertainty.study import ScheduleSection

#: parameters of the linear cuff model, in the order of phi
PARAMS = ("Kf", "C_tis", "L", "C_v", "Pv", "r", "tau_v")
#: the study quantity behind each target
TARGETS = {"Kf": "Kf", "Pvi": "Pv"}
_FD_STEP = 1e-5


# --------------------------------------------------------------------------------------------
# generic linearised Bayesian design core


def jacobian(forward: Callable[[np.ndarray], np.ndarray], phi: np.ndarray, step: float = _FD_STEP) -> np.ndarray:
    """Central finite-difference Jacobian of ``forward`` at ``phi``.

    ``forward`` maps (M, p) parameter points to (M, G) predictions; returns (M, G, p), in the
    predictions' unit per unit of phi. Steps are ``step * max(1, |phi|)``.
    """
    phi = np.atleast_2d(np.asarray(phi, dtype=float))
    M, p = phi.shape
    cols = []
    for k in range(p):
        h = step * np.maximum(1.0, np.abs(phi[:, k]))
        up, dn = phi.copy(), phi.copy()
        up[:, k] += h
        dn[:, k] -= h
        cols.append((forward(up) - forward(dn)) / (2.0 * h[:, None]))
    return np.stack(cols, axis=-1)


def posterior_cov(info: np.ndarray, prior_prec: np.ndarray) -> np.ndarray:
    """Linearised posterior covariance (info + prior precision)^{-1}; info (..., p, p), prior_prec (p, p)."""
    return np.linalg.inv(info + prior_prec)


def information(J: np.ndarray, noise_sd: float) -> np.ndarray:
    """Per-reading Fisher information J_j^T J_j / noise_sd^2: (M, G, p) -> (M, G, p, p)."""
    return np.einsum("mgi,mgj->mgij", J, J) / noise_sd**2


@dataclass(frozen=True)
class Criterion:
    """Design criterion over target indices ``idx`` of phi: ``A`` or ``D`` (see the module docstring)."""

    kind: str
    idx: tuple[int, ...]
    prior_cov: np.ndarray

    def __call__(self, cov: np.ndarray) -> np.ndarray:
        """Criterion of posterior covariances (..., M, p, p), averaged over M: shape (...)."""
        ix = np.array(self.idx)
        if self.kind == "A":
            ratio = np.diagonal(cov, axis1=-2, axis2=-1)[..., ix] / np.diag(self.prior_cov)[ix]
            return ratio.sum(axis=-1).mean(axis=-1)
        block = cov[..., ix[:, None], ix[None, :]]
        _, logdet = np.linalg.slogdet(block)
        _, logdet0 = np.linalg.slogdet(self.prior_cov[np.ix_(ix, ix)])
        return (logdet - logdet0).mean(axis=-1)


def select_times(O: np.ndarray, K: int, prior_prec: np.ndarray, crit: Criterion,
                 start: Sequence[int] | None = None, max_passes: int = 50) -> tuple[list[int], float]:
    """K distinct reading indices on the grid minimising ``crit``: greedy, then exchange.

    ``O``: per-reading information (M, G, p, p). With ``start`` the exchange also runs from that set
    and the better result is returned. Returns (sorted indices, criterion value).
    """
    M, G = O.shape[:2]
    if K > G:
        raise InputError("more readings than grid times", key="schedule.measurements", value=K)
    Ot = np.moveaxis(O, 1, 0)  # (G, M, p, p)

    def value(info: np.ndarray) -> np.ndarray:
        return crit(posterior_cov(info, prior_prec))

    def exchange(chosen: list[int]) -> tuple[list[int], float]:
        chosen = list(chosen)
        info = Ot[chosen].sum(axis=0)
        best = float(value(info[None])[0])
        for _ in range(max_passes):
            improved = False
            for pos in range(K):
                others = np.setdiff1d(np.arange(G), chosen)
                if others.size == 0:
                    break
                trial = info[None] - Ot[chosen[pos]][None] + Ot[others]
                vals = value(trial)
                j = int(np.argmin(vals))
                if vals[j] < best - 1e-12 * max(1.0, abs(best)):
                    info = trial[j]
                    best = float(vals[j])
                    chosen[pos] = int(others[j])
                    improved = True
            if not improved:
                break
        return sorted(chosen), best

    chosen: list[int] = []
    info = np.zeros_like(Ot[0])
    for _ in range(K):
        others = np.setdiff1d(np.arange(G), chosen)
        vals = value(info[None] + Ot[others])
        j = int(others[int(np.argmin(vals))])
        chosen.append(j)
        info = info + Ot[j]
    results = [exchange(chosen)]
    if start is not None:
        results.append(exchange(list(start)))
    return min(results, key=lambda r: r[1])


# --------------------------------------------------------------------------------------------
# the cuff model


@dataclass
class CuffModel:
    """Linearised venous-cuff protocol: prior moments of phi, linearisation points, fixed settings.

    ``names``: parameters in phi order; ``log``: which are on the log scale; ``prior_mean`` /
    ``prior_cov``: moments of phi; ``points``: (M, p) linearisation points (phi); ``step_min``:
    duration of each cuff step (min); ``transmission``: cuff -> venous pressure.
    """

    names: tuple[str, ...]
    log: np.ndarray
    prior_mean: np.ndarray
    prior_cov: np.ndarray
    points: np.ndarray
    step_min: float
    transmission: float
    origins: dict[str, str] = field(default_factory=dict)

    def values(self, phi: np.ndarray) -> dict[str, np.ndarray]:
        """phi (M, p) -> parameter values (canonical units), each (M, 1)."""
        out = {}
        for k, n in enumerate(self.names):
            v = phi[:, k]
            out[n] = (np.exp(v) if self.log[k] else v)[:, None]
        return out

    def forward(self, pressures: Sequence[float], times: np.ndarray) -> Callable[[np.ndarray], np.ndarray]:
        """phi (M, p) -> limb volume change (mL per basis) at ``times`` (min), (M, G)."""

        steps = [k * self.step_min for k in range(len(pressures))]
        t = np.asarray(times, dtype=float)[None, :]

        def f(phi: np.ndarray) -> np.ndarray:
            v = self.values(phi)
            return volume_time_course(t, steps, [float(p) for p in pressures], v["Kf"], v["C_tis"], v["L"],
                                      v["C_v"], Pv0=v["Pv"], tau_v=v["tau_v"], r=v["r"],
                                      transmission=self.transmission) * np.ones_like(t)
        return f

    def information(self, pressures: Sequence[float], times: np.ndarray, noise_sd: float) -> np.ndarray:
        """Per-reading Fisher information at every linearisation point: (M, G, p, p)."""
        return information(jacobian(self.forward(pressures, times), self.points), noise_sd)


def _moments(prior: Any, rng: np.random.Generator, n: int) -> tuple[bool, np.ndarray]:
    """(log scale?, individual-level draws on that scale) of a Prior (typical + between-subject layer)."""
    typ = np.asarray(prior.frozen().rvs(size=n, random_state=rng), dtype=float)
    ind = np.asarray(prior.individual(typ, rng.standard_normal(n)), dtype=float)
    log = prior.distribution.positive_support and bool(np.all(ind > 0))
    return log, (np.log(ind) if log else ind)


def cuff_model(study: Any, section: Any, seed: int, draws: int = 20000) -> CuffModel:
    """The linearised cuff model of a study: priors of Kf, C_tis, L, Pv, r from the study (else its
    tissue's prior set), C_v and tau_v lognormal from the ``[schedule]`` section.

    Moments of phi are matched to individual-level prior draws (``draws``); correlations between
    these quantities are not carried (the prior sets declare none among them).
    """

    rng = np.random.default_rng(seed)
    file = getattr(study, "file", None)
    pset = None
    logs, samples, origins = [], [], {}
    for name in PARAMS:
        if name in ("C_v", "tau_v"):
            med = getattr(section, f"{name}_median")
            gsd = getattr(section, f"{name}_gsd")
            z = rng.standard_normal(draws)
            logs.append(True)
            samples.append(math.log(med) + math.log(gsd) * z)
            origins[name] = getattr(type(section).model_fields[f"{name}_median"], "description", "") or ""
            continue
        prior = (getattr(study, "priors", {}) or {}).get(name)
        if prior is None:
            if pset is None:
                pset = load_prior_set(study.tissue)
            prior = pset.priors.get(name)
        if prior is None:
            if name == "r" and "r" not in (pset.priors if pset else {}):
                prior = parse_prior("r", {"dist": "fixed", "value": 0.2})
            else:
                raise InputError(f"the cuff model needs a prior for {name}: give it under [parameters]",
                                 file=file, key=f"parameters.{name}", value=None)
        origins[name] = getattr(prior, "origin", "") or ""
        if prior.is_fixed:
            logs.append(False)
            samples.append(np.full(draws, float(prior.median())))
            continue
        lg, s = _moments(prior, rng, draws)
        logs.append(lg)
        samples.append(s)
    S = np.column_stack(samples)
    mean = S.mean(axis=0)
    var = S.var(axis=0, ddof=1)
    fixed = var <= 0
    var = np.where(fixed, 1e-24, var)  # a fixed quantity: (numerically) known exactly
    M = int(section.linearisation_draws)
    centre = np.median(S, axis=0)
    points = np.vstack([centre, S[1:M]]) if M > 1 else centre[None, :]
    return CuffModel(names=PARAMS, log=np.array(logs), prior_mean=mean, prior_cov=np.diag(var),
                     points=points, step_min=float(section.step_min), transmission=float(section.transmission),
                     origins=origins)


# --------------------------------------------------------------------------------------------
# search


@dataclass
class Problem:
    """A schedule search: the model, the grids, K, the noise and the criterion."""

    model: CuffModel
    pressure_grid: tuple[float, ...]
    steps: int
    times: np.ndarray
    K: int
    noise_sd: float
    crit: Criterion
    increasing: bool = True
    evaluations: int = 0
    _cache: dict[tuple[float, ...], np.ndarray] = field(default_factory=dict)

    @property
    def prior_prec(self) -> np.ndarray:
        """Prior precision of phi."""
        return np.linalg.inv(self.model.prior_cov)

    def info(self, pressures: Sequence[float]) -> np.ndarray:
        """Per-reading information on the time grid for a pressure protocol (cached)."""
        key = tuple(float(p) for p in pressures)
        if key not in self._cache:
            self._cache[key] = self.model.information(key, self.times, self.noise_sd)
        return self._cache[key]

    def value(self, pressures: Sequence[float], idx: Sequence[int]) -> float:
        """Criterion of a schedule (pressures, reading indices on the time grid)."""
        O = self.info(pressures)
        info = O[:, list(idx)].sum(axis=1)
        self.evaluations += 1
        return float(self.crit(posterior_cov(info, self.prior_prec)))

    def best_times(self, pressures: Sequence[float], start: Sequence[int] | None) -> tuple[list[int], float]:
        """Best K reading times for a protocol (greedy + exchange, also from ``start``)."""
        self.evaluations += 1
        return select_times(self.info(pressures), self.K, self.prior_prec, self.crit, start=start)

    def allowed(self, pressures: Sequence[float]) -> bool:
        """True when the protocol respects ``increasing`` (each step at or above the previous)."""
        return not self.increasing or all(a <= b for a, b in itertools.pairwise(pressures))


def equal_times(times: np.ndarray, K: int) -> list[int]:
    """Indices on the grid nearest to K equally spaced times T j / K, j = 1..K (distinct)."""
    T = float(times[-1])
    out: list[int] = []
    for j in range(1, K + 1):
        order = np.argsort(np.abs(times - T * j / K), kind="stable")
        out.append(int(next(i for i in order if i not in out)))
    return sorted(out)


def optimise(prob: Problem, start_pressures: Sequence[float], start_times: Sequence[int],
             max_passes: int = 10, pair_moves: bool = True) -> tuple[list[float], list[int], float]:
    """Coordinate exchange over the cuff pressures (times re-optimised per trial), from a start schedule.

    Single-step moves first; when none improves and ``pair_moves``, moves of two adjacent steps at once
    (which escape optima that the ``increasing`` constraint makes local to single moves). Returns
    (pressures, reading indices, criterion); never worse than the start.
    """
    pressures = [float(p) for p in start_pressures]
    times, best = prob.best_times(pressures, start_times)  # the exchange from start_times never loses

    def moves(order: int):
        # single steps, or two adjacent steps (enough to pass the increasing constraint's local optima)
        for steps in ([(k,) for k in range(prob.steps)] if order == 1
                      else [(k, k + 1) for k in range(prob.steps - 1)]):
            for vals in itertools.product(prob.pressure_grid, repeat=order):
                if any(float(v) == pressures[s] for s, v in zip(steps, vals, strict=True)):
                    continue
                trial = list(pressures)
                for s, v in zip(steps, vals, strict=True):
                    trial[s] = float(v)
                if prob.allowed(trial):
                    yield trial

    for _ in range(max_passes):
        improved = False
        for order in (1, 2) if pair_moves and prob.steps > 1 else (1,):
            for trial in moves(order):
                t_idx, v = prob.best_times(trial, times)
                if v < best - 1e-12 * max(1.0, abs(best)):
                    pressures, times, best, improved = trial, t_idx, v, True
            if improved:
                break  # back to single moves from the new protocol
        if not improved:
            break
    return pressures, times, best


def brute_force(prob: Problem) -> tuple[list[float], list[int], float]:
    """Exhaustive search over every allowed protocol and every K-subset of the time grid (tiny grids)."""
    best: tuple[list[float], list[int], float] | None = None
    for pressures in itertools.product(prob.pressure_grid, repeat=prob.steps):
        if not prob.allowed(pressures):
            continue
        O = prob.info(pressures)
        subsets = np.array(list(itertools.combinations(range(len(prob.times)), prob.K)))
        info = O[:, subsets].sum(axis=2)  # (M, n_subsets, p, p)
        vals = prob.crit(posterior_cov(np.moveaxis(info, 1, 0), prob.prior_prec))
        j = int(np.argmin(vals))
        if best is None or vals[j] < best[2]:
            best = ([float(p) for p in pressures], [int(i) for i in subsets[j]], float(vals[j]))
    assert best is not None
    return best


# --------------------------------------------------------------------------------------------
# on a study


def _baseline_pressures(study: Any, grid: Sequence[float], steps: int) -> list[float]:
    """The study's volume_time_course protocol when it has ``steps`` steps, else equal spacing over the grid."""
    for ob in getattr(study, "observations", None) or []:
        if getattr(ob, "kind", None) == "volume_time_course" and getattr(ob, "steps", None):
            vals = [float(s.to) for s in ob.steps]
            if len(vals) == steps:
                return vals
    g = np.asarray(sorted(grid), dtype=float)
    target = np.linspace(g[0], g[-1], steps)
    return [float(g[np.argmin(np.abs(g - x))]) for x in target]


def _summary(prob: Problem, pressures: Sequence[float], idx: Sequence[int]) -> dict[str, Any]:
    """Posterior sds of the targets (canonical units; Kf also on the log scale) for one schedule."""
    m = prob.model
    O = prob.info(pressures)
    cov = posterior_cov(O[:, list(idx)].sum(axis=1), prob.prior_prec)
    sd: dict[str, float] = {}
    sd_log: dict[str, float] = {}
    for target, q in TARGETS.items():
        k = m.names.index(q)
        s = np.sqrt(cov[:, k, k])
        if m.log[k]:
            sd_log[target] = float(s.mean())
            sd[target] = float((np.exp(m.points[:, k]) * s).mean())  # delta method at each point
        else:
            sd[target] = float(s.mean())
    return {"pressures": [float(p) for p in pressures], "times": [float(prob.times[i]) for i in idx],
            "criterion": prob.value(pressures, idx), "posterior_sd": sd, "posterior_sd_log": sd_log}


def _ratio(kind: str, opt: float, base: float) -> float:
    """Optimised over equal spacing: A, the ratio of the criteria; D, the ratio of the determinants
    (exp of the log-det difference). Below 1 is a gain in both."""
    if kind == "D":
        return float(math.exp(opt - base))
    return opt / base if base else float("nan")


def schedule(study: Any, seed: int | None = None) -> ScheduleResult:
    """Optimise the venous-cuff schedule of a study (``[schedule]`` section; defaults when absent).

    Returns a :class:`ScheduleResult` whose JSON holds ``optimised`` and ``equal_spacing``
    (``pressures`` mmHg per step, reading ``times`` min, ``criterion``, ``posterior_sd`` of Kf in
    mL/min/mmHg per basis and Pvi in mmHg, ``posterior_sd_log`` of Kf), ``prior_sd``, ``sd_ratio``
    (optimised / equal spacing per target; below 1 is a gain), ``parameters`` (prior moments and
    origins) and the settings. Seeded by ``seed`` (default the study seed).
    """

    section = getattr(study, "schedule", None) or ScheduleSection()
    file = getattr(study, "file", None)
    seed = int(seed if seed is not None else getattr(study, "seed", 0) or 0)
    model = cuff_model(study, section, seed)
    grid = tuple(sorted(float(p) for p in section.pressure_grid))
    total = section.steps * section.step_min
    n_grid = int(math.floor(total / section.time_step_min + 1e-9))
    times = section.time_step_min * np.arange(1, n_grid + 1)
    if section.measurements > len(times):
        raise InputError(f"more readings than times on the grid ({len(times)})", file=file,
                         key="schedule.measurements", value=section.measurements)
    idx = tuple(model.names.index(TARGETS[t]) for t in section.targets)
    crit = Criterion(section.criterion, idx, model.prior_cov)
    prob = Problem(model, grid, section.steps, times, section.measurements, float(section.noise_sd), crit,
                   increasing=section.increasing)
    base_p = _baseline_pressures(study, grid, section.steps)
    base_t = equal_times(times, section.measurements)
    opt_p, opt_t, _ = optimise(prob, base_p, base_t)
    opt = _summary(prob, opt_p, opt_t)
    base = _summary(prob, base_p, base_t)
    prior_sd = {}
    for target, q in TARGETS.items():
        k = model.names.index(q)
        s = math.sqrt(model.prior_cov[k, k])
        prior_sd[target] = float((np.exp(model.points[:, k]) * s).mean()) if model.log[k] else s
    ratio = {t: opt["posterior_sd"][t] / base["posterior_sd"][t] for t in TARGETS}
    params = {}
    for k, n in enumerate(model.names):
        entry = {"scale": "log" if model.log[k] else "linear",
                 "median": float(np.exp(model.points[0, k]) if model.log[k] else model.points[0, k]),
                 "sd_phi": float(math.sqrt(model.prior_cov[k, k])), "origin": model.origins.get(n, "")}
        params[n] = entry
    notes = ["linearised (Laplace) posterior of the linear cuff model, averaged over "
             f"{len(model.points)} prior points; Pvi is the resting venous pressure Pv0 of that model",
             "r (Rv/Ra) and Kf enter the slow phase only as Kf/(1 + r): the prior of r bounds how far sd(Kf) "
             "can fall"]
    doc = {"criterion": section.criterion, "targets": list(section.targets), "steps": section.steps,
           "step_min": section.step_min, "measurements": section.measurements, "noise_sd": section.noise_sd,
           "pressure_grid": list(grid), "time_grid_min": section.time_step_min, "increasing": section.increasing,
           "optimised": opt, "equal_spacing": base, "prior_sd": prior_sd, "sd_ratio": ratio,
           "criterion_ratio": _ratio(section.criterion, opt["criterion"], base["criterion"]),
           "search": {"method": "coordinate exchange (pressures) + greedy/exchange (times)",
                      "evaluations": prob.evaluations},
           "parameters": params, "seed": seed, "notes": notes,
           "units": {"pressures": "mmHg", "times": "min", "Kf": "mL/min/mmHg/100g", "Pvi": "mmHg",
                     "noise_sd": "mL/100g", "posterior_sd_log": "1 (sd of the natural log)"}}
    return ScheduleResult(doc, model)
