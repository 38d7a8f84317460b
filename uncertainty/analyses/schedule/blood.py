"""Blood-sampling times for a ``whole_body`` study with haemoglobin readings: which K of the candidate times.

The cuff schedule's linearised Bayesian design (``analyses.schedule``: the Fisher information of the readings
plus the prior precision, finite-difference Jacobians at a few prior points, greedy selection then exchange)
applied to serial haemoglobin. A baseline sample at time 0 is always drawn; each later sample at t_j gives the
reading the ``haemoglobin`` observation kind fits, y_j = Hb(t_j) / Hb(0) = hb_ratio(t_j), with the normal error
of that ratio by the kind's delta method, sd_j = noise_sd sqrt(1 + y_j^2) / hb_ref (y_j at the prior median; the
baseline's error shared by the ratios neglected, as the kind neglects it). The time course is the one the kind
solves (``inference.observations.course.whole_body_course``, Runge-Kutta steps of at most 2 min, linear
interpolation between report times).

The parameters phi are the study's uncertain inputs, on the log scale for a positive quantity; their prior
moments are matched to draws of the study's individual (typical uncertainty and between-subject spread, the
study's correlations included). The target is a quantity (e.g. ``Kf``) or a time course at a time
(``"infused_retained_fraction at 60 min"``); the criterion is the target's linearised posterior variance over its
prior variance, g' Sigma_post g / g' Sigma_prior g with g the target's gradient in phi, averaged over the
linearisation points (for a quantity g picks its own coordinate: the cuff schedule's A criterion on one target).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from uncertainty.analyses.inference.observations.course import interpolation, whole_body_course
from uncertainty.analyses.propagate.timeline import values_at
from uncertainty.analyses.sampling import draw
from uncertainty.analyses.schedule import equal_times, information, jacobian, posterior_cov, select_times
from uncertainty.core import units
from uncertainty.core.errors import InputError
from uncertainty.forms.evaluate import input_values
from uncertainty.study.endpoints import parse_time_endpoint

#: One haemoglobin reading's sd, g/dL: from memory (automated analysers repeat to about 1-2% at 14 g/dL).
HB_NOISE_SD_G_PER_DL = 0.2
#: Resting haemoglobin, g/dL: common practice (adult reference about 12-17 g/dL).
HB_REF_G_PER_DL = 14.0


@dataclass(frozen=True)
class TargetCriterion:
    """Posterior over prior variance of a linear function g' phi of the parameters, averaged over the points.

    ``grads``: (M, p), the target's gradient at each linearisation point; ``prior_cov``: (p, p).
    """

    grads: np.ndarray
    prior_cov: np.ndarray

    def __call__(self, cov: np.ndarray) -> np.ndarray:
        """Criterion of posterior covariances (..., M, p, p), averaged over M: shape (...)."""
        g = self.grads
        post = np.einsum("mi,...mij,mj->...m", g, cov, g)
        prior = np.einsum("mi,ij,mj->m", g, self.prior_cov, g)
        return (post / prior).mean(axis=-1)


def _phi_of(study: Any, n: int, seed: int) -> tuple[list[str], np.ndarray, np.ndarray]:
    """Names, log flags and (n, p) draws of phi for the study's individual."""
    vals = draw(study, n, method="mc", seed=seed, layer="individual")
    names = [q for q in study.names if np.ptp(np.asarray(vals[q], dtype=float)) > 0]
    cols, logs = [], []
    for q in names:
        x = np.asarray(vals[q], dtype=float)
        lg = bool(np.all(x > 0))
        logs.append(lg)
        cols.append(np.log(x) if lg else x)
    return names, np.array(logs), np.column_stack(cols)


@dataclass(frozen=True)
class BloodDesign:
    """The linearised design problem of :func:`blood_design`: per-sample information and the target's criterion.

    Attributes
    ----------
    times : numpy.ndarray
        Candidate times, min (sorted, distinct).
    info : numpy.ndarray
        (M, G, p, p) Fisher information of a sample at each candidate time, at each linearisation point.
    crit : TargetCriterion
        The target's posterior over prior variance.
    prior_cov : numpy.ndarray
        (p, p) prior covariance of phi.
    names : list of str
        The parameters of phi.
    unit : str
        The target's unit.
    natural : numpy.ndarray or None
        (M,) the target's value at each point when its sd is taken from the log scale (a positive quantity),
        else None.
    """

    times: np.ndarray
    info: np.ndarray
    crit: TargetCriterion
    prior_cov: np.ndarray
    names: list[str]
    unit: str
    natural: np.ndarray | None

    def posterior(self, idx: Sequence[int]) -> np.ndarray:
        """(M, p, p) linearised posterior covariance after samples at the candidate indices ``idx``."""
        return posterior_cov(self.info[:, list(idx)].sum(axis=1), np.linalg.inv(self.prior_cov))

    def sd(self, cov: np.ndarray) -> float:
        """The target's sd (its unit) under covariances ``cov`` (M, p, p), averaged over the points."""
        g = self.crit.grads
        s = np.sqrt(np.einsum("mi,mij,mj->m", g, cov, g))
        return float((s if self.natural is None else self.natural * s).mean())


def blood_design(study: Any, candidates_min: Sequence[float], target: str, *,
                 noise_sd: float = HB_NOISE_SD_G_PER_DL, hb_ref: float = HB_REF_G_PER_DL,
                 points: int = 4, draws: int = 4000, seed: int | None = None) -> BloodDesign:
    """The design problem of :func:`blood_sampling_times` (arguments there; no ``k``).

    Returns
    -------
    BloodDesign

    Raises
    ------
    InputError
        Not a whole_body study, a candidate time outside (0, end], an unknown target.
    """
    plan = getattr(study, "timeline", None)
    file = getattr(study, "file", None)
    if plan is None:
        raise InputError("blood-sampling times need a whole_body study (its [[interventions]] and [timeline])",
                         file=file, key="study.model", value=getattr(study, "model", None))
    times = np.array(sorted({float(t) for t in candidates_min}), dtype=float)
    if times.size == 0 or times[0] <= 0 or times[-1] > float(plan.end):
        raise InputError(f"candidate times lie after 0 and at most the timeline's end ({plan.end:g} min)",
                         file=file, key="candidates", value=list(candidates_min))
    seed = int(seed if seed is not None else getattr(study, "seed", 0) or 0)
    names, logs, S = _phi_of(study, draws, seed)
    prior_cov = np.cov(S, rowvar=False)
    centre = np.median(S, axis=0)
    pts = np.vstack([centre, S[1:points]]) if points > 1 else centre[None, :]

    def values(phi: np.ndarray) -> dict[str, np.ndarray]:
        return {q: np.exp(phi[:, j]) if logs[j] else phi[:, j] for j, q in enumerate(names)}

    point = parse_time_endpoint(target, plan, file=file, key="target")
    natural = None
    if point is not None:
        def endpoint(phi: np.ndarray) -> np.ndarray:
            return values_at(study, point, values(phi))[:, None]

        grads = jacobian(endpoint, pts, batched=True)[:, 0, :]
        unit = point.unit
    elif target in names:
        j = names.index(target)
        grads = np.zeros_like(pts)
        grads[:, j] = 1.0
        unit = units.CANONICAL.get(target, "")
        natural = np.exp(pts[:, j]) if logs[j] else None  # delta method from the log scale
    else:
        raise InputError(f"the target is an uncertain quantity of the study ({', '.join(names)}) or a time course "
                         "at a time (\"NAME at TIME\")", file=file, key="target", value=target)

    def hb_at_times(phi: np.ndarray) -> np.ndarray:
        c = whole_body_course(input_values(study, values(phi)), study, "hb_ratio", np)
        series = np.stack([np.asarray(x, dtype=float) * np.ones(len(phi)) for x in c["hb_ratio"]], axis=1)
        lo, hi, w = interpolation(times, c["times_min"])
        return (1.0 - w) * series[:, lo] + w * series[:, hi]  # (rows, G)

    J = jacobian(hb_at_times, pts, batched=True)  # (M, G, p)
    y = hb_at_times(centre[None, :])[0]
    sd = noise_sd * np.sqrt(1.0 + y**2) / hb_ref  # the kind's delta method, at the prior median
    return BloodDesign(times=times, info=information(J / sd[None, :, None], 1.0),
                       crit=TargetCriterion(grads, prior_cov), prior_cov=prior_cov, names=names, unit=unit,
                       natural=natural)


def blood_sampling_times(study: Any, candidates_min: Sequence[float], k: int, target: str, *,
                         noise_sd: float = HB_NOISE_SD_G_PER_DL, hb_ref: float = HB_REF_G_PER_DL,
                         points: int = 4, draws: int = 4000, seed: int | None = None) -> dict[str, Any]:
    """The ``k`` candidate times to draw blood for haemoglobin that most narrow ``target``'s posterior.

    Parameters
    ----------
    study : Study
        A ``whole_body`` study (its interventions and ``[timeline]``).
    candidates_min : sequence of float
        Candidate sampling times after 0, min (at most the timeline's end); a baseline at 0 is always drawn.
    k : int
        Number of samples after the baseline.
    target : str
        An uncertain quantity of the study (e.g. ``Kf``) or ``"NAME at TIME"`` (a time course at a time).
    noise_sd : float
        sd of one haemoglobin reading, g/dL.
    hb_ref : float
        Resting haemoglobin, g/dL (scales the ratio's error).
    points : int
        Linearisation points (the prior median and further prior draws).
    draws : int
        Prior draws the moments of phi are matched to.
    seed : int, optional
        Default the study's seed.

    Returns
    -------
    dict
        ``times_min`` (the chosen times, min), ``posterior_sd`` and ``prior_sd`` of the target (its unit),
        ``equal_spacing`` (``times_min``, ``posterior_sd``, ``criterion``), ``sd_ratio`` (chosen over equal spacing;
        below 1 is a gain), ``criterion`` (posterior over prior variance), ``target``, ``unit``, ``parameters``
        (phi names), the noise settings.

    Raises
    ------
    InputError
        Not a whole_body study, a candidate time outside (0, end], k outside 1..number of candidates, an unknown
        target.
    """
    n_cand = len({float(t) for t in candidates_min})
    if not 1 <= k <= max(n_cand, 1):
        raise InputError(f"the number of samples lies between 1 and the {n_cand} candidates",
                         file=getattr(study, "file", None), key="k", value=k)
    d = blood_design(study, candidates_min, target, noise_sd=noise_sd, hb_ref=hb_ref, points=points, draws=draws,
                     seed=seed)
    base = equal_times(d.times, k)
    chosen, value = select_times(d.info, k, np.linalg.inv(d.prior_cov), d.crit, start=base)
    sd_opt, sd_base = d.sd(d.posterior(chosen)), d.sd(d.posterior(base))
    prior = d.sd(np.broadcast_to(d.prior_cov, (len(d.crit.grads), *d.prior_cov.shape)))
    return {"target": target, "unit": d.unit, "times_min": [float(d.times[i]) for i in chosen],
            "posterior_sd": sd_opt, "prior_sd": prior, "criterion": float(value),
            "equal_spacing": {"times_min": [float(d.times[i]) for i in base], "posterior_sd": sd_base,
                              "criterion": float(d.crit(d.posterior(base)))},
            "sd_ratio": sd_opt / sd_base if sd_base > 0 else float("nan"),
            "parameters": d.names, "noise_sd_g_per_dL": noise_sd, "hb_ref_g_per_dL": hb_ref}


__all__ = ["HB_NOISE_SD_G_PER_DL", "HB_REF_G_PER_DL", "BloodDesign", "TargetCriterion", "blood_design",
           "blood_sampling_times"]
