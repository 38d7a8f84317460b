"""Compare model forms (classic against revised) on the same observations by PSIS-LOO.

Each form is refitted (the study re-resolved by ``Study.with_model``, as if ``[study] model`` were
edited, so each form gets the quantities it needs), the pointwise log-likelihood is computed, and
the expected log predictive density is estimated by Pareto-smoothed importance sampling
leave-one-out (Vehtari, Gelman & Gabry 2017, Stat Comput 27:1413-1432). With subject labels the
unit left out is a subject: the log-likelihood of each subject's readings is summed before PSIS
(leave-one-subject-out).
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

import numpy as np

from uncertainty.study import Study

FORMS = ("classic", "revised")


def _pointwise(built: Any, idata: Any) -> tuple[np.ndarray, str]:
    """Log-likelihood per draw and unit (reading, or subject when hierarchical)."""
    import warnings

    import pymc as pm

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ll = pm.compute_log_likelihood(idata, model=built.model, extend_inferencedata=False,
                                       progressbar=False)
    cols, subj = [], []
    for term in built.terms:
        a = np.asarray(ll[term.name].values)
        a = a.reshape(a.shape[0], a.shape[1], -1)
        cols.append(a)
        s = np.asarray(term.subjects if term.subjects is not None else [0])
        subj.append(np.broadcast_to(s, (a.shape[2],)) if s.size in (1, a.shape[2]) else np.zeros(a.shape[2]))
    mat = np.concatenate(cols, axis=2)
    sidx = np.concatenate(subj).astype(int)
    if built.hierarchical:
        mat = np.stack([mat[:, :, sidx == k].sum(axis=2) for k in range(len(built.subjects))], axis=2)
        return mat, "leave-one-subject-out PSIS"
    return mat, "PSIS-LOO"


def compare_forms(study: Study, *, fit: Callable[..., Any], sampler: str = "nutpie", seed: int | None = None,
                  chains: int = 4, draws: int = 1000, tune: int = 1000,
                  observations: Sequence[Any] | None = None) -> dict[str, Any]:
    """elpd (and its se, Pareto k max) per model form and the preferred form; failures as notes.

    Parameters
    ----------
    study : Study
        The study; each form of :data:`FORMS` is fitted to ``study.with_model(form)``.
    fit : callable
        ``inference.fit`` (passed in, so that this module does not import the entry points that
        call it).
    sampler, seed, chains, draws, tune
        Sampler settings, as for ``inference.fit``.
    observations : Sequence, optional
        Observations replacing the study's own (study-file form, canonical units).

    Returns
    -------
    dict
        ``method``, ``models`` (per form: ``elpd`` and ``se`` in nats, ``p_loo``, ``pareto_k_max``,
        ``converged``), ``notes``; with both forms fitted, ``elpd_difference_revised_minus_classic``
        and ``preferred``.
    """
    import arviz as az

    models: dict[str, Any] = {}
    notes: list[str] = []
    method = "PSIS-LOO"
    for form in FORMS:
        try:
            st = study if form == study.model else study.with_model(form)
            res = fit(st, observations, sampler=sampler, seed=seed, chains=chains, draws=draws, tune=tune)
            mat, method = _pointwise(res.built, res.idata)
            ll = az.from_dict(log_likelihood={"y": mat}, posterior={"_": np.zeros(mat.shape[:2])})
            loo = az.loo(ll, pointwise=True)
            models[form] = {"elpd": float(loo.elpd_loo), "se": float(loo.se), "p_loo": float(loo.p_loo),
                            "pareto_k_max": float(np.max(loo.pareto_k.values)),
                            "converged": bool(res.passed)}
        except Exception as exc:  # noqa: BLE001 - a form that cannot be fitted is reported, not raised
            notes.append(f"{form}: could not be compared ({type(exc).__name__}: {exc})")
    out: dict[str, Any] = {"method": method, "models": models, "notes": notes}
    if len(models) == 2:
        a, b = models["classic"], models["revised"]
        diff = b["elpd"] - a["elpd"]
        out["elpd_difference_revised_minus_classic"] = diff
        out["preferred"] = "revised" if diff > 0 else "classic"
        if any(m["pareto_k_max"] > 0.7 for m in models.values()):
            notes.append("Pareto k above 0.7 (Vehtari et al. 2017): the PSIS estimate is unreliable")
    return out
