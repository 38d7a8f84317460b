"""Build a PyMC model from a :class:`~uncertainty.analyses.inference.problem.Problem`.

Layers (DESIGN.md section 2):

- *typical subject*: one value per uncertain quantity, from its prior. Normal and lognormal priors
  are sampled through a standard-normal score (non-centred: ``q = mean + sd * z`` or
  ``q = median * gsd ** z``); other shapes through ``Prior.pymc(name)``. Correlations are those of
  normal scores (Gaussian copula), added as a copula density term.
- *individuals*: each subject label (or the study's one individual when there are none) gets its
  own value of every quantity with a between-subject spread, non-centred:
  ``q_s = q + spread * z_s`` (spread as sd) or ``q_s = q * exp(s * z_s)`` with
  ``s = sqrt(log(1 + cv^2))`` (spread as cv; median at the typical value). With two or more
  subjects the spread has its own prior (lognormal, median at the declared value); for one
  individual it is the declared value. Between-subject correlations declared per pair
  (``Problem.between_correlations``) correlate each subject's scores: z_s = L u_s with L the
  Cholesky factor of their normal-score correlation matrix and u_s independent standard normals
  (``between_cholesky``), so a subject's deviations go together as the pairs say.
- *groups*: group labels give a group effect on named quantities, relative to the reference
  group (``control`` when present, else the first label in sorted order): a log ratio for
  positive quantities, a shift otherwise.
- *observations*: each observation kind module (``uncertainty.analyses.inference.observations``) adds its
  likelihood through the physiology functions evaluated with ``xp = pytensor.tensor``.

PyMC variable names: the typical value of quantity ``q`` is ``q``; per-subject values are
``q__subject`` (dim ``subject``); outputs are ``Jv__typical`` and ``Jv__subject``.
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np

from uncertainty.analyses.inference.observations import kind_module
from uncertainty.analyses.inference.observations.base import prior_centres
from uncertainty.analyses.inference.problem import Observation, Problem
from uncertainty.core.errors import InputError
from uncertainty.distributions import Spread

#: sd of the log of a between-subject spread around its declared value (factor ~1.65 at 1 sd).
#: common practice: a weakly informative scale prior centred on the prior set's value.
SPREAD_LOG_SD = 0.5
#: sd of a group effect: log ratio for positive quantities (common practice: weakly informative,
#: ratios within about 0.37..2.7 at 2 sd), in units of the prior sd for others.
GROUP_EFFECT_SD = 0.5


@dataclasses.dataclass
class ObservedTerm:
    """One likelihood term added by an observation kind (for checks and model comparison)."""

    name: str                       # the PyMC observed variable
    observation: Observation
    predicted: str | None = None    # a Deterministic with the noise-free prediction
    subjects: np.ndarray | None = None   # subject index of each element (for leave-one-subject-out)
    label: str = ""
    times_min: np.ndarray | None = None  # time of each element, min (timed readings on a whole-body course)


@dataclasses.dataclass
class BuiltModel:
    """A PyMC model with the bookkeeping the samplers, checks and results need."""

    model: Any
    problem: Problem
    subjects: list[str]
    hierarchical: bool
    groups: list[str]
    subject_group: dict[str, str]
    terms: list[ObservedTerm]
    quantities: list[str]           # typical-value variables reported per parameter
    spreads: dict[str, tuple[str, float]]   # quantity -> (sd|cv, declared value)
    notes: list[str]
    extra_params: list[str] = dataclasses.field(default_factory=list)
    prior_bound_candidates: list[str] = dataclasses.field(default_factory=list)
    context: Any = None

    @property
    def extra_priors(self) -> dict[str, Any]:
        """Priors of side quantities added by observation kinds (volume curves, instruments)."""
        return self.context.extra_priors if self.context is not None else {}


class BuildContext:
    """What observation kinds see while they add their terms (inside the model context).

    ``value(q, subject_index)`` returns the value of quantity ``q`` for the subjects given
    (a PyTensor vector), ``output(name, subject_index)`` an output of the forward map.
    """

    def __init__(self, problem: Problem, subjects: list[str], hierarchical: bool,
                 structure_only: bool = False) -> None:
        self.problem = problem
        # True when the model is declared only to be checked (``fluidshift check``): kinds skip the
        # numerical fits that place their sampling frames (the model's variables and shapes are the same)
        self.structure_only = structure_only
        self.subjects = subjects
        self.hierarchical = hierarchical
        self.typical: dict[str, Any] = {}
        self.per_subject: dict[str, Any] = {}
        self.subject_outputs: dict[str, Any] = {}
        self.terms: list[ObservedTerm] = []
        self.notes: list[str] = []
        self.extra_params: list[str] = []
        self.prior_bound_candidates: list[str] = []
        self.instrument_bias: dict[str, Any] = {}
        self.extra_priors: dict[str, Any] = {}      # side quantity -> Prior (for contraction)
        self.subject_params: dict[str, str] = {}    # per-subject Deterministic -> label
        self.curves: list[dict[str, Any]] = []      # time-course data (for figures)
        # quantities whose subject layer an observation kind builds itself (``claims`` hook):
        # name -> {"base": typical value per subject (group effect included), "kind": "sd"|"cv",
        # "declared": float, "spread": the between-subject spread (tensor or float)}
        self.layers: dict[str, dict[str, Any]] = {}
        # claimed quantity -> (shared vector over the pinned subjects, their indices): the value a
        # pinned subject's reading is linearised at (``_subject_scores``); a claiming kind that can
        # estimate it from its data before sampling sets it with ``guess``
        self.guesses: dict[str, tuple[Any, np.ndarray]] = {}
        self._overrides: dict[str, Any] = {}

    # -- access ---------------------------------------------------------------------------------
    def subject_index(self, obs: Observation) -> Any:
        """Index of the observation's subject (0, the study's individual, when unlabelled); for an
        observation with data-file rows, an integer array with the index of each reading's subject."""
        if obs.rows is not None:
            where = {s: k for k, s in enumerate(self.subjects)}
            return np.array([0 if s is None else where[s] for s in obs.rows.subject], dtype=int)
        if obs.subject is None:
            return 0
        return self.subjects.index(obs.subject)

    def value(self, name: str) -> Any:
        """Per-subject vector (dim subject) of a quantity (uncertain or fixed) or output; raises
        KeyError when unknown."""
        import pytensor.tensor as pt

        if name in self._overrides:
            return self._overrides[name]
        if name in self.per_subject:
            return self.per_subject[name]
        if name in self.problem.fixed:
            return pt.as_tensor_variable(float(self.problem.fixed[name])) * pt.ones(len(self.subjects))
        outs = self.outputs()
        if name in outs:
            return pt.as_tensor_variable(outs[name]) * pt.ones(len(self.subjects))
        raise KeyError(name)

    def outputs(self) -> dict[str, Any]:
        """Outputs of the forward map for every subject (vectors over dim subject)."""
        if not self.subject_outputs:
            import pytensor.tensor as pt

            vals = {**self.problem.fixed, **self.per_subject, **self._overrides}
            outs = self.problem.evaluate(vals, pt)
            self.subject_outputs = {k: v for k, v in outs.items() if not isinstance(v, str)}
        return self.subject_outputs

    def override(self, name: str, tensor: Any) -> None:
        """Replace a quantity's per-subject values (re-parameterised kinds); resets the outputs."""
        self._overrides[name] = tensor
        self.subject_outputs = {}

    def add_term(self, term: ObservedTerm) -> None:
        self.terms.append(term)

    def guess(self, name: str, values: np.ndarray) -> None:
        """Point estimates (a vector over all subjects, canonical unit) of a claimed quantity, for the
        subjects whose readings are linearised at them; ignored when no subject needs it."""
        if name in self.guesses:
            shared, index = self.guesses[name]
            shared.set_value(np.asarray(values, dtype=float)[index])


def is_positive(prior: Any) -> bool:
    """Whether a prior puts (almost) all its mass above zero.

    Parameters
    ----------
    prior : Prior
        A declared prior (its distribution's support, else its scipy form's 1e-9 quantile, decides).

    Returns
    -------
    bool
        True for a positive support or a positive far-left quantile; False when unknown.
    """
    if getattr(getattr(prior, "distribution", None), "positive_support", False):
        return True
    frozen = prior.frozen() if hasattr(prior, "frozen") else None
    try:
        return frozen is not None and float(frozen.ppf(1e-9)) > 0
    except Exception:  # noqa: BLE001 - any failure means "not known positive"
        return False


def _non_centred(prior: Any) -> bool:
    """True when the prior's family is sampled through a standard-normal score (normal, lognormal)."""
    return bool(getattr(getattr(prior, "distribution", None), "non_centred", False))


def _spread(prior: Any) -> tuple[str, float] | None:
    bs = getattr(prior, "between_subject", None)
    if not bs:
        return None
    if isinstance(bs, dict):
        for kind in ("cv", "sd"):
            if bs.get(kind) is not None:
                return kind, float(bs[kind])
        return None
    for kind in ("cv", "sd"):
        v = getattr(bs, kind, None)
        if v is not None:
            return kind, float(v)
    return None


def spread_ratio(kind: str, declared: float, spread: Any, xp: Any) -> Any:
    """Factor on the normal score that turns the declared between-subject spread into ``spread``.

    ``Prior.individual(typical, z * ratio)`` then has spread ``spread``: for an sd the ratio is
    ``spread / declared``; for a cv it is ``s(spread) / s(declared)`` with ``s = sqrt(log(1+cv^2))``.
    """
    return Spread(kind, declared).ratio(spread, xp)


def apply_layer(prior: Any, typical: Any, z: Any, xp: Any, ratio: Any = 1.0) -> Any:
    """One subject's value around ``typical`` (numpy or PyTensor), through ``Prior.individual``.

    sd: additive; cv: multiplicative lognormal with median at the typical value; reflection
    coefficients on the logit scale (as the prior declares). ``ratio`` rescales the spread
    (see :func:`spread_ratio`).
    """
    return prior.individual(typical, z * ratio, xp=xp)


def _merged_layers(prior: Any) -> tuple[float, float, float, bool] | None:
    """(location, typical sd, between-subject sd, log scale) when both layers are normal on one scale.

    normal prior + sd spread: both additive normal; lognormal prior + cv spread: both normal in
    log (log-sd of the spread sqrt(log(1 + cv^2))). Reflection coefficients (logit layer) and other
    shapes return None.
    """
    spread = getattr(prior, "spread", None)
    dist = getattr(prior, "distribution", None)
    scale = dist.normal_scale() if spread is not None and dist is not None else None
    if scale is None:
        return None
    loc, s_typ, log_scale = scale
    s_bs = spread.on_normal_scale(log_scale)
    return None if s_bs is None else (loc, s_typ, s_bs, log_scale)


def _probit(logp: Any) -> Any:
    import pytensor.tensor as pt

    u = pt.clip(pt.exp(logp), 1e-12, 1 - 1e-12)
    return np.sqrt(2.0) * pt.erfinv(2.0 * u - 1.0)


def _collect_subjects(problem: Problem) -> tuple[list[str], dict[str, str]]:
    """Subject labels (from the observations and data files) and each subject's group."""

    labels: dict[str, None] = {}     # insertion-ordered set (cohorts of thousands of readings)
    groups: dict[str, str] = {}
    for obs in problem.observations:
        mod = kind_module(obs)
        found = mod.subjects(obs, problem) if hasattr(mod, "subjects") else obs.subject_groups()
        for k, (subj, grp) in enumerate(found):
            labels.setdefault(subj)
            if grp is not None:
                if subj in groups and groups[subj] != grp:
                    where = (f"{obs.rows.source} line {obs.rows.line[k]}: "
                             if obs.rows is not None and None not in obs.rows.subject else "")
                    raise obs.error(f"{where}subject {subj!r} is in two groups ({groups[subj]!r}, {grp!r})",
                                    "file" if where else "group", grp)
                groups[subj] = grp
    return list(labels), groups


def _group_effect_targets(problem: Problem) -> list[str]:
    """Quantities given a group effect (``effects`` of any observation), each checked to be uncertain:
    an effect on a fixed or unknown quantity raises InputError naming the observation's ``effects``."""
    targets: list[str] = []
    for obs in problem.observations:
        eff = obs.extra.get("effects")
        if eff:
            for q in eff:
                if str(q) not in problem.priors:
                    what = "fixed" if str(q) in problem.fixed else "not a quantity of this study"
                    raise obs.error(f"a group effect needs an uncertain quantity; {q} is {what} "
                                    f"(uncertain: {', '.join(problem.priors)})", "effects", q)
                if q not in targets:
                    targets.append(str(q))
    return targets


def build_model(problem: Problem, structure_only: bool = False) -> BuiltModel:
    """Declare the PyMC model of ``problem`` (no sampling). See the module docstring for layers.

    Parameters
    ----------
    problem : Problem
        Priors, forward map and observations (canonical units).
    structure_only : bool
        Declare the model only to check it (every refusal raised, same variables and shapes): kinds
        skip the numerical fits that place their sampling frames, so the model is not for sampling.

    Returns
    -------
    BuiltModel
        The PyMC model and its bookkeeping.

    Raises
    ------
    InputError
        An observation the model cannot use (naming the study file, its key path and value).
    """
    import pymc as pm
    import pytensor.tensor as pt


    for obs in problem.observations:
        mod = kind_module(obs)
        mod.validate(obs, problem)
    labels, subject_group = _collect_subjects(problem)
    hierarchical = len(labels) >= 2
    if not labels:
        labels = ["individual"]
    unlabelled = [o for o in problem.observations
                  if (o.subject is None if o.rows is None else None in o.rows.subject)
                  and getattr(kind_module(o), "LABELLED", False) is False]
    if hierarchical and unlabelled:
        o = unlabelled[0]
        raise o.error("the study has subject labels; give this observation a subject too", "subject",
                      None)
    groups = sorted(set(subject_group.values()))
    ctx = BuildContext(problem, labels, hierarchical, structure_only)
    n_subj = len(labels)
    spreads: dict[str, tuple[str, float]] = {}
    with pm.Model(coords={"subject": labels}) as model:
        # typical-subject values
        scores: dict[str, Any] = {}
        collapsed: dict[str, Any] = {}
        plain = [q for q, p in problem.priors.items() if _non_centred(p)]
        # (a quantity every subject reads keeps its own score: its readings pin it, not the outputs' direction)
        typical_z = _typical_scores(problem, [q for q in plain if q not in _read_alone(problem, labels)]) \
            if hierarchical else {}
        paired = {q for pair in problem.between_correlations for q in pair[:2]}
        for name, prior in problem.priors.items():
            merged = None if hierarchical or name in paired else _merged_layers(prior)
            if merged is not None:
                # one individual: sample the individual's value from the exact two-layer marginal
                # and the typical value from its conditional given the individual (non-centred)
                loc, s_typ, s_bs, log_scale = merged
                total = float(np.hypot(s_typ, s_bs))
                z = pm.Normal(f"{name}__z", 0.0, 1.0)
                z2 = pm.Normal(f"{name}__typical_z", 0.0, 1.0)
                dev_typ = (s_typ**2 / total) * z + (s_typ * s_bs / total) * z2
                if log_scale:
                    collapsed[name] = pt.exp(loc + total * z)
                    ctx.typical[name] = pm.Deterministic(name, pt.exp(loc + dev_typ))
                else:
                    collapsed[name] = loc + total * z
                    ctx.typical[name] = pm.Deterministic(name, loc + dev_typ)
                scores[name] = dev_typ / s_typ
            elif _non_centred(prior):
                z = typical_z[name] if name in typical_z else pm.Normal(f"{name}__z", 0.0, 1.0)
                ctx.typical[name] = pm.Deterministic(name, prior.distribution.from_scores(z, pt))
                scores[name] = z
            else:
                ctx.typical[name] = prior.pymc(name)
        _add_copula(problem, ctx, scores)
        # group effects
        targets = _group_effect_targets(problem)
        effects: dict[str, Any] = {}
        if len(groups) >= 2 and targets:
            ref = "control" if "control" in groups else groups[0]
            others = [g for g in groups if g != ref]
            model.add_coord("group", others)
            gidx = np.array([others.index(subject_group[s]) + 1 if subject_group.get(s) in others
                             else 0 for s in labels])
            for q in targets:
                eff = pm.Normal(f"{q}__effect", 0.0, GROUP_EFFECT_SD, dims="group")
                ctx.extra_params.append(f"{q}__effect")
                effects[q] = (pt.concatenate([pt.zeros(1), eff]), gidx)
            ctx.notes.append(f"group effects on {', '.join(targets)} relative to group {ref!r}"
                             + (" (log ratio)" if targets else ""))
        # individuals (a kind's ``claims(obs, problem)`` names quantities whose subject layer it
        # builds itself, e.g. centred on a scale the data identify; it must ``ctx.override`` them)
        # (a kind's ``OWN_SPREAD`` names quantities whose spread its readings inform alone: own factors)
        claimed: set[str] = set()
        own: set[str] = set()
        scored: dict[str, tuple[Any, Any, Any]] = {}   # quantity -> (prior, base, spread ratio)
        for obs in problem.observations:
            module = kind_module(obs)
            fn = getattr(module, "claims", None)
            if fn is not None and hierarchical:
                claimed.update(fn(obs, problem))
            own.update(getattr(module, "OWN_SPREAD", ()))
        joint = _jointly_spread(problem, claimed | own | set(collapsed)) if hierarchical else []
        if joint:
            w_joint = pm.Normal("joint__spread_z", 0.0, 1.0)
            ctx.notes.append(f"one between-subject spread factor for {', '.join(joint)} (the data reach them "
                             "only together)")
        for name, prior in problem.priors.items():
            typ = ctx.typical[name]
            base = typ * pt.ones(n_subj)
            if name in effects:
                vec, gidx = effects[name]
                if is_positive(prior):
                    base = base * pt.exp(vec[gidx])
                else:
                    base = base + float(prior.sd()) * vec[gidx]
            sp = _spread(prior)
            if sp is None:
                ctx.per_subject[name] = base
                continue
            kind, declared = sp
            spreads[name] = sp
            if name in collapsed:
                ctx.per_subject[name] = collapsed[name] * pt.ones(n_subj)
                continue
            ratio: Any = 1.0
            if hierarchical:
                w = w_joint if name in joint else pm.Normal(f"{name}__spread_z", 0.0, 1.0)
                spread = pm.Deterministic(f"{name}__spread", declared * pt.exp(SPREAD_LOG_SD * w))
                ratio = spread_ratio(kind, declared, spread, pt)
            if name in claimed and hierarchical:
                ctx.layers[name] = {"base": base, "kind": kind, "declared": declared, "spread": spread}
                ctx.per_subject[name] = base  # replaced by the claiming kind (ctx.override)
                continue
            scored[name] = (prior, base, ratio)
        for name in _centred(problem, scored, labels, paired) if hierarchical else []:
            ctx.per_subject[name] = _centred_layer(name, *scored.pop(name))
            ctx.notes.append(f"{name}: every subject's readings pin it; its subject values are sampled centred")
        chol, chol_notes = between_cholesky(problem, list(scored))
        ctx.notes += [n for n in chol_notes if n not in ctx.notes]
        z_scores = _subject_scores(problem, ctx, scored, labels, hierarchical, chol)
        for name, (prior, base, ratio) in scored.items():
            ctx.per_subject[name] = apply_layer(prior, base, z_scores[name], pt, ratio)
        # observation terms (kinds may re-parameterise per-subject quantities first)
        for obs in problem.observations:
            mod = kind_module(obs)
            if hasattr(mod, "prepare"):
                mod.prepare(ctx, obs)
        for obs in problem.observations:
            kind_module(obs).add(ctx, obs)
            ctx.notes += [n for n in obs.notes + _repeat_note(obs) if n not in ctx.notes]
        for name in problem.priors:
            if name not in ctx._overrides:
                pm.Deterministic(f"{name}__subject", ctx.per_subject[name], dims="subject")
            else:
                pm.Deterministic(f"{name}__subject", ctx._overrides[name], dims="subject")
        outs = ctx.outputs()
        pm.Deterministic("Jv__subject", outs["Jv"] * pt.ones(n_subj), dims="subject")
        typ_vals = {**problem.fixed, **ctx.typical}
        typ_out = problem.evaluate(typ_vals, pt)
        pm.Deterministic("Jv__typical", typ_out["Jv"])
    return BuiltModel(model=model, problem=problem, subjects=labels, hierarchical=hierarchical,
                      groups=groups, subject_group=subject_group, terms=ctx.terms,
                      quantities=list(problem.priors), spreads=spreads,
                      notes=ctx.notes, extra_params=ctx.extra_params,
                      prior_bound_candidates=ctx.prior_bound_candidates, context=ctx)


def _jointly_spread(problem: Problem, own: set[str]) -> list[str]:
    """Quantities whose between-subject spreads share one factor: those with a declared spread that no
    observation reads on its own (a ``measurement`` of the quantity) and no kind models itself or names as
    informed alone (``own``: a kind's ``claims`` and ``OWN_SPREAD``).

    The data reach such quantities only through combinations (Jv from weights or lymph flow, say), so
    they say how much subjects differ in the combination but not how that variance divides among the
    quantities; separate spread factors then form a ridge the chains cannot cross in the time of a fit
    (200 invented subjects: bulk ESS 305 for one spread at 4 x 1000 draws). One shared factor (same
    prior as each factor had: lognormal around the declared spreads, log-sd :data:`SPREAD_LOG_SD`) keeps
    the declared proportions and lets the data set their common size. With fewer than two such
    quantities each keeps its own factor.
    """
    read = _read_alone(problem)
    names = [q for q, p in problem.priors.items()
             if _spread(p) is not None and q not in read and q not in own]
    return names if len(names) >= 2 else []


def _centred(problem: Problem, scored: dict[str, tuple[Any, Any, Any]], labels: list[str],
             paired: set[str]) -> list[str]:
    """Quantities whose subject values are sampled centred (:func:`_centred_layer`): read directly by a
    ``measurement`` (sd, no instrument) in every subject, each reading's sd below PIN_RATIO times the declared
    between-subject sd (a cv at the prior centre), on an additive (sd) or log (cv) layer, in no between-subject
    pair, in a study without readings that pin a subject's output (those build their own scores over every
    quantity).

    Non-centred scores suit subjects the data say little about; when every subject's readings pin the value,
    each score must move with the typical value and the spread, and the chains crawl (40 invented subjects
    with plasma protein read to 0.2 g/dL against a spread of 0.7 (sepsis): bulk ESS of the typical Cp 374 in 4,000
    draws). The usual remedy is the centred form (Betancourt & Girolami 2015, see :data:`PIN_RATIO`).
    """
    if _pinned_readings(problem):
        return []
    centre = prior_centres(problem)
    covered: dict[str, set[Any]] = {}
    precise: dict[str, bool] = {}
    for o in problem.observations:
        q = o.parameter
        if o.kind != "measurement" or q not in scored or q in paired:
            continue
        spread = getattr(scored[q][0], "spread", None)
        if spread is None or spread.logit or o.instrument is not None or o.cv is not None or o.sds is None:
            precise[q] = False   # (an instrument may read through a bias or a difference)
            continue
        between = spread.value if spread.kind == "sd" else spread.value * abs(float(centre[q]))
        precise[q] = precise.get(q, True) and bool(np.all(np.asarray(o.sds) < PIN_RATIO * between))
        subjects = set(o.rows.subject) if o.rows is not None else {o.subject}
        covered.setdefault(q, set()).update(subjects)
    return [q for q in covered if precise.get(q) and covered[q] >= set(labels)]


def _centred_layer(name: str, prior: Any, base: Any, ratio: Any) -> Any:
    """Subject values of ``name`` sampled centred: ``q__subject_c`` ~ Normal(base, spread) for an sd layer, its
    log ~ Normal(log base, log-sd) for a cv layer (the same distribution as ``Prior.individual`` of a
    standard-normal score, which ``q__subject_z`` records as a Deterministic)."""
    import pymc as pm
    import pytensor.tensor as pt

    spread = prior.spread
    if spread.kind == "sd":
        s = spread.value * ratio
        x = pm.Normal(f"{name}__subject_c", mu=base, sigma=s, dims="subject")
        pm.Deterministic(f"{name}__subject_z", (x - base) / s, dims="subject")
        return x
    s = spread.log_sd() * ratio
    lx = pm.Normal(f"{name}__subject_logc", mu=pt.log(base), sigma=s, dims="subject")
    pm.Deterministic(f"{name}__subject_z", (lx - pt.log(base)) / s, dims="subject")
    return pt.exp(lx)


def _read_alone(problem: Problem, every: list[str] | None = None) -> set[str]:
    """Uncertain quantities a ``measurement`` reads on its own: the quantity itself, or one computed from it
    alone (pi_c from Cp); with ``every`` (subject labels), only those read in every one of those subjects."""
    derived = getattr(getattr(problem, "study", None), "derived", None) or {}

    def roots(q: str) -> set[str]:   # the uncertain quantities a quantity is computed from (itself if declared)
        d = derived.get(q)
        return {q} if d is None else set().union(*(roots(i) for i in d.inputs))

    seen: dict[str, set[Any]] = {}
    for o in problem.observations:
        if o.kind == "measurement" and o.parameter:
            found = roots(o.parameter) & set(problem.priors)
            if len(found) == 1:
                seen.setdefault(found.pop(), set()).update(set(o.rows.subject) if o.rows is not None else {o.subject})
    return {q for q, subjects in seen.items() if every is None or subjects >= set(every)}


#: Step (in standard-normal score units) of the finite differences that find a reading's direction in
#: score space: our numerical choice.
PIN_STEP = 1e-4


def between_cholesky(problem: Problem, names: list[str]) -> tuple[np.ndarray | None, list[str]]:
    """Lower Cholesky factor of the between-subject normal-score correlation over ``names`` (the
    quantities given subject scores), or None when no declared pair lies within ``names``; and notes
    on the pairs left out (a quantity a kind models itself, or without scores here).

    Parameters
    ----------
    problem : Problem
        Its ``between_correlations`` (a, b, rho), dimensionless.
    names : list of str
        The scored quantities, in score order.

    Returns
    -------
    tuple
        (L (k, k) or None, notes).

    Raises
    ------
    InputError
        The kept pairs do not form a positive-definite matrix.
    """
    idx = {n: i for i, n in enumerate(names)}
    corr = np.eye(len(names))
    notes: list[str] = []
    used = False
    for a, b, rho in problem.between_correlations:
        if a in idx and b in idx:
            corr[idx[a], idx[b]] = corr[idx[b], idx[a]] = float(rho)
            used = True
        else:
            notes.append(f"between-subject correlation {a}-{b} ({rho:g}) not used in inference: "
                         f"{a if a not in idx else b} has no subject scores in this model")
    if not used:
        return None, notes
    try:
        return np.linalg.cholesky(corr), notes
    except np.linalg.LinAlgError:
        raise InputError("the between-subject correlations are not positive definite",
                         key="correlations.between_subject", value=problem.between_correlations) from None


def _correlate(z: Any, chol: np.ndarray | None) -> Any:
    """Scores (..., k) -> z L^T (each row correlated by the lower factor L); unchanged without L."""
    import pytensor.tensor as pt

    if chol is None:
        return z
    z = pt.as_tensor(z)
    return pt.tensordot(z, pt.as_tensor(chol.T), axes=[[z.ndim - 1], [0]])


def _pinned_readings(problem: Problem) -> list[tuple[Observation, str, bool]]:
    """(observation, output, log scale) of every reading with a kind's ``pinned_output`` hook (one
    single-value record per data-file row)."""

    out = []
    for obs in problem.observations:
        hook = getattr(kind_module(obs), "pinned_output", None)
        pinned = hook(obs, problem) if hook is not None else None
        if pinned is not None:
            out += [(reading, *pinned) for reading in obs.readings()]
    return out


def _typical_pins(problem: Problem) -> list[tuple[Observation, str, bool]]:
    """(observation, output, log scale) of every observation whose kind pins an output of the typical subject
    only (a ``typical_output(obs, problem)`` hook: a cohort's weights fix the typical Jv over share, not one
    subject's Jv); :func:`_typical_scores` reflects the typical scores along it as it does for lymph readings."""
    out = []
    for obs in problem.observations:
        hook = getattr(kind_module(obs), "typical_output", None)
        pinned = hook(obs, problem) if hook is not None else None
        if pinned is not None:
            out.append((obs, *pinned))
    return out


def _repeat_note(obs: Observation) -> list[str]:
    """A note where a data file holds several readings of one subject (fitted as repeats of one value)."""
    if obs.rows is None or len(set(obs.rows.subject)) == len(obs.rows.subject):
        return []
    if getattr(kind_module(obs), "TIMED", False):  # the kind models the readings' times itself
        return []
    return [f"{obs.key}: several readings of one subject are fitted as repeated readings of one steady value "
            "(times are not modelled)"]


def _output_at(problem: Problem, names: list[str], value_of: Any, output: str, z: np.ndarray,
               centre: dict[str, float] | None = None) -> float:
    """An output of the forward map (numpy) with the quantities ``names`` at scores z (``value_of(q,
    z_q)``) and every other quantity at its prior centre (``centre``, ``prior_centres`` when None)."""

    vals = {**problem.fixed, **(prior_centres(problem) if centre is None else centre)}
    vals.update({q: value_of(q, z[j]) for j, q in enumerate(names)})
    return float(np.asarray(problem.evaluate(vals, np)[output]))


def _gradient(problem: Problem, names: list[str], value_of: Any, output: str, log: bool) -> np.ndarray | None:
    """Gradient of an output (its log when ``log``) with respect to the scores of ``names`` at 0
    (central finite differences, ``_output_at``). None where it is zero or not finite."""

    centre = prior_centres(problem)

    def predict(z: np.ndarray) -> float:
        v = _output_at(problem, names, value_of, output, z, centre)
        return float(np.log(v)) if log else v

    grad = np.zeros(len(names))
    with np.errstate(all="ignore"):
        for j in range(len(names)):
            e = np.zeros(len(names))
            e[j] = PIN_STEP
            grad[j] = (predict(e) - predict(-e)) / (2 * PIN_STEP)
    if not np.all(np.isfinite(grad)) or not np.any(grad):
        return None
    return grad


def _direction(problem: Problem, names: list[str], value_of: Any, output: str, log: bool) -> np.ndarray | None:
    """Unit direction of steepest change of an output (``_gradient``); None where there is none."""
    grad = _gradient(problem, names, value_of, output, log)
    return None if grad is None else grad / np.linalg.norm(grad)


def _householder(w: Any, xp: Any = np, k: int | None = None) -> Any:
    """Orthogonal, symmetric reflections H (..., k, k) whose first column is -sign(w_1) w, for unit
    vectors w (..., k), numpy or PyTensor (give k, the static length, with PyTensor). v = w + sign(w_1) e1
    keeps |v| >= 1 (no cancellation)."""
    k = w.shape[-1] if k is None else k
    sign = xp.where(w[..., 0] >= 0.0, 1.0, -1.0)
    v = w + sign[..., None] * np.eye(k)[0]
    return np.eye(k) - 2.0 * v[..., :, None] * v[..., None, :] / (v * v).sum(axis=-1)[..., None, None]


#: A reading pins its subject (``_pinned_subjects``) when its error sd is below this fraction of the
#: between-subject sd of its prediction: our numerical choice, after the usual rule that a centred
#: parameterisation suits a group whose data are more informative than the population spread
#: (Betancourt M, Girolami M 2015, Current Trends in Bayesian Methodology with Applications, CRC Press;
#: arXiv:1312.0906; from memory).
PIN_RATIO = 0.5
#: Floor of the slope along a pinned subject's pinned axis, as a fraction of the slope at its anchor:
#: our numerical choice (any positive floor keeps the change of variables exact).
SLOPE_FLOOR = 0.1
#: Largest distance (in standard-normal score units) of a pinned subject's anchor from the typical
#: subject: our numerical choice (a reading further out than 3 prior sds is anchored at 3).
ANCHOR_MAX = 3.0


def _pinned_subjects(problem: Problem, names: list[str], labels: list[str]) -> dict[int, tuple[str, np.ndarray]]:
    """Subject index -> (pinned output, anchor scores z*) for every subject with a reading of an output
    (a kind's ``pinned_output(obs, problem)`` hook, e.g. lymph flow; the subject's first such reading)
    that depends on the subject's between-subject scores of ``names`` and pins it: the reading's error
    sd (a cv times the value) is below PIN_RATIO times the between-subject sd of the prediction, |grad|
    at the priors' medians (a reading less precise than that is left non-centred).

    The anchor z* = lambda w lies on the direction w in which the output changes fastest at the
    priors' medians (finite differences), where the output equals the reading (a root in
    [-ANCHOR_MAX, ANCHOR_MAX], else the nearer end): the subject's scores are linearised there, not at
    the typical subject, since a reading far from the typical value is where the posterior is."""

    centre = prior_centres(problem)

    def value_of(q: str, z: float) -> float:
        return problem.priors[q].individual(centre[q], z)

    out: dict[int, tuple[str, np.ndarray]] = {}
    grads: dict[str, np.ndarray | None] = {}   # at the medians: the same for every reading of an output
    for obs, output, _log in _pinned_readings(problem):
        if obs.subject not in labels or labels.index(obs.subject) in out:
            continue
        if output not in grads:
            grads[output] = _gradient(problem, names, value_of, output, False)
        grad = grads[output]
        reading_sd = obs.sd if obs.sd is not None else obs.cv * abs(float(obs.value))
        if grad is None or not reading_sd < PIN_RATIO * np.linalg.norm(grad):
            continue
        w = grad / np.linalg.norm(grad)

        def miss(lam: float, w: np.ndarray = w, output: str = output, reading: float = float(obs.value)) -> float:
            return _output_at(problem, names, value_of, output, lam * w, centre) - reading

        lam = _anchor(miss)
        out[labels.index(obs.subject)] = (output, lam * w)
    return out


def _anchor(miss: Any) -> float:
    """The root of ``miss`` (prediction minus reading along a unit direction) in [-ANCHOR_MAX,
    ANCHOR_MAX], else the nearer end; 0 where the ends are not finite."""
    from scipy.optimize import brentq

    ends = (miss(-ANCHOR_MAX), miss(ANCHOR_MAX))
    if not all(np.isfinite(ends)):
        return 0.0
    if ends[0] * ends[1] < 0:
        return float(brentq(miss, -ANCHOR_MAX, ANCHOR_MAX, xtol=1e-6))
    return -ANCHOR_MAX if abs(ends[0]) < abs(ends[1]) else ANCHOR_MAX


def _typical_scores(problem: Problem, names: list[str]) -> dict[str, Any]:
    """Standard-normal scores ``q__z`` of the typical values of ``names`` (normal or lognormal priors),
    reflected (Householder) along the direction the study's readings of
    outputs pin together (the sum of their unit directions): with subjects, a few lymph readings
    pin the typical net pressure as well. Empty (the builder makes its own ``q__z``) when nothing
    is pinned or there are fewer than two scores."""
    import pymc as pm

    pinned = _pinned_readings(problem) + _typical_pins(problem)
    if len(names) < 2 or not pinned:
        return {}

    def typical(q: str, z: float) -> float:
        return float(problem.priors[q].distribution.from_scores(z))

    total = np.zeros(len(names))
    directions: dict[tuple[str, bool], np.ndarray | None] = {}   # the same for every reading of an output
    for _obs, output, log in pinned:
        if (output, log) not in directions:
            directions[(output, log)] = _direction(problem, names, typical, output, log)
        w = directions[(output, log)]
        if w is not None:
            total += w
    if not np.linalg.norm(total) > 0:
        return {}
    H = _householder(total / np.linalg.norm(total))
    pm.modelcontext(None).add_coord("typical_score", names)
    u = pm.Normal("typical_scores", 0.0, 1.0, dims="typical_score")
    z = (H * u[None, :]).sum(axis=-1)
    return {q: pm.Deterministic(f"{q}__z", z[j]) for j, q in enumerate(names)}


def _subject_scores(problem: Problem, ctx: BuildContext, scored: dict[str, tuple[Any, Any, Any]],
                    labels: list[str], hierarchical: bool, chol: np.ndarray | None = None) -> dict[str, Any]:
    """Standard-normal between-subject scores ``q__subject_z`` (dim subject) of the quantities ``scored``
    (name -> (prior, per-subject base, spread ratio)), correlated across quantities by ``chol`` (lower
    Cholesky factor over ``scored``'s order; None: independent): z = L u with u independent.

    A subject with a reading of an output (``_pinned_subjects``: lymph flow pins Kf x net pressure, a
    thin slab across all the scores whose place and width move with the typical values and spreads) is
    sampled centred along the direction the reading pins. With z* the subject's anchor, g the gradient
    of the output with respect to the scores at z* (central differences in PyTensor, so it follows the
    typical values and spreads) and H the Householder reflection (orthogonal, symmetric) whose first column is -+g/|g|,
    the scores are z = z* + H u with u ~ N(-H z*, I), which is z ~ N(0, I) again. The free variables are
    u_rest (``pinned_scores``) and, in place of u1, the subject's output itself (``pinned_prediction``,
    in the output's unit): t = f(z* + H (0, u_rest)) -+ c u1, with c > 0 the output's slope along the
    pinned axis at z* + H (0, u_rest) (floored at SLOPE_FLOOR |g|), so t ~ Normal(f(...) -+ c (-H z*)_1,
    c), a change of variables with Jacobian 1/c, exact for any positive c: the model is unchanged, but
    t sits where the reading puts it whatever the spreads and typical values, where u1 would have to
    move with them (a funnel: the chains diverged at large spreads). The output is taken with the
    subject's other quantities at their typical values, except quantities another kind claims (the cuff
    curves' Kf and Pv): those are constants, the kind's estimate from its own data (``ctx.guess``) or
    else the prior centre, so that t follows the subject's reading and not the typical Pv or Kf. Other
    subjects keep plain scores (``subject_scores``)."""
    import pymc as pm
    import pytensor
    import pytensor.tensor as pt


    names = list(scored)
    pinned = _pinned_subjects(problem, names, labels) if hierarchical and names else {}
    if not pinned and chol is None:
        return {q: pm.Normal(f"{q}__subject_z", 0.0, 1.0, dims="subject") for q in names}
    if not pinned:
        model = pm.modelcontext(None)
        model.add_coord("score", names)
        u = pm.Normal("subject_scores_iid", 0.0, 1.0, dims=("subject", "score"))
        zc = _correlate(u, chol)
        return {q: pm.Deterministic(f"{q}__subject_z", zc[:, j], dims="subject") for j, q in enumerate(names)}
    model = pm.modelcontext(None)
    k, n = len(names), len(labels)
    pidx = np.array(sorted(pinned))
    anchor = np.array([pinned[i][1] for i in pidx])
    free = np.array([i for i in range(n) if i not in pinned])
    model.add_coord("score", names)
    model.add_coord("pinned_subject", [labels[i] for i in pidx])
    if k > 1:
        model.add_coord("pinned_axis", names[1:])

    centre = prior_centres(problem)
    for name in ctx.layers:           # claimed: a constant the claiming kind may set (``ctx.guess``)
        ctx.guesses[name] = (pytensor.shared(np.full(len(pidx), centre[name]), name=f"{name}__pinned_at"), pidx)

    out_names = [pinned[i][0] for i in pidx]

    def predict(z: Any) -> Any:
        """The pinned outputs of the pinned subjects at scores z (..., P, k) -> (..., P)."""
        vals = {**problem.fixed}
        for name in problem.priors:
            if name in ctx.guesses:
                vals[name] = ctx.guesses[name][0]
            elif name not in scored:
                vals[name] = ctx.per_subject[name][pidx]
        zc = _correlate(z, chol)
        for j, (name, (prior, base, ratio)) in enumerate(scored.items()):
            vals[name] = apply_layer(prior, base[pidx], zc[..., j], pt, ratio)
        outs = problem.evaluate(vals, pt)
        shape = pt.shape(z)[:-1]
        # one broadcast per output name, chosen per subject by a mask (a stack of one slice per subject
        # made the graph grow quadratically with the pinned subjects of a cohort)
        result = None
        for out_name in dict.fromkeys(out_names):
            part = pt.broadcast_to(outs[out_name], shape)
            result = part if result is None else pt.where(np.array(out_names) == out_name, part, result)
        return result

    # derivatives by central differences in one batched evaluation each (PIN_STEP): pytensor.grad here
    # would put second derivatives of the forward map into the sampler's gradient, and the steady forms'
    # Newton solve then took many minutes to compile
    steps = PIN_STEP * np.concatenate([np.eye(k), -np.eye(k)])[:, None, :]          # (2k, 1, k)
    f_steps = predict(pt.as_tensor(anchor)[None] + steps)                           # (2k, P)
    grad = ((f_steps[:k] - f_steps[k:]) / (2 * PIN_STEP)).T                          # (P, k)
    gnorm = pt.maximum(pt.sqrt((grad**2).sum(axis=1)), 1e-300)
    w = grad / gnorm[:, None]
    sign = pt.where(w[:, 0] >= 0.0, 1.0, -1.0)
    H = _householder(w, pt, k)
    mean = -(H * anchor[:, None, :]).sum(axis=-1)          # -H z*, the prior mean of u
    rest = (pm.Normal("pinned_scores", mean[:, 1:], 1.0, dims=("pinned_subject", "pinned_axis")) if k > 1
            else pt.zeros((len(pidx), 0)))
    z_rest = anchor + (H[:, :, 1:] * rest[:, None, :]).sum(axis=-1)
    f_rest = predict(pt.stack([z_rest, z_rest + PIN_STEP * w, z_rest - PIN_STEP * w]))   # (3, P)
    offset = f_rest[0]
    # slope of the output along the pinned axis at z_rest (floored at a tenth of |g|: any positive slope
    # gives an exact change of variables; the true one makes t follow the output most closely)
    slope = pt.maximum((f_rest[1] - f_rest[2]) / (2 * PIN_STEP), SLOPE_FLOOR * gnorm)
    t = pm.Normal("pinned_prediction", mu=offset - sign * slope * mean[:, 0], sigma=slope, dims="pinned_subject")
    u = pt.concatenate([(-sign * (t - offset) / slope)[:, None], rest], axis=1)
    z = pt.zeros((n, k))
    z = pt.set_subtensor(z[pidx], anchor + (H * u[:, None, :]).sum(axis=-1))
    if free.size:
        model.add_coord("unpinned_subject", [labels[i] for i in free])
        z = pt.set_subtensor(z[free], pm.Normal("subject_scores", 0.0, 1.0, dims=("unpinned_subject", "score")))
    z = _correlate(z, chol)
    return {q: pm.Deterministic(f"{q}__subject_z", z[:, j], dims="subject") for j, q in enumerate(names)}


def _add_copula(problem: Problem, ctx: BuildContext, scores: dict[str, Any]) -> None:
    """Gaussian-copula density for correlated quantities: -0.5 z'(R^-1 - I)z - 0.5 log|R|."""
    import pymc as pm
    import pytensor.tensor as pt

    R = problem.correlation
    if R is None:
        return
    names = problem.names
    R = np.asarray(R, dtype=float)
    if R.shape != (len(names), len(names)) or np.allclose(R, np.eye(len(names))):
        return
    involved = [i for i in range(len(names)) if not np.allclose(np.delete(R[i], i), 0.0)]
    Rs = R[np.ix_(involved, involved)]
    zs = []
    for i in involved:
        name = names[i]
        if name in scores:
            zs.append(scores[name])
        else:
            prior = problem.priors[name]
            rv = ctx.typical[name]
            zs.append(_probit(pm.logcdf(_marginal(prior), rv)))
    z = pt.stack(zs)
    prec = np.linalg.inv(Rs) - np.eye(len(involved))
    _, logdet = np.linalg.slogdet(Rs)
    pm.Potential("copula", -0.5 * pt.dot(z, pt.dot(prec, z)) - 0.5 * logdet)


def _marginal(prior: Any) -> Any:
    """An unnamed PyMC distribution of a prior's marginal (for its CDF in the copula term)."""
    try:
        return prior.distribution.pymc_dist()
    except NotImplementedError:
        raise InputError("correlation with this prior shape is not supported in inference",
                         key=f"parameters.{prior.symbol}.dist", value=prior.dist) from None
