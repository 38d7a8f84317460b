"""Entry points: :func:`infer` (a study's posterior, gated) and :func:`fit` (loop-friendly).

``fit`` builds and samples the model of a study with an optional overriding observation list
(e.g. simulated trial readings) and returns the result without raising on the quality gate;
``infer`` adds the model checks, the optional model comparison and raises
:class:`~uncertainty.core.errors.QualityGateError` (exit status 3) when the chains fail the gate.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from typing import Any

import numpy as np

from uncertainty.analyses.inference import checks as checks_mod
from uncertainty.analyses.inference.answers import add_answers
from uncertainty.analyses.inference.compare import compare_forms
from uncertainty.analyses.inference.diagnostics import Gate, contraction_note, diagnose, gate_message, summary_mcse
from uncertainty.analyses.inference.model_builder import BuiltModel, apply_layer, build_model, is_positive, spread_ratio
from uncertainty.analyses.inference.observations import kind_module
from uncertainty.analyses.inference.posterior_sensitivity import posterior_sensitivity
from uncertainty.analyses.inference.posterior_timeline import posterior_timeline
from uncertainty.analyses.inference.problem import Problem, normalise_observations, problem_from_study
from uncertainty.analyses.inference.result import InferenceResult
from uncertainty.analyses.inference.samplers import SampleRun, compile_model, posterior_mode, sample
from uncertainty.analyses.inference.summaries import CONFOUNDED_CORRELATION, PRIOR_BOUND_CONTRACTION, flat, summarise
from uncertainty.analyses.inference.worker_chains import sample_on_workers
from uncertainty.core import units
from uncertainty.core.errors import InputError, QualityGateError
from uncertainty.core.stage import stage
from uncertainty.forms.catalogue import note_outputs, output_notes
from uncertainty.study import InferSection

#: prior draws used for prior moments that have no closed form (individual layers, Jv)
PRIOR_DRAWS = 8000
#: NUTS target acceptance (study [infer] default; its description gives the reason for 0.95).
DEFAULT_TARGET_ACCEPT: float = InferSection.model_fields["target_accept"].default
#: where chains start: "auto" (the posterior mode when an observation kind asks for it with
#: START_AT_MODE, else the priors' central points), "mode" or "prior"
STARTS = ("auto", "mode", "prior")


def _problem(study: Any, observations: Sequence[Any] | None, model: str | None) -> Problem:
    if isinstance(study, Problem):
        if observations is not None:
            return dataclasses.replace(study, observations=normalise_observations(
                observations, file=study.file, density=study.density, tissue_mass_kg=study.tissue_mass_kg))
        return study
    return problem_from_study(study, observations=observations, model=model)


def fit(study: Any, observations: Sequence[Any] | None = None, *, sampler: str = "nutpie",
        seed: int | None = None, chains: int = 4, draws: int = 1000, tune: int = 1000,
        gate: Any = None, model: str | None = None, checks: bool = False,
        target_accept: float = DEFAULT_TARGET_ACCEPT, start: str = "auto", progress: bool = False,
        sensitivity: bool = False, executor: Any = None) -> InferenceResult:
    """Build and sample the posterior of ``study`` (a Study or a Problem); never raises on the gate.

    ``observations`` replaces the study's own observation list (records in study-file form);
    ``model`` replaces its model form; ``start`` is one of :data:`STARTS`. Returns an
    :class:`InferenceResult` whose ``doc["diagnostics"]["passed"]`` says whether the gate passed.
    Jv in mL/min per basis. ``progress`` shows the sampler's live per-chain table on stderr.
    ``sensitivity`` adds the sensitivity of the posterior (``summarise_run``; left out of refit loops).
    ``executor`` (:mod:`uncertainty.core.parallel`) runs each chain as a task on its workers
    (:mod:`~uncertainty.analyses.inference.worker_chains`); without it the sampler runs the chains here.
    """
    problem = _problem(study, observations, model)
    if not problem.observations:
        raise InputError("the study has no [[observations]] to update the priors from",
                         file=problem.file, key="observations", value=None)
    if seed is None:
        seed = getattr(problem.study, "seed", None)
    built = build_model(problem)
    mode, mode_seconds = _start_point(built, start)
    if executor is None:
        run = sample(built.model, sampler=sampler, chains=chains, draws=draws, tune=tune, seed=seed,
                     target_accept=target_accept, start=mode, progress=progress)
    else:
        run = sample_on_workers(executor, problem, sampler=sampler, chains=chains, draws=draws, tune=tune,
                                target_accept=target_accept, seed=seed, start=mode)
    with stage(progress, "summarising the draws" + (" and running the model checks" if checks else ""),
               "summarised the draws" + (" and ran the model checks" if checks else "")):
        result = summarise_run(built, run, Gate.coerce(gate), seed=seed, sensitivity=sensitivity)
        _add_timeline(result, built)
        if checks:
            result.doc["checks"] = checks_mod.run_checks(built, result.idata, seed=seed)
    if mode is not None:
        result.doc["notes"].append(f"chains started around the posterior mode (found in {mode_seconds:.1f} s), "
                                   "with uniform jitter of +/-1 on the unconstrained scale")
    return result


def _add_timeline(result: InferenceResult, built: BuiltModel) -> None:
    """The posterior time courses of a ``whole_body`` study into ``result.doc["timeline"]`` (nothing for another
    form; a failure is noted, never loses the fit)."""
    try:
        tl = posterior_timeline(built, result.idata)
    except Exception as exc:  # noqa: BLE001 - a summary; a failure must not lose the fit
        result.doc["notes"].append(f"posterior time courses not computed: {type(exc).__name__}: {exc}")
        return
    if tl is not None:
        result.doc["timeline"] = tl


def check_model(study: Any) -> dict[str, Any]:
    """Declare the inference model of ``study`` without compiling or sampling it, so that every
    refusal :func:`infer` would make (an observation the model cannot use, a group effect on a
    quantity that is not uncertain, a quantity a kind needs and the study lacks) is raised now.

    Parameters
    ----------
    study : Study or Problem
        A study with ``[[observations]]`` (and optionally ``[infer]``).

    Returns
    -------
    dict
        ``subjects`` (count), ``groups`` (labels), ``terms`` (likelihood terms, one per observation
        entry), ``readings`` (values they hold), ``free_variables`` (PyMC free random variables).

    Raises
    ------
    InputError
        The refusal, naming the study file, the key path and the value (exit 2 on the command line).
    """
    problem = _problem(study, None, None)
    if not problem.observations:
        raise InputError("the study has no [[observations]] to update the priors from",
                         file=problem.file, key="observations", value=None)
    settings(study)
    built = build_model(problem, structure_only=True)
    readings = sum(int(np.size(t.subjects)) if t.observation.kind == "volume_time_course"
                   else int(np.size(t.observation.values)) for t in built.terms)
    return {"subjects": len(built.subjects) if built.hierarchical else 1, "groups": list(built.groups),
            "terms": [t.name for t in built.terms], "readings": readings,
            "free_variables": len(built.model.free_RVs)}


def settings(study: Any, **given: Any) -> dict[str, Any]:
    """Sampler settings and gate for ``study``: each value given (not None) wins, then the study's
    ``[infer]`` section, then the defaults of :class:`uncertainty.study.InferSection`.

    Returns ``{sampler, chains, draws, tune, target_accept, start, gate}`` (``gate`` a dict of the
    thresholds unless one was given).
    """
    section = getattr(study, "infer", None)
    if section is None and isinstance(study, Problem):
        section = getattr(study.study, "infer", None)
    if section is None:
        section = InferSection()
    out = {k: getattr(section, k) for k in ("sampler", "chains", "draws", "tune", "target_accept", "start")}
    out["gate"] = section.gate()
    out.update({k: v for k, v in given.items() if v is not None})
    return out


def with_kind_notes(notes: Sequence[str], observations: Sequence[Any], problem: Any = None) -> list[str]:
    """``notes`` plus each observation kind's note that no note already ends with (a kind that noted it after
    the observation's key, ``observations[3]: ...``, is not noted twice).

    Parameters
    ----------
    notes : sequence of str
        The notes of the built model.
    observations : sequence of Observation
        The problem's observations.
    problem : Problem, optional
        The problem they belong to: a kind whose note depends on the study or the observation (a
        ``kind_note(obs, problem)`` hook: ``body_weight`` in a whole_body study, ``urine`` read as rates) gives
        that note; without it, and for the other kinds, the kind's ``NOTE``.

    Returns
    -------
    list of str
        The notes, each once.
    """
    out = list(notes)
    for obs in observations:
        module = kind_module(obs)
        hook = getattr(module, "kind_note", None)
        note = hook(obs, problem) if hook is not None else getattr(module, "NOTE", "")
        if note and not any(n.endswith(note) for n in out):
            out.append(note)
    return out


def infer(study: Any, sampler: str | None = None, seed: int | None = None, chains: int | None = None,
          draws: int | None = None, tune: int | None = None, gate: Any = None, compare_models: bool = False,
          checks: bool = True, observations: Sequence[Any] | None = None,
          target_accept: float | None = None, start: str | None = None, progress: bool = False,
          executor: Any = None) -> InferenceResult:
    """Posterior of a study from its observations, with diagnostics and model checks.

    Settings left as None come from the study's ``[infer]`` section, else the defaults (nutpie,
    4 chains x (1000 + 1000), target_accept 0.95, start "auto"; gate R-hat <= 1.01, bulk ESS >= 400,
    no divergences). Raises QualityGateError (exit 3, naming the failing quantities, the result
    attached) when the chains fail the gate. Intervals are in canonical units (Jv in mL/min per the
    study's basis). ``progress`` shows the sampler's live per-chain table (draws, divergences so far,
    time left) on stderr while the main fit samples. ``executor`` runs the main fit's chains as tasks on
    its workers (one per chain; see :func:`fit`).
    """
    opts = settings(study, sampler=sampler, chains=chains, draws=draws, tune=tune, gate=gate,
                    target_accept=target_accept, start=start)
    result = fit(study, observations, seed=seed, checks=checks, progress=progress, sensitivity=True,
                 executor=executor, **opts)
    if compare_models:
        result.doc["comparison"] = compare_forms(study, fit=fit, sampler=opts["sampler"], seed=seed,
                                                 chains=opts["chains"], draws=opts["draws"], tune=opts["tune"],
                                                 observations=observations)
    if not result.passed:
        result.doc["trustworthy"] = False
        raise QualityGateError(f"intervals not trustworthy: {gate_message(result.doc['diagnostics'])}",
                               result=result)
    return result


def _start_point(built: BuiltModel, start: str) -> tuple[dict[str, Any] | None, float]:
    """The posterior mode to start the chains from (and the seconds it took), or (None, 0)."""

    if start not in STARTS:
        raise InputError(f"start must be one of {', '.join(STARTS)}", file=built.problem.file, key="start",
                         value=start)
    wanted = start == "mode" or (start == "auto" and any(
        getattr(kind_module(o), "START_AT_MODE", False) for o in built.problem.observations))
    return posterior_mode(built.model) if wanted else (None, 0.0)


# ---------------------------------------------------------------------------------------------
def _prior_draws(built: BuiltModel, rng: np.random.Generator, n: int) -> dict[str, np.ndarray]:
    """Prior draws (numpy) of the reported quantities at their reported level, and of Jv."""
    problem = built.problem
    typical: dict[str, np.ndarray] = {}
    for name, prior in problem.priors.items():
        typical[name] = np.asarray(prior.frozen().rvs(size=n, random_state=rng), dtype=float)
    typical.update(checks_mod.correlate_prior_draws(problem, typical))   # the study's copula
    level = dict(typical)
    if not built.hierarchical:
        for name in built.spreads:
            level[name] = apply_layer(problem.priors[name], typical[name], rng.standard_normal(n), np)
    try:
        outs = problem.evaluate({**problem.fixed, **level}, np)
        level["Jv"] = np.asarray(outs["Jv"], dtype=float) * np.ones(n)
    except Exception:  # noqa: BLE001 - prior Jv is informative only
        pass
    return level


def _reported(built: BuiltModel, idata: Any, name: str) -> np.ndarray:
    if built.hierarchical:
        return flat(idata, name)
    return flat(idata, f"{name}__subject")[:, 0]


def _chains(built: BuiltModel, idata: Any, name: str) -> np.ndarray:
    """(chain, draw) draws of a reported quantity (typical value with subjects, else the individual's)."""
    if built.hierarchical:
        return np.asarray(idata.posterior[name].values)
    return np.asarray(idata.posterior[f"{name}__subject"].values)[..., 0]


def _new_subject(built: BuiltModel, idata: Any, rng: np.random.Generator) -> tuple[np.ndarray, dict[str, Any]]:
    vals = new_subject_values(built, idata, rng)
    return np.asarray(built.problem.evaluate(vals, np)["Jv"], dtype=float), vals


def new_subject_values(built: BuiltModel, idata: Any, rng: np.random.Generator) -> dict[str, Any]:
    """Posterior draws of each quantity for a new subject: the typical value plus a fresh
    between-subject layer (posterior spread where sampled), then each observation kind's hook.
    Canonical units; one value per posterior draw (fixed quantities as given)."""
    problem = built.problem
    vals: dict[str, Any] = dict(problem.fixed)
    for name in problem.priors:
        typ = flat(idata, name)
        sp = built.spreads.get(name)
        if sp is None:
            vals[name] = typ
            continue
        kind, declared = sp
        ratio: Any = 1.0
        if f"{name}__spread" in idata.posterior:
            ratio = spread_ratio(kind, declared, flat(idata, f"{name}__spread"), np)
        vals[name] = apply_layer(problem.priors[name], typ, rng.standard_normal(typ.shape[0]), np, ratio)
    for hook in _kind_hooks(built, "new_subject"):
        vals = hook(built, idata, vals, rng)
    return vals


def _kind_hooks(built: BuiltModel, attr: str) -> list[Any]:
    seen, hooks = set(), []
    for obs in built.problem.observations:
        mod = kind_module(obs)
        fn = getattr(mod, attr, None)
        if fn is not None and mod.__name__ not in seen:
            seen.add(mod.__name__)
            hooks.append(fn)
    return hooks


def _transform(x: np.ndarray, positive: bool) -> np.ndarray:
    return np.log(np.maximum(x, 1e-300)) if positive else x


def identifiability(built: BuiltModel, post: dict[str, np.ndarray], prior: dict[str, np.ndarray],
                    contraction: dict[str, float]) -> dict[str, Any]:
    """Which quantities stay prior-bound and which pairs the data identify only in combination.

    A pair is confounded when its posterior correlation (log scale for positive quantities)
    exceeds CONFOUNDED_CORRELATION in size while the prior correlation is below 0.3; the
    contraction along the pair's least-informed direction (prior-standardised) is reported.
    """
    import scipy.linalg

    names = [n for n in built.quantities if n in post and n in prior]
    prior_bound = [n for n in names if contraction.get(n, 0.0) < PRIOR_BOUND_CONTRACTION]
    pos = {n: is_positive(built.problem.priors[n]) for n in names}
    pairs = []
    for a_i, a in enumerate(names):
        for b in names[a_i + 1:]:
            pa, pb = _transform(prior[a], pos[a]), _transform(prior[b], pos[b])
            qa, qb = _transform(post[a], pos[a]), _transform(post[b], pos[b])
            if np.std(qa) == 0 or np.std(qb) == 0:
                continue
            r_post = float(np.corrcoef(qa, qb)[0, 1])
            r_prior = float(np.corrcoef(pa, pb)[0, 1])
            if abs(r_post) < CONFOUNDED_CORRELATION or abs(r_prior) > 0.3:
                continue
            # posterior variance relative to the prior's along each direction (the prior's own
            # correlation included): generalised eigenvalues of the two covariance matrices
            lam = scipy.linalg.eigh(np.cov(np.vstack([qa, qb])), np.cov(np.vstack([pa, pb])),
                                    eigvals_only=True)
            pairs.append({
                "pair": [a, b], "posterior_correlation": r_post,
                "contraction_unidentified": float(1.0 - lam[-1]),
                "contraction_identified": float(1.0 - lam[0]),
                "note": (f"the data identify only a combination of {a} and {b} (posterior "
                         f"correlation {r_post:+.2f}); along the other direction the posterior stays "
                         f"at its prior (contraction {1.0 - lam[-1]:.2f})"),
            })
    return {"prior_bound": prior_bound, "confounded": pairs}


def posterior_output_notes(problem: Problem, post: dict[str, np.ndarray]) -> list[str]:
    """Notes the model form calls for on posterior draws (the catalogue's ``output_notes``; e.g. the glomerular
    "Kf is only bounded below" note). ``post`` holds one array of draws per quantity of ``problem.priors``
    at the reported level (canonical units); fixed quantities come from ``problem.fixed``."""
    if not note_outputs(problem.model_form) or any(name not in post for name in problem.priors):
        return []
    outs = problem.evaluate({**problem.fixed, **{name: post[name] for name in problem.priors}}, np)
    return output_notes(problem.model_form, outs)


def summarise_run(built: BuiltModel, run: SampleRun, gate: Gate, seed: int | None,
                  sensitivity: bool = False) -> InferenceResult:
    """Turn posterior draws into the result document (intervals, contraction, diagnostics).

    With ``sensitivity`` the document also holds ``posterior_sensitivity``: given-data first-order
    indices of Jv on the posterior draws beside the same indices on the prior draws (a second or two
    of bootstrap; :func:`infer` asks for it, refit loops do not).
    """

    idata = run.idata
    problem = built.problem
    rng = np.random.default_rng(None if seed is None else seed + 7919)
    diag_vars = list(built.quantities) + [f"{q}__spread" for q in built.spreads
                                          if f"{q}__spread" in idata.posterior]
    diag_vars += [v for v in built.extra_params if v in idata.posterior]
    diag_vars += ["Jv__typical", "Jv__subject"]
    diag_vars += [v for v in idata.posterior.data_vars if v.endswith("__subject_z")]
    diagnostics = diagnose(idata, diag_vars, gate)
    prior = _prior_draws(built, rng, PRIOR_DRAWS)
    post: dict[str, np.ndarray] = {}
    parameters: dict[str, Any] = {}
    contraction: dict[str, float] = {}
    for name in built.quantities:
        x = _reported(built, idata, name)
        post[name] = x
        p = problem.priors[name]
        if built.hierarchical or name not in built.spreads:
            prior_mean, prior_sd = float(p.mean()), float(p.sd())
            prior_ci = [float(v) for v in p.frozen().ppf([0.025, 0.975])]
        else:
            prior_mean, prior_sd = float(prior[name].mean()), float(prior[name].std(ddof=1))
            prior_ci = [float(v) for v in np.quantile(prior[name], [0.025, 0.975])]
        s = summarise(x)
        c = float(1.0 - s["sd"] ** 2 / prior_sd**2) if prior_sd > 0 else float("nan")
        contraction[name] = c
        s["mcse"] = summary_mcse(_chains(built, idata, name))
        parameters[name] = {**s, "contraction": c,
                            "prior": {"mean": prior_mean, "sd": prior_sd, "ci95": prior_ci},
                            "prior_bound": bool(c < PRIOR_BOUND_CONTRACTION)}
    jv_subject = flat(idata, "Jv__subject")
    jv_typical = flat(idata, "Jv__typical")
    subjects = {}
    if built.hierarchical:
        for k, sid in enumerate(built.subjects):
            block: dict[str, Any] = {"Jv": summarise(jv_subject[:, k])}
            if sid in built.subject_group:
                block["group"] = built.subject_group[sid]
            subjects[sid] = block
    jv_main = jv_typical if built.hierarchical else jv_subject[:, 0]
    new, new_values = _new_subject(built, idata, rng)
    jv_block = summarise(jv_main)
    jv_block["mcse"] = summary_mcse(_chains(built, idata, "Jv__typical" if built.hierarchical else "Jv"))
    if "Jv" in prior:
        pv = float(np.var(prior["Jv"], ddof=1))
        jv_block["contraction"] = float(1.0 - jv_block["sd"] ** 2 / pv) if pv > 0 else float("nan")
        post["Jv"] = jv_main
    spreads = {}
    for q, (kind, declared) in built.spreads.items():
        if f"{q}__spread" in idata.posterior:
            spreads[q] = {**summarise(flat(idata, f"{q}__spread")), "kind": kind, "declared": declared}
    extras = {}
    for v in built.extra_params:
        if v not in idata.posterior:
            continue
        x = flat(idata, v).reshape(flat(idata, v).shape[0], -1)[:, 0]
        extras[v] = summarise(x)
        ep = built.extra_priors.get(v)
        if ep is not None and not ep.is_fixed:
            c = float(1.0 - extras[v]["sd"] ** 2 / ep.sd() ** 2)
            extras[v].update({"contraction": c, "prior": {"mean": ep.mean(), "sd": ep.sd(),
                                                          "ci95": list(ep.interval(0.95))},
                              "prior_bound": bool(c < PRIOR_BOUND_CONTRACTION)})
    if built.hierarchical and built.context is not None:
        for var, label in built.context.subject_params.items():
            draws = flat(idata, var)
            for k, sid in enumerate(built.subjects):
                subjects[sid][label] = summarise(draws[:, k])

    notes = with_kind_notes(built.notes, problem.observations, problem)
    for note in posterior_output_notes(problem, post):
        if note not in notes:
            notes.append(note)
    ident = identifiability(built, post, prior, contraction)
    ident["prior_bound"] += [v for v, e in extras.items() if e.get("prior_bound")]
    for pair in ident["confounded"]:
        notes.append(pair["note"])
    for name, p in parameters.items():
        note = contraction_note(name, p["contraction"], p["mcse"]["ess_bulk"])
        if note:
            notes.append(note)
    if not diagnostics["passed"]:
        notes.insert(0, "QUALITY GATE FAILED, these figures are not trustworthy: " + gate_message(diagnostics))
    if ident["prior_bound"]:
        notes.append("prior-bound (the data barely inform them): " + ", ".join(ident["prior_bound"]))
    unit_map = {}
    for name in list(built.quantities) + ["Jv"]:
        try:
            unit_map[name] = units.canonical_unit(name, problem.basis)
        except Exception:  # noqa: BLE001 - quantity without a registered unit
            unit_map[name] = ""
    doc = {
        "model": problem.model_form,
        "sampler": run.sampler,
        "seed": seed,
        "chains": int(idata.posterior.sizes["chain"]),
        "draws": int(idata.posterior.sizes["draw"]),
        "level": "typical subject" if built.hierarchical else "the study's individual",
        "Jv": jv_block,
        "typical": {"Jv": summarise(jv_typical)},
        "subjects": subjects,
        "new_subject": {"Jv": summarise(new)},
        "parameters": parameters,
        "between_subject": spreads,
        "other_parameters": extras,
        "identifiability": ident,
        "diagnostics": {k: v for k, v in diagnostics.items()},
        "trustworthy": bool(diagnostics["passed"]),
        "notes": notes,
        "units": unit_map,
    }
    try:
        add_answers(doc, built, idata, new_values)
    except Exception as exc:  # noqa: BLE001 - the answers are summaries; a failure must not lose the fit
        doc["notes"].append(f"per-subject and group answers not computed: {type(exc).__name__}: {exc}")
    try:
        if sensitivity:
            doc["posterior_sensitivity"] = _posterior_sensitivity(built, post, jv_main, prior, new_values, new,
                                                                  diagnostics, seed)
    except Exception as exc:  # noqa: BLE001 - a summary; a failure must not lose the fit
        doc["notes"].append(f"sensitivity of the posterior not computed: {type(exc).__name__}: {exc}")
    return InferenceResult(doc=doc, idata=idata, built=built, prior_draws=prior,
                           new_subject_draws=new,
                           timing={"compile_s": run.compile_seconds, "sample_s": run.sample_seconds})


def _posterior_sensitivity(built: BuiltModel, post: dict[str, np.ndarray], jv: np.ndarray,
                           prior: dict[str, np.ndarray], new_values: dict[str, Any], new_jv: np.ndarray,
                           diagnostics: dict[str, Any], seed: int | None) -> dict[str, Any]:
    """The ``posterior_sensitivity`` block: given-data indices of Jv on the posterior and prior draws, for
    the reported level and a new subject (whose prior adds a fresh between-subject layer where the
    reported level is the typical subject)."""
    problem = built.problem
    names = [q for q in built.quantities if q in post]
    ess = (diagnostics.get("per_quantity") or {}).get("Jv__typical" if built.hierarchical else "Jv__subject",
                                                       {}).get("ess_bulk")
    new_prior: dict[str, np.ndarray] | None = None
    new_prior_jv = prior.get("Jv")
    if built.hierarchical and "Jv" in prior:
        rng = np.random.default_rng(None if seed is None else seed + 104729)
        new_prior = {q: prior[q] for q in names}
        for q in built.spreads:
            if q in new_prior:
                new_prior[q] = apply_layer(problem.priors[q], prior[q], rng.standard_normal(prior[q].shape[0]), np)
        n = prior["Jv"].shape[0]
        new_prior_jv = np.asarray(problem.evaluate({**problem.fixed, **{k: v for k, v in prior.items() if k != "Jv"},
                                                     **new_prior}, np)["Jv"], dtype=float) * np.ones(n)
    new_post = {q: np.asarray(new_values[q], dtype=float) for q in names
                if q in new_values and np.size(new_values[q]) == np.size(new_jv)}
    return posterior_sensitivity({q: post[q] for q in names}, jv, level="typical subject" if built.hierarchical
                                 else "the study's individual", prior=prior if "Jv" in prior else None,
                                 prior_jv=prior.get("Jv"), ess=ess, new_post=new_post, new_jv=new_jv,
                                 new_prior=new_prior if built.hierarchical else prior, new_prior_jv=new_prior_jv,
                                 seed=0 if seed is None else int(seed))


class Session:
    """A model built and compiled once, refitted to new readings in a loop (nutpie ``with_data``).

    ``Session(study, observations)`` declares the model for the observation list given (or the
    study's own); ``fit(observations=...)`` (records with the same kinds, order and sizes, e.g.
    simulated trial readings) or ``fit(data={term: values})`` samples again without recompiling.
    Used by simulation-based calibration and by trial simulation (``design --exact``).
    """

    def __init__(self, study: Any, observations: Sequence[Any] | None = None, *,
                 sampler: str = "nutpie", model: str | None = None, gate: Any = None) -> None:
        self.problem = _problem(study, observations, model)
        self.built = build_model(self.problem)
        self.sampler = sampler
        self.gate = Gate.coerce(gate)
        self.compiled, self.compile_seconds = compile_model(self.built.model, sampler)

    @property
    def terms(self) -> list[str]:
        """Names of the observed variables, in observation order."""
        return [t.name for t in self.built.terms]

    def data_from(self, observations: Sequence[Any]) -> dict[str, np.ndarray]:
        """The model's data for new study-form observation records: each term's readings as the term fits them
        (canonical units; for the kinds fitted relative to each subject's first reading, the ratios or changes)
        under ``{term}__data`` and, where the term has one per reading, their sds under ``{term}__sd``.

        The records are built into the model again (no compile) and its data read from there, so every kind
        turns its readings into data in one place (the kind's own ``add``).

        Raises
        ------
        InputError
            Not as many observations as the session was built with, or a term whose readings differ in number
            from the session's (a new design needs a new session).
        """
        obs = normalise_observations(observations, file=self.problem.file, density=self.problem.density,
                                     tissue_mass_kg=self.problem.tissue_mass_kg)
        if len(obs) != len(self.problem.observations):
            raise InputError("a refit needs as many observations as the session was built with",
                             key="observations", value=len(obs))
        rebuilt = build_model(dataclasses.replace(self.problem, observations=obs)).model
        data = {}
        for term in self.built.terms:
            for key in (f"{term.name}__data", f"{term.name}__sd"):
                if key not in self.built.model.named_vars:
                    continue   # a single sd for all readings is a constant of the model
                value = np.asarray(rebuilt[key].get_value(), dtype=float) if key in rebuilt.named_vars else None
                if value is None or value.shape != np.shape(self.built.model[key].get_value()):
                    raise InputError("a refit needs the readings of the session's design (as many per term); "
                                     "build a new Session for another design", key="observations", value=term.name)
                data[key] = value
        return data

    def fit(self, *, observations: Sequence[Any] | None = None, data: dict[str, Any] | None = None,
            seed: int | None = None, chains: int = 4, draws: int = 1000, tune: int = 1000,
            target_accept: float = DEFAULT_TARGET_ACCEPT, summarise_result: bool = True,
            cores: int | None = None) -> Any:
        """Sample with new readings; returns an InferenceResult (or the raw SampleRun). The sampler
        settings default to those of ``infer`` (target_accept as the ``[infer]`` section's default)."""
        if observations is not None:
            data = self.data_from(observations)
        elif data is not None:
            data = {(k if k.endswith(("__data", "__sd")) else f"{k}__data"): np.asarray(v, dtype=float)
                    for k, v in data.items()}
        run = sample(self.built.model, sampler=self.sampler, chains=chains, draws=draws, tune=tune,
                     seed=seed, compiled=self.compiled, data=data, target_accept=target_accept, cores=cores)
        if not summarise_result:
            return run
        return summarise_run(self.built, run, self.gate, seed=seed)
