"""Checks of the model itself: prior predictive, prior-data conflict, power-scaling, posterior predictive.

- Prior predictive draws of every observation (``pm.sample_prior_predictive``).
- Prior-data conflict: an observation whose value lies in the far tail of its prior predictive
  distribution, two-sided tail probability below CONFLICT_P (Evans & Moshonov 2006, Bayesian Analysis
  1:893-914, prior-data conflict checks; the threshold is common practice).
- Prior sensitivity by power scaling (Kallioinen et al. 2024, Stat Comput 34:57): the posterior is
  reweighted by importance sampling as if the prior were raised to a power near 1; the cumulative
  Jensen-Shannon distance per unit log power (``arviz.psens``; the declared priors are scaled, not the
  between-subject layers) above PSENS_THRESHOLD (0.05, the value those authors suggest, from memory)
  flags a quantity as sensitive to its prior (or, when the likelihood is sensitive too, a prior-data
  conflict).
- Posterior predictive checks of each observation kind: the posterior predictive p-value of the
  mean reading and the share of readings inside their 95% predictive interval.
"""

from __future__ import annotations

from typing import Any

import numpy as np

CONFLICT_P = 0.01          # common practice
PSENS_THRESHOLD = 0.05     # Kallioinen et al. 2024 (from memory)
PRIOR_PREDICTIVE_DRAWS = 1000


def _pooled(arr: Any) -> np.ndarray:
    a = np.asarray(arr)
    return a.reshape((-1,) + a.shape[2:])


def prior_predictive(built: Any, *, draws: int = PRIOR_PREDICTIVE_DRAWS, seed: int | None = None) -> Any:
    """Prior predictive draws (ArviZ InferenceData with ``prior`` and ``prior_predictive``)."""
    import warnings

    import pymc as pm

    with built.model, warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return pm.sample_prior_predictive(draws=draws, random_seed=seed)


def prior_data_conflict(built: Any, prior_idata: Any) -> list[dict[str, Any]]:
    """Per observation: two-sided tail probability of its value under the prior predictive."""
    rows = []
    for term in built.terms:
        if term.name not in prior_idata.prior_predictive:
            continue
        rep = _pooled(prior_idata.prior_predictive[term.name].values)
        y = np.asarray(built.model[f"{term.name}__data"].get_value(), dtype=float)
        rep = rep.reshape(rep.shape[0], -1)
        yv = y.ravel()
        lo = (rep <= yv).mean(axis=0)
        hi = (rep >= yv).mean(axis=0)
        p = np.minimum(1.0, 2.0 * np.minimum(lo, hi))
        worst = float(p.min())
        rows.append({"observation": term.observation.key, "kind": term.observation.kind,
                     "label": term.label, "p_tail": worst, "conflict": bool(worst < CONFLICT_P),
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
    import pymc as pm

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        if "log_prior" not in idata.groups():
            pm.compute_log_prior(idata, var_names=top_level(built.model), model=built.model,
                                 extend_inferencedata=True, progressbar=False)
        if "log_likelihood" not in idata.groups():
            pm.compute_log_likelihood(idata, model=built.model, extend_inferencedata=True,
                                      progressbar=False)
        names = [v for v in var_names if v in idata.posterior]
        prior_s = az.psens(idata, component="prior", var_names=names)
        lik_s = az.psens(idata, component="likelihood", var_names=names)
    if len(names) == 1:            # arviz gives a bare DataArray for one variable
        prior_s, lik_s = ({names[0]: prior_s}, {names[0]: lik_s})
    out = {}
    for v in names:
        ps = float(np.nanmax(np.asarray(prior_s[v].values)))
        ls = float(np.nanmax(np.asarray(lik_s[v].values)))
        if ps >= PSENS_THRESHOLD and ls >= PSENS_THRESHOLD:
            diagnosis = "prior-data conflict"
        elif ps >= PSENS_THRESHOLD:
            diagnosis = "prior dominates (weak likelihood)"
        else:
            diagnosis = "-"
        out[v.replace("__subject", "")] = {"prior": ps, "likelihood": ls, "diagnosis": diagnosis}
    return out


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
    return out
