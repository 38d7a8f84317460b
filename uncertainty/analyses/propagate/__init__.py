"""Forward uncertainty: the distribution of Jv and other outputs (MC, scrambled-Sobol' QMC, LHS).

The sample is split into R independent replicates (R >= 16: independent scrambles for QMC,
independent streams for MC, independent designs for LHS). Point estimates use the pooled sample;
the Monte Carlo standard error of every statistic is the spread of its R replicate values divided
by sqrt(R) (Owen 2013, *Monte Carlo theory, methods and examples*, ch. 17, randomised QMC; from
memory). Each output is summarised for the study's individual (typical-subject uncertainty plus the
between-subject spread) and for the typical subject (uncertainty only), DESIGN.md section 2.

Draws whose output is not finite (NaN / inf) are counted per output and layer, reported, and left
out of that output's statistics; they are never averaged silently.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np

from uncertainty.analyses.propagate.result import PropagateResult, Summary
from uncertainty.analyses.propagate.thresholds import pooled_order, threshold_results, threshold_specs
from uncertainty.analyses.propagate.timeline import timeline as whole_body_timeline
from uncertainty.analyses.sampling import (
    METHODS,
    cube_columns,
    from_cube,
    is_power_of_two,
    next_power_of_two,
    open_cube,
    replicate_seeds,
)
from uncertainty.core.errors import InputError, QualityGateError
from uncertainty.core.parallel import InProcess
from uncertainty.core.units import basis_factor
from uncertainty.forms.catalogue import note_outputs, output_notes, output_unit, study_outputs
from uncertainty.forms.evaluate import evaluate as model_evaluate

DEFAULT_SAMPLES = 16384
DEFAULT_METHOD = "qmc"
DEFAULT_OUTPUTS = ("Jv", "net_pressure", "force_Pc", "force_Pi", "force_pi_c", "force_pi_i")
REPLICATES = 16
DEFAULT_MAX_SAMPLES = 2**22

#: What the body can return: whole-body afferent lymph flow of an adult, L/day. An organ-level filtration
#: whose median exceeds it cannot be a steady state and is flagged (``PropagateResult.flags``).
WHOLE_BODY_LYMPH_L_PER_DAY = 8.0
WHOLE_BODY_LYMPH_ORIGIN = (
    "about 8 L/day of afferent lymph in an adult: Chronic lower limb oedema (review; authors and journal not "
    "confirmed), abstract: approximately eight litres a day pass through the afferent lymphatics, about four "
    "absorbed in the nodes; Levick JR, Michel CC 2010 Cardiovasc Res 87:198-210 (from memory)")
#: Forms whose organ-level filtration is not returned by lymph (the kidney's tubules reabsorb it).
NOT_LYMPH_RETURNED = ("glomerular",)


# --------------------------------------------------------------------------------------------
# Replicated cube streams
# --------------------------------------------------------------------------------------------

#: fewest points one task of the executor draws and evaluates: a take of m points per replicate goes in
#: tasks of ceil(TASK_ROWS / m) consecutive replicates (all of them in one task for a small sample, so a
#: small propagate pays no per-task cost). The split depends only on the sample sizes, never on the
#: number of workers, so the numbers are the same in-process and on any cluster.
TASK_ROWS = 2**15


def replicate_chunks(replicates: int, m: int) -> list[range]:
    """Consecutive replicates evaluated together in one task, for a take of ``m`` points each.

    Parameters
    ----------
    replicates : int
        Number of replicates R.
    m : int
        Points per replicate in this take.

    Returns
    -------
    list of range
        Replicate indices of each task, in order (the last may be shorter).
    """
    per_task = min(replicates, max(1, math.ceil(TASK_ROWS / max(int(m), 1))))
    return [range(i, min(i + per_task, replicates)) for i in range(0, replicates, per_task)]


def replicate_points(k: int, method: str, seed: np.random.SeedSequence, before: Sequence[int], m: int
                     ) -> np.ndarray:
    """The next ``m`` points (m, k) of one replicate's stream in the open cube, after takes of ``before``.

    The stream is rebuilt from the replicate's own seed and the earlier takes replayed (drawing points
    costs little beside the model), so a take can run on any worker: ``qmc`` continues the scrambled
    Sobol' sequence (the union after doubling is again a balanced Sobol' prefix), ``mc`` more
    pseudo-random points, ``lhs`` a fresh independent Latin hypercube per take.

    Parameters
    ----------
    k : int
        Cube dimension (uncertain inputs plus between-subject scores).
    method : str
        ``qmc``, ``mc`` or ``lhs``.
    seed : numpy.random.SeedSequence
        The replicate's seed (child of the study seed).
    before : sequence of int
        Sizes of the earlier takes of this stream.
    m : int
        Points wanted.

    Returns
    -------
    ndarray
        (m, k) points in (0, 1), no unit.

    Raises
    ------
    InputError
        For an unknown method.
    """
    from scipy.stats import qmc

    if method not in METHODS:
        raise InputError(f"unknown sampling method; use one of {', '.join(METHODS)}",
                         key="propagate.method", value=method)
    if k == 0:
        return np.empty((m, 0))
    # a fresh copy of the seed: scipy's QMC engines spawn their streams from the generator's seed
    # sequence (child 0 for the Sobol' scramble, child j for the j-th Latin hypercube), which must not
    # depend on what was drawn from this seed object before
    rng = np.random.default_rng(np.random.SeedSequence(seed.entropy, spawn_key=seed.spawn_key,
                                                       pool_size=seed.pool_size))
    if method == "qmc":
        sobol = qmc.Sobol(k, scramble=True, rng=rng)
        skip = int(sum(before))
        if skip:
            sobol.fast_forward(skip)
        return open_cube(sobol.random(m))
    if method == "lhs":
        for size in before:
            qmc.LatinHypercube(k, rng=rng).random(size)
        return open_cube(qmc.LatinHypercube(k, rng=rng).random(m))
    skip = int(sum(before))
    if skip:
        rng.random((skip, k))
    return open_cube(rng.random((m, k)))


class CubeStream:
    """R independent replicated streams of points in the open cube (0,1)^k.

    ``take(m)`` returns the next m points of each replicate (:func:`replicate_points`): for ``qmc``
    the continuation of each scrambled Sobol' sequence, for ``mc`` more pseudo-random points, for
    ``lhs`` a fresh independent Latin hypercube per replicate.
    """

    def __init__(self, k: int, method: str, seed: Any, replicates: int = REPLICATES) -> None:
        if method not in METHODS:
            raise InputError(f"unknown sampling method; use one of {', '.join(METHODS)}",
                             key="propagate.method", value=method)
        self.k, self.method, self.replicates = k, method, replicates
        self.seeds = replicate_seeds(seed, replicates)
        self.before: list[int] = []

    def take(self, m: int) -> list[np.ndarray]:
        """The next m points (m, k) of every replicate, in the open cube."""
        out = [replicate_points(self.k, self.method, ss, self.before, m) for ss in self.seeds]
        self.before.append(int(m))
        return out


class _Take:
    """Task function of propagation: draw a chunk of replicates' next points and evaluate them.

    A task is (replicate seeds, sizes of the earlier takes, points per replicate); the result is
    ``sample_layers`` on those points (replicate after replicate) with the gated outputs as full
    arrays, plus the ``_``-prefixed extras the sampler returns. The executor's seed is not used: each
    replicate's stream comes from its own seed, a child of the study seed.
    """

    def __init__(self, sample_layers: Callable[[np.ndarray], dict[str, Any]], k: int, method: str,
                 outputs: Sequence[str]) -> None:
        self.sample_layers, self.k, self.method, self.outputs = sample_layers, k, method, list(outputs)

    def __call__(self, task: tuple[tuple[np.random.SeedSequence, ...], tuple[int, ...], int],
                 ss: np.random.SeedSequence) -> dict[str, Any]:
        seeds, before, m = task
        u = np.vstack([replicate_points(self.k, self.method, s, before, m) for s in seeds])
        res = self.sample_layers(u)
        rows = u.shape[0]
        return {layer: (outs if layer.startswith("_") else {name: _rows(outs[name], rows) for name in self.outputs})
                for layer, outs in res.items()}


def _rows(x: Any, n: int) -> np.ndarray:
    """``x`` as a float array of n rows (a constant output repeated), copied only when it must be."""
    a = np.asarray(x, dtype=float)
    return a if a.shape == (n,) else np.broadcast_to(a, (n,)).copy()


def _join(parts: Sequence[Any]) -> Any:
    """Chunk results joined in chunk order: dicts key by key, arrays end to end."""
    if len(parts) == 1:
        return parts[0]
    if isinstance(parts[0], dict):
        return {key: _join([p[key] for p in parts]) for key in parts[0]}
    return np.concatenate([np.asarray(p) for p in parts])


# --------------------------------------------------------------------------------------------
# Summaries
# --------------------------------------------------------------------------------------------

#: Fewest draws per replicate: with fewer, the replicate spread understates the Monte Carlo error of the
#: 95% interval ends (sd of standardised errors 1.54 at 16 draws, 1.28 at 64, 1.15 at 128, against
#: about 1.07 expected from t with 15 df; measured on normal draws, 1500 repetitions each).
MIN_PER_REPLICATE = 128


def _t975(df: int) -> float:
    from scipy.stats import t

    return float(t.ppf(0.975, df))


def _stats(y: np.ndarray) -> np.ndarray:
    """mean, sd, median, q2.5, q97.5, P(y<0) of the finite values of y (NaN when none)."""
    if y.size == 0:
        return np.full(6, np.nan)
    q = np.quantile(y, [0.5, 0.025, 0.975])
    sd = float(np.std(y, ddof=1)) if y.size > 1 else np.nan
    return np.array([y.mean(), sd, q[0], q[1], q[2], np.mean(y < 0)])


def summarize(name: str, replicates: Sequence[np.ndarray], unit: str = "") -> Summary:
    """Summarise one output from its R replicate draw arrays (pooled estimates, replicate SEs)."""
    reps = [np.asarray(r, dtype=float).ravel() for r in replicates]
    finite = [r[np.isfinite(r)] for r in reps]
    nan = int(sum(r.size - f.size for r, f in zip(reps, finite, strict=True)))
    pooled = np.concatenate(finite) if finite else np.empty(0)
    est = _stats(pooled)
    per = np.array([_stats(f) for f in finite])
    R = len(reps)
    with np.errstate(invalid="ignore"):
        se = np.nanstd(per, axis=0, ddof=1) / math.sqrt(R) if R > 1 else np.full(6, np.nan)
    return Summary(
        name=name, unit=unit, mean=float(est[0]), sd=float(est[1]), median=float(est[2]),
        ci95=(float(est[3]), float(est[4])),
        mc_se={"mean": float(se[0]), "sd": float(se[1]), "median": float(se[2]),
               "ci95": [float(se[3]), float(se[4])]},
        p_negative=float(est[5]), p_negative_se=float(se[5]), n=int(pooled.size), nan_draws=nan)


# --------------------------------------------------------------------------------------------
# Core: any sampler of the cube + any model
# --------------------------------------------------------------------------------------------

def section_settings(study: Any, name: str) -> dict[str, Any]:
    """The keys a study file sets in its section ``name`` (our defaults are not filled in).

    Parameters
    ----------
    study : Study
        The study (or a stand-in whose section is a mapping).
    name : str
        The analysis section, e.g. "propagate" or "sensitivity".

    Returns
    -------
    dict
        Key -> value (canonical units) for the keys set; {} when the section is absent.
    """
    sec = getattr(study, name, None)
    if sec is None:
        return {}
    if hasattr(sec, "model_dump"):  # only the keys the file sets; our own defaults otherwise
        return {k: v for k, v in sec.model_dump(exclude_unset=True).items() if v is not None}
    return dict(sec)


def _resolve_samples(samples: int, method: str, replicates: int, notes: list[str],
                     key: str = "propagate.samples") -> int:
    """Per-replicate sample size: samples / replicates, a power of two for qmc (rounded up)."""
    if isinstance(samples, bool) or not isinstance(samples, int | np.integer):
        raise InputError("the number of samples must be a whole number", key=key, value=samples)
    if samples <= 0:
        raise InputError("the number of samples must be positive", key=key, value=samples)
    per = max(2, math.ceil(samples / replicates))
    if method == "qmc" and not is_power_of_two(per):
        per = next_power_of_two(per)
    if per * replicates != samples:
        notes.append(f"samples rounded up from {samples} to {per * replicates} "
                     f"({replicates} replicates of {per}"
                     + (", a power of two as scrambled Sobol' needs)" if method == "qmc" else ")"))
    return per


def starting_samples(samples: int, method: str, replicates: int = REPLICATES) -> int:
    """The sample size propagation starts from (the total over the replicates), as :func:`propagate_arrays`
    rounds and raises it.

    Parameters
    ----------
    samples : int
        Draws asked for (total over the replicates).
    method : str
        ``qmc`` (per-replicate size a power of two), ``mc`` or ``lhs``.
    replicates : int
        Independent replicates.

    Returns
    -------
    int
        The starting total (draws).

    Raises
    ------
    InputError
        ``samples`` is not a positive whole number.
    """
    return max(_resolve_samples(samples, method, replicates, []), MIN_PER_REPLICATE) * replicates


def propagate_arrays(
    sample_layers: Callable[[np.ndarray], dict[str, dict[str, np.ndarray]]],
    k: int,
    outputs: Sequence[str],
    *,
    samples: int = DEFAULT_SAMPLES,
    method: str = DEFAULT_METHOD,
    seed: Any = None,
    tol: float | None = None,
    max_samples: int | None = None,
    replicates: int = REPLICATES,
    units: dict[str, str] | None = None,
    tol_outputs: Sequence[str] | None = None,
    executor: Any = None,
    on_batch: Callable[[dict[str, Any]], None] | None = None,
) -> PropagateResult:
    """Replicated forward propagation over any cube -> outputs map.

    ``sample_layers(u)`` takes cube points (n, k) and returns ``{layer: {output: array(n)}}`` for
    the layers ``individual`` and ``typical``. ``samples`` is the total over ``replicates``
    independent replicates, each of at least :data:`MIN_PER_REPLICATE` draws (raised, with a note).
    With ``tol`` (in the unit of the gated outputs, default the first of ``outputs``), the sample
    doubles until the 95% Monte Carlo margin of both 95%-interval ends, t_{0.975, R-1} x their
    replicate standard error, is below ``tol`` in both layers; QualityGateError (exit 3, carrying the
    result) if ``max_samples`` would be exceeded first.

    Every take runs through ``executor`` (:mod:`uncertainty.core.parallel`, in-process when None) in
    tasks of consecutive replicates (:func:`replicate_chunks`: at least :data:`TASK_ROWS` points a
    task), each drawing its replicates' points from their own seeds (children of ``seed``), so the
    numbers are the same on any executor and any number of workers. ``sample_layers`` must then be
    picklable for a cluster and free of side effects: what the caller wants kept besides the outputs
    it returns under keys starting with ``_`` (arrays, or dicts of arrays, one row per point), and
    ``on_batch`` receives each take's joined result here.
    """
    if replicates < 2:
        raise InputError("at least 2 replicates are needed for a Monte Carlo error", key="replicates",
                         value=replicates)
    notes: list[str] = []
    per = _resolve_samples(samples, method, replicates, notes)
    if per < MIN_PER_REPLICATE:
        notes.append(f"samples raised to {MIN_PER_REPLICATE * replicates}: the Monte Carlo error of the 95% "
                     f"interval ends needs at least {MIN_PER_REPLICATE} draws in each of the {replicates} "
                     "replicates (with fewer it is understated)")
        per = MIN_PER_REPLICATE
    if tol is not None and not (tol > 0):
        raise InputError("the tolerance must be positive", key="tol", value=tol)
    # without a stated max-samples the doubling stops at the default, never below the starting size
    max_samples = max(DEFAULT_MAX_SAMPLES, per * replicates) if max_samples is None else max_samples
    if max_samples < per * replicates:
        raise InputError(f"max-samples is below the starting sample size {per * replicates}",
                         key="max_samples", value=max_samples)
    seeds = tuple(replicate_seeds(seed, replicates))
    task_fn = _Take(sample_layers, k, method, outputs)  # one task function for every take (sent once)
    executor = executor if executor is not None else InProcess()
    before: list[int] = []
    units = dict(units or {})
    gate = list(tol_outputs or outputs[:1])
    store: dict[str, dict[str, list[list[np.ndarray]]]] = {}
    history: list[dict[str, Any]] = []
    take = per
    total_per = 0
    while True:
        # replicates in chunks (vectorised evaluation within a chunk), joined in replicate order
        tasks = [(tuple(seeds[r] for r in c), tuple(before), take) for c in replicate_chunks(replicates, take)]
        parts = executor.map(task_fn, tasks, seed=0, label="propagate")
        before.append(take)
        res = _join(parts)
        if on_batch is not None:
            on_batch(res)
        for layer, outs in res.items():
            if layer.startswith("_"):
                continue
            for name in outputs:
                store.setdefault(layer, {}).setdefault(name, [[] for _ in range(replicates)])
                parts = np.split(np.broadcast_to(np.asarray(outs[name], dtype=float), (take * replicates,)),
                                 replicates)
                for r in range(replicates):
                    store[layer][name][r].append(parts[r])
        total_per += take
        summaries = {layer: {name: summarize(name, [np.concatenate(x) for x in reps], units.get(name, ""))
                             for name, reps in outs_.items()} for layer, outs_ in store.items()}
        worst = max((max(summaries[layer][g].mc_se["ci95"]) for layer in summaries for g in gate),
                    default=float("nan"))
        margin = _t975(replicates - 1) * worst
        history.append({"samples": total_per * replicates, "worst_ci95_mc_se": worst, "worst_ci95_mc_margin": margin})
        if tol is None or margin < tol:
            converged = None if tol is None else True
            break
        if 2 * total_per * replicates > max_samples:
            converged = False
            break
        take = total_per  # doubling
    draws = {layer: {name: np.concatenate([np.concatenate(x) for x in reps])
                     for name, reps in outs_.items()} for layer, outs_ in store.items()}
    result = PropagateResult(method=method, samples=total_per * replicates, replicates=replicates,
                             seed=seed if isinstance(seed, int | type(None)) else str(seed),
                             outputs=list(outputs), units=units, summaries=summaries, draws=draws,
                             notes=notes, tol=tol, converged=converged, history=history)
    for layer, outs_ in summaries.items():
        for name, s in outs_.items():
            if s.nan_draws:
                result.warnings.append(
                    f"{s.nan_draws} of {s.n + s.nan_draws} {layer} draws of {name} are not finite "
                    f"(NaN/inf); they are left out of its statistics")
    if converged is False:
        raise QualityGateError(
            f"95% Monte Carlo margin of the 95% interval ends (t x se = {margin:.3g}) is still above "
            f"tol={tol:g} at {total_per * replicates} samples; the next doubling would exceed "
            f"max-samples={max_samples}", result=result)
    return result


# --------------------------------------------------------------------------------------------
# Study layer
# --------------------------------------------------------------------------------------------

def available_outputs(study: Any, evaluate: Callable | None = None) -> list[str]:
    """Output names the study's model returns, in order, from the form catalogue (never by running it).

    Parameters
    ----------
    study : Study
        The study (its ``model``, ``priors``, ``derived``, ``tissue``, ``tissue_mass_kg``, ``Pi_ref``).
    evaluate : callable, optional
        Accepted for callers that pass their forward map; not called.

    Returns
    -------
    list of str

    Raises
    ------
    StudyError
        For an unknown model form.
    """
    return study_outputs(study)


def model_evaluator(evaluate: Callable | None) -> Callable:
    """``evaluate`` itself, or the model-form evaluation when it is None.

    Parameters
    ----------
    evaluate : callable or None
        ``evaluate(study, values) -> {output: array}`` (canonical units), or None.

    Returns
    -------
    callable
        The evaluation to use.
    """
    return model_evaluate if evaluate is None else evaluate


def _output_units(outputs: Sequence[str]) -> dict[str, str]:
    return {k: output_unit(k) for k in outputs}


def propagate(study: Any, samples: int | None = None, method: str | None = None, seed: int | None = None,
              tol: float | None = None, max_samples: int | None = None,
              outputs: Sequence[str] | None = None, *, replicates: int = REPLICATES,
              evaluate: Callable | None = None, executor: Any = None) -> PropagateResult:
    """Distribution of the study's outputs (Jv in its canonical unit and the rest) for its
    individual and its typical subject.

    Arguments override the study's ``[propagate]`` section (``samples``, ``method``, ``outputs``);
    ``seed`` defaults to the study's. ``tol`` is in the unit of the first output; see
    :func:`propagate_arrays`. Raises InputError for an unknown output, zero samples or an unknown
    method; QualityGateError when ``tol`` is not reached within ``max_samples``.

    ``executor`` (:mod:`uncertainty.core.parallel`, default in-process): the draws go through it in
    chunks of replicates (:func:`replicate_chunks`), each replicate's stream from its own child of
    the seed, so the numbers are identical in-process and on any number of workers.
    """
    sec = section_settings(study, "propagate")
    samples = sec.get("samples", DEFAULT_SAMPLES) if samples is None else samples
    method = sec.get("method", DEFAULT_METHOD) if method is None else method
    if method not in METHODS:
        raise InputError(f"unknown sampling method; use one of {', '.join(METHODS)}",
                         file=_file(study), key="propagate.method", value=method)
    seed = getattr(study, "seed", None) if seed is None else seed
    tol = sec.get("tol") if tol is None else tol
    max_samples = sec.get("max_samples") if max_samples is None else max_samples
    if "replicates" in sec and replicates == REPLICATES:
        replicates = sec["replicates"]
    if replicates < REPLICATES:
        raise InputError(f"at least {REPLICATES} independent replicates are needed for the Monte Carlo "
                         "standard errors (DESIGN.md: at least 16 scrambles)", file=_file(study),
                         key="propagate.replicates", value=replicates)
    evaluate = model_evaluator(evaluate)
    have = available_outputs(study, evaluate)
    if outputs is None:
        outputs = sec.get("outputs") or [o for o in DEFAULT_OUTPUTS if o in have] + \
            [o for o in have if o not in DEFAULT_OUTPUTS]
    outputs = list(outputs)
    for o in outputs:
        if o not in have:
            raise InputError(f"no such output; the {getattr(study, 'model', 'study')} model gives "
                             f"{', '.join(have)}", file=_file(study), key="propagate.outputs", value=o)
    if "Jv" in have and "Jv" not in outputs:
        outputs.append("Jv")  # P(absorption) always reported
    specs = threshold_specs(study, have)
    outputs += [o for o in dict.fromkeys(s["output"] for s in specs) if o not in outputs]
    d = len(study.names)
    k = len(cube_columns(study, "individual"))
    has_bs = k > d

    form = getattr(study, "model", None)
    note_keys = note_outputs(form)  # outputs whose draws the form's notes read
    kept: list[dict[str, np.ndarray]] = []  # individual draws the form's notes read (output_notes)
    players = {layer: list(dict.fromkeys(s for s, _ in cube_columns(study, layer))) for layer in ("individual",
                                                                                               "typical")}
    kept_inputs: list[dict[str, dict[str, np.ndarray]]] = []  # input draws of the threshold drivers
    sample_layers = _StudyLayers(study, evaluate, d, has_bs, players if specs else None, note_keys)

    def keep(batch: dict[str, Any]) -> None:
        if "_inputs" in batch:
            kept_inputs.append(batch["_inputs"])
        if "_notes" in batch:
            kept.append(batch["_notes"])

    def add_thresholds(res: PropagateResult) -> None:
        if specs and kept_inputs:
            inputs = {layer: {s: pooled_order([b[layer][s] for b in kept_inputs], res.replicates)
                              for s in players[layer]} for layer in ("individual", "typical")}
            res.thresholds = threshold_results(specs, res.draws, inputs, res.replicates)

    def add_form_notes(res: PropagateResult) -> None:
        if kept:
            draws = {key: np.concatenate([b[key] for b in kept]) for key in note_keys}
            res.notes.extend(n for n in output_notes(form, draws) if n not in res.notes)

    try:
        result = propagate_arrays(sample_layers, k, outputs, samples=samples, method=method, seed=seed,
                                  tol=tol, max_samples=max_samples, replicates=replicates,
                                  units=_output_units(outputs), executor=executor, on_batch=keep)
    except QualityGateError as exc:
        if exc.result is not None:
            exc.result.study = study_meta(study)
            add_form_notes(exc.result)
            add_thresholds(exc.result)
            flag_implausible_flux(exc.result, getattr(study, "tissue_mass_kg", None), form)
        raise
    except InputError as exc:
        if exc.file is None and _file(study):
            raise InputError(exc.reason, file=_file(study), key=exc.key, value=exc.value) from exc
        raise
    result.study = study_meta(study)
    add_form_notes(result)
    add_thresholds(result)
    flag_implausible_flux(result, getattr(study, "tissue_mass_kg", None), form)
    if getattr(study, "timeline", None) is not None:  # whole_body form: time courses after the interventions
        result.timeline = whole_body_timeline(study, seed, executor=executor)
    if not has_bs:
        result.notes.append("no between-subject spread declared: the individual equals the typical "
                            "subject")
    return result


class _StudyLayers:
    """The study's outputs for its individual and its typical subject at cube points (picklable).

    Returns ``{"individual": {...}, "typical": {...}}`` plus ``_inputs`` (layer -> input draws of the
    threshold drivers, when ``players`` is given) and ``_notes`` (the individual draws the form's
    notes read), one row per point.
    """

    def __init__(self, study: Any, evaluate: Callable, d: int, has_bs: bool,
                 players: dict[str, list[str]] | None, note_keys: Sequence[str]) -> None:
        self.study, self.evaluate, self.d, self.has_bs = study, evaluate, d, has_bs
        self.players, self.note_keys = players, list(note_keys)

    def __call__(self, u: np.ndarray) -> dict[str, Any]:
        study, n = self.study, u.shape[0]
        typ_values = from_cube(study, u[:, :self.d], "typical")
        ind_values = from_cube(study, u, "individual") if self.has_bs else typ_values
        typ = self.evaluate(study, typ_values)
        ind = self.evaluate(study, ind_values) if self.has_bs else typ
        out: dict[str, Any] = {"individual": ind, "typical": typ}
        if self.players is not None:
            out["_inputs"] = {layer: {s: _rows(vals[s], n) for s in self.players[layer]}
                              for layer, vals in (("individual", ind_values), ("typical", typ_values))}
        if self.note_keys and all(key in ind for key in self.note_keys):
            out["_notes"] = {key: _rows(ind[key], n) for key in self.note_keys}
        return out


def flag_implausible_flux(result: PropagateResult, tissue_mass_kg: float | None, form: str | None) -> None:
    """Flag an organ-level filtration beyond what the body can return (plausibility guard).

    With a tissue mass, the organ's filtration in L/day is Jv (mL/min/100g) times the organ's 100 g units
    times 1440/1000. When its median (individual or typical subject) exceeds
    :data:`WHOLE_BODY_LYMPH_L_PER_DAY`, a flag (a dict: ``kind``, ``output``, ``layer``, ``median``,
    ``limit``, ``unit``, ``message``, ``source``) is added to ``result.flags`` and its message to
    ``result.warnings`` (shown by the terminal table, the JSON and the report). Forms in
    :data:`NOT_LYMPH_RETURNED` (glomerular filtration, reabsorbed by the tubules) are not checked.

    Parameters
    ----------
    result : PropagateResult
        Changed in place.
    tissue_mass_kg : float or None
        The organ's mass in kg; nothing is checked without it.
    form : str or None
        The study's model form.
    """
    if tissue_mass_kg is None or form in NOT_LYMPH_RETURNED:
        return
    per_day = basis_factor("100g", "organ", tissue_mass_kg=tissue_mass_kg, symbol="Jv") * 1440.0 / 1000.0
    for layer in ("individual", "typical"):
        s = result.summaries.get(layer, {}).get("Jv")
        if s is None or not math.isfinite(s.median):
            continue
        median = s.median * per_day  # a positive scale: the median of the flux is the scaled median
        if median > WHOLE_BODY_LYMPH_L_PER_DAY:
            who = "the study's individual" if layer == "individual" else "the typical subject"
            message = (f"implausible organ-level filtration: the median for {who} is {median:.3g} L/day "
                       f"({median * 1000.0 / 24.0:.3g} mL/h) over {tissue_mass_kg:g} kg, more than the "
                       f"{WHOLE_BODY_LYMPH_L_PER_DAY:g} L/day the whole body's lymph can return, so it cannot "
                       f"be a steady state (source: {WHOLE_BODY_LYMPH_ORIGIN})")
            result.flags.append({"kind": "implausible_flux", "output": "Jv_L_per_day", "layer": layer,
                                 "median": median, "limit": WHOLE_BODY_LYMPH_L_PER_DAY, "unit": "L/day",
                                 "message": message, "source": WHOLE_BODY_LYMPH_ORIGIN})
            result.warnings.append(message)


def _file(study: Any) -> str | None:
    p = getattr(study, "path", None)
    return str(p) if p else None


def study_meta(study: Any) -> dict[str, Any]:
    """What a result records about its study: title, path, hash, model form and tissue.

    Parameters
    ----------
    study : Study
        The study.

    Returns
    -------
    dict
        The five entries (None where the study has none).
    """
    return {"title": getattr(study, "title", None), "path": _file(study),
            "hash": getattr(study, "hash", None), "model": getattr(study, "model", None),
            "tissue": getattr(study, "tissue", None)}
