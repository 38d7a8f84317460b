"""Shared pieces of the observation kinds: the reading's error model and declared side priors."""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty import priors as priors_mod
from uncertainty.analyses.inference.problem import Observation, Problem
from uncertainty.core.errors import InputError
from uncertainty.distributions import log_sd_from_cv
from uncertainty.forms.catalogue import outputs, study_outputs


def term_name(obs: Observation) -> str:
    """PyMC name of an observation's observed variable, e.g. ``obs2__lymph_flow``: one term per
    ``[[observations]]`` entry (all the rows of its data file), so names cannot clash."""
    return f"obs{obs.index}__{obs.kind}"


def term_subjects(index: Any) -> np.ndarray:
    """Subject index of each element of a term (``BuildContext.subject_index``: an int or an array)."""
    return np.atleast_1d(np.asarray(index, dtype=int))


def require_error(obs: Observation) -> None:
    """An observation needs a value (or data-file rows) and exactly one of sd (normal error, on the
    observation or per row) or cv (lognormal error); every reading needs its error."""
    if obs.value is None and obs.rows is None:
        raise obs.error("a value is required", "value", None)
    sds = obs.sds
    if (sds is None) == (obs.cv is None):
        raise obs.error("give exactly one of sd (normal error) or cv (lognormal error)", "sd",
                        obs.sd if obs.sd is not None else obs.cv)
    check_sds(obs, sds)


def check_sds(obs: Observation, sds: Any) -> None:
    """Every reading's normal error (``sds``: a number, an array over rows or None) is given and positive."""
    if sds is None:
        return
    sds = np.broadcast_to(np.asarray(sds, dtype=float), np.shape(obs.values))
    obs.check_values(np.isfinite(sds), "no sd for this reading (a blank sd cell and no sd on the observation)",
                     "sd")
    obs.check_values(sds > 0, "sd must be positive", "sd")


def add_reading(name: str, predicted: Any, value: Any, *, sd: float | None = None,
                cv: float | None = None, dims: str | None = None) -> Any:
    """Add the observed reading(s) ``value`` of ``predicted`` to the current PyMC model.

    ``sd``: normal error in the value's (canonical) unit; ``cv``: lognormal error with
    log-sd ``sqrt(log(1 + cv^2))`` around the prediction (which must be positive). The prediction is
    recorded as the Deterministic ``{name}__pred`` and the readings are drawn around that variable, so a
    posterior predictive reads it from the trace instead of compiling the model again (12 s less per
    20-subject whole-body fit); the log density is the same (PyTensor's rewrites drop the Deterministic's view).
    """
    import pymc as pm
    import pytensor.tensor as pt

    predicted = pm.Deterministic(f"{name}__pred", predicted)
    data = pm.Data(f"{name}__data", np.asarray(value, dtype=float))
    if cv is not None:
        s = log_sd_from_cv(cv)
        mu = pt.log(pt.maximum(predicted, 1e-300))
        return pm.LogNormal(name, mu=mu, sigma=s, observed=data, shape=data.shape)
    # one sd per reading (e.g. of a ratio to the subject's first reading, which scales with the readings) is data
    # too, so that a new dataset of the same design leaves the compiled log density's cache key unchanged
    sigma = pm.Data(f"{name}__sd", np.asarray(sd, dtype=float)) if np.ndim(sd) > 0 else sd
    return pm.Normal(name, mu=predicted, sigma=sigma, observed=data, shape=data.shape)


def check_positive_value(obs: Observation) -> None:
    """A cv (lognormal) error needs positive readings."""
    if obs.cv is not None and (obs.value is not None or obs.rows is not None):
        obs.check_values(obs.values > 0, "a cv (lognormal) error needs a positive value")


def declared_prior(decl: Any, symbol: str, obs: Observation, field: str) -> Any:
    """A Prior from a declaration given inside an observation (e.g. a distribution volume).

    Read with ``uncertainty.priors.parse_prior`` (any declaration a prior file accepts).
    """

    try:
        return priors_mod.parse_prior(symbol, decl, key=f"{obs.key}.{field}",
                                      ctx=priors_mod.Context(file=obs.file))
    except InputError as exc:
        raise obs.error(exc.reason, field, decl) from None


def prior_rv(name: str, prior: Any) -> Any:
    """A PyMC variable for a side prior: a constant for ``fixed``, non-centred (a standard-normal
    score ``name__z`` through ``Distribution.from_scores``) for normal and lognormal shapes, else
    ``prior.pymc(name)``."""
    import pymc as pm
    import pytensor.tensor as pt

    dist = prior.distribution
    if dist.is_fixed:
        return pt.as_tensor_variable(float(prior.params.get("value", prior.mean())))
    if dist.non_centred:
        z = pm.Normal(f"{name}__z", 0.0, 1.0)
        return pm.Deterministic(name, dist.from_scores(z, pt))
    return prior.pymc(name)


def require_quantity(obs: Observation, problem: Problem, name: str, why: str) -> None:
    """Raise when a quantity the observation kind needs is not part of the study."""
    if not problem.quantity_known(name) and name not in output_names(problem):
        raise obs.error(f"{obs.kind} needs the quantity {name} ({why}); add a prior for it to "
                        "[parameters]", "kind", obs.kind)


def prior_centres(problem: Problem) -> dict[str, float]:
    """Each uncertain quantity's prior median (its mean where a prior has no median)."""
    out = {}
    for name, prior in problem.priors.items():
        try:
            out[name] = float(prior.median())
        except Exception:  # noqa: BLE001 - priors without a median method
            out[name] = float(prior.mean())
    return out


def output_names(problem: Problem) -> set[str]:
    """Names of the forward map's outputs, from the form catalogue (never by running the model).

    Parameters
    ----------
    problem : Problem
        Its ``study`` (form, tissue, inputs) when it has one; otherwise its ``model_form`` with the
        problem's own quantities.

    Returns
    -------
    set of str

    Raises
    ------
    StudyError
        For an unknown model form.
    """
    if problem.study is not None and getattr(problem.study, "model", None) == problem.model_form:
        return set(study_outputs(problem.study))
    return set(outputs(problem.model_form, have=(*problem.priors, *problem.fixed)))


def timed_readings(obs: Observation, subjects: list[str]) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """A timed observation's data-file rows as arrays: subject index (0 for the study's individual when a
    row has none), time (min), value and sd (the observation's units).

    Parameters
    ----------
    obs : Observation
        An observation with data-file rows (subject, time, value).
    subjects : list of str
        The model's subject labels.

    Returns
    -------
    tuple of numpy.ndarray
        ``subject`` (int), ``time_min``, ``value``, ``sd``, one entry per row.
    """
    rows = obs.rows
    where = {s: k for k, s in enumerate(subjects)}
    subj = np.array([0 if s is None else where[s] for s in rows.subject], dtype=int)
    value = np.asarray(rows.value, dtype=float)
    sd = np.broadcast_to(np.asarray(obs.sds, dtype=float), value.shape).astype(float)
    return subj, np.asarray(rows.time_min, dtype=float), value, sd


def pair_with_first(subject: np.ndarray, time: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Each reading after its subject's earliest, paired with that earliest reading (for kinds that fit a
    change or a ratio from a subject's own baseline).

    Parameters
    ----------
    subject : numpy.ndarray
        Subject index of each reading.
    time : numpy.ndarray
        Time of each reading (any unit).

    Returns
    -------
    tuple of numpy.ndarray
        ``later`` (row indices of the readings after the first), ``first`` (the row of each one's subject's
        earliest reading) and ``skipped`` (subjects with a single reading), all int.
    """
    later, first, skipped = [], [], []
    for s in np.unique(subject):
        idx = np.flatnonzero(subject == s)
        f = idx[np.argmin(time[idx])]
        rest = [k for k in idx if k != f]
        if not rest:
            skipped.append(int(s))
        later += rest
        first += [f] * len(rest)
    return np.asarray(later, dtype=int), np.asarray(first, dtype=int), np.asarray(skipped, dtype=int)

