"""Blood-sampling times for a ``whole_body`` study with haemoglobin readings: which K of the candidate times.

The cuff schedule's linearised Bayesian design (``analyses.schedule``: the Fisher information of the readings
plus the prior precision, finite-difference Jacobians at a few prior points, greedy selection then exchange)
applied to serial haemoglobin. A baseline sample at time 0 is always drawn; each later sample at t_j gives the
reading the ``haemoglobin`` observation kind fits, y_j = Hb(t_j) / Hb(0) = hb_ratio(t_j), with the normal error
of that ratio by the kind's delta method, sd_j = noise_sd sqrt(1 + y_j^2) / hb_ref (y_j at the prior median; the
baseline's error shared by the ratios neglected, as the kind neglects it). The time course is the one the kind
solves (``inference.observations.course.whole_body_course``, Runge-Kutta steps of at most ``MAX_STEP_MIN``, linear
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
from uncertainty.analyses.schedule.blood_result import BloodScheduleResult
from uncertainty.analyses.schedule.linear import equal_times, information, jacobian, posterior_cov, select_times
from uncertainty.core import units
from uncertainty.core.errors import InputError
from uncertainty.forms.evaluate import input_values
from uncertainty.study import ScheduleSection
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
    chosen, base, value = _choose(d, k)
    sd_opt, sd_base = d.sd(d.posterior(chosen)), d.sd(d.posterior(base))
    prior = _prior_sd(d)
    return {"target": target, "unit": d.unit, "times_min": [float(d.times[i]) for i in chosen],
            "posterior_sd": sd_opt, "prior_sd": prior, "criterion": float(value),
            "equal_spacing": {"times_min": [float(d.times[i]) for i in base], "posterior_sd": sd_base,
                              "criterion": float(d.crit(d.posterior(base)))},
            "sd_ratio": sd_opt / sd_base if sd_base > 0 else float("nan"),
            "parameters": d.names, "noise_sd_g_per_dL": noise_sd, "hb_ref_g_per_dL": hb_ref}


def _choose(d: BloodDesign, k: int) -> tuple[list[int], list[int], float]:
    """(chosen indices, equal-spacing indices, criterion of the chosen) for ``k`` samples."""
    base = equal_times(d.times, k)
    chosen, value = select_times(d.info, k, np.linalg.inv(d.prior_cov), d.crit, start=base)
    return chosen, base, float(value)


def _prior_sd(d: BloodDesign) -> float:
    """The target's prior sd (its unit), as :meth:`BloodDesign.sd` reports a posterior one."""
    return d.sd(np.broadcast_to(d.prior_cov, (len(d.crit.grads), *d.prior_cov.shape)))


# --------------------------------------------------------------------------------------------
# the [schedule] section of a whole_body study

#: ``[schedule]`` keys of the venous-cuff schedule only
CUFF_KEYS = ("steps", "step_min", "pressure_grid", "increasing", "measurements", "time_step_min", "noise_sd",
             "criterion", "targets", "transmission", "C_v_median", "C_v_gsd", "tau_v_median", "tau_v_gsd")
#: ``[schedule]`` keys of the blood-sampling schedule only (``linearisation_draws`` serves both)
BLOOD_KEYS = ("candidates", "samples", "target", "hb_sd", "hb_baseline")
#: Most sample counts the posterior-sd-against-K curve of the result covers (common practice: a figure bound).
MAX_CURVE_SAMPLES = 12
#: Prior draws of the individual behind the haemoglobin-ratio band of the figure (common practice).
BAND_DRAWS = 400


def is_blood_study(study: Any) -> bool:
    """True when ``[schedule]`` of ``study`` chooses blood-sampling times (a ``whole_body`` study).

    Parameters
    ----------
    study : Study
        A loaded study.

    Returns
    -------
    bool
    """
    return getattr(study, "model", None) == "whole_body" and getattr(study, "timeline", None) is not None


@dataclass(frozen=True)
class BloodSettings:
    """The blood-sampling settings of a study's ``[schedule]`` section, checked and in canonical units.

    Attributes
    ----------
    candidates : tuple of float
        Candidate sampling times after 0, min (sorted, distinct).
    samples : int
        Samples after the baseline.
    target : str
        A quantity of the study or ``"NAME at TIME"``.
    hb_sd, hb_baseline : float
        sd of one reading and resting haemoglobin, g/dL.
    points : int
        Linearisation points.
    """

    candidates: tuple[float, ...]
    samples: int
    target: str
    hb_sd: float
    hb_baseline: float
    points: int


def _time_min(value: float | str, file: Any, key: str) -> float:
    """A candidate time in min: a number (min) or a string with a time unit."""
    if not isinstance(value, str):
        return float(value)
    try:
        return float(units.registry().Quantity(value).to("min").magnitude)
    except Exception:  # pint raises several error kinds for a bad string or dimension
        raise InputError("not a time with its unit (e.g. \"30 min\", \"2 h\")", file=file, key=key,
                         value=value) from None


def blood_settings(study: Any) -> BloodSettings:
    """The checked blood-sampling settings of a ``whole_body`` study (``[schedule]``; defaults when absent).

    Parameters
    ----------
    study : Study
        A ``whole_body`` study.

    Returns
    -------
    BloodSettings
        Candidates default to every report time of ``[timeline]`` after 0 (min).

    Raises
    ------
    InputError
        (exit 2, naming ``schedule.<key>`` and the value) a venous-cuff key, a candidate time after the timeline's
        end, more samples than distinct candidates, a target that is neither an uncertain quantity of the study nor
        a time course at a time.
    StudyError
        A badly written ``"NAME at TIME"`` target (:func:`uncertainty.study.endpoints.parse_time_endpoint`).
    """
    sec = getattr(study, "schedule", None) or ScheduleSection()
    file = getattr(study, "file", None)
    plan = study.timeline
    for key in CUFF_KEYS:
        if key in sec.model_fields_set:
            raise InputError("a venous-cuff key: in a whole_body study [schedule] chooses blood-sampling times ("
                             + ", ".join(BLOOD_KEYS) + ", linearisation_draws)", file=file, key=f"schedule.{key}",
                             value=getattr(sec, key))
    end = float(plan.end)
    if sec.candidates is None:
        step = float(plan.report_every)
        times = [step * j for j in range(1, int(np.floor(end / step + 1e-9)) + 1)]
    else:
        times = []
        for i, v in enumerate(sec.candidates):
            key = f"schedule.candidates[{i}]"
            t = _time_min(v, file, key)
            if not 0.0 < t <= end + 1e-9:
                raise InputError(f"a candidate time lies after 0 and at or before the timeline's end ({end:g} min)",
                                 file=file, key=key, value=v)
            times.append(t)
    cand = tuple(sorted({round(t, 9) for t in times}))
    if sec.samples > len(cand):
        raise InputError(f"more samples than distinct candidate times ({len(cand)})", file=file,
                         key="schedule.samples", value=sec.samples)
    if parse_time_endpoint(sec.target, plan, file=file, key="schedule.target") is None \
            and sec.target not in (getattr(study, "names", None) or ()):
        raise InputError("the target is an uncertain quantity of the study ("
                         + ", ".join(getattr(study, "names", None) or ()) + ") or a time course at a time "
                         "(\"NAME at TIME\", e.g. \"infused_retained_fraction at 60 min\")", file=file,
                         key="schedule.target", value=sec.target)
    return BloodSettings(candidates=cand, samples=int(sec.samples), target=sec.target, hb_sd=float(sec.hb_sd),
                         hb_baseline=float(sec.hb_baseline), points=int(sec.linearisation_draws))


def check_blood_section(study: Any) -> None:
    """Refuse a ``[schedule]`` whose keys do not fit the study's form, before any work (exit 2).

    A ``whole_body`` study: :func:`blood_settings`; another form: no blood-sampling key.

    Parameters
    ----------
    study : Study
        A loaded study.

    Raises
    ------
    InputError
        As :func:`blood_settings`, or a blood-sampling key in a study of another form.
    """
    sec = getattr(study, "schedule", None)
    if is_blood_study(study):
        blood_settings(study)
        return
    if sec is None:
        return
    for key in BLOOD_KEYS:
        if key in sec.model_fields_set:
            raise InputError("a blood-sampling key: only a whole_body study's [schedule] chooses blood-sampling "
                             "times (this study's schedule is the venous-cuff one)", file=getattr(study, "file", None),
                             key=f"schedule.{key}", value=getattr(sec, key))


def _hb_band(study: Any, seed: int) -> dict[str, Any]:
    """Median and 95% interval of the individual's prior haemoglobin ratio at the report times."""
    vals = draw(study, BAND_DRAWS, method="mc", seed=seed, layer="individual")
    c = whole_body_course(input_values(study, vals), study, "hb_ratio", np)
    series = np.stack([np.asarray(x, dtype=float) * np.ones(BAND_DRAWS) for x in c["hb_ratio"]], axis=1)
    lo, med, hi = np.percentile(series, [2.5, 50.0, 97.5], axis=0)
    return {"times": [float(t) for t in c["times_min"]], "median": med.tolist(),
            "ci95": [[float(a), float(b)] for a, b in zip(lo, hi, strict=True)], "draws": BAND_DRAWS}


def blood_schedule(study: Any, seed: int | None = None) -> BloodScheduleResult:
    """The blood-sampling schedule of a ``whole_body`` study's ``[schedule]`` section (defaults when absent).

    Parameters
    ----------
    study : Study
        A ``whole_body`` study.
    seed : int, optional
        Default the study's seed.

    Returns
    -------
    BloodScheduleResult
        Its JSON: ``kind`` ("blood_sampling"), ``target``, ``unit``, ``samples``, ``candidates`` (min),
        ``optimised`` and ``equal_spacing`` (``times`` min, ``criterion``, ``posterior_sd`` {target: sd},
        ``hb_ratio``: the prior-median haemoglobin ratio at those times), ``prior_sd`` and ``sd_ratio``
        ({target: value}; searched over equal spacing, below 1 a gain), ``criterion_ratio``, ``status``,
        ``verdict``, ``by_samples`` (``samples``, ``optimised``, ``equal_spacing``: the target's posterior sd
        against the number of samples), ``hb_course`` (``times`` min, ``median``, ``ci95``: the individual's
        prior haemoglobin ratio), ``parameters``, ``hb_sd`` and ``hb_baseline`` (g/dL), ``linearisation_draws``,
        ``seed``, ``notes``, ``units``.

    Raises
    ------
    InputError
        As :func:`blood_settings` and :func:`blood_design`.
    """
    st = blood_settings(study)
    seed = int(seed if seed is not None else getattr(study, "seed", 0) or 0)
    d = blood_design(study, st.candidates, st.target, noise_sd=st.hb_sd, hb_ref=st.hb_baseline, points=st.points,
                     seed=seed)
    band = _hb_band(study, seed)
    t_band, med = np.asarray(band["times"]), np.asarray(band["median"])

    def row(idx: Sequence[int]) -> dict[str, Any]:
        times = [float(d.times[i]) for i in idx]
        return {"times": times, "criterion": float(d.crit(d.posterior(idx))),
                "posterior_sd": {st.target: d.sd(d.posterior(idx))},
                "hb_ratio": np.interp(times, t_band, med).tolist()}

    chosen, base, _ = _choose(d, st.samples)
    opt, eq = row(chosen), row(base)
    ks = sorted(set(range(1, min(len(d.times), MAX_CURVE_SAMPLES) + 1)) | {st.samples})
    curve_opt, curve_eq = [], []
    for k in ks:
        c, b, _ = _choose(d, k)
        curve_opt.append(d.sd(d.posterior(c)))
        curve_eq.append(d.sd(d.posterior(b)))
    prior = _prior_sd(d)
    sd_o, sd_e = opt["posterior_sd"][st.target], eq["posterior_sd"][st.target]
    better = opt["criterion"] < eq["criterion"] - 1e-9 * max(1.0, abs(eq["criterion"]))
    status = "optimised" if better else "no_better_schedule"
    verdict = (f"optimised: posterior sd of {st.target} {sd_o / sd_e:.3g} times that of equal spacing" if better
               else "no better schedule found: keep equal spacing")
    notes = [f"linearised (Laplace) posterior over {len(d.names)} uncertain inputs, averaged over "
             f"{len(d.crit.grads)} prior points; a baseline sample at 0 min is always drawn",
             "each later sample reads Hb(t)/Hb(0), the haemoglobin observation kind's ratio, with the sd of that ratio "
             "by the delta method (the baseline's shared error neglected, as the kind neglects it)",
             "the linearised sd is a lower bound on what a fitted posterior shows when the model is far from linear "
             "over the prior"]
    doc = {"kind": "blood_sampling", "target": st.target, "unit": d.unit, "samples": st.samples,
           "candidates": [float(t) for t in d.times], "baseline_time": 0.0, "optimised": opt, "equal_spacing": eq,
           "comparison": "equal_spacing", "prior_sd": {st.target: prior},
           "sd_ratio": {st.target: sd_o / sd_e if sd_e > 0 else float("nan")},
           "criterion_ratio": opt["criterion"] / eq["criterion"] if eq["criterion"] > 0 else float("nan"),
           "status": status, "verdict": verdict,
           "by_samples": {"samples": ks, "optimised": curve_opt, "equal_spacing": curve_eq},
           "hb_course": band, "parameters": list(d.names), "hb_sd": st.hb_sd, "hb_baseline": st.hb_baseline,
           "linearisation_draws": st.points, "seed": seed, "notes": notes,
           "units": {"times": "min", "candidates": "min", "posterior_sd": d.unit, "prior_sd": d.unit,
                     "hb_ratio": "1 (Hb over its value at 0 min)", "hb_sd": "g/dL", "hb_baseline": "g/dL"}}
    return BloodScheduleResult(doc)


__all__ = ["BAND_DRAWS", "BLOOD_KEYS", "CUFF_KEYS", "HB_NOISE_SD_G_PER_DL", "HB_REF_G_PER_DL", "MAX_CURVE_SAMPLES",
           "BloodDesign", "BloodScheduleResult", "BloodSettings", "TargetCriterion", "blood_design",
           "blood_sampling_times", "blood_schedule", "blood_settings", "check_blood_section", "is_blood_study"]
