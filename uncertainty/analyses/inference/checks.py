"""Checks of the model itself: prior predictive, prior-data conflict, power-scaling, posterior predictive.

- Prior predictive draws of every observation (``pm.sample_prior_predictive``), with the study's
  correlations (Gaussian copula, as ``propagate`` draws them) put back in: PyMC's forward sampling
  leaves the copula term out.
- Prior-data conflict: a reading in the far tail of its prior predictive distribution (Evans &
  Moshonov 2006, Bayesian Analysis 1:893-914, prior-data conflict checks). The two-sided tail
  probabilities of all readings are adjusted together (single-step max-T, :func:`joint_tail_p`), so
  that a study with many readings raises a false alarm no more often than CONFLICT_P.
- Prior sensitivity by power scaling (Kallioinen et al. 2024, Stat Comput 34:57): the posterior is
  reweighted by importance sampling as if the prior were raised to a power near 1; the cumulative
  Jensen-Shannon distance per unit log power (``arviz.psens``; the declared priors and their copula
  are scaled, not the between-subject layers) above PSENS_THRESHOLD (0.05, the value those authors
  suggest, from memory) marks a quantity as prior-driven, or, when the likelihood moves it too, as
  a possible conflict, which the prior-predictive check then confirms or not (:func:`reconcile`).
- Posterior predictive checks of each observation kind: the posterior predictive p-value of the
  mean reading and the share of readings inside their 95% predictive interval.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.analyses.sampling import cholesky, scores_to_values

CONFLICT_P = 0.01          # common practice
PSENS_THRESHOLD = 0.05     # Kallioinen et al. 2024 (from memory)
PRIOR_PREDICTIVE_DRAWS = 1000


def _pooled(arr: Any) -> np.ndarray:
    a = np.asarray(arr)
    return a.reshape((-1,) + a.shape[2:])


def correlated_block(problem: Any) -> tuple[list[str], np.ndarray] | None:
    """The quantities a study correlates and their normal-score correlation matrix (Gaussian copula).

    Parameters
    ----------
    problem : Problem
        Its ``correlation`` is over ``problem.names`` (None or the identity: independent).

    Returns
    -------
    (list of str, numpy.ndarray) or None
        The names with a non-zero correlation to another quantity, in ``problem.names`` order, and
        their correlation matrix (dimensionless); None when every quantity is independent.
    """
    R = getattr(problem, "correlation", None)
    names = list(problem.names)
    if R is None:
        return None
    R = np.asarray(R, dtype=float)
    if R.shape != (len(names), len(names)) or np.allclose(R, np.eye(len(names))):
        return None
    involved = [i for i in range(len(names)) if not np.allclose(np.delete(R[i], i), 0.0)]
    return [names[i] for i in involved], R[np.ix_(involved, involved)]


def normal_scores_of(prior: Any, x: Any) -> np.ndarray:
    """Normal scores Phi^-1(F(x)) of a prior's values (dimensionless; the copula's coordinates).

    Parameters
    ----------
    prior : Prior
        The declaration (its scipy form gives F).
    x : array
        Values in the prior's canonical unit.

    Returns
    -------
    numpy.ndarray
        Scores shaped like ``x``, clipped to |z| <= 8.5 where F rounds to 0 or 1.
    """
    from scipy.special import ndtri

    fr = prior.frozen()
    x = np.asarray(x, dtype=float)
    lo = fr.cdf(x)
    hi = fr.sf(x)
    with np.errstate(divide="ignore"):
        z = np.where(lo < 0.5, ndtri(lo), -ndtri(hi))
    return np.clip(z, -8.5, 8.5)


def copula_log_density(problem: Any, values: dict[str, Any]) -> np.ndarray | None:
    """Log density of the study's Gaussian copula at the given typical values, per draw.

    ``log c = -0.5 z'(R^-1 - I) z - 0.5 log|R|`` with z the normal scores of the correlated
    quantities: the term the model adds to the independent priors (``pm.Potential("copula")``).

    Parameters
    ----------
    problem : Problem
        Priors and correlation matrix.
    values : dict
        Draws (canonical units, any common shape) of every correlated quantity.

    Returns
    -------
    numpy.ndarray or None
        The log density (nats) shaped like the draws; None when the priors are independent.
    """
    block = correlated_block(problem)
    if block is None:
        return None
    names, R = block
    z = np.stack([normal_scores_of(problem.priors[n], values[n]) for n in names], axis=-1)
    prec = np.linalg.inv(R) - np.eye(len(names))
    _, logdet = np.linalg.slogdet(R)
    return -0.5 * np.einsum("...i,ij,...j->...", z, prec, z) - 0.5 * logdet


def correlate_prior_draws(problem: Any, values: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Independent prior draws made correlated by the study's Gaussian copula (as ``propagate`` draws).

    Each correlated quantity's draws are turned into normal scores, multiplied by the Cholesky
    factor of the correlation matrix (``uncertainty.analyses.sampling``) and mapped back through
    the prior; the marginals stay exactly as declared.

    Parameters
    ----------
    problem : Problem
        Priors and correlation matrix.
    values : dict
        Independent draws of the typical value of each quantity (canonical units, one shape).

    Returns
    -------
    dict
        The new draws of the correlated quantities only (empty when all are independent).
    """
    block = correlated_block(problem)
    if block is None:
        return {}
    names, R = block
    z = np.stack([normal_scores_of(problem.priors[n], values[n]) for n in names], axis=-1)
    z = z @ cholesky(R).T
    return {n: scores_to_values(problem.priors[n], z[..., j], exact=True) for j, n in enumerate(names)}


def _merged_shift(built: Any, name: str, old: np.ndarray, new: np.ndarray) -> np.ndarray | None:
    """For one individual whose two layers are sampled as one (``name__z`` the individual's score,
    ``name__typical_z`` the typical value's), the shift of ``name__z`` that moves the individual with
    its typical value (between-subject deviation kept); None for other parameterisations."""
    model = built.model
    prior = built.problem.priors[name]
    if built.hierarchical or f"{name}__typical_z" not in model.named_vars:
        return None
    scale = prior.distribution.normal_scale()
    spread = prior.spread
    if scale is None or spread is None:
        return None
    _, s_typ, log_scale = scale
    s_bs = spread.on_normal_scale(log_scale)
    if s_bs is None:
        return None
    g = np.log if log_scale else (lambda v: v)
    return (g(new) - g(old)) / float(np.hypot(s_typ, s_bs))


def prior_predictive(built: Any, *, draws: int = PRIOR_PREDICTIVE_DRAWS, seed: int | None = None) -> Any:
    """Prior predictive draws (ArviZ InferenceData with ``prior`` and ``prior_predictive``), the
    study's correlations included.

    PyMC's forward sampling leaves out the copula (a ``pm.Potential``), so the typical values are
    drawn independently first, then made correlated (:func:`correlate_prior_draws`) and every
    quantity downstream of them (between-subject layers, outputs, the readings) drawn given
    the new values (``pm.sample_posterior_predictive`` on the corrected draws). The first pass draws only
    the typical values and what they are made of, so that the model's outputs are compiled once (for the
    whole-body form each forward-sampling function of the full model took about 20 s to compile).

    Parameters
    ----------
    built : BuiltModel
        The declared model.
    draws : int
        Number of prior predictive draws.
    seed : int, optional
        Seed of both passes.

    Returns
    -------
    arviz.InferenceData
        Groups ``prior``, ``prior_predictive`` (and ``observed_data``, ``constant_data``).
    """
    import warnings

    import pymc as pm
    from pytensor.graph.traversal import ancestors

    model = built.model
    block = correlated_block(built.problem)
    first = None
    if block is not None:
        upstream = set(ancestors([model[n] for n in block[0]]))
        first = [v.name for v in model.free_RVs + model.deterministics if v in upstream]
    with model, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        idata = pm.sample_prior_predictive(draws=draws, var_names=first, random_seed=seed)
    if block is None:
        return idata
    problem = built.problem
    names = block[0]
    old = {n: np.asarray(idata.prior[n].values, dtype=float) for n in names}
    new = correlate_prior_draws(problem, old)
    return _redraw_downstream(built, idata, new, old, seed)


def _redraw_downstream(built: Any, idata: Any, new: dict[str, np.ndarray], old: dict[str, np.ndarray],
                       seed: int | None) -> Any:
    """Put ``new`` typical values into the prior draws and redraw everything that depends on them."""
    import warnings

    import arviz as az
    import pymc as pm
    from pytensor.graph.traversal import ancestors

    model = built.model
    targets = [model[n] for n in new]
    upstream = set(ancestors(targets))
    kept = [v.name for v in model.free_RVs if v in upstream]
    trace = idata.prior[[v for v in kept if v in idata.prior]].copy()
    for n, x in new.items():
        trace[n] = (idata.prior[n].dims, x)
        shift = _merged_shift(built, n, old[n], x)
        if shift is not None:
            trace[f"{n}__z"] = trace[f"{n}__z"] + shift
    observed = {t.name for t in built.terms}
    again = [v.name for v in list(model.free_RVs) + list(model.deterministics)
             if v not in upstream and v.name not in trace] + sorted(observed)
    groups = {"posterior": trace}
    if "constant_data" in idata.groups():
        groups["constant_data"] = idata.constant_data
    with model, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pp = pm.sample_posterior_predictive(az.InferenceData(**groups), var_names=again,
                                            random_seed=None if seed is None else seed + 1,
                                            progressbar=False)
    redrawn = pp.posterior_predictive
    prior = idata.prior.copy()
    for v in trace.data_vars:
        prior[v] = trace[v]
    for v in again:
        if v not in observed and v in redrawn:
            prior[v] = redrawn[v]
    out = az.InferenceData(prior=prior, prior_predictive=redrawn[[v for v in observed if v in redrawn]])
    for g in ("observed_data", "constant_data"):
        if g in idata.groups():
            out.add_groups({g: getattr(idata, g)})
    return out


def tail_distance(stack: np.ndarray) -> np.ndarray:
    """How far each value lies out in its column's tail: its distance from the column's median in
    units of the distance from the median to the 2.5 % (below) or 97.5 % (above) quantile.

    Continuous (no ties, unlike ranks), so the largest distance over many readings still orders the
    draws finely; the two sides are scaled apart so a skewed prior predictive is treated fairly.

    Parameters
    ----------
    stack : numpy.ndarray
        (n, m) draws of m readings (any unit).

    Returns
    -------
    numpy.ndarray
        (n, m) distances (dimensionless, 1 at the 2.5 % and 97.5 % quantiles).
    """
    lo, med, hi = np.quantile(stack, [0.025, 0.5, 0.975], axis=0)
    tiny = np.finfo(float).tiny
    up = (stack - med) / np.maximum(hi - med, tiny)
    down = (med - stack) / np.maximum(med - lo, tiny)
    return np.where(stack >= med, up, down)


def joint_tail_p(rep: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per-reading tail probabilities, raw and adjusted for the number of readings.

    Raw: the two-sided tail probability of each reading, ``2 min(#{draws <= y}, #{draws >= y}) / n``
    among the n = N + 1 values (the reading counted too, so an exchangeable reading gets a valid
    p-value; the smallest is 2/n). Adjusted: the
    single-step max-T method (Westfall & Young 1993, Resampling-Based Multiple Testing, Wiley,
    section 2.6; from memory) on the tail distances (:func:`tail_distance`): a reading's adjusted p is
    the share of the prior predictive draws (the readings themselves included) whose largest distance
    over all readings is at least the reading's own. Under no conflict the readings are one more draw
    of the prior predictive, exchangeable with the others, so P(smallest adjusted p <= a) <= a
    whatever the number of readings and however they depend on each other (shared typical values).

    Parameters
    ----------
    rep : numpy.ndarray
        (N, m) prior predictive draws of the m readings (canonical units).
    y : numpy.ndarray
        (m,) the readings.

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        Raw and adjusted tail probabilities, each (m,); the adjusted ones are at least 1/(N+1).
    """
    stack = np.vstack([np.asarray(y, dtype=float).reshape(1, -1), np.asarray(rep, dtype=float)])
    n = stack.shape[0]
    raw = np.minimum(1.0, 2.0 * np.minimum((stack <= stack[0]).sum(axis=0), (stack >= stack[0]).sum(axis=0)) / n)
    d = tail_distance(stack)
    largest = np.sort(d.max(axis=1))
    adjusted = (n - np.searchsorted(largest, d[0], side="left")) / n
    return raw, adjusted


def prior_data_conflict(built: Any, prior_idata: Any, *, level: float = CONFLICT_P) -> list[dict[str, Any]]:
    """Per observation: its readings' tail probability under the prior predictive, and whether it
    conflicts with the prior once the number of readings is allowed for (:func:`joint_tail_p`).

    Parameters
    ----------
    built : BuiltModel
        The declared model (its terms and their data).
    prior_idata : arviz.InferenceData
        Prior predictive draws (:func:`prior_predictive`).
    level : float
        Family-wise false-alarm rate over all the study's readings (common practice: 0.01).

    Returns
    -------
    list of dict
        One row per observation: ``p_tail`` (smallest raw two-sided tail probability of its
        readings), ``p_adjusted`` (smallest adjusted one), ``readings``, ``conflict``
        (``p_adjusted < level``) and the prior predictive mean and 95% interval (canonical units).
    """
    reps, ys, terms = [], [], []
    for term in built.terms:
        if term.name not in prior_idata.prior_predictive:
            continue
        rep = _pooled(prior_idata.prior_predictive[term.name].values)
        reps.append(rep.reshape(rep.shape[0], -1))
        ys.append(np.asarray(built.model[f"{term.name}__data"].get_value(), dtype=float).ravel())
        terms.append(term)
    if not terms:
        return []
    raw, adjusted = joint_tail_p(np.concatenate(reps, axis=1), np.concatenate(ys))
    rows, start = [], 0
    for term, rep in zip(terms, reps, strict=True):
        sl = slice(start, start + rep.shape[1])
        start += rep.shape[1]
        p_adj = float(adjusted[sl].min())
        rows.append({"observation": term.observation.key, "kind": term.observation.kind,
                     "label": term.label, "p_tail": float(raw[sl].min()), "p_adjusted": p_adj,
                     "readings": int(rep.shape[1]), "conflict": bool(p_adj < level),
                     "prior_predictive": {"mean": float(rep.mean()), "ci95":
                                          [float(v) for v in np.quantile(rep, [0.025, 0.975])]}})
    return rows


def top_level(model: Any) -> list[str]:
    """Free variables of the declared priors: every free variable without a subject dimension (the
    per-subject layers, whatever their parameterisation, are left out)."""
    dims = model.named_vars_to_dims
    return [v.name for v in model.free_RVs if not any("subject" in d for d in dims.get(v.name, ()) or ())]


def power_scaling(built: Any, idata: Any, var_names: list[str]) -> dict[str, Any]:
    """Power-scaling sensitivity of each quantity to the prior and to the likelihood (arviz.psens).

    Only the declared priors are scaled (``top_level``): the typical values, spreads, group effects and
    side quantities, not the between-subject layers. Scaling those too would ask how the answer moves
    if the population model itself were weakened, and it would depend on how the subject layer is
    parameterised (a centred coordinate carries the layer's density, a non-centred score does not)."""
    import warnings

    import arviz as az

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        add_log_densities(built, idata)
        names = [v for v in var_names if v in idata.posterior]
        prior_s = az.psens(idata, component="prior", var_names=names)
        lik_s = az.psens(idata, component="likelihood", var_names=names)
    if len(names) == 1:            # arviz gives a bare DataArray for one variable
        prior_s, lik_s = ({names[0]: prior_s}, {names[0]: lik_s})
    out = {}
    for v in names:
        ps = float(np.nanmax(np.asarray(prior_s[v].values)))
        ls = float(np.nanmax(np.asarray(lik_s[v].values)))
        q = v.replace("__subject", "")
        out[q] = {"prior": ps, "likelihood": ls, **scaling_pattern(q, ps, ls)}
    return out


def add_log_densities(built: Any, idata: Any) -> None:
    """Add the ``log_prior`` (declared priors, :func:`top_level`, and the copula) and ``log_likelihood``
    (every observed term) groups to ``idata``: per posterior draw, pointwise, in nats.

    The values are those of ``pymc.compute_log_prior`` and ``pymc.compute_log_likelihood`` (untransformed
    values, no Jacobian), but from one log-density graph and one compiled function: each of those builds PyMC's
    log density of the whole model and compiles it again, which for the whole-body form cost about 15 s apiece.
    Each reading's recorded prediction (``{term}__pred``, in the trace) enters that graph as an input instead of
    the model that computes it, so the graph holds the readings' and the priors' densities only (3-subject
    whole-body model: 7.2 s -> 0.9 s, values equal to 1e-12). A group already there is kept (nothing is computed
    when both are).
    """
    missing = [g for g in ("log_prior", "log_likelihood") if g not in idata.groups()]
    if not missing:
        return
    import pytensor
    import pytensor.tensor as pt
    from pymc.backends.arviz import apply_function_over_dataset, coords_and_dims_for_inferencedata
    from pymc.model.transform.conditioning import do, remove_value_transforms

    umodel = remove_value_transforms(built.model)
    preds = [v.name for v in umodel.deterministics if v.name.endswith("__pred") and v.name in idata.posterior]
    if preds:   # the predictions as data (PyMC's do), then as inputs of the compiled function
        umodel = do(umodel, {n: np.zeros(idata.posterior[n].shape[2:]) for n in preds})
    priors = [umodel.named_vars[name] for name in top_level(built.model)]
    observed = list(umodel.observed_RVs)
    outs = umodel.logp(vars=priors + observed, sum=False)
    inputs = {umodel[n]: pt.tensor(name=n, shape=(None,) * umodel[n].ndim, dtype="float64") for n in preds}
    outs = pytensor.graph_replace(outs, inputs, strict=False)
    fn = umodel.compile_fn(inputs=umodel.value_vars + list(inputs.values()), outs=outs, on_unused_input="ignore")
    coords, dims = coords_and_dims_for_inferencedata(umodel)
    names = [v.name for v in priors + observed]
    both = apply_function_over_dataset(fn, idata.posterior[[rv.name for rv in umodel.free_RVs] + preds],
                                       output_var_names=names, sample_dims=("chain", "draw"), dims=dims,
                                       coords=coords, progressbar=False)
    groups = {"log_prior": both[names[:len(priors)]], "log_likelihood": both[names[len(priors):]]}
    idata.add_groups({g: groups[g] for g in missing})
    if "log_prior" in missing:
        _add_copula_log_prior(built, idata)


def _add_copula_log_prior(built: Any, idata: Any) -> None:
    """Add the copula's log density (``copula``) to the ``log_prior`` group: PyMC's log prior holds
    the declared priors one by one and leaves the ``pm.Potential`` out."""
    block = correlated_block(built.problem)
    if block is None or "log_prior" not in idata.groups():
        return
    if not all(n in idata.posterior for n in block[0]):
        return
    dims = idata.posterior[block[0][0]].dims
    values = {n: np.asarray(idata.posterior[n].values, dtype=float) for n in block[0]}
    idata.log_prior["copula"] = (dims, copula_log_density(built.problem, values))


#: short labels of the power-scaling patterns (our own wording)
PATTERNS = {"none": "-", "prior": "prior-driven", "both": "possible conflict"}


def scaling_pattern(name: str, prior: float, likelihood: float,
                    threshold: float = PSENS_THRESHOLD) -> dict[str, str]:
    """The pattern of one quantity's power-scaling sensitivities, as a label and one sentence.

    Parameters
    ----------
    name : str
        The quantity.
    prior, likelihood : float
        Sensitivity to scaling the prior and the likelihood (cumulative Jensen-Shannon distance per
        unit log power, dimensionless).
    threshold : float
        Level above which a sensitivity counts.

    Returns
    -------
    dict
        ``diagnosis`` (a :data:`PATTERNS` label) and ``sentence``.
    """
    p_on, l_on = prior >= threshold, likelihood >= threshold
    nums = f"(prior {prior:.3f}, readings {likelihood:.3f}; {threshold:g} counts)"
    if p_on and l_on:
        return {"diagnosis": PATTERNS["both"], "sentence":
                f"{name} shifts when either the prior or the readings are given more weight {nums}: "
                "the two may pull apart, a possible prior-data conflict."}
    if p_on:
        return {"diagnosis": PATTERNS["prior"], "sentence":
                f"{name} shifts with the weight of its prior and hardly with the readings' {nums}: "
                "the readings say little about it, so the prior carries the answer."}
    if l_on:
        return {"diagnosis": PATTERNS["none"], "sentence":
                f"{name} follows the readings and barely moves with its prior {nums}."}
    return {"diagnosis": PATTERNS["none"], "sentence":
            f"{name} moves with neither the prior's nor the readings' weight {nums}."}


def reconcile(sensitivity: dict[str, Any], conflict: Any, level: float = CONFLICT_P) -> None:
    """Say beside each "possible conflict" what the prior-predictive check found (in place).

    Power scaling only hints at a conflict (both components move the answer); the calibrated
    prior-predictive check (:func:`prior_data_conflict`) decides whether the readings are improbable
    under the prior. Each such entry gets ``predictive_check`` ("conflict", "none" or "not run") and
    its sentence the check's verdict.
    """
    if not isinstance(sensitivity, dict):
        return
    rows = conflict if isinstance(conflict, list) else []
    flagged = [r for r in rows if r.get("conflict")]
    smallest = min((r["p_adjusted"] for r in rows if "p_adjusted" in r), default=None)
    for entry in sensitivity.values():
        if not isinstance(entry, dict) or entry.get("diagnosis") != PATTERNS["both"]:
            continue
        if smallest is None:
            entry["predictive_check"] = "not run"
            entry["sentence"] += " The prior-predictive check did not run."
        elif flagged:
            entry["predictive_check"] = "conflict"
            entry["sentence"] += (" The prior-predictive check agrees: "
                                  + ", ".join(r["observation"] for r in flagged)
                                  + f" lie in its far tail (adjusted p {smallest:.3g} < {level:g}).")
        else:
            entry["predictive_check"] = "none"
            entry["sentence"] += (" The prior-predictive check finds the readings plausible under the prior "
                                  f"(smallest adjusted p {smallest:.3g}), so the shift more likely reflects "
                                  "a prior and readings of similar weight than a conflict.")


def posterior_predictive(built: Any, idata: Any, *, seed: int | None = None) -> dict[str, Any]:
    """Posterior predictive p-value (mean reading) and 95% coverage of each observation term."""
    import warnings

    import pymc as pm

    with built.model, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        pp = pm.sample_posterior_predictive(idata, random_seed=seed, progressbar=False,
                                            var_names=[t.name for t in built.terms])
    out = {}
    for term in built.terms:
        rep = _pooled(pp.posterior_predictive[term.name].values)
        rep = rep.reshape(rep.shape[0], -1)
        y = np.asarray(built.model[f"{term.name}__data"].get_value(), dtype=float).ravel()
        lo, hi = np.quantile(rep, [0.025, 0.975], axis=0)
        out[term.name] = {"observation": term.observation.key, "kind": term.observation.kind,
                          "p_value_mean": float((rep.mean(axis=1) >= y.mean()).mean()),
                          "coverage95": float(((y >= lo) & (y <= hi)).mean()),
                          "n": int(y.size)}
    idata.extend(pp)
    return out


def run_checks(built: Any, idata: Any, *, seed: int | None = None) -> dict[str, Any]:
    """All model checks; each failure to compute one is recorded, not raised."""
    out: dict[str, Any] = {}
    try:
        prior_id = prior_predictive(built, seed=seed)
        out["prior_data_conflict"] = prior_data_conflict(built, prior_id)
        idata.extend(prior_id)
    except Exception as exc:  # noqa: BLE001 - a check that cannot run is reported
        out["prior_data_conflict"] = {"error": f"{type(exc).__name__}: {exc}"}
    try:
        level = [q if built.hierarchical else f"{q}__subject" for q in built.quantities]
        out["prior_sensitivity"] = power_scaling(built, idata, level + ["Jv__typical"])
    except Exception as exc:  # noqa: BLE001
        out["prior_sensitivity"] = {"error": f"{type(exc).__name__}: {exc}"}
    try:
        out["posterior_predictive"] = posterior_predictive(built, idata, seed=seed)
    except Exception as exc:  # noqa: BLE001
        out["posterior_predictive"] = {"error": f"{type(exc).__name__}: {exc}"}
    reconcile(out["prior_sensitivity"], out["prior_data_conflict"])
    return out
