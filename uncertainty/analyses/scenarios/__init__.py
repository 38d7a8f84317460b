"""Scenarios: what-ifs (``[[scenarios]]``) evaluated on the same draws as the baseline.

Each scenario changes quantities (a shift such as ``Cp = "+1 g/dL"``, a multiplier such as
``sigma = "x0.9"``) and adds or removes conditions of ``priors/conditions.toml``. Its effect is the
PAIRED change of every output: for each draw, the output with the scenario minus the output without it,
on the same draw, so the uncertainty shared by both (most of it) cancels. The change is summarised by its
median, its 95 % interval (2.5 and 97.5 % quantiles of the paired changes) and the probabilities that it
is negative and positive.

Prior draws: the typical subject and the study's individual (typical plus between-subject layer), drawn
from the unit cube as propagate does (plain Monte Carlo, the study's seed). A changed condition gives a
changed study (resolved again, ``Study.with_conditions``); its draw is taken at the same cube point, so
each quantity keeps its quantile (its normal score) and only the distribution it is read from changes.

Posterior draws (when inference ran): the typical subject and, when the posterior has subjects, each
subject. A changed condition maps each posterior draw through the quantile of the baseline prior to the
same quantile of the changed prior (F_new^-1(F_base(x)), a monotone transport: a shift of the prior's
location shifts every draw by it, a changed width stretches the draws about the quantiles); for a
subject's value the typical prior's map is used, an approximation when the condition changes a spread.

Explicit changes act on the values after the conditions: a shift adds to every draw, a multiplier
scales it; a change of a derived quantity (``pi_c`` from protein, ``Pc`` from pressures) changes the
derivation's result, so its inputs stay as drawn.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from uncertainty.analyses.sampling import cube_columns, from_cube, open_cube
from uncertainty.analyses.scenarios.result import ScenariosResult
from uncertainty.core.errors import InputError
from uncertainty.forms.catalogue import output_unit
from uncertainty.forms.evaluate import evaluate as model_evaluate

#: prior draws per layer (plain Monte Carlo); the Monte Carlo error of a 95 % interval end is then about
#: 1 % of the interval's width (common practice: a few thousand draws for 2.5 % quantiles)
DEFAULT_SAMPLES = 4096
#: a paired change smaller than this fraction of the baseline's size counts as no change (round-off)
ZERO_TOL = 1e-12

__all__ = ["DEFAULT_SAMPLES", "ScenariosResult", "apply_changes", "change_summary", "scenarios"]


def change_summary(base: np.ndarray, changed: np.ndarray) -> dict[str, Any]:
    """Summary of the paired change ``changed - base`` (same draws; the output's unit).

    Parameters
    ----------
    base, changed : numpy.ndarray
        The output without and with the scenario, one value per draw (same order).

    Returns
    -------
    dict
        ``median``, ``mean``, ``ci95`` (2.5 and 97.5 % quantiles) of the change, ``p_decrease`` and
        ``p_increase`` (P(change < 0), P(change > 0); a change within round-off of zero counts as
        neither), ``base_median`` and ``scenario_median`` (the output's medians without and with the
        scenario), ``n`` (finite pairs) and ``nan_draws`` (pairs left out because either is not finite).
    """
    b = np.broadcast_to(np.asarray(base, dtype=float), np.shape(changed)).ravel()
    c = np.asarray(changed, dtype=float).ravel()
    b = np.broadcast_to(b, c.shape)
    ok = np.isfinite(b) & np.isfinite(c)
    b, c = b[ok], c[ok]
    d = c - b
    d = np.where(np.abs(d) <= ZERO_TOL * np.maximum(1.0, np.abs(b)), 0.0, d)
    if d.size == 0:
        nan = float("nan")
        return {"median": nan, "mean": nan, "ci95": [nan, nan], "p_decrease": nan, "p_increase": nan,
                "base_median": nan, "scenario_median": nan, "n": 0, "nan_draws": int((~ok).sum())}
    q = np.quantile(d, [0.5, 0.025, 0.975])
    return {"median": float(q[0]), "mean": float(d.mean()), "ci95": [float(q[1]), float(q[2])],
            "p_decrease": float(np.mean(d < 0)), "p_increase": float(np.mean(d > 0)),
            "base_median": float(np.median(b)), "scenario_median": float(np.median(c)), "n": int(d.size),
            "nan_draws": int((~ok).sum())}


def apply_changes(study: Any, values: Mapping[str, np.ndarray], changes: Sequence[Any]
                  ) -> tuple[Any, dict[str, np.ndarray]]:
    """A scenario's explicit changes applied to one set of draws.

    Parameters
    ----------
    study : Study
        The study the draws belong to (after the scenario's conditions).
    values : Mapping of str to numpy.ndarray
        Draws of the study's priors (canonical units).
    changes : sequence of ScenarioChange
        Shifts (canonical unit of their quantity) and multipliers (dimensionless).

    Returns
    -------
    study : Study
        ``study``, or a copy whose derivations carry the changes of derived quantities.
    values : dict of str to numpy.ndarray
        New draws: a shift added to, a multiplier applied to each draw of a prior quantity.
    """
    vals = {k: np.asarray(v, dtype=float) for k, v in values.items()}
    derived = dict(getattr(study, "derived", None) or {})
    touched = False
    for ch in changes:
        mult = 1.0 if ch.multiply is None else ch.multiply
        shift = 0.0 if ch.shift is None else ch.shift
        if ch.symbol in derived:
            d = derived[ch.symbol]
            derived[ch.symbol] = dataclasses.replace(d, shift=d.shift * mult + shift, multiply=d.multiply * mult)
            touched = True
            continue
        if ch.symbol not in vals:
            prior = study.priors[ch.symbol]
            vals[ch.symbol] = np.asarray(prior.params["value"] if prior.is_fixed else prior.median(), dtype=float)
        vals[ch.symbol] = vals[ch.symbol] * mult + shift
    return (dataclasses.replace(study, derived=derived) if touched else study), vals


def _changed_study(study: Any, sc: Any) -> Any:
    if not sc.conditions_add and not sc.conditions_remove:
        return study
    conditions = [c for c in study.conditions if c not in sc.conditions_remove] + list(sc.conditions_add)
    return study.with_conditions(conditions)


def _outputs(study: Any, outputs: Sequence[str] | None) -> list[str]:
    have = list(study.outputs())
    if outputs is None:
        return have
    for o in outputs:
        if o not in have:
            raise InputError(f"no such output; the {study.model} model gives {', '.join(have)}", file=study.file,
                             key="outputs", value=o)
    return list(outputs)


def _evaluate(study: Any, values: Mapping[str, Any], outputs: Sequence[str], n: int) -> dict[str, np.ndarray]:
    out = model_evaluate(study, values)
    return {o: np.broadcast_to(np.asarray(out[o], dtype=float), (n,)) for o in outputs}


def _prior_layers(study: Any, changed: Any, n: int, rng: np.random.Generator
                  ) -> dict[str, tuple[dict[str, np.ndarray], dict[str, np.ndarray]]]:
    """Per layer: (baseline draws, changed-study draws) at the same cube points, matched by column."""
    out = {}
    for layer in ("typical", "individual"):
        cols = cube_columns(study, layer)
        u = open_cube(rng.random((n, len(cols))))
        base = from_cube(study, u, layer)
        if changed is study:
            out[layer] = (base, base)
            continue
        at = {col: u[:, j] for j, col in enumerate(cols)}
        ccols = cube_columns(changed, layer)
        fresh = open_cube(rng.random((n, len(ccols))))  # a quantity uncertain only in the scenario
        uc = np.column_stack([at.get(col, fresh[:, j]) for j, col in enumerate(ccols)]) if ccols else np.empty((n, 0))
        out[layer] = (base, from_cube(changed, uc, layer))
    return out


def quantile_map(base_prior: Any, new_prior: Any, x: np.ndarray) -> np.ndarray:
    """Draws of one quantity moved to the same quantile of another prior: F_new^-1(F_base(x)).

    Parameters
    ----------
    base_prior, new_prior : Prior
        The quantity's prior without and with the scenario's conditions (canonical units).
    x : numpy.ndarray
        Draws (canonical unit).

    Returns
    -------
    numpy.ndarray
        The mapped draws; ``x`` itself when both priors are the same declaration. A fixed new prior gives
        its value; a fixed baseline prior gives the new prior's median.
    """
    if base_prior.dist == new_prior.dist and base_prior.params == new_prior.params:
        return x
    if new_prior.is_fixed:
        return np.full(np.shape(x), float(new_prior.params["value"]))
    if base_prior.is_fixed:
        return np.full(np.shape(x), float(new_prior.median()))
    u = np.clip(base_prior.frozen().cdf(x), 1e-12, 1.0 - 1e-12)
    return np.asarray(new_prior.frozen().ppf(u), dtype=float)


def _posterior_values(study: Any, idata: Any) -> tuple[dict[str, np.ndarray], dict[str, dict[str, np.ndarray]]]:
    """Typical-subject draws and per-subject draws (when the posterior has subjects) of the study's
    uncertain quantities, chain and draw stacked."""
    post = idata.posterior

    def flat(name: str) -> np.ndarray:
        arr = np.asarray(post[name].values, dtype=float)
        return arr.reshape((-1,) + arr.shape[2:])

    typical = {name: flat(name) for name in study.names if name in post}
    subjects: dict[str, dict[str, np.ndarray]] = {}
    labels = [str(s) for s in post.coords["subject"].values] if "subject" in post.coords else []
    if len(labels) > 1:
        per = {name: flat(f"{name}__subject") for name in study.names if f"{name}__subject" in post}
        for k, sid in enumerate(labels):
            subjects[sid] = {**typical, **{name: x[:, k] for name, x in per.items()}}
    return typical, subjects


def _mapped(study: Any, changed: Any, values: Mapping[str, np.ndarray], rng: np.random.Generator
            ) -> dict[str, np.ndarray]:
    if changed is study:
        return dict(values)
    n = len(next(iter(values.values()))) if values else 1
    out = {}
    for name, prior in changed.priors.items():
        if name in values and name in study.priors:
            out[name] = quantile_map(study.priors[name], prior, values[name])
        elif name in changed.names:  # uncertain only in the scenario: an independent draw
            out[name] = np.asarray(prior.frozen().ppf(open_cube(rng.random(n))), dtype=float)
    return out


def scenarios(study: Any, seed: int | None = None, *, samples: int | None = None,
              posterior: Any = None, outputs: Sequence[str] | None = None) -> ScenariosResult:
    """The paired change of every output under each of the study's ``[[scenarios]]``.

    Parameters
    ----------
    study : Study
        A study with ``scenarios``.
    seed : int, optional
        Seed of the prior draws (default the study's).
    samples : int, optional
        Prior draws per layer (default :data:`DEFAULT_SAMPLES`).
    posterior : InferenceResult or arviz.InferenceData, optional
        Posterior draws of the same study (its ``idata``); with it every scenario is also evaluated on
        the posterior, for the typical subject and for each subject.
    outputs : sequence of str, optional
        Outputs to summarise (default every output of the study's model).

    Returns
    -------
    ScenariosResult
        ``to_dict()``: per scenario its changes as written, and ``prior`` / ``posterior`` blocks of
        paired-change summaries (:func:`change_summary`; output units in ``units``, Jv mL/min per basis).

    Raises
    ------
    InputError
        A study without scenarios, samples below 100, an unknown output.
    """
    scs = list(getattr(study, "scenarios", None) or [])
    if not scs:
        raise InputError("the study has no [[scenarios]]", file=study.file, key="scenarios", value=None)
    n = DEFAULT_SAMPLES if samples is None else int(samples)
    if n < 100:
        raise InputError("at least 100 draws are needed for a 95% interval", file=study.file, key="samples",
                         value=samples)
    seed = study.seed if seed is None else seed
    outs = _outputs(study, outputs)
    idata = getattr(posterior, "idata", posterior)
    notes: list[str] = []
    docs: list[dict[str, Any]] = []
    draws: dict[str, Any] = {}
    post_vals: tuple[dict[str, np.ndarray], dict[str, dict[str, np.ndarray]]] | None = None
    if idata is not None:
        post_vals = _posterior_values(study, idata)
        missing = [nm for nm in study.names if nm not in post_vals[0]]
        if missing:
            notes.append(f"the posterior has no draws of {', '.join(missing)}: posterior scenarios are left out")
            post_vals = None
    for i, sc in enumerate(scs):
        rng = np.random.default_rng([int(seed), 7717, i])
        changed = _changed_study(study, sc)
        keep = [o for o in outs if o in changed.outputs()]
        doc: dict[str, Any] = {"name": sc.name, "changes": {c.symbol: c.text for c in sc.changes_resolved},
                               "conditions_add": list(sc.conditions_add),
                               "conditions_remove": list(sc.conditions_remove), "note": sc.note,
                               "prior": {}, "posterior": None}
        draws[sc.name] = {"prior": {}}
        for layer, (base_v, ch_v) in _prior_layers(study, changed, n, rng).items():
            target, ch_v = apply_changes(changed, ch_v, sc.changes_resolved)
            b = _evaluate(study, base_v, keep, n)
            c = _evaluate(target, ch_v, keep, n)
            doc["prior"][layer] = {o: change_summary(b[o], c[o]) for o in keep}
            draws[sc.name]["prior"][layer] = {"inputs": base_v, "base": b, "scenario": c}
        if post_vals is not None:
            typical, subjects = post_vals
            m = len(next(iter(typical.values())))
            block: dict[str, Any] = {"draws": m, "typical": {}, "subjects": {}}
            for who, vals in [("typical", typical), *subjects.items()]:
                target, ch_v = apply_changes(changed, _mapped(study, changed, vals, rng), sc.changes_resolved)
                b = _evaluate(study, vals, keep, m)
                c = _evaluate(target, ch_v, keep, m)
                summ = {o: change_summary(b[o], c[o]) for o in keep}
                if who == "typical":
                    block["typical"] = summ
                else:
                    block["subjects"][who] = summ
            doc["posterior"] = block
        docs.append(doc)
    if any(sc.conditions_add or sc.conditions_remove for sc in scs) and post_vals is not None:
        notes.append("posterior draws under a changed condition keep their quantile of the prior (F_new^-1(F_base(x)));"
                     " subjects' values use the typical prior's map")
    if idata is None:
        notes.append("prior draws only: the posterior columns appear when inference runs in the same session "
                     "(fluidshift run with [[observations]])")
    units = {o: output_unit(o) for o in outs}
    result_doc = {"samples": n, "seed": seed, "outputs": outs, "units": units, "scenarios": docs,
                  "notes": notes}
    return ScenariosResult(doc=result_doc, draws=draws)
