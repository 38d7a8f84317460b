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

Pvi is defined as in the inference model (``volume_time_course`` observation,
``physiology.interstitium.cuff_curve``): the isovolumetric venous pressure, the venous pressure above
which filtration starts (Gamble et al. 1993, J Physiol 464:407). The veins fill from the resting venous
pressure Pv; the filtration part responds to venous pressure above Pvi. Its prior is the study's
``Pvi`` when declared, else the inference model's side prior; the corner of max(Pvi, T P_cuff) is
rounded by the same ``SMOOTH_MMHG`` as there. sd(Pvi) is the posterior sd of that Pvi.

Criteria over the targets (Kf, Pvi): ``A`` = mean over the linearisation points of
sum_k Var_post(phi_k) / Var_prior(phi_k) (prior-standardised trace, Bayesian A-optimal);
``D`` = mean of log det of the targets' posterior block over the prior block (Bayesian D_s-optimal).

Search: reading times by greedy forward selection on the time grid followed by exchange (Fedorov
style: swap a chosen time for an unchosen one while the criterion falls), started both from the
greedy set and from equal spacing; cuff pressures by coordinate exchange over the pressure grid (one
step at a time, times re-optimised for each trial value), started from the equal-spacing protocol.
Every move is accepted only when it lowers the criterion and leaves no target's posterior sd above
the comparison schedule's (the user's own protocol from the study's ``volume_time_course`` when it has
the same number of steps, else true equal spacing), so the result is never worse than the comparison
for any target; it is called optimised only when its criterion is lower. :func:`brute_force` enumerates
a small grid exactly (for checks).
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from uncertainty.analyses.design.trial_power import z_sample_size
from uncertainty.analyses.inference.observations.volume_time_course import SIDE_PRIORS, SMOOTH_MMHG
from uncertainty.analyses.sampling import draw
from uncertainty.analyses.schedule.blood import blood_schedule, check_blood_section, is_blood_study
from uncertainty.analyses.schedule.blood_result import BloodScheduleResult
from uncertainty.analyses.schedule.linear import (
    Criterion,
    equal_times,
    information,
    jacobian,
    posterior_cov,
    select_times,
)
from uncertainty.analyses.schedule.result import ScheduleResult
from uncertainty.core.errors import InputError
from uncertainty.physiology.interstitium import cuff_curve, volume_time_course
from uncertainty.priors import load_prior_set, parse_prior
from uncertainty.study import ScheduleSection

#: parameters of the linear cuff model, in the order of phi
PARAMS = ("Kf", "C_tis", "L", "C_v", "Pv", "Pvi", "r", "tau_v")
#: the study quantity behind each target (Pvi: the isovolumetric venous pressure, as in inference)
TARGETS = {"Kf": "Kf", "Pvi": "Pvi"}
#: what the report calls each comparison schedule
LABELS = {"user_protocol": "your protocol (the study's cuff steps, readings equally spaced)",
          "equal_spacing": "equal spacing (pressures equally spaced over the grid, readings equally spaced)"}


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
        """phi (M, p) -> limb volume change (mL/100 g) at ``times`` (min), (M, G): the curve the inference
        model fits (veins from Pv, filtration above Pvi)."""

        steps = [k * self.step_min for k in range(len(pressures))]
        t = np.asarray(times, dtype=float)[None, :]

        def f(phi: np.ndarray) -> np.ndarray:
            v = self.values(phi)
            return cuff_curve(t, steps, [float(p) for p in pressures], v["Kf"], v["C_tis"], v["L"], v["C_v"],
                              Pv_rest=v["Pv"], Pvi=v["Pvi"], tau_v=v["tau_v"], r=v["r"],
                              transmission=self.transmission, smooth=SMOOTH_MMHG) * np.ones_like(t)
        return f

    def parts(self, pressures: Sequence[float], times: np.ndarray) -> tuple[Callable, Callable]:
        """(venous, filtration) parts of :meth:`forward` (mL/100 g), each phi (M, p) -> (M, G): the veins
        fill from Pv with C_v and tau_v; filtration depends on Kf, C_tis, L, Pvi and r only."""
        steps = [k * self.step_min for k in range(len(pressures))]
        t = np.asarray(times, dtype=float)[None, :]
        cuffs = [float(p) for p in pressures]

        def part(name: str, base: str) -> Callable[[np.ndarray], np.ndarray]:
            def f(phi: np.ndarray) -> np.ndarray:
                v = self.values(phi)
                res = volume_time_course(t, steps, cuffs, v["Kf"], v["C_tis"], v["L"], v["C_v"], Pv0=v[base],
                                         tau_v=v["tau_v"], r=v["r"], transmission=self.transmission, parts=True,
                                         smooth=SMOOTH_MMHG)
                return res[name] * np.ones_like(t)
            return f
        return part("venous", "Pv"), part("filtration", "Pvi")

    def information(self, pressures: Sequence[float], times: np.ndarray, noise_sd: float) -> np.ndarray:
        """Per-reading Fisher information at every linearisation point: (M, G, p, p).

        The Jacobian of the curve is the sum of its venous and filtration parts' Jacobians, each
        differenced only over the parameters it depends on (half the curve evaluations of differencing
        the whole curve over every parameter)."""
        ven, fil = self.parts(pressures, times)
        ix = {n: k for k, n in enumerate(self.names)}
        J = (jacobian(ven, self.points, only=[ix[n] for n in ("C_v", "Pv", "tau_v")])
             + jacobian(fil, self.points, only=[ix[n] for n in ("Kf", "C_tis", "L", "Pvi", "r")]))
        return information(J, noise_sd)


def _moments(prior: Any, rng: np.random.Generator, n: int) -> tuple[bool, np.ndarray]:
    """(log scale?, individual-level draws on that scale) of a Prior (typical + between-subject layer)."""
    typ = np.asarray(prior.frozen().rvs(size=n, random_state=rng), dtype=float)
    ind = np.asarray(prior.individual(typ, rng.standard_normal(n)), dtype=float)
    log = prior.distribution.positive_support and bool(np.all(ind > 0))
    return log, (np.log(ind) if log else ind)


def cuff_model(study: Any, section: Any, seed: int, draws: int = 20000) -> CuffModel:
    """The linearised cuff model of a study: priors of Kf, C_tis, L, Pv, r from the study (else its
    tissue's prior set), C_v and tau_v lognormal from the ``[schedule]`` section.

    Moments of phi (mean and full covariance, on the log scale for a positive quantity) are matched to
    individual-level prior draws (``draws``). The study's own quantities are drawn jointly, through its
    Gaussian-copula correlations, so a correlation the study declares between them carries into the prior
    precision and hence into the chosen schedule.
    """

    rng = np.random.default_rng(seed)
    joint = draw(study, draws, method="mc", seed=np.random.default_rng(seed + 1)) if getattr(
        study, "priors", None) else {}
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
        if prior is None and name == "Pvi":
            side = {k: v for k, v in SIDE_PRIORS["Pvi"].items() if k != "origin"}
            prior = parse_prior("Pvi", side)
            origins[name] = "inference side prior: " + SIDE_PRIORS["Pvi"]["origin"]
        if prior is None:
            if name == "r" and "r" not in (pset.priors if pset else {}):
                prior = parse_prior("r", {"dist": "fixed", "value": 0.2})
            else:
                raise InputError(f"the cuff model needs a prior for {name}: give it under [parameters]",
                                 file=file, key=f"parameters.{name}", value=None)
        origins[name] = origins.get(name) or getattr(prior, "origin", "") or ""
        if prior.is_fixed:
            logs.append(False)
            samples.append(np.full(draws, float(prior.median())))
            continue
        if name in joint and prior is study.priors.get(name):  # drawn with the study's correlations
            ind = np.asarray(joint[name], dtype=float)
            lg = prior.distribution.positive_support and bool(np.all(ind > 0))
            logs.append(lg)
            samples.append(np.log(ind) if lg else ind)
            continue
        lg, s = _moments(prior, rng, draws)
        logs.append(lg)
        samples.append(s)
    S = np.column_stack(samples)
    mean = S.mean(axis=0)
    cov = np.cov(S, rowvar=False)
    fixed = np.diag(cov) <= 0
    cov[fixed, :] = 0.0
    cov[:, fixed] = 0.0
    cov[fixed, fixed] = 1e-24  # a fixed quantity: (numerically) known exactly
    M = int(section.linearisation_draws)
    centre = np.median(S, axis=0)
    points = np.vstack([centre, S[1:M]]) if M > 1 else centre[None, :]
    return CuffModel(names=PARAMS, log=np.array(logs), prior_mean=mean, prior_cov=cov,
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


class _BestTimes:
    """Task function of the schedule search: the best reading times for one trial protocol (picklable).

    A task is (trial pressures, the current reading indices the exchange also starts from); the
    result is that of :meth:`Problem.best_times` (deterministic: no random stream is used).
    """

    def __init__(self, prob: Problem) -> None:
        self.prob = prob

    def __call__(self, task: tuple[list[float], list[int]], ss: Any = None) -> tuple[list[int], float]:
        pressures, start = task
        prob = self.prob
        return select_times(prob.info(pressures), prob.K, prob.prior_prec, prob.crit, start=start)


def optimise(prob: Problem, start_pressures: Sequence[float], start_times: Sequence[int],
             max_passes: int = 10, pair_moves: bool = True,
             feasible: Callable[[Sequence[float], Sequence[int]], bool] | None = None,
             executor: Any = None) -> tuple[list[float], list[int], float]:
    """Coordinate exchange over the cuff pressures (times re-optimised per trial), from a start schedule.

    Single-step moves first; when none improves and ``pair_moves``, moves of two adjacent steps at once
    (which escape optima that the ``increasing`` constraint makes local to single moves). ``feasible``
    (pressures, reading indices) -> bool, when given, must hold for every accepted schedule (e.g. no
    target worse than a comparison); the start is taken as it is when its re-optimised times fail it.
    Returns (pressures, reading indices, criterion); never worse than the start.

    With an ``executor`` (:mod:`uncertainty.core.parallel`) the next ``executor.workers`` trial
    protocols (the moves from the current schedule, in the search's order) are evaluated at once, as
    tasks; the moves are then accepted in that order and, once one is accepted, the rest of the batch
    is dropped and the search goes on from the new schedule. The search is therefore the same move by
    move as one after another, and so is the result; only the dropped trials are extra work.

    Parameters
    ----------
    prob : Problem
        The search (its ``evaluations`` counts the criterion evaluations the search used).
    start_pressures : sequence of float
        Cuff pressure of each step at the start, mmHg.
    start_times : sequence of int
        Reading indices on the time grid at the start.
    max_passes : int
        Most passes over the moves.
    pair_moves : bool
        Also moves of two adjacent steps.
    feasible : callable or None
        Condition every accepted schedule meets.
    executor : InProcess or DaskExecutor or None
        Where the trial protocols are evaluated (here, one at a time, when None).

    Returns
    -------
    tuple
        (pressures mmHg, reading indices, criterion value).
    """
    pressures = [float(p) for p in start_pressures]
    times, best = prob.best_times(pressures, start_times)  # the exchange from start_times never loses
    if feasible is not None and not feasible(pressures, times):
        times, best = sorted(int(i) for i in start_times), prob.value(pressures, start_times)
    task_fn = _BestTimes(prob)
    batch = max(1, int(getattr(executor, "workers", 1) or 1))

    def positions(order: int) -> list[tuple[tuple[int, ...], tuple[float, ...]]]:
        # single steps, or two adjacent steps (enough to pass the increasing constraint's local optima)
        return [(steps, vals) for steps in ([(k,) for k in range(prob.steps)] if order == 1
                                            else [(k, k + 1) for k in range(prob.steps - 1)])
                for vals in itertools.product(prob.pressure_grid, repeat=order)]

    def trial_at(steps: tuple[int, ...], vals: tuple[float, ...]) -> list[float] | None:
        if any(float(v) == pressures[s] for s, v in zip(steps, vals, strict=True)):
            return None
        trial = list(pressures)
        for s, v in zip(steps, vals, strict=True):
            trial[s] = float(v)
        return trial if prob.allowed(trial) else None

    def evaluate(trials: list[list[float]]) -> list[tuple[list[int], float]]:
        tasks = [(t, list(times)) for t in trials]
        if executor is None:
            return [task_fn(t) for t in tasks]
        return executor.map(task_fn, tasks, seed=0, label="schedule candidates")

    for _ in range(max_passes):
        improved = False
        for order in (1, 2) if pair_moves and prob.steps > 1 else (1,):
            moves = positions(order)
            i = 0
            while i < len(moves):
                chunk: list[tuple[int, list[float]]] = []  # (position, trial) of the next few moves
                j = i
                while j < len(moves) and len(chunk) < batch:
                    trial = trial_at(*moves[j])
                    if trial is not None:
                        chunk.append((j, trial))
                    j += 1
                i = j
                for (at, trial), (t_idx, v) in zip(chunk, evaluate([t for _, t in chunk]), strict=True):
                    prob.evaluations += 1
                    if v < best - 1e-12 * max(1.0, abs(best)) and (feasible is None or feasible(trial, t_idx)):
                        pressures, times, best, improved = trial, t_idx, v, True
                        i = at + 1  # the later moves of the batch were from the old schedule: redo them
                        break
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


def user_protocol(study: Any, steps: int) -> list[float] | None:
    """The cuff pressures (mmHg) of the study's ``volume_time_course`` observation when it has ``steps`` steps."""
    for ob in getattr(study, "observations", None) or []:
        if getattr(ob, "kind", None) == "volume_time_course" and getattr(ob, "steps", None):
            vals = [float(s.to) for s in ob.steps]
            if len(vals) == steps:
                return vals
    return None


def equal_pressures(grid: Sequence[float], steps: int) -> list[float]:
    """``steps`` pressures equally spaced from the lowest to the highest grid pressure, each moved to the
    nearest grid point (mmHg)."""
    g = np.asarray(sorted(grid), dtype=float)
    target = np.linspace(g[0], g[-1], steps)
    return [float(g[np.argmin(np.abs(g - x))]) for x in target]


def _target_sd(prob: Problem, pressures: Sequence[float], idx: Sequence[int]) -> dict[str, float]:
    """Posterior sd of each target (canonical units) for one schedule, as :func:`_summary` reports it."""
    m = prob.model
    cov = posterior_cov(prob.info(pressures)[:, list(idx)].sum(axis=1), prob.prior_prec)
    out = {}
    for target, q in TARGETS.items():
        k = m.names.index(q)
        s = np.sqrt(cov[:, k, k])
        out[target] = float((np.exp(m.points[:, k]) * s).mean()) if m.log[k] else float(s.mean())
    return out


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


def group_comparison(model: CuffModel, posterior_sd: dict[str, float], alpha: float = 0.05,
                     power: float = 0.8) -> dict[str, dict[str, float]]:
    """Subjects per group to detect a difference of one between-subject sd in a target, measured with this
    schedule, against perfect measurement.

    Each subject's estimate is the true value plus an error of the schedule's posterior sd, so the sd
    of the estimates is sqrt(between^2 + posterior_sd^2) and n per group is the normal-approximation
    2 (z_{1-a/2} + z_{1-b})^2 sd^2 / delta^2 with delta = the between-subject sd (common practice).

    Parameters
    ----------
    model : CuffModel
        The cuff model (prior sds; the between-subject part is approximated by the prior sd of phi on
        the natural scale at the median).
    posterior_sd : dict
        Per-subject posterior sd of each target (Kf in mL/min/mmHg/100g, Pvi mmHg).
    alpha, power : float
        Two-sided level and power.

    Returns
    -------
    dict
        Per target: ``between_sd``, ``posterior_sd``, ``n_per_group`` (with this schedule) and
        ``n_per_group_perfect`` (error-free measurement), subjects per group.
    """
    out = {}
    for target, q in TARGETS.items():
        k = model.names.index(q)
        s = math.sqrt(model.prior_cov[k, k])
        between = float(np.exp(model.points[0, k]) * s) if model.log[k] else s
        post = float(posterior_sd[target])
        out[target] = {"between_sd": between, "posterior_sd": post,
                       "n_per_group": z_sample_size(between, math.hypot(between, post), alpha, power),
                       "n_per_group_perfect": z_sample_size(between, between, alpha, power)}
    return out


def schedule(study: Any, seed: int | None = None,
             executor: Any = None) -> ScheduleResult | BloodScheduleResult:
    """Optimise the venous-cuff schedule of a study (``[schedule]`` section; defaults when absent); for a
    ``whole_body`` study the blood-sampling times instead (:func:`~uncertainty.analyses.schedule.blood.blood_schedule`,
    which does not use ``executor``: a few time-course solves).

    Returns a :class:`ScheduleResult` whose JSON holds ``optimised`` (the searched schedule; ``status``
    says whether it is better: ``optimised``, ``trade_off`` or ``no_better_schedule``), ``equal_spacing``
    (true equal spacing), ``user_protocol`` (the study's own cuff steps, when it has them), ``comparison``
    (``pressures`` mmHg per step, reading ``times`` min, ``criterion``, ``posterior_sd`` of Kf in
    mL/min/mmHg/100g and Pvi in mmHg, ``posterior_sd_log`` of Kf), ``prior_sd``, ``sd_ratio``
    (optimised / equal spacing per target; below 1 is a gain), ``parameters`` (prior moments and
    origins) and the settings. Seeded by ``seed`` (default the study seed). ``executor``
    (:mod:`uncertainty.core.parallel`, default here one after another): the trial protocols of the
    search are evaluated on it a few at a time (:func:`optimise`); the result does not depend on it.
    """

    if is_blood_study(study):
        return blood_schedule(study, seed=seed)
    check_blood_section(study)
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
    base_t = equal_times(times, section.measurements)
    rows = {"equal_spacing": (equal_pressures(grid, section.steps), base_t)}
    user = user_protocol(study, section.steps)
    if user is not None:
        rows["user_protocol"] = (user, base_t)
    comparison = "user_protocol" if user is not None else "equal_spacing"
    summaries = {k: _summary(prob, p, t) for k, (p, t) in rows.items()}
    caps = summaries[comparison]["posterior_sd"]

    def feasible(pressures: Sequence[float], idx: Sequence[int]) -> bool:
        sd = _target_sd(prob, pressures, idx)
        return all(sd[t] <= caps[t] * (1 + 1e-9) for t in section.targets)

    # one search, from the better (lower criterion) of the comparison and equal spacing when both qualify
    starts = [k for k in rows if k == comparison or feasible(*rows[k])]
    start = min(starts, key=lambda k: summaries[k]["criterion"])
    opt_p, opt_t, _ = optimise(prob, *rows[start], feasible=feasible, executor=executor)
    opt = _summary(prob, opt_p, opt_t)
    base = summaries[comparison]
    prior_sd = {}
    for target, q in TARGETS.items():
        k = model.names.index(q)
        s = math.sqrt(model.prior_cov[k, k])
        prior_sd[target] = float((np.exp(model.points[:, k]) * s).mean()) if model.log[k] else s
    ratio = {t: opt["posterior_sd"][t] / base["posterior_sd"][t] for t in TARGETS}
    crit_ratio = _ratio(section.criterion, opt["criterion"], base["criterion"])
    better = opt["criterion"] < base["criterion"] - 1e-9 * max(1.0, abs(base["criterion"]))
    worse = [t for t in TARGETS if ratio[t] > 1 + 1e-6]
    if not better:
        status = "no_better_schedule"
        verdict = f"no better schedule found: keep {LABELS[comparison]}"
    elif worse:
        status = "trade_off"
        verdict = (f"better on criterion {section.criterion} than {LABELS[comparison]} but worse for "
                   f"{', '.join(worse)} (not a target)")
    else:
        status = "optimised"
        verdict = f"optimised: no target worse than {LABELS[comparison]}, criterion ratio {crit_ratio:.3g}"
    params = {}
    for k, n in enumerate(model.names):
        entry = {"scale": "log" if model.log[k] else "linear",
                 "median": float(np.exp(model.points[0, k]) if model.log[k] else model.points[0, k]),
                 "sd_phi": float(math.sqrt(model.prior_cov[k, k])), "origin": model.origins.get(n, "")}
        params[n] = entry
    notes = ["linearised (Laplace) posterior of the linear cuff model, averaged over "
             f"{len(model.points)} prior points; Pvi is the isovolumetric venous pressure as in the inference "
             "model (filtration above Pvi, veins from the resting Pv)",
             "r (Rv/Ra) and Kf enter the slow phase only as Kf/(1 + r): the prior of r bounds how far sd(Kf) "
             "can fall",
             "the linearised sd is a lower bound on what a fitted posterior shows when the curve model has "
             "ridges (Pvi against Cv) or the noise sd is underestimated"]
    doc = {"criterion": section.criterion, "targets": list(section.targets), "steps": section.steps,
           "step_min": section.step_min, "measurements": section.measurements, "noise_sd": section.noise_sd,
           "pressure_grid": list(grid), "time_grid_min": section.time_step_min, "increasing": section.increasing,
           "optimised": opt, "equal_spacing": summaries["equal_spacing"], "comparison": comparison,
           "comparison_label": LABELS[comparison], "status": status, "verdict": verdict,
           "prior_sd": prior_sd, "sd_ratio": ratio,
           "sd_ratio_equal_spacing": {t: opt["posterior_sd"][t] / summaries["equal_spacing"]["posterior_sd"][t]
                                      for t in TARGETS},
           "criterion_ratio": crit_ratio,
           "group_comparison": group_comparison(model, opt["posterior_sd"]),
           "search": {"method": "coordinate exchange (pressures) + greedy/exchange (times), from the comparison "
                                "and equal spacing; no target may end worse than the comparison",
                      "evaluations": prob.evaluations},
           "parameters": params, "seed": seed, "notes": notes,
           "units": {"pressures": "mmHg", "times": "min", "Kf": "mL/min/mmHg/100g", "Pvi": "mmHg",
                     "noise_sd": "mL/100g (one limb-volume reading)", "posterior_sd_log": "1 (sd of the natural log)",
                     "group_comparison": "subjects per group"}}
    if user is not None:
        doc["user_protocol"] = summaries["user_protocol"]
    return ScheduleResult(doc, model)
