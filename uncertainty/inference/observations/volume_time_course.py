"""``volume_time_course``: limb volume (mL/100 mL) against time after one or more venous-cuff steps.

The curve is ``physiology.interstitium.volume_time_course`` (linear interstitium, analytic):
a fast venous-filling phase (venous compliance Cv, time constant tau_v) plus the filtration phase,
with the cuff-to-vein transmission and dPc = dPv / (1 + r), plus a per-subject baseline offset
(the protocol bias term). Filtration responds to venous pressure above the isovolumetric venous
pressure Pvi (the curve's filtration part is evaluated with Pvi as its baseline), the venous part
to pressure above the resting venous pressure Pv.

Re-parameterisation. What such curves identify is Kf (per 100 mL) and Pvi for each subject; the
interstitial compliance C_tis and lymph conductance L enter the linear solution only through the
time constant tau = C_tis / (Kf + L). So the model samples, non-centred, per subject Kf (the study's
hierarchical Kf, converted to per 100 mL), Pvi and Cv, and once tau, tau_v, transmission and the
reading noise; C_tis and L are never sampled separately (they would form a ridge). The naive
alternative (``parameterisation = "naive"``: centred per-subject Kf, C_tis and L) is kept for the
benchmark only.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.inference.problem import Observation, Problem

LABELLED = True
#: Start the chains around the posterior mode (inference.api.fit, start="auto"): from the priors'
#: central points some chains stuck far from the curves' fit in warm-up (one of four on the invented
#: forearm study, R-hat about 2); from the mode all agree.
START_AT_MODE = True
NOTE = ("volume_time_course: the curves identify Kf (per 100 mL) and Pvi per subject; interstitial "
        "compliance and lymph conductance enter only through tau = C_tis/(Kf + L), sampled as one "
        "quantity.")

# Side priors of the curve model (canonical units). Each names its origin.
SIDE_PRIORS: dict[str, dict[str, Any]] = {
    # isovolumetric venous pressure, typical subject; REFERENCES: Gamble et al. 1993 (J Physiol
    # 464:407), Pvi roughly 8-30 mmHg depending on protocol (from memory)
    "Pvi": {"dist": "normal", "mean": 15.0, "sd": 5.0, "between_subject": {"sd": 4.0},
            "origin": "from memory: Gamble et al. 1993 J Physiol 464:407, Pvi about 8-30 mmHg"},
    # venous compliance of the forearm, mL/mmHg per 100 mL (from memory: a few hundredths)
    "Cv": {"dist": "lognormal", "median": 0.04, "gsd": 1.6, "between_subject": {"cv": 0.3},
           "origin": "from memory: forearm venous compliance of order 0.03-0.06 mL/mmHg/100 mL"},
    # venous filling time constant (min), physiology.interstitium.TAU_VENOUS_MIN is 1 min (from memory)
    "tau_v": {"dist": "lognormal", "median": 0.6, "gsd": 2.0,
              "origin": "from memory: venous filling complete within 1-2 min of a cuff step"},
    # slow-phase time constant C_tis/(Kf + L) (min); the slow phase is near-linear over minutes
    "tau": {"dist": "lognormal", "median": 30.0, "gsd": 3.0,
            "origin": "from memory: filtration phase near-linear over a 4-min step (tau of tens of min)"},
    # cuff-to-vein pressure transmission; Christ et al. 1997 (J Physiol 503:463) about 0.9
    "transmission": {"dist": "normal", "mean": 0.9, "sd": 0.04,
                     "origin": "from memory: Christ et al. 1997 J Physiol 503:463, about 0.9"},
    # per-subject baseline offset (mL/100 mL): common practice, a zero-centred protocol bias term
    "offset_sd": {"value": 0.02, "origin": "common practice: zero-centred baseline offset"},
    # reading noise when the observation states no sd (mL/100 mL)
    "noise": {"dist": "lognormal", "median": 0.01, "gsd": 2.5,
              "origin": "from memory: strain-gauge plethysmography resolution about 0.01 mL/100 mL"},
}

#: Rounding (mmHg) of the corner of Pv = max(Pv0, T P_cuff) (``interstitium.venous_pressure``):
#: our numerical choice, well below the 10 mmHg cuff steps; it gives the likelihood a continuous
#: gradient where a subject's Pvi crosses a step's venous pressure. studies/data/make_demo_data.py
#: uses the same value.
SMOOTH_MMHG = 1.0
#: Use every k-th reading of each subject (1 = all). Readings 0.25 min apart over 4-min steps
#: carry redundant information on the slow phase; thinning cuts gradient cost.
DEFAULT_EVERY = 1
#: Span of the bend factor g(tau) in protocol lengths (a numerical choice: any value is an exact
#: re-parameterisation; 1.2 brought the posterior correlation of tau with each subject's Kf from
#: -0.85 (0.5) to about zero on the invented five-step protocol of tests/test_inference_volume.py).
BEND_SPAN = 1.2
#: Resting venous pressure (mmHg) when the study has no Pv: from memory, supine forearm veins about
#: 5-10 mmHg. Post- to pre-capillary resistance ratio r when the study has none: from memory,
#: resting muscle 0.1-0.3 (Pappenheimer & Soto-Rivera 1948).
PV_REST = 9.0
R_DEFAULT = 0.2

# Naive model (benchmark only): centred hierarchy over C_tis and L (mL/mmHg, mL/min/mmHg per 100 mL)
NAIVE_PRIORS = {
    "C_tis": {"median": 0.3, "gsd": 2.0, "cv": 0.3, "origin": "from memory: Aukland & Reed 1993"},
    "L": {"median": 0.005, "gsd": 2.0, "cv": 0.3, "origin": "from memory: order of Kf"},
}


def _time_column(data: dict[str, list]) -> np.ndarray:
    if "time_min" in data:
        return np.asarray(data["time_min"], dtype=float)
    if "time_h" in data:
        return np.asarray(data["time_h"], dtype=float) * 60.0
    return np.asarray(data["time_day"], dtype=float) * 1440.0


def _data(obs: Observation, problem: Problem) -> dict[str, list]:
    data = obs.extra.get("data")
    if data is None:
        raise obs.error("a volume_time_course needs its data file (read by the study loader)", "file",
                        obs.extra.get("file"))
    return data


def _steps(obs: Observation) -> tuple[list[float], list[float]]:
    steps = obs.extra.get("steps")
    if steps is None:
        step = obs.extra.get("step")
        steps = [step] if step is not None else []
        for s in steps:
            if isinstance(s, dict):
                s.setdefault("at_min", 0.0)
    times, cuffs = [], []
    for i, s in enumerate(steps):
        get = s.get if isinstance(s, dict) else (lambda k, _s=s: getattr(_s, k, None))
        at = get("at_min")
        times.append(0.0 if at is None else float(at))
        cuffs.append(float(get("to")))
        if i and not times[-1] > times[-2]:
            raise obs.error("step times (at_min) must increase", f"steps[{i}].at_min", times[-1])
    if not times:
        raise obs.error("give step = {...} or steps = [...]", "step", None)
    return times, cuffs


def subjects(obs: Observation, problem: Problem) -> list[tuple[str, str | None]]:
    """(subject, group) pairs in the data file, in file order."""
    data = _data(obs, problem)
    seen: dict[str, str | None] = {}
    groups = data.get("group")
    for k, s in enumerate(data["subject"]):
        s = str(s)
        if s not in seen:
            seen[s] = None if groups is None else str(groups[k])
    return list(seen.items())


def validate(obs: Observation, problem: Problem) -> None:
    """Data columns (subject, time, volume), times rising per subject, non-negative volumes, steps."""
    data = _data(obs, problem)
    if "subject" not in data or "volume" not in data:
        raise obs.error("the data file needs columns subject, time_min and volume", "file",
                        obs.extra.get("file"))
    t = _time_column(data)
    last: dict[str, float] = {}
    for k, (s, tk) in enumerate(zip(data["subject"], t, strict=True)):
        if s in last and not tk > last[s]:
            raise obs.error(f"time must increase within subject {s} (row {k + 1})", "file", float(tk))
        last[s] = tk
    _steps(obs)
    if obs.cv is not None:
        raise obs.error("volume changes can be zero or negative: give the reading noise as sd "
                        "(mL/100 mL), or leave it out to estimate it", "cv", obs.cv)
    if "Kf" not in problem.priors:
        raise obs.error("a volume_time_course needs Kf to be uncertain in the study", "kind", obs.kind)
    if "effects" not in obs.extra and data.get("group") is not None:
        obs.extra["effects"] = ["Kf"]


def _side_prior(name: str) -> Any:
    from uncertainty.priors import Prior

    spec = SIDE_PRIORS[name]
    params = {k: float(v) for k, v in spec.items() if k in ("mean", "sd", "median", "gsd")}
    return Prior(name, spec["dist"], params, between_subject=spec.get("between_subject"),
                 origin=spec["origin"])


def claims(obs: Observation, problem: Problem) -> list[str]:
    """Quantities whose subject layer this kind builds itself, centred: Kf (on the cuff scale) and the
    resting venous pressure Pv (the first step's venous volume pins it) when the study samples it."""
    if obs.extra.get("parameterisation") == "naive":
        return []
    return ["Kf"] + (["Pv"] if "Pv" in problem.priors else [])


def _hyper(ctx: Any, name: str, prior: Any) -> tuple[Any, Any]:
    """Typical value (non-centred) and between-subject spread (lognormal around the declared value)."""
    import pymc as pm
    import pytensor.tensor as pt

    from uncertainty.inference.model_builder import SPREAD_LOG_SD
    from uncertainty.inference.observations.base import prior_rv

    typ = prior_rv(name, prior)
    ctx.extra_params.append(name)
    ctx.extra_priors[name] = prior
    kind, declared = next(iter(prior.between_subject.items()))
    declared = float(declared)
    if not ctx.hierarchical:
        return typ, declared
    w = pm.Normal(f"{name}__spread_z", 0.0, 1.0)
    spread = pm.Deterministic(f"{name}__spread", declared * pt.exp(SPREAD_LOG_SD * w))
    ctx.extra_params.append(f"{name}__spread")
    return typ, spread


def _log_sd(kind: str, spread: Any, xp: Any) -> Any:
    """Log-scale sd of a multiplicative between-subject spread given as a cv."""
    return xp.sqrt(xp.log1p(spread * spread)) if kind == "cv" else spread


def _subject_layer(ctx: Any, name: str, n: int, *, log_mean: Any = None, mean: Any = None,
                   sd: Any) -> Any:
    """Per-subject values, centred: log-normal around exp(log_mean) or normal around mean.

    Centred because every subject's curve pins its own value far more tightly than the
    population spread does; non-centred scores would then all move with the typical value and
    spread (one correlated direction through every subject), which is what made NUTS hit its
    tree-depth limit. With one individual the layer has the declared spread.
    """
    import pymc as pm
    import pytensor.tensor as pt

    if log_mean is not None:
        v = pm.Normal(f"{name}__log_subject", log_mean, sd, dims="subject")
        ctx.extra_params.append(f"{name}__log_subject")
        return pt.exp(v)
    v = pm.Normal(f"{name}__c_subject", mean, sd, dims="subject")
    ctx.extra_params.append(f"{name}__c_subject")
    return v


def _thin(obs: Observation) -> int:
    every = int(obs.extra.get("every", DEFAULT_EVERY))
    if every < 1:
        raise obs.error("every (use every k-th reading) must be a positive integer", "every", every)
    return every


#: Evaluate the curves on a subjects x distinct-times table (then pick the readings) when the table
#: has at most this many cells per reading: shared time constants then cost one exponential per
#: distinct time and step instead of one per reading (20x fewer on a shared time grid of 20 subjects).
GRID_CELLS_PER_READING = 2.0


def _curve(t: np.ndarray, sidx: np.ndarray, n: int, times: list[float], cuffs: list[float], kf: Any,
           c_tis: Any, lym: Any, cv: Any, pv0: Any, pvi: Any, tau_v: Any, r: Any, trans: Any,
           tau: Any) -> Any:
    """Noise-free limb volume (mL/100 mL) of each reading (subject ``sidx``, time ``t`` in min) through
    ``interstitium.cuff_curve``: on the subjects x distinct-times table when that is small (shared
    time grid), else reading by reading. Per-subject arguments are vectors over the ``n`` subjects;
    ``tau`` (min) replaces C_tis and L when given."""
    import pytensor.tensor as pt

    from uncertainty.physiology import interstitium

    grid, tidx = np.unique(t, return_inverse=True)
    on_grid = n * grid.size <= GRID_CELLS_PER_READING * t.size
    if on_grid:
        time_arg, pick = pt.as_tensor_variable(grid[None, :]), (lambda v: v[:, None])
    else:
        time_arg, pick = pt.as_tensor_variable(t), (lambda v: v[sidx])
    per = [None if v is None else pick(v) for v in (kf, c_tis, lym, cv, pv0, pvi, r)]
    kf_a, c_a, l_a, cv_a, pv0_a, pvi_a, r_a = per
    curve = interstitium.cuff_curve(time_arg, times, cuffs, kf_a, c_a, l_a, cv_a, Pv_rest=pv0_a, Pvi=pvi_a,
                                    tau_v=tau_v, r=r_a, transmission=trans, smooth=SMOOTH_MMHG, xp=pt,
                                    tau=tau)
    if not on_grid:
        return curve
    flat = sidx * grid.size + tidx
    if flat.size == n * grid.size and np.array_equal(flat, np.arange(flat.size)):
        return curve.ravel()  # every subject read at every time, in file order: no gather needed
    return curve.ravel()[flat]


def add(ctx: Any, obs: Observation) -> None:
    """Likelihood of the volume readings (every ``every``-th per subject) of every subject in the file."""
    import pymc as pm
    import pytensor.tensor as pt

    from uncertainty.inference.model_builder import ObservedTerm
    from uncertainty.inference.observations.base import add_reading, prior_rv, term_name

    data = _data(obs, ctx.problem)
    name = term_name(obs)
    t_all = _time_column(data)
    subj_all = [str(s) for s in data["subject"]]
    every = _thin(obs)
    # keep every k-th reading of each subject, counted from its first one
    count: dict[str, int] = {}
    keep = np.zeros(len(subj_all), dtype=bool)
    for k, s in enumerate(subj_all):
        keep[k] = count.get(s, 0) % every == 0
        count[s] = count.get(s, 0) + 1
    t = t_all[keep]
    sidx = np.array([ctx.subjects.index(s) for s, k in zip(subj_all, keep, strict=True) if k])
    y = np.asarray(data["volume"], dtype=float)[keep]
    times, cuffs = _steps(obs)
    n = len(ctx.subjects)
    naive = obs.extra.get("parameterisation") == "naive"
    density = ctx.problem.density
    r = ctx.value("r") if ctx.problem.quantity_known("r") else R_DEFAULT * pt.ones(n)
    tau_v = prior_rv(f"{name}__tau_v", _side_prior("tau_v"))
    trans = prior_rv(f"{name}__transmission", _side_prior("transmission"))
    pv_layer = ctx.layers.get("Pv")
    if pv_layer is not None:
        # the curves see T P_cuff - Pv: sampled on the cuff scale, Pv / T (as Pvi below)
        if pv_layer["kind"] == "sd":
            pv0 = trans * _subject_layer(ctx, f"{name}__Pv_per_T", n, mean=pv_layer["base"] / trans,
                                         sd=pv_layer["spread"] / trans)
        else:
            pv0 = trans * _subject_layer(ctx, f"{name}__Pv_per_T", n, log_mean=pt.log(pv_layer["base"] / trans),
                                         sd=_log_sd("cv", pv_layer["spread"], pt))
        ctx.override("Pv", pv0)
    else:
        pv0 = ctx.value("Pv") if ctx.problem.quantity_known("Pv") else PV_REST * pt.ones(n)
    for q in ("tau_v", "transmission"):
        ctx.extra_params.append(f"{name}__{q}")
        ctx.extra_priors[f"{name}__{q}"] = _side_prior(q)
    pvi_prior, cv_prior = _side_prior("Pvi"), _side_prior("Cv")
    pvi_typ, pvi_spread = _hyper(ctx, f"{name}__Pvi", pvi_prior)
    cv_typ, cv_spread = _hyper(ctx, f"{name}__Cv", cv_prior)
    if naive:
        # benchmark baseline: the builder's non-centred Kf, non-centred Pvi and Cv in their own
        # units, centred per-subject C_tis and L (a ridge along C_tis/(Kf + L))
        kf = ctx.value("Kf") * density
        zp = pm.Normal(f"{name}__Pvi__subject_z", 0.0, 1.0, dims="subject")
        zc = pm.Normal(f"{name}__Cv__subject_z", 0.0, 1.0, dims="subject")
        pvi = pvi_typ + pvi_spread * zp if ctx.hierarchical else pvi_typ * pt.ones(n)
        cv = cv_typ * pt.exp(_log_sd("cv", cv_spread, pt) * zc) if ctx.hierarchical else cv_typ * pt.ones(n)
        c_tis = pm.LogNormal(f"{name}__C_tis", mu=np.log(NAIVE_PRIORS["C_tis"]["median"]),
                             sigma=np.log(NAIVE_PRIORS["C_tis"]["gsd"]), dims="subject")
        lym = pm.LogNormal(f"{name}__L", mu=np.log(NAIVE_PRIORS["L"]["median"]),
                           sigma=np.log(NAIVE_PRIORS["L"]["gsd"]), dims="subject")
        c_arg, l_arg = c_tis, lym
    else:
        # What the curves identify, on the cuff scale (transmission T factored out): the slope
        # b = Kf T / (1 + r) per cuff mmHg, the cuff pressure of zero filtration Pvi / T and the venous
        # volume per cuff mmHg Cv T. Sampling those (centred, per subject) leaves T a global
        # quantity that hardly correlates with any subject. The priors are the declared ones:
        # log Kf_s ~ N(log Kf_typ, s) is log b_s ~ N(log Kf_typ + log T - log(1 + r_s), s); Pvi_s ~ N(m, sd) is
        # Pvi_s / T ~ N(m / T, sd / T) (the Jacobian is in the transformed density).
        # The slow-phase time constant tau bends every curve: the data pin Kf g(tau), with
        # g = tau (1 - exp(-S/tau)) / S and S = BEND_SPAN x the protocol's length, far better than Kf
        # itself; sampling that product (shifted log-normal prior, exact for any S) keeps tau from
        # correlating with every subject's Kf.
        tau = prior_rv(f"{name}__tau", _side_prior("tau"))
        ctx.extra_params.append(f"{name}__tau")
        ctx.extra_priors[f"{name}__tau"] = _side_prior("tau")
        t_bend = BEND_SPAN * max(float(np.max(t_all)) - times[0], 1e-6)
        bend = tau * (-pt.expm1(-t_bend / tau)) / t_bend
        layer = ctx.layers.get("Kf")
        if layer is not None:
            b = _subject_layer(ctx, f"{name}__Kf_T", n,
                               log_mean=pt.log(layer["base"] * density * trans * bend / (1.0 + r)),
                               sd=_log_sd(layer["kind"], layer["spread"], pt))
            kf = b * (1.0 + r) / (trans * bend)
            ctx.override("Kf", kf / density)
        else:  # one individual, or Kf without a between-subject spread: the builder's values
            kf = ctx.value("Kf") * density
        pc = _subject_layer(ctx, f"{name}__Pvi_per_T", n, mean=pvi_typ / trans, sd=pvi_spread / trans)
        pvi = pc * trans
        cT = _subject_layer(ctx, f"{name}__Cv_T", n, log_mean=pt.log(cv_typ * trans),
                            sd=_log_sd("cv", cv_spread, pt))
        cv = cT / trans
        # the solution depends on C_tis and L only through tau = C_tis / (Kf + L), given directly
        c_arg, l_arg = None, None
    z_off = pm.Normal(f"{name}__offset_z", 0.0, 1.0, dims="subject")
    offset = SIDE_PRIORS["offset_sd"]["value"] * z_off
    pred = _curve(t, sidx, n, times, cuffs, kf, c_arg, l_arg, cv, pv0, pvi, tau_v, r, trans,
                  None if naive else tau) + offset[sidx]
    pm.Deterministic(f"{name}__pred", pred)
    pm.Deterministic(f"{name}__Pvi__subject", pvi, dims="subject")
    pm.Deterministic(f"{name}__Kf_100mL__subject", kf, dims="subject")
    ctx.subject_params[f"{name}__Pvi__subject"] = "Pvi"
    ctx.subject_params[f"{name}__Kf_100mL__subject"] = "Kf_100mL"
    if obs.sd is not None:
        sd: Any = obs.sd
    else:
        sd = prior_rv(f"{name}__noise", _side_prior("noise"))
        ctx.extra_params.append(f"{name}__noise")
        ctx.extra_priors[f"{name}__noise"] = _side_prior("noise")
    add_reading(name, pred, y, sd=sd)
    ctx.add_term(ObservedTerm(name=name, observation=obs, predicted=f"{name}__pred",
                              subjects=sidx, label="limb volume"))
    ctx.notes.append(f"{obs.key}: C_tis and L are not separately identified by short protocols; their "
                     f"combination tau = C_tis/(Kf + L) is sampled as {name}__tau")
    if every > 1:
        ctx.notes.append(f"{obs.key}: every {every}th reading of each subject used ({int(keep.sum())} of "
                         f"{keep.size})")
    ctx.curves.append({"name": name, "t": t, "subject_index": sidx, "volume": y,
                       "subjects": list(ctx.subjects)})
