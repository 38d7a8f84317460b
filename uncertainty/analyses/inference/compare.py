"""Compare model forms (classic against revised) on the same observations by PSIS-LOO.

Each form is refitted (the study re-resolved by ``Study.with_model``, as if ``[study] model`` were
edited, so each form gets the quantities it needs), the pointwise log-likelihood is computed, and
the expected log predictive density is estimated by Pareto-smoothed importance sampling
leave-one-out (Vehtari, Gelman & Gabry 2017, Stat Comput 27:1413-1432). With subject labels the
unit left out is a subject: the log-likelihood of each subject's readings is summed before PSIS
(leave-one-subject-out).

The difference of the two forms' elpd is reported with its standard error from the pointwise
differences, sqrt(n var(d_i)) (Vehtari, Gelman & Gabry 2017, section 5.2), and a form is preferred
only when the difference exceeds PREFER_SE of those standard errors; a form whose chains failed the
quality gate is not compared at all.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from typing import Any

import numpy as np

from uncertainty.study import Study

FORMS = ("classic", "revised")
#: standard errors of the elpd difference beyond which one form is preferred (common practice)
PREFER_SE = 2.0


def elpd_difference(pointwise_a: np.ndarray, pointwise_b: np.ndarray, *, names: tuple[str, str] = FORMS,
                    converged: tuple[bool, bool] = (True, True)) -> dict[str, Any]:
    """The elpd difference b - a of two fits to the same units, its se and the verdict.

    Parameters
    ----------
    pointwise_a, pointwise_b : numpy.ndarray
        Pointwise elpd (nats) of each unit left out, same units in the same order.
    names : (str, str)
        The two forms (a, b).
    converged : (bool, bool)
        Whether each fit passed its quality gate.

    Returns
    -------
    dict
        ``difference`` (nats, b - a), ``se`` (sqrt(n var(d_i))), ``preferred`` (a name, or None when
        the difference is within PREFER_SE standard errors or a fit did not converge) and ``verdict``
        (one sentence).
    """
    a, b = np.asarray(pointwise_a, dtype=float), np.asarray(pointwise_b, dtype=float)
    d = b - a
    diff = float(d.sum())
    se = float(np.sqrt(d.size * np.var(d, ddof=1))) if d.size > 1 else float("nan")
    out: dict[str, Any] = {"difference": diff, "se": se, "preferred": None}
    if not all(converged):
        bad = [n for n, ok in zip(names, converged, strict=True) if not ok]
        out["verdict"] = (f"not compared: the chains of {' and '.join(bad)} failed the quality gate, so their "
                          "elpd is not trustworthy")
        return out
    if not np.isfinite(se) or abs(diff) <= PREFER_SE * se:
        out["verdict"] = (f"neither form preferred: the elpd difference {diff:+.2f} is within {PREFER_SE:g} "
                          f"standard errors ({se:.2f}) of zero")
        return out
    out["preferred"] = names[1] if diff > 0 else names[0]
    out["verdict"] = (f"{out['preferred']} preferred: elpd difference {names[1]} - {names[0]} {diff:+.2f} "
                      f"(se {se:.2f}), beyond {PREFER_SE:g} standard errors")
    return out


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
        ``converged``), ``notes``; with both forms fitted, ``elpd_difference_revised_minus_classic``,
        ``elpd_difference_se``, ``preferred`` (None unless the difference exceeds PREFER_SE standard
        errors and both fits converged) and ``verdict``.
    """
    import arviz as az

    models: dict[str, Any] = {}
    pointwise: dict[str, np.ndarray] = {}
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
            pointwise[form] = np.asarray(loo.loo_i.values, dtype=float).ravel()
        except Exception as exc:  # noqa: BLE001 - a form that cannot be fitted is reported, not raised
            notes.append(f"{form}: could not be compared ({type(exc).__name__}: {exc})")
    out: dict[str, Any] = {"method": method, "models": models, "notes": notes}
    if len(models) == 2:
        verdict = elpd_difference(pointwise["classic"], pointwise["revised"],
                                  converged=(models["classic"]["converged"], models["revised"]["converged"]))
        out["elpd_difference_revised_minus_classic"] = verdict["difference"]
        out["elpd_difference_se"] = verdict["se"]
        out["preferred"] = verdict["preferred"]
        out["verdict"] = verdict["verdict"]
        if any(m["pareto_k_max"] > 0.7 for m in models.values()):
            notes.append("Pareto k above 0.7 (Vehtari et al. 2017): the PSIS estimate is unreliable")
    return out
