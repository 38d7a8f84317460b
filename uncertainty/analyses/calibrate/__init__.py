"""Simulation-based calibration of a study's own inference model (Talts et al. 2018, arXiv:1804.06788).

Does the posterior the study would report mean what it says? Over many truths drawn from the study's
prior and readings simulated from them, the rank of each truth among L posterior draws must be
uniform on 0..L, and the 90 % interval must hold the truth in 90 % of the replicates.

Each replicate:

1. truths of every quantity from the prior the inference model uses, the study's correlations
   included, and readings of the study's observations (same kinds, subjects, times and measurement
   sds) simulated through the model's own forward path and likelihood
   (:func:`uncertainty.analyses.inference.checks.prior_predictive`, one joint draw per replicate,
   made in this process from the study seed);
2. a refit of the model compiled once per process (``Session``; new data per replicate; on a cluster
   every worker starts its compile while this process still simulates the replicates), with the
   study's ``[infer]`` sampler settings, checked by the same quality gate as ``infer`` (R-hat, bulk
   and tail ESS, divergences); a replicate that fails is counted and reported, never used;
3. the rank of each truth among L thinned posterior draws, for every quantity the model reports (its
   free quantities, at the reported level) and Jv, and whether the central 90 % interval held it.

Replicates are tasks of one executor (:mod:`uncertainty.core.parallel`); each task's sampler seed and
tie-breaking stream come from the study seed and the replicate's index, so 1 and many workers give
identical ranks.

Power of the defaults (N = 200 replicates, B = 10 bins, L = 99 draws): 20 expected ranks per bin,
above the 5 per cell the chi-square approximation needs (common practice). At level 0.01 the
uniformity test then detects a posterior 30 % too narrow with power 0.99, 20 % too narrow with 0.55,
30 % too wide with 0.66, and a posterior shifted by half its sd with power above 0.99 (computed with
:func:`~uncertainty.analyses.calibrate.stats.chi2_power` on the closed-form bins of
:func:`~uncertainty.analyses.calibrate.stats.scaled_posterior_bins`; N = 100 gives 0.71 and 0.20 for the
first two). L = 99 makes 100 possible ranks, which 10 bins split evenly.
"""

from __future__ import annotations

import dataclasses
import threading
import uuid
from typing import Any

import numpy as np

from uncertainty.analyses.calibrate import stats as sbc
from uncertainty.analyses.calibrate.result import CalibrationResult
from uncertainty.analyses.inference.api import Session, settings
from uncertainty.analyses.inference.checks import prior_predictive
from uncertainty.analyses.inference.diagnostics import Gate, diagnose
from uncertainty.analyses.inference.model_builder import build_model
from uncertainty.analyses.inference.problem import Problem, problem_from_study
from uncertainty.analyses.inference.samplers import SamplerError
from uncertainty.analyses.inference.summaries import flat
from uncertainty.core import units
from uncertainty.core.errors import InputError, QualityGateError
from uncertainty.core.parallel import InProcess
from uncertainty.core.provenance import code_hash, package_version

#: default replicates N, bins B and thinned posterior draws L (power: module docstring)
REPLICATES = 200
BINS = 10
DRAWS = 99
#: fewest expected ranks per bin for the chi-square approximation (common practice: 5)
MIN_PER_BIN = 5
#: most replicates (an absurdity bound: 10^5 refits)
MAX_REPLICATES = 100_000


@dataclasses.dataclass(frozen=True)
class Replicate:
    """One task: the replicate's index, its simulated readings per observed term (canonical units)
    and its truths per reported quantity (canonical units)."""

    index: int
    data: dict[str, np.ndarray]
    truths: dict[str, float]


def as_problem(study: Any) -> Problem:
    """The inference problem of a Study (or a Problem as it is).

    Parameters
    ----------
    study : Study or Problem
        A validated study with ``[[observations]]``.

    Returns
    -------
    Problem
        Priors, forward map and observations in canonical units.
    """
    return study if isinstance(study, Problem) else problem_from_study(study)


def check_settings(replicates: int, bins: int, draws: int, posterior_draws: int | None = None) -> None:
    """Refuse settings that cannot give a meaningful test (exit 2 on the command line).

    Parameters
    ----------
    replicates : int
        N.
    bins : int
        B.
    draws : int
        L (thinned posterior draws per replicate).
    posterior_draws : int, optional
        Draws each refit keeps (chains x draws per chain); L may not exceed it.

    Raises
    ------
    InputError
        Naming the flag (``--replicates``, ``--bins`` or ``--draws``) and its value.
    """
    if draws < 1:
        raise InputError("need at least one posterior draw to rank among", key="--draws", value=draws)
    why = sbc.check_bins(bins, draws)
    if why:
        raise InputError(why, key="--bins", value=bins)
    if not MIN_PER_BIN * bins <= replicates <= MAX_REPLICATES:
        raise InputError(f"replicates must lie between {MIN_PER_BIN} per bin ({MIN_PER_BIN * bins} for {bins} "
                         f"bins, so that the chi-square test holds) and {MAX_REPLICATES:,}",
                         key="--replicates", value=replicates)
    if posterior_draws is not None and draws > posterior_draws:
        raise InputError(f"cannot thin {posterior_draws} posterior draws per refit (chains x draws of [infer]) "
                         f"to {draws}", key="--draws", value=draws)


def _reported_vars(built: Any) -> dict[str, str]:
    """Quantity -> the model variable holding it at the reported level (typical value with
    subjects, else the study's individual), Jv last."""
    out = {}
    for name in built.quantities:
        out[name] = name if built.hierarchical else f"{name}__subject"
    out["Jv"] = "Jv__typical" if built.hierarchical else "Jv__subject"
    return out


def _scalar(x: Any) -> np.ndarray:
    """Pooled draws (draw, ...) -> the first element per draw (the individual of a one-subject layer)."""
    a = np.asarray(x, dtype=float)
    return a.reshape(a.shape[0], -1)[:, 0]


#: compiled models of this process by session key (a cluster worker's, made by :class:`SessionWarmup` or the
#: first replicate task; only the latest few are kept: a worker serves one calibration at a time)
_SESSIONS: dict[str, Session] = {}
_SESSIONS_KEEP = 2
_SESSIONS_LOCK = threading.Lock()


def process_session(key: str, study: Any, sampler: str) -> Session:
    """The compiled model of ``study`` in this process under ``key``, made on first use (one compile per
    process even when a warm-up and a task ask at once).

    Parameters
    ----------
    key : str
        Names one calibration run (its study and sampler); a new run takes a new key.
    study : Study or Problem
        The study whose inference model is compiled.
    sampler : str
        Sampler to compile for (``nutpie`` or ``pymc``).

    Returns
    -------
    Session
        The session (model built and compiled, seconds in ``compile_seconds``).
    """
    with _SESSIONS_LOCK:
        if key not in _SESSIONS:
            session = Session(as_problem(study), sampler=sampler)
            while len(_SESSIONS) >= _SESSIONS_KEEP:
                _SESSIONS.pop(next(iter(_SESSIONS)))
            _SESSIONS[key] = session
        return _SESSIONS[key]


class SessionWarmup:
    """Warm-up of a cluster worker (``executor.warm``): compile the study's model into this process's
    cache under ``key``, where the replicate tasks of the same run find it (picklable)."""

    def __init__(self, key: str, study: Any, sampler: str) -> None:
        self.key, self.study, self.sampler = key, study, sampler

    def __call__(self) -> None:
        process_session(self.key, self.study, self.sampler)


class ReplicateTask:
    """Task function of the executor: refit one replicate and rank its truths (picklable; the
    compiled model is made once per process on first use and never pickled; with a ``session_key`` it is
    the process's cached one of :func:`process_session`, which a warm-up may have made already)."""

    def __init__(self, study: Any, variables: dict[str, str], gate_vars: list[str], gate: Gate, *,
                 sampler: str, chains: int, draws: int, tune: int, target_accept: float, L: int,
                 cores: int | None = None, session_key: str | None = None) -> None:
        self.study, self.variables, self.gate_vars, self.gate = study, variables, gate_vars, gate
        self.session_key = session_key  # (not in checkpoint_key: it names the compile, not the result)
        self.cores = cores  # sampler threads per refit (1 on cluster workers: the replicates are the parallel work)
        self.sampler, self.chains, self.draws, self.tune = sampler, chains, draws, tune
        self.target_accept, self.L = target_accept, L
        self._session: Session | None = None

    def __getstate__(self) -> dict[str, Any]:
        state = dict(self.__dict__)
        state["_session"] = None
        return state

    @property
    def checkpoint_key(self) -> str:
        """Digest of what a replicate's result depends on beyond its readings and truths (the task): the
        sampler settings, the gate, L, the quantities ranked, the package version and the hash of its
        sources, so a checkpoint of other settings or other code is never reused."""
        import hashlib

        parts = (self.sampler, self.chains, self.draws, self.tune, self.target_accept, self.L,
                 dataclasses.asdict(self.gate), sorted(self.variables.items()), self.gate_vars,
                 package_version(), code_hash())
        return hashlib.sha256(repr(parts).encode()).hexdigest()

    def session(self) -> Session:
        """The compiled model of this process (made on first use)."""
        if self._session is None:
            if self.session_key is None:
                self._session = Session(as_problem(self.study), sampler=self.sampler)
            else:
                self._session = process_session(self.session_key, self.study, self.sampler)
        return self._session

    def __call__(self, rep: Replicate, ss: np.random.SeedSequence) -> dict[str, Any]:
        """Refit ``rep``; its ranks (0..L) and 90 % coverage per quantity, and the gate's verdict."""
        seed = int(ss.generate_state(1)[0] % (2**31))
        rng = np.random.default_rng(ss.spawn(1)[0])
        out: dict[str, Any] = {"index": rep.index, "passed": False, "reason": "", "ranks": {}, "covered": {}}
        session = self.session()
        if set(rep.data) != set(session.terms):  # the same study declares the same observed terms
            raise RuntimeError(f"simulated terms {sorted(rep.data)} differ from the model's {session.terms}")
        try:
            run = session.fit(data=rep.data, seed=seed, chains=self.chains, draws=self.draws,
                              tune=self.tune, target_accept=self.target_accept, summarise_result=False,
                              cores=self.cores)
        except SamplerError as exc:
            out["reason"] = f"sampler failed: {exc}"
            return out
        idata = run.idata
        names = self.gate_vars + [v for v in idata.posterior.data_vars if str(v).endswith("__subject_z")]
        diag = diagnose(idata, names, self.gate)
        out["r_hat_max"], out["ess_bulk_min"] = diag["r_hat_max"], diag["ess_bulk_min"]
        out["ess_tail_min"], out["divergences"] = diag["ess_tail_min"], diag["divergences"]
        for name, var in self.variables.items():
            if var not in idata.posterior or name not in rep.truths:
                continue
            draws = _scalar(flat(idata, var))
            out["ranks"][name] = sbc.rank_of(rep.truths[name], sbc.thin(draws, self.L), rng)
            lo, hi = np.quantile(draws, [(1 - sbc.COVERAGE_LEVEL) / 2, (1 + sbc.COVERAGE_LEVEL) / 2])
            out["covered"][name] = bool(lo <= rep.truths[name] <= hi)
        out["passed"] = bool(diag["passed"])
        if not diag["passed"]:
            out["reason"] = "; ".join(diag["failing"])
        return out


def simulate_replicates(built: Any, n: int, seed: int) -> list[Replicate]:
    """N joint draws of truths and readings from the model's prior predictive (correlations included).

    Parameters
    ----------
    built : BuiltModel
        The declared inference model.
    n : int
        Replicates.
    seed : int
        Seed of the prior-predictive draws.

    Returns
    -------
    list of Replicate
        Truths at the reported level (canonical units) and the readings of every observed term.
    """
    idata = prior_predictive(built, draws=n, seed=seed)
    prior, pp = idata.prior, idata.prior_predictive
    truths: dict[str, np.ndarray] = {}
    for name, var in _reported_vars(built).items():
        if var in prior:
            truths[name] = _scalar(np.asarray(prior[var].values)[0])
    if "Jv" not in truths:  # the forward map at the truths (when Jv is not a model variable)
        problem = built.problem
        vals = {**problem.fixed, **{q: truths[q] for q in problem.priors if q in truths}}
        truths["Jv"] = np.asarray(problem.evaluate(vals, np)["Jv"], dtype=float) * np.ones(n)
    data = {t.name: np.asarray(pp[t.name].values)[0] for t in built.terms}
    return [Replicate(i, {k: np.asarray(v[i], dtype=float) for k, v in data.items()},
                      {k: float(v[i]) for k, v in truths.items()}) for i in range(n)]


def _verdict(name: str, q: dict[str, Any], alpha: float) -> str:
    cov = q["coverage90"]
    spread = (f"ranks p = {q['p_value']:.3g}, truth inside the 90 % interval {cov['covered']} of {cov['n']} "
              f"times (expected {cov['range'][0]}-{cov['range'][1]})")
    if q["flagged"]:
        return f"{name}: miscalibrated, {sbc.shape_of(np.asarray(q['counts']), q['mean_rank'], cov)} ({spread})."
    return f"{name}: no sign of miscalibration ({spread})."


def summarise(outcomes: list[dict[str, Any]], names: list[str], L: int, bins: int) -> dict[str, Any]:
    """The per-quantity tests of the replicates that passed the gate.

    Parameters
    ----------
    outcomes : list of dict
        :class:`ReplicateTask` results (``passed``, ``ranks``, ``covered``).
    names : list of str
        Quantities, in report order.
    L : int
        Draws each truth was ranked among.
    bins : int
        B.

    Returns
    -------
    dict
        ``quantities.<name>.{ranks, counts, chi2, p_value, mean_rank, coverage90, flagged, verdict}``,
        ``alpha_per_test`` (the family rate split over quantities and both tests), ``band99``,
        ``flagged`` (names) and ``used`` (replicates that passed).
    """
    used = [o for o in outcomes if o["passed"]]
    alpha = sbc.FAMILY_ALPHA / max(2 * len(names), 1)  # Bonferroni over quantities x (uniformity, coverage)
    quantities: dict[str, Any] = {}
    for name in names:
        ranks = [int(o["ranks"][name]) for o in used if name in o["ranks"]]
        counts = sbc.bin_counts(ranks, L, bins)
        test = sbc.uniformity_test(counts)
        cov = sbc.coverage_test(sum(bool(o["covered"][name]) for o in used if name in o["covered"]), len(ranks))
        flagged = bool((test["p_value"] < alpha) or (cov["p_value"] < alpha))
        q = {"ranks": ranks, "counts": counts.tolist(), "chi2": test["chi2"], "df": int(test["df"]),
             "p_value": test["p_value"], "mean_rank": float(np.mean(ranks) / L) if ranks else float("nan"),
             "coverage90": cov, "flagged": flagged}
        if len(ranks) < MIN_PER_BIN * bins:
            q["flagged"] = False
            q["verdict"] = (f"{name}: no verdict, {len(ranks)} usable replicates where the test needs "
                            f"{MIN_PER_BIN * bins}.")
        else:
            q["verdict"] = _verdict(name, q, alpha)
        quantities[name] = q
    return {"quantities": quantities, "alpha_per_test": alpha, "used": len(used),
            "band99": sbc.uniform_band(len(used), bins), "flagged": [n for n, q in quantities.items() if q["flagged"]]}


def calibrate(study: Any, seed: int | None = None, *, replicates: int = REPLICATES, bins: int = BINS,
              draws: int = DRAWS, executor: Any = None, chains: int | None = None,
              posterior_draws: int | None = None, tune: int | None = None, gate: Any = None) -> CalibrationResult:
    """Simulation-based calibration of ``study``'s inference model (module docstring for the method).

    Parameters
    ----------
    study : Study or Problem
        A study with ``[[observations]]`` (their kinds, subjects, times and sds are simulated).
    seed : int, optional
        Seed of the whole run (default: the study's seed).
    replicates : int
        N, at least 5 per bin.
    bins : int
        B, a divisor of ``draws + 1``.
    draws : int
        L, thinned posterior draws each truth is ranked among.
    executor : optional
        An :mod:`uncertainty.core.parallel` executor (in-process when None); one task per replicate. On workers
        each refit samples its chains in one thread (the replicates are the parallel work; the draws are the same).
    chains, posterior_draws, tune : int, optional
        Sampler settings of each refit (default: the study's ``[infer]`` section).
    gate : Gate or dict, optional
        Quality-gate thresholds each refit must pass (default: the study's ``[infer]`` gate).

    Returns
    -------
    CalibrationResult
        Per quantity the ranks, bin counts, chi-square p-value, 90 % coverage against Binomial(N, 0.9)
        and a verdict; the failed replicates with their reasons. Values in canonical units.

    Raises
    ------
    InputError
        No observations, or settings that cannot give a test (exit 2).
    QualityGateError
        Fewer replicates passed the gate than the test needs (exit 3, the result attached).
    """
    problem = as_problem(study)
    if not problem.observations:
        raise InputError("calibration simulates the study's observations: the study has none",
                         file=problem.file, key="observations", value=None)
    opts = settings(study, chains=chains, draws=posterior_draws, tune=tune, gate=gate)
    check_settings(replicates, bins, draws, opts["chains"] * opts["draws"])
    if seed is None:
        seed = getattr(study, "seed", None) if not isinstance(study, Problem) else getattr(study.study, "seed", None)
    seed = int(seed if seed is not None else 0)
    executor = executor or InProcess()
    on_workers = type(executor) is not InProcess
    # cluster workers compile the model now, while this process builds its own and simulates the replicates
    session_key = uuid.uuid4().hex if on_workers else None
    if on_workers and hasattr(executor, "warm"):
        executor.warm(SessionWarmup(session_key, study, opts["sampler"]))
    built = build_model(problem)
    variables = _reported_vars(built)
    gate = Gate.coerce(opts["gate"])
    gate_vars = (list(built.quantities) + [f"{q}__spread" for q in built.spreads] + list(built.extra_params)
                 + ["Jv__typical", "Jv__subject"])
    # the prior-predictive stream: its own child of the seed, apart from the task streams
    pp_seed = int(np.random.SeedSequence([seed, 5813]).generate_state(1)[0] % (2**31))
    reps = simulate_replicates(built, replicates, pp_seed)
    task = ReplicateTask(study, variables, gate_vars, gate, sampler=opts["sampler"], chains=opts["chains"],
                         draws=opts["draws"], tune=opts["tune"], target_accept=opts["target_accept"], L=draws,
                         cores=1 if on_workers else None, session_key=session_key)
    outcomes = executor.map(task, reps, seed=seed, label="calibration replicates")
    names = [n for n in variables if n in reps[0].truths]
    summary = summarise(outcomes, names, draws, bins)
    failures = [{"replicate": o["index"], "reason": o["reason"]} for o in outcomes if not o["passed"]]
    unit_map = {}
    for name in names:
        try:
            unit_map[name] = units.canonical_unit(name, problem.basis)
        except Exception:  # noqa: BLE001 - quantity without a registered unit
            unit_map[name] = ""
    notes = []
    if failures:
        notes.append(f"{len(failures)} of {replicates} replicates failed the quality gate and are left out "
                     "of the tests; leaving them out can itself bias the ranks when failures depend on the "
                     "truth (raise [infer] draws or tune, or target_accept)")
    if built.hierarchical:
        notes.append("ranks are of the typical subject's values (the study has several subjects)")
    flagged = summary["flagged"]
    if summary["used"] < MIN_PER_BIN * bins:
        verdict = (f"not enough replicates passed the quality gate ({summary['used']} of {replicates}; the test "
                   f"needs {MIN_PER_BIN * bins}): no verdict")
    elif flagged:
        verdict = (f"the posterior of {', '.join(flagged)} is not calibrated: intervals the study reports for "
                   "them cannot be taken at face value")
    else:
        verdict = ("the study's posterior is consistent with calibration: every quantity's ranks look uniform "
                   "and its 90 % intervals hold the truth about 90 % of the time")
    doc = {
        "method": "simulation-based calibration (Talts et al. 2018)",
        "model": problem.model_form,
        "seed": seed,
        "replicates": replicates,
        "replicates_used": summary["used"],
        "failed": len(failures),
        "failures": failures,
        "bins": bins,
        "draws": draws,
        "sampler": {"name": opts["sampler"], "chains": opts["chains"], "draws": opts["draws"], "tune": opts["tune"],
                    "target_accept": opts["target_accept"]},
        "gate": dataclasses.asdict(gate),
        "level": "typical subject" if built.hierarchical else "the study's individual",
        "alpha_per_test": summary["alpha_per_test"],
        "family_alpha": sbc.FAMILY_ALPHA,
        "band99": summary["band99"],
        "quantities": summary["quantities"],
        "flagged": flagged,
        "calibrated": bool(not flagged and summary["used"] >= MIN_PER_BIN * bins),
        "verdict": verdict,
        "notes": notes,
        "units": unit_map,
    }
    result = CalibrationResult(doc=doc)
    if summary["used"] < MIN_PER_BIN * bins:
        raise QualityGateError(f"calibration has no verdict: {verdict}", result=result)
    return result


__all__ = ["calibrate", "CalibrationResult", "REPLICATES", "BINS", "DRAWS"]
