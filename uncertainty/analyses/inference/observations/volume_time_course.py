"""``volume_time_course``: limb volume (mL/100 mL) against time after one or more venous-cuff steps.

The curve is ``physiology.interstitium.volume_time_course`` (linear interstitium, analytic):
a fast venous-filling phase (venous compliance Cv, time constant tau_v) plus the filtration phase,
with the cuff-to-vein transmission and dPc = dPv / (1 + r), plus a per-subject baseline offset
(the protocol bias term). Filtration responds to venous pressure above the isovolumetric venous
pressure Pvi (the curve's filtration part is evaluated with Pvi as its baseline), the venous part
to pressure above the resting venous pressure Pv.

Re-parameterisation. What such curves identify is Kf (per 100 mL) and Pvi for each subject; the
interstitial compliance C_tis and lymph conductance L enter the linear solution only through the
time constant tau = C_tis / (Kf + L). So the model samples, per subject, the cuff-scale slope, Pvi,
the venous volume per cuff mmHg, the baseline offset (and Pv when the study samples it), and once
tau, tau_v, transmission and the reading noise; C_tis and L are never sampled separately (they
would form a ridge). Each subject's block is sampled in its own affine frame, fitted to its curve
before sampling (``_frame``), which makes the posterior of the frame coordinates close to
independent unit normals while keeping the declared prior exactly (``_subject_block``): on the
20-subject benchmark NUTS went from about 275 leapfrog steps per draw to about 19. The naive
alternative (``parameterisation = "naive"``: per-subject Kf, C_tis and L) is kept for the benchmark
only.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np

from uncertainty.analyses.inference.model_builder import SPREAD_LOG_SD, ObservedTerm
from uncertainty.analyses.inference.observations.base import add_reading, prior_rv, term_name
from uncertainty.analyses.inference.problem import Observation, Problem
from uncertainty.distributions import log_sd_from_cv
from uncertainty.physiology import interstitium
from uncertainty.priors import Prior

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
    """Times in minutes (the study loader gives ``time_min``; records built in code may use another unit)."""
    if "time_s" in data and "time_min" not in data:
        return np.asarray(data["time_s"], dtype=float) / 60.0
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
    """(subject, group) pairs in the data file, in file order (a subject's group from any of its rows)."""
    data = _data(obs, problem)
    seen: dict[str, str | None] = {}
    groups = data.get("group")
    for k, s in enumerate(data["subject"]):
        s = str(s)
        g = None if groups is None or groups[k] is None else str(groups[k])
        if s not in seen or seen[s] is None:   # a blank group cell: the subject's group from another row
            seen[s] = g
    return list(seen.items())


def validate(obs: Observation, problem: Problem) -> None:
    """Data columns (subject, time, volume), times rising per subject, steps. Volumes may be negative
    (zeroed readings below the baseline): the curve has a per-subject baseline offset."""
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
    return log_sd_from_cv(spread, xp) if kind == "cv" else spread


@dataclasses.dataclass
class _Entry:
    """One per-subject quantity of the curve block, on its sampling scale: normal with ``mean``
    (vector over subjects) and ``sd`` (PyTensor), ``log`` when the scale is the log of the value."""

    label: str
    mean: Any
    sd: Any
    log: bool


def _physical(entries: list[_Entry], theta: Any, r: Any, trans: Any, bend: Any, xp: Any) -> dict[str, Any]:
    """Curve arguments from the block's values on their sampling scales (``theta[j]`` for entry j; numpy
    or PyTensor): Kf per 100 mL from the cuff-scale slope b (Kf = b (1 + r) / (T g(tau))), Pvi and Pv
    from Pvi / T and Pv / T, Cv from Cv T, the baseline offset (mL/100 mL) as it is."""
    nat = {e.label: (xp.exp(theta[j]) if e.log else theta[j]) for j, e in enumerate(entries)}
    out = {"offset": nat["offset"], "Pvi": nat["Pvi_per_T"] * trans, "Cv": nat["Cv_T"] / trans}
    if "Kf_T" in nat:
        out["Kf"] = nat["Kf_T"] * (1.0 + r) / (trans * bend)
    if "Pv_per_T" in nat:
        out["Pv"] = nat["Pv_per_T"] * trans
    return out


def _bend(tau: Any, t_bend: float, xp: Any) -> Any:
    """g(tau) = tau (1 - exp(-S/tau)) / S, the slow phase's bend over the span S (min)."""
    return tau * (-xp.expm1(-t_bend / tau)) / t_bend


#: Finite-difference step (in the frame's global coordinates) for the frame's derivatives, and the
#: cap on function evaluations of the joint fit: our numerical choices.
FRAME_STEP = 1e-4
FRAME_MAX_EVALUATIONS = 200


def _globals(tau: Any, tau_v: Any, trans: Any, xp: Any, t_bend: float) -> list[Any]:
    """The global quantities the frame follows: the bend g(tau) (bounded, so a frame shift along it
    saturates where tau runs far out, as it may with few subjects; a shift along log tau left
    divergences in the 4-subject recovery test), log tau_v and the transmission T."""
    return [_bend(tau, t_bend, xp), xp.log(tau_v), trans]


def _frame(entries: list[_Entry], centre: dict[str, Any], t: np.ndarray, y: np.ndarray, sidx: np.ndarray,
           times: list[float], cuffs: list[float], noise: float, t_bend: float
           ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Per-subject affine frame of the curve block: theta_s = m_s + D_s (g - g0) + L_s u_s.

    First every subject's block and the global quantities (tau, tau_v, T) are fitted jointly by
    penalised least squares (each prior as a residual), which gives g0; then at g0 m_s is the
    subject's own fit, L_s the Cholesky factor of its Laplace covariance, and D_s = dm_s/dg
    (Gauss-Newton, finite differences) with g the ``_globals``, so that the frame follows tau,
    tau_v and T as they move. Any frame gives an exact model; a good one makes the posterior of the
    frame coordinates u close to independent standard normals. A subject whose fit fails gets the
    prior's centre and scales (no shift). Returns (m (n, k), L (n, k, k), D (n, k, 3), g0); g as in
    ``_globals``."""
    from scipy.optimize import least_squares


    mean = np.array([np.broadcast_to(centre[f"mean:{e.label}"], (len(centre["r"]),)) for e in entries]).T
    sd = np.array([np.broadcast_to(centre[f"sd:{e.label}"], (len(centre["r"]),)) for e in entries]).T
    n, k = mean.shape

    def resid(theta: np.ndarray, q: np.ndarray, s: int) -> np.ndarray:
        """Residuals of subject s at block values theta and q = (log tau, log tau_v, T)."""
        rows = sidx == s
        r_s = float(centre["r"][s])
        tau, tau_v, trans = np.exp(q[0]), np.exp(q[1]), q[2]
        v = _physical(entries, theta, r_s, trans, _bend(tau, t_bend, np), np)
        pred = interstitium.cuff_curve(t[rows], times, cuffs, v.get("Kf", centre["kf"][s]), None, None,
                                       v["Cv"], Pv_rest=v.get("Pv", centre["pv0"][s]), Pvi=v["Pvi"],
                                       tau_v=tau_v, r=r_s, transmission=trans, smooth=SMOOTH_MMHG,
                                       tau=tau) + v["offset"]
        return np.concatenate([(y[rows] - pred) / noise, (theta - mean[s]) / sd[s]])

    # joint fit over (theta_1 .. theta_n, log tau, log tau_v, T), each side prior a residual
    side = [_side_prior(q) for q in ("tau", "tau_v", "transmission")]
    q0 = np.array([np.log(float(centre["tau"])), np.log(float(centre["tau_v"])), float(centre["trans"])])
    q_sd = np.array([np.log(side[0].params["gsd"]), np.log(side[1].params["gsd"]), side[2].params["sd"]])

    def joint(x: np.ndarray) -> np.ndarray:
        q = x[n * k:]
        return np.concatenate([resid(x[s * k:(s + 1) * k], q, s) for s in range(n)] + [(q - q0) / q_sd])

    x = np.concatenate([mean.ravel(), q0])
    try:
        x = least_squares(joint, x, method="trf", x_scale="jac", max_nfev=FRAME_MAX_EVALUATIONS).x
    except (np.linalg.LinAlgError, ValueError):
        pass
    q_hat = x[n * k:]
    g0 = np.array(_globals(np.exp(q_hat[0]), np.exp(q_hat[1]), q_hat[2], np, t_bend))
    # dq/dg is diagonal: d log tau / d g(tau) for the bend, 1 for log tau_v and T
    h = FRAME_STEP
    dq_dg = np.array([2 * h / (_bend(np.exp(q_hat[0] + h), t_bend, np) - _bend(np.exp(q_hat[0] - h), t_bend, np)),
                      1.0, 1.0])
    m, chol, shift = mean.copy(), np.zeros((n, k, k)), np.zeros((n, k, g0.size))
    for s in range(n):
        try:
            fit = least_squares(lambda th, s=s: resid(th, q_hat, s), x[s * k:(s + 1) * k], method="lm")
            jt = fit.jac
            cov = np.linalg.inv(jt.T @ jt)
            chol[s] = np.linalg.cholesky(0.5 * (cov + cov.T))
            m[s] = fit.x
            for j in range(q_hat.size):
                dq = np.zeros_like(q_hat)
                dq[j] = h
                jq = (resid(fit.x, q_hat + dq, s) - resid(fit.x, q_hat - dq, s)) / (2 * h)
                shift[s, :, j] = -cov @ (jt.T @ jq) * dq_dg[j]
        except (np.linalg.LinAlgError, ValueError):
            chol[s], m[s], shift[s] = np.diag(sd[s]), mean[s], 0.0
    return m, chol, shift, g0


def _at_prior_centre(tensors: dict[str, Any]) -> dict[str, np.ndarray]:
    """Numeric values of ``tensors`` at the model's initial point (every score at 0: the priors'
    centres, declared spreads)."""
    import pymc as pm
    import pytensor.tensor as pt

    model = pm.modelcontext(None)
    names = list(tensors)
    outs = model.replace_rvs_by_values([pt.as_tensor_variable(tensors[k]) for k in names])
    fn = model.compile_fn(outs, inputs=model.value_vars, on_unused_input="ignore", mode="FAST_COMPILE")
    return {k: np.asarray(v, dtype=float) for k, v in zip(names, fn(model.initial_point()), strict=True)}


def _frame_logp(u: Any, mean: Any, sd: Any, m: Any, chol: Any, inv: Any, log_det: Any) -> Any:
    """Log density of frame coordinates u (last axis): that of theta = m + L u under the declared
    independent normals N(mean, sd), plus log |det L| (the Jacobian of the map, a constant). The
    same density as a multivariate normal with mean L^-1 (mean - m) and Cholesky factor
    L^-1 diag(sd), in elementwise arithmetic only (no batched triangular solves)."""
    import pytensor.tensor as pt

    theta = m + (chol * pt.shape_padaxis(u, -2)).sum(axis=-1)
    x = (theta - mean) / sd
    return (-0.5 * x * x - pt.log(sd)).sum(axis=-1) - 0.5 * np.log(2.0 * np.pi) * u.shape[-1] + log_det


def _frame_random(mean: np.ndarray, sd: np.ndarray, m: np.ndarray, chol: np.ndarray, inv: np.ndarray,
                  log_det: np.ndarray, rng: np.random.Generator, size: Any = None) -> np.ndarray:
    """Prior draws of the frame coordinates: theta from the declared normals, u = L^-1 (theta - m)."""
    theta = rng.normal(mean, sd, size=size if size is None else (*size, np.shape(mean)[-1]))
    return np.einsum("...ij,...j->...i", inv, theta - m)


def _subject_block(ctx: Any, name: str, entries: list[_Entry], frame: tuple[np.ndarray, np.ndarray, np.ndarray],
                   globals_now: list[Any], globals_centre: np.ndarray) -> dict[str, Any]:
    """Per-subject values of the block's quantities (vectors over subjects, sampling scale).

    The block is sampled in each subject's frame (``_frame``): theta_s = m_s(g) + L_s u_s with
    m_s(g) = m_s + D_s (g - g0) following the global quantities g. Its prior is exactly the declared
    one (theta_s normal with the entries' means and sds, independent, given g): u_s is multivariate
    normal with mean L_s^-1 (mean_s - m_s(g)) and Cholesky factor L_s^-1 diag(sd_s), and the map from
    (g, u) to (g, theta) has the constant Jacobian det L_s, so the posterior is unchanged. The
    curves pin the block far more tightly than the population spread does, and within a subject its
    quantities trade off (Pvi against Cv at correlation about 0.9 on a 20-subject protocol, Cv and Kf
    against the baseline offset); in the frame those directions are close to independent and of
    unit scale, so NUTS needs short trajectories with a diagonal mass matrix.
    """
    import pymc as pm
    import pytensor.tensor as pt

    m0, chol, shift = frame
    inv = np.linalg.inv(chol)
    log_det = np.log(np.abs(np.diagonal(chol, axis1=-2, axis2=-1))).sum(axis=-1)
    model = pm.modelcontext(None)
    axis = f"{name}__axis"
    model.add_coord(axis, [e.label for e in entries])
    n = m0.shape[0]
    delta = pt.stack(globals_now) - globals_centre
    m = m0 + (shift * delta).sum(axis=-1)
    mean = pt.stack([e.mean * pt.ones(n) for e in entries], axis=1)
    sd = pt.stack([e.sd * pt.ones(n) for e in entries], axis=1)
    u = pm.CustomDist(f"{name}__subject_frame", mean, sd, m, chol, inv, log_det, logp=_frame_logp,
                      random=_frame_random, signature="(k),(k),(k),(k,k),(k,k),()->(k)", dims=("subject", axis))
    theta = m + (chol * u[:, None, :]).sum(axis=-1)
    values = {}
    for j, e in enumerate(entries):
        label = f"{name}__{e.label}__{'log_subject' if e.log else 'c_subject'}"
        values[e.label] = pm.Deterministic(label, theta[:, j], dims="subject")
        ctx.extra_params.append(label)
    return values


def _thin(obs: Observation) -> int:
    every = int(obs.extra.get("every", DEFAULT_EVERY))
    if every < 1:
        raise obs.error("every (use every k-th reading) must be a positive integer", "every", every)
    return every


#: Evaluate the curves on a subjects x distinct-times table (then pick the readings) when the table
#: has at most this many cells per reading: shared time constants then cost one exponential per
#: distinct time and step instead of one per reading (20x fewer on a shared time grid of 20 subjects).
#: Our numerical choice: a table at most twice the readings is still far cheaper than per reading.
GRID_CELLS_PER_READING = 2.0


def _curve(t: np.ndarray, sidx: np.ndarray, n: int, times: list[float], cuffs: list[float], kf: Any,
           c_tis: Any, lym: Any, cv: Any, pv0: Any, pvi: Any, tau_v: Any, r: Any, trans: Any,
           tau: Any) -> Any:
    """Noise-free limb volume (mL/100 mL) of each reading (subject ``sidx``, time ``t`` in min) through
    ``interstitium.cuff_curve``: on the subjects x distinct-times table when that is small (shared
    time grid), else reading by reading. Per-subject arguments are vectors over the ``n`` subjects;
    ``tau`` (min) replaces C_tis and L when given."""
    import pytensor.tensor as pt


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
    if pv_layer is None:
        pv0 = ctx.value("Pv") if ctx.problem.quantity_known("Pv") else PV_REST * pt.ones(n)
    for q in ("tau_v", "transmission"):
        ctx.extra_params.append(f"{name}__{q}")
        ctx.extra_priors[f"{name}__{q}"] = _side_prior(q)
    pvi_prior, cv_prior = _side_prior("Pvi"), _side_prior("Cv")
    pvi_typ, pvi_spread = _hyper(ctx, f"{name}__Pvi", pvi_prior)
    cv_typ, cv_spread = _hyper(ctx, f"{name}__Cv", cv_prior)
    offset_sd = SIDE_PRIORS["offset_sd"]["value"]
    noise = float(obs.sd) if obs.sd is not None else float(SIDE_PRIORS["noise"]["median"])
    if naive:
        # benchmark baseline: the builder's non-centred Kf, non-centred Pvi and Cv in their own
        # units, centred per-subject C_tis and L (a ridge along C_tis/(Kf + L))
        kf = ctx.value("Kf") * density
        zp = pm.Normal(f"{name}__Pvi__subject_z", 0.0, 1.0, dims="subject")
        zc = pm.Normal(f"{name}__Cv__subject_z", 0.0, 1.0, dims="subject")
        pvi = pvi_typ + pvi_spread * zp if ctx.hierarchical else pvi_typ * pt.ones(n)
        cv = cv_typ * pt.exp(_log_sd("cv", cv_spread, pt) * zc) if ctx.hierarchical else cv_typ * pt.ones(n)
        c_arg = pm.LogNormal(f"{name}__C_tis", mu=np.log(NAIVE_PRIORS["C_tis"]["median"]),
                             sigma=np.log(NAIVE_PRIORS["C_tis"]["gsd"]), dims="subject")
        l_arg = pm.LogNormal(f"{name}__L", mu=np.log(NAIVE_PRIORS["L"]["median"]),
                             sigma=np.log(NAIVE_PRIORS["L"]["gsd"]), dims="subject")
        offset = offset_sd * pm.Normal(f"{name}__offset_z", 0.0, 1.0, dims="subject")
        tau = None
    else:
        # What the curves identify, on the cuff scale (transmission T factored out): the slope
        # b = Kf T / (1 + r) per cuff mmHg, the cuff pressure of zero filtration Pvi / T and the venous
        # volume per cuff mmHg Cv T. Sampling those per subject leaves T a global quantity that
        # hardly correlates with any subject. The priors are the declared ones:
        # log Kf_s ~ N(log Kf_typ, s) is log b_s ~ N(log Kf_typ + log T - log(1 + r_s), s); Pvi_s ~ N(m, sd) is
        # Pvi_s / T ~ N(m / T, sd / T) (the Jacobian is in the transformed density).
        # The slow-phase time constant tau bends every curve: the data pin Kf g(tau), with
        # g = tau (1 - exp(-S/tau)) / S and S = BEND_SPAN x the protocol's length, far better than Kf
        # itself; sampling that product (shifted log-normal prior, exact for any S) keeps tau from
        # correlating with every subject's Kf. The solution depends on C_tis and L only through tau.
        tau = prior_rv(f"{name}__tau", _side_prior("tau"))
        ctx.extra_params.append(f"{name}__tau")
        ctx.extra_priors[f"{name}__tau"] = _side_prior("tau")
        t_bend = BEND_SPAN * max(float(np.max(t_all)) - times[0], 1e-6)
        bend = _bend(tau, t_bend, pt)
        layer = ctx.layers.get("Kf")
        entries = []
        if layer is not None:
            entries.append(_Entry("Kf_T", pt.log(layer["base"] * density * trans * bend / (1.0 + r)),
                                  _log_sd(layer["kind"], layer["spread"], pt), True))
        entries += [_Entry("Pvi_per_T", pvi_typ / trans, pvi_spread / trans, False),
                    _Entry("Cv_T", pt.log(cv_typ * trans), _log_sd("cv", cv_spread, pt), True),
                    _Entry("offset", pt.zeros(()), pt.as_tensor_variable(offset_sd), False)]
        if pv_layer is not None:  # the curves see T P_cuff - Pv: Pv on the cuff scale too
            log_pv = pv_layer["kind"] != "sd"
            entries.append(_Entry("Pv_per_T", pt.log(pv_layer["base"] / trans) if log_pv else pv_layer["base"] / trans,
                                  _log_sd("cv", pv_layer["spread"], pt) if log_pv else pv_layer["spread"] / trans,
                                  log_pv))
        given = {"r": r, "trans": trans, "tau": tau, "tau_v": tau_v,
                 "kf": ctx.value("Kf") * density if layer is None else pt.zeros(n),
                 "pv0": pv0 if pv_layer is None else pt.zeros(n)}
        if getattr(ctx, "structure_only", False):   # checked, not sampled: a unit frame, no fits
            k = len(entries)
            frame = (np.zeros((n, k)), np.tile(np.eye(k), (n, 1, 1)), np.zeros((n, k, 3)), np.zeros(3))
        else:
            centre = _at_prior_centre(given | {f"mean:{e.label}": e.mean for e in entries}
                                      | {f"sd:{e.label}": e.sd for e in entries})
            frame = _frame(entries, centre, t, y, sidx, times, cuffs, noise, t_bend)
            at_fit = _physical(entries, list(frame[0].T), centre["r"], frame[3][2], frame[3][0], np)
            for q in ("Kf", "Pv"):       # the fit's estimates, for subjects with other readings (ctx.guess)
                if q in at_fit:
                    ctx.guess(q, at_fit[q] / density if q == "Kf" else at_fit[q])
        values = _subject_block(ctx, name, entries, frame[:3], _globals(tau, tau_v, trans, pt, t_bend), frame[3])
        phys = _physical(entries, [values[e.label] for e in entries], r, trans, bend, pt)
        if layer is not None:
            ctx.override("Kf", phys["Kf"] / density)
        kf = phys["Kf"] if layer is not None else ctx.value("Kf") * density
        if pv_layer is not None:
            pv0 = phys["Pv"]
            ctx.override("Pv", pv0)
        pvi, cv, offset = phys["Pvi"], phys["Cv"], phys["offset"]
        c_arg = l_arg = None
    pred = _curve(t, sidx, n, times, cuffs, kf, c_arg, l_arg, cv, pv0, pvi, tau_v, r, trans, tau) + offset[sidx]
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
        ctx.notes.append(f"{obs.key}: one reading in {every} of each subject used ({int(keep.sum())} of "
                         f"{keep.size})")
    ctx.curves.append({"name": name, "t": t, "subject_index": sidx, "volume": y,
                       "subjects": list(ctx.subjects)})
