"""Trial design: power, assurance, Bayesian success and sample size for a study's ``[design]``.

Designs: ``parallel`` (two arms; with ``baseline = true`` analysed by ANCOVA on the baseline) and
``paired`` (before/after in the same subjects; needs ``within_subject`` test-retest spread) and
``crossover`` (AB/BA two-period crossover: n subjects per sequence, each treated in one period and not in
the other; analysed by the two-sample t test on the halved period differences, which removes a period
effect; needs ``within_subject`` spread; no carry-over assumed).
The effect is a ``shift`` (natural units, analysed on the natural scale) or a ``multiply`` (a
ratio, analysed on the log scale: sd of a log endpoint from a cv is sqrt(ln(1 + cv^2))) on one or
more quantities. ``design_prior`` is over the first effect's shift or log ratio.

Endpoints:
- a quantity (``"Kf"``): subjects drawn around the typical value with the between-subject spread
  (from ``[design] between_subject`` or the prior), a within-subject (occasion) spread and a
  measurement error. Power is exact (noncentral t) as well as simulated.
- ``"Jv"`` or another model output, or an observation kind (``lymph_flow`` = Jv at steady state):
  each simulated subject's quantities go through ``model.evaluate``; the typical subject is drawn
  from the prior once per simulated trial. Power is simulated; an analytic figure from a large
  pilot's sd (normal approximation) is given beside it.

Fast path: every simulated trial is analysed in closed form (t test / ANCOVA / paired t;
conjugate normal posterior for Bayesian success). Exact path (``exact=True``): each simulated
trial is also refitted with full MCMC (PyMC model, nutpie sampler), success when the posterior
probability of an effect in one direction exceeds 1 - alpha/2, on the same simulated trials.

Tasks (one per design point: a sample size, for power or for assurance; on the exact path its
trials are refitted inside the task) go through :mod:`uncertainty.core.parallel`, each seeded from the
study seed and its index; a checkpoint is keyed by the study and the section as well.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy import stats

from uncertainty.analyses import sampling
from uncertainty.analyses.design import bayes_n, binary
from uncertainty.analyses.design import group_sequential as gs
from uncertainty.analyses.design import trial_power as tp
from uncertainty.analyses.design.result import DesignResult
from uncertainty.analyses.inference.diagnostics import Gate, diagnose
from uncertainty.analyses.propagate.timeline import values_at
from uncertainty.core import units
from uncertainty.core.errors import InputError
from uncertainty.core.parallel import InProcess
from uncertainty.core.provenance import code_hash, package_version
from uncertainty.distributions import REGISTRY, Distribution, Normal, Spread, TruncNormal, Uniform, log_sd_from_cv
from uncertainty.forms.catalogue import all_outputs
from uncertainty.forms.evaluate import evaluate as model_evaluate
from uncertainty.study.endpoints import TimePoint, parse_time_endpoint
from uncertainty.study.schema import NAMED_ENDPOINTS

#: Families a design prior (over the analysis-scale effect) may take; an analysis prior is normal.
#: Every parameter of these families is required here (a truncnormal gives both bounds).
DESIGN_PRIOR_FAMILIES: tuple[type[Distribution], ...] = (Normal, TruncNormal, Uniform)
ANALYSIS_PRIOR_FAMILIES: tuple[type[Distribution], ...] = (Normal,)

#: observation kind (or named clinical endpoint) -> (kind, what is read). ``lymph_flow`` measures Jv at steady
#: state; ``volume_time_course`` (venous-cuff plethysmography) identifies Kf per subject (its NOTE in
#: analyses/inference/observations), so the endpoint is Kf read with the cuff method's error (``measurement``);
#: ``limb_volume`` (the volume a lymphoedema trial measures, e.g. by perometry) is the model's
#: ``oedema_volume`` (mL per 100 g, steady forms).
OBSERVATION_ENDPOINTS = {"lymph_flow": "Jv", "volume_time_course": "Kf", **NAMED_ENDPOINTS}
#: of those, the ones read as a study quantity rather than a model output
QUANTITY_ENDPOINTS = frozenset({"volume_time_course"})
_DEFAULT_TRIALS = 1000
_DEFAULT_EXACT_TRIALS = 40


# --------------------------------------------------------------------------------------------
# specification


@dataclass(frozen=True)
class Effect:
    """One effect of treatment: ``kind`` shift (canonical unit) or multiply (ratio) on ``parameter``."""

    parameter: str
    kind: str
    value: float

    def analysis_value(self) -> float:
        """The effect on its analysis scale: the shift, or the natural log of the ratio."""
        return math.log(self.value) if self.kind == "multiply" else self.value

    def apply(self, x: np.ndarray, delta: np.ndarray | float | None = None) -> np.ndarray:
        """Treated values: x + shift or x * ratio; ``delta`` (analysis scale) replaces the point effect."""
        d = self.analysis_value() if delta is None else delta
        return x * np.exp(d) if self.kind == "multiply" else x + d


#: Fewest simulated trials per design point, exact (MCMC) trials, and most of either.
MIN_TRIALS = 100
MIN_TRIALS_REASON = "fewer leave a Monte Carlo error of power near 0.05 or more: sqrt(0.5 * 0.5 / 100)"
MIN_EXACT_TRIALS = 20
MAX_TRIALS = 10**7


@dataclass
class DesignSpec:
    """A validated ``[design]`` section (see the module docstring for the meaning of each field)."""

    design: str = "parallel"
    baseline: bool = False
    endpoint: str = "Kf"
    endpoint_kind: str = "quantity"  # quantity | output
    output: str = "Kf"  # the model output or quantity that is read
    effects: list[Effect] = field(default_factory=list)
    between: dict[str, dict[str, float]] = field(default_factory=dict)
    within: dict[str, dict[str, float]] = field(default_factory=dict)
    measurement: dict[str, float] | None = None
    alpha: float = 0.05
    target_power: float = 0.8
    target_assurance: float | None = None
    dropout: float = 0.0
    n_range: tuple[int, int] = (5, 200)
    n_points: int = 10
    trials: int = _DEFAULT_TRIALS
    exact_trials: int = _DEFAULT_EXACT_TRIALS
    design_prior: dict[str, Any] | None = None
    analysis_prior: dict[str, float] | None = None
    target_half_width: float | None = None
    half_width_probability: float = 0.8
    file: str | None = None
    prior_frozen: Any = None
    scale_forced: str | None = None
    benefit: str | None = None  # "increase" | "decrease"; None: the sign of the point effect
    notes: list[str] = field(default_factory=list)  # remarks found while parsing (kept in the result)
    typical: dict[str, float] = field(default_factory=dict)  # stated typical values (canonical units)
    test: str = "two_sided"  # two_sided | one_sided | non_inferiority (trial_power.TESTS)
    margin: float | None = None  # non-inferiority margin as written: endpoint unit (shift) or a ratio
    looks: int = 1  # group-sequential looks at equally spaced information fractions (1: fixed design)
    spending: str = "obrien_fleming"  # Lan-DeMets spending shape (group_sequential.SPENDING)
    futility: str | None = None  # non-binding beta-spending futility bound shape (group_sequential.SPENDING)
    responder: dict[str, Any] | None = None  # {"cut": canonical unit, "side": "below" | "above"}: binary endpoint
    bayes_width: float | None = None  # target width of the 95 % posterior interval (analysis scale)
    bayes_success: float | None = None  # target probability that the interval excludes no effect
    timepoint: TimePoint | None = None  # a whole_body time course at a time (uncertainty.study.endpoints)
    followups: int = 1  # repeated measures: follow-up readings per subject, their mean analysed (parallel only)

    @property
    def responder_sign(self) -> float:
        """+1 when more responders on treatment is the benefit (the cut lies on the side of benefit), else -1."""
        if self.responder is None:
            return 1.0
        return 1.0 if (self.responder["side"] == "below") == (self.direction < 0) else -1.0

    @property
    def responder_cut_analysis(self) -> float:
        """The responder cut on the analysis scale (its natural log on the log scale)."""
        cut = float(self.responder["cut"]) if self.responder else 0.0
        return math.log(cut) if self.scale == "log" else cut

    @property
    def margin_analysis(self) -> float:
        """The non-inferiority margin on the analysis scale (>= 0): the margin itself for a shift, |ln ratio|
        for a ratio effect analysed on the log scale; 0 for the other tests.

        Raises
        ------
        InputError
            A ratio margin while the endpoint is analysed on the natural scale (it takes values <= 0).
        """
        if self.test != "non_inferiority" or self.margin is None:
            return 0.0
        if self.effects and self.effects[0].kind == "multiply":
            if self.scale != "log":
                raise InputError("a ratio margin needs an endpoint analysed on the log scale; this one takes "
                                 "values <= 0: give the effect as a shift and the margin in the endpoint's unit",
                                 file=self.file, key="design.margin", value=self.margin)
            return abs(math.log(self.margin))
        return float(self.margin)

    @property
    def test_text(self) -> str:
        """The test in words, as printed in the headline, the report and results.json."""
        d = "an increase" if self.direction > 0 else "a decrease"
        if self.test == "one_sided":
            return f"one-sided test at alpha {self.alpha:g} for {d}"
        if self.test == "non_inferiority":
            unit = "ratio" if self.effects and self.effects[0].kind == "multiply" else "margin"
            return (f"non-inferiority test at one-sided alpha {self.alpha:g} ({unit} {self.margin:g}; benefit is "
                    f"{d})")
        return f"two-sided test at alpha {self.alpha:g}, success only for {d}"

    @property
    def analysis(self) -> str:
        """``parallel`` (t test), ``ancova``, ``paired`` or ``crossover``: the analysis of one trial."""
        if self.design in ("paired", "crossover"):
            return self.design
        return "ancova" if self.baseline else "parallel"

    @property
    def scale(self) -> str:
        """``log`` for a ratio effect, ``natural`` for a shift (or when the endpoint can be <= 0)."""
        if self.scale_forced:
            return self.scale_forced
        return "log" if self.effects[0].kind == "multiply" else "natural"

    @property
    def direction(self) -> float:
        """The direction of benefit on the analysis scale: +1 when raising the endpoint is the desired
        outcome, -1 when lowering it is; stated as ``benefit`` in the study, else the sign of the point
        effect. Power, assurance and Bayesian success count only results in this direction."""
        if self.benefit is not None:
            return 1.0 if self.benefit == "increase" else -1.0
        return tp.benefit_sign(self.effects[0].analysis_value())

    def design_prior_frozen(self) -> Any:
        """The design prior as a scipy frozen distribution (over the analysis-scale effect)."""
        if self.prior_frozen is not None:
            return self.prior_frozen
        if self.design_prior is None:
            return None
        p = self.design_prior
        dist = p.get("dist", Normal.name)
        cls = REGISTRY.get(dist) if isinstance(dist, str) else None
        if cls is None or cls not in DESIGN_PRIOR_FAMILIES:
            raise InputError("design_prior: use dist normal, truncnormal or uniform", file=self.file,
                             key="design.design_prior.dist", value=dist)
        return cls.from_params(p).frozen()


def _section_dict(section: Any) -> dict[str, Any]:
    if section is None:
        return {}
    if hasattr(section, "model_dump"):
        return {k: v for k, v in section.model_dump().items() if v is not None}
    return dict(section)


def _spread(value: Any, file: str | None, key: str) -> dict[str, float]:
    if hasattr(value, "model_dump"):
        value = value.model_dump()
    if isinstance(value, dict):
        value = {k: v for k, v in value.items() if v is not None}
    if not isinstance(value, dict) or len(value) != 1 or next(iter(value)) not in ("sd", "cv"):
        raise InputError("a spread is { sd = .. } or { cv = .. }", file=file, key=key, value=value)
    kind, v = next(iter(value.items()))
    if not isinstance(v, int | float) or v < 0:
        raise InputError("a spread must be a number >= 0", file=file, key=f"{key}.{kind}", value=v)
    return {kind: float(v)}


def _prob(doc: dict, key: str, file: str | None, default: float | None, *, open_: bool = True) -> float | None:
    v = doc.get(key, default)
    if v is None:
        return None
    if not isinstance(v, int | float) or not (0 < v < 1 if open_ else 0 <= v < 1):
        raise InputError("must lie strictly between 0 and 1" if open_ else "must lie in [0, 1)",
                         file=file, key=f"design.{key}", value=v)
    return float(v)


def parse_design(study: Any, section: Any = None) -> DesignSpec:
    """Validate a study's ``[design]`` section (or ``section``) into a :class:`DesignSpec`.

    Raises InputError (file, key, value) for a target power outside 0..1, an empty n range,
    an effect on an unknown quantity, a paired design without within-subject spread, etc.
    """
    file = str(getattr(study, "path", None) or "") or None
    doc = _section_dict(section if section is not None else getattr(study, "design", None))
    if not doc:
        raise InputError("the study has no [design] section", file=file, key="design")
    priors = getattr(study, "priors", {}) or {}
    spec = DesignSpec(file=file)
    spec.design = doc.get("design", "parallel")
    if spec.design not in ("parallel", "paired", "crossover"):
        raise InputError("design must be parallel, paired or crossover", file=file, key="design.design",
                         value=spec.design)
    spec.baseline = bool(doc.get("baseline", False))
    if spec.baseline and spec.design != "parallel":
        raise InputError("baseline (ANCOVA) is for design = \"parallel\"", file=file, key="design.baseline",
                         value=spec.baseline)
    spec.benefit = doc.get("benefit")
    if spec.benefit not in (None, "increase", "decrease"):
        raise InputError("benefit must be increase or decrease", file=file, key="design.benefit", value=spec.benefit)
    spec.alpha = _prob(doc, "alpha", file, 0.05)
    spec.target_power = _prob(doc, "target_power", file, 0.8)
    spec.target_assurance = _prob(doc, "target_assurance", file, None)
    spec.dropout = _prob(doc, "dropout", file, 0.0, open_=False)
    spec.half_width_probability = _prob(doc, "half_width_probability", file, 0.8)

    nr = doc.get("n_range", [5, 200])
    if (not isinstance(nr, list | tuple) or len(nr) != 2 or not all(isinstance(v, int) for v in nr)
            or nr[0] < 2 or nr[1] < nr[0]):
        raise InputError("n_range must be [low, high] integers with 2 <= low <= high", file=file,
                         key="design.n_range", value=list(nr) if isinstance(nr, list | tuple) else nr)
    spec.n_range = (int(nr[0]), int(nr[1]))
    if "simulations" in doc and "trials" not in doc:
        doc["trials"] = doc["simulations"]
    for key, least in (("n_points", 2), ("trials", MIN_TRIALS), ("exact_trials", MIN_EXACT_TRIALS)):
        if key in doc:
            v = doc[key]
            if isinstance(v, bool) or not isinstance(v, int) or not least <= v <= MAX_TRIALS:
                why = f" ({MIN_TRIALS_REASON})" if key == "trials" else ""
                raise InputError(f"must be an integer from {least} to {MAX_TRIALS}{why}", file=file,
                                 key=f"design.{'simulations' if key == 'trials' else key}", value=v)
            setattr(spec, key, int(v))

    # endpoint
    endpoint = doc.get("endpoint", "Jv")
    spec.endpoint = endpoint
    point = parse_time_endpoint(endpoint, getattr(study, "timeline", None), file=file, key="design.endpoint")
    if point is not None:  # a whole_body time course at a time: "infused_retained_fraction at 60 min"
        spec.endpoint_kind, spec.output, spec.timepoint = "output", endpoint, point
    elif endpoint in priors:
        spec.endpoint_kind, spec.output = "quantity", endpoint
    elif endpoint in OBSERVATION_ENDPOINTS:
        spec.output = OBSERVATION_ENDPOINTS[endpoint]
        spec.endpoint_kind = "quantity" if endpoint in QUANTITY_ENDPOINTS else "output"
        if spec.endpoint_kind == "quantity" and spec.output not in priors:
            raise InputError(f"endpoint {endpoint} reads {spec.output}: declare it under [parameters]", file=file,
                             key="design.endpoint", value=endpoint)
    elif endpoint in _model_outputs():
        spec.endpoint_kind, spec.output = "output", endpoint
    else:
        raise InputError("unknown endpoint: a quantity of the study, a model output or an observation kind",
                         file=file, key="design.endpoint", value=endpoint)

    # effects
    raw = doc.get("effect")
    raws = (raw if isinstance(raw, list) else [raw]) + list(doc.get("extra_effects") or [])
    if raw is None:
        raise InputError("an effect is required, e.g. { parameter = \"Kf\", multiply = 0.7 }", file=file,
                         key="design.effect")
    for i, e in enumerate(raws):
        e = _section_dict(e)
        key = "design.effect" if i == 0 and not isinstance(raw, list) else f"design.effect[{i}]"
        par = e.get("parameter")
        if par not in priors:
            raise InputError("effect on an unknown quantity", file=file, key=f"{key}.parameter", value=par)
        kinds = [k for k in ("shift", "multiply") if e.get(k) is not None]
        if len(kinds) != 1:
            raise InputError("give exactly one of shift or multiply", file=file, key=key, value=e)
        kind = kinds[0]
        val = e[kind]
        if kind == "shift" and e.get("unit"):
            val = units.to_canonical(par, val, e["unit"])
        if not isinstance(val, int | float) or (kind == "multiply" and val <= 0):
            raise InputError("multiply must be a ratio > 0" if kind == "multiply" else "shift must be a number",
                             file=file, key=f"{key}.{kind}", value=val)
        spec.effects.append(Effect(par, kind, float(val)))
    if spec.endpoint_kind == "quantity" and spec.effects[0].parameter != spec.output:
        raise InputError("for a quantity endpoint the (first) effect must be on that quantity", file=file,
                         key="design.effect.parameter", value=spec.effects[0].parameter)
    parse_test(spec, doc)

    for name in ("between_subject", "within_subject"):
        target = spec.between if name == "between_subject" else spec.within
        for sym, sp in _section_dict(doc.get(name)).items():
            if sym not in priors:
                raise InputError("spread for an unknown quantity", file=file, key=f"design.{name}.{sym}", value=sym)
            target[sym] = _spread(sp, file, f"design.{name}.{sym}")
    if doc.get("measurement") is not None:
        spec.measurement = _spread(doc["measurement"], file, "design.measurement")
    if spec.design in ("paired", "crossover") and not spec.within:
        raise InputError(f"a {spec.design} design needs within_subject (test-retest) variability", file=file,
                         key="design.within_subject",
                         value=_section_dict(doc.get("within_subject")))

    sec_obj = section if section is not None else getattr(study, "design", None)
    obj = getattr(sec_obj, "design_prior_obj", None)
    if obj is not None:
        spec.prior_frozen = obj.frozen()
        spec.design_prior = {"dist": obj.dist, **obj.params}
    for name in ("design_prior", "analysis_prior"):
        p = _section_dict(doc.get(name))
        if not p or (name == "design_prior" and spec.prior_frozen is not None):
            continue
        dist = p.get("dist", Normal.name)
        cls = REGISTRY.get(dist) if isinstance(dist, str) else None
        allowed = DESIGN_PRIOR_FAMILIES if name == "design_prior" else ANALYSIS_PRIOR_FAMILIES
        if cls is None or cls not in allowed:
            raise InputError(f"{name}: unsupported dist", file=file, key=f"design.{name}.dist", value=dist)
        need = cls.required + cls.optional
        for k in need:
            if not isinstance(p.get(k), int | float):
                raise InputError(f"{name} needs a number", file=file, key=f"design.{name}.{k}", value=p.get(k))
        if "sd" in need and p["sd"] <= 0:
            raise InputError("sd must be > 0", file=file, key=f"design.{name}.sd", value=p["sd"])
        setattr(spec, name, {k: (float(v) if isinstance(v, int | float) else v) for k, v in p.items()})
    if spec.target_assurance is not None and spec.design_prior is None:
        raise InputError("target_assurance needs a design_prior", file=file, key="design.design_prior", value=None)

    for sym, v in _section_dict(doc.get("typical")).items():
        if sym not in priors:
            raise InputError("typical value for an unknown quantity", file=file, key=f"design.typical.{sym}", value=sym)
        if isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
            raise InputError("a typical value is a number (canonical unit)", file=file,
                             key=f"design.typical.{sym}", value=v)
        spec.typical[sym] = float(v)
    check_prior_scale(spec)

    hw = doc.get("target_half_width")
    if hw is not None:
        if not isinstance(hw, int | float) or hw <= 0:
            raise InputError("target_half_width must be > 0", file=file, key="design.target_half_width", value=hw)
        spec.target_half_width = float(hw)
    bw = doc.get("bayes_width")
    if bw is not None:
        if isinstance(bw, bool) or not isinstance(bw, int | float) or not 0 < bw < math.inf:
            raise InputError("bayes_width must be a number > 0", file=file, key="design.bayes_width", value=bw)
        spec.bayes_width = float(bw)
    spec.bayes_success = _prob(doc, "bayes_success", file, None)
    parse_responder(spec, doc)
    check_bayes(spec)
    k = doc.get("followups", 1)
    if isinstance(k, bool) or not isinstance(k, int) or not 1 <= k <= 50:
        raise InputError("followups must be an integer from 1 to 50", file=file, key="design.followups", value=k)
    if k > 1 and (spec.design != "parallel" or spec.responder is not None):
        raise InputError("repeated follow-ups are for design = \"parallel\" (with or without baseline) and a "
                         "continuous endpoint", file=file, key="design.followups", value=k)
    spec.followups = int(k)
    return spec


def parse_responder(spec: DesignSpec, doc: dict[str, Any]) -> None:
    """Set ``spec.responder`` from ``[design] responder = { cut = .., side = .. }`` (a binary endpoint).

    A subject responds when the endpoint (canonical unit) lies below or above ``cut``; ``side`` defaults to
    the direction of benefit (below when a decrease is the benefit). Responder endpoints are analysed by
    the continuity-corrected z test of two proportions, so they need parallel groups without a baseline, a
    two-sided or one-sided test, and neither ``target_half_width`` nor ``analysis_prior``.

    Parameters
    ----------
    spec : DesignSpec
        The section parsed so far; changed in place.
    doc : dict
        The section as a dict.

    Raises
    ------
    InputError
        A cut that is not a finite number (or not > 0 on the log scale), an unknown side, or a design, test
        or target that does not go with a binary endpoint (keys ``design.responder...``).
    """
    raw = _section_dict(doc.get("responder"))
    if not raw:
        return
    file = spec.file
    extra = set(raw) - {"cut", "side"}
    if extra:
        raise InputError("responder takes cut and side only", file=file, key=f"design.responder.{sorted(extra)[0]}",
                         value=raw[sorted(extra)[0]])
    cut = raw.get("cut")
    if isinstance(cut, bool) or not isinstance(cut, int | float) or not math.isfinite(cut):
        raise InputError("responder cut must be a number in the endpoint's canonical unit", file=file,
                         key="design.responder.cut", value=cut)
    if spec.scale == "log" and cut <= 0:
        raise InputError("responder cut must be > 0 for an endpoint analysed on the log scale", file=file,
                         key="design.responder.cut", value=cut)
    side = raw.get("side") or ("below" if spec.direction < 0 else "above")
    if side not in ("below", "above"):
        raise InputError("responder side must be below or above", file=file, key="design.responder.side", value=side)
    why = None
    if spec.analysis != "parallel":
        why = "a responder endpoint needs design = \"parallel\" without baseline"
    elif spec.test == "non_inferiority":
        why = "a responder endpoint takes test = \"two_sided\" or \"one_sided\""
    elif spec.target_half_width is not None or spec.analysis_prior is not None:
        why = "a responder endpoint takes neither target_half_width nor analysis_prior"
    if why:
        raise InputError(why, file=file, key="design.responder", value=raw)
    spec.responder = {"cut": float(cut), "side": side}


def parse_test(spec: DesignSpec, doc: dict[str, Any]) -> None:
    """Set ``spec.test`` and ``spec.margin`` from the section, checking the margin against the effect.

    ``margin`` is needed by ``non_inferiority`` and refused for the other tests. For a shift effect it is
    a number > 0 in the endpoint's canonical unit (the loss of benefit tolerated); for a ratio effect a
    ratio on the harmful side of 1: above 1 when a decrease is the benefit, below 1 when an increase is.

    Parameters
    ----------
    spec : DesignSpec
        The section parsed so far (effects and benefit set); changed in place.
    doc : dict
        The section as a dict.

    Raises
    ------
    InputError
        An unknown test, a missing or superfluous margin, a margin <= 0 or on the wrong side of 1
        (keys ``design.test``, ``design.margin``).
    """
    file = spec.file
    test = doc.get("test", "two_sided")
    if test not in tp.TESTS:
        raise InputError("test must be two_sided, one_sided or non_inferiority", file=file, key="design.test",
                         value=test)
    spec.test = test
    looks = doc.get("looks", 1)
    if isinstance(looks, bool) or not isinstance(looks, int) or not 1 <= looks <= 20:
        raise InputError("looks must be an integer from 1 (a fixed design) to 20", file=file, key="design.looks",
                         value=looks)
    spending = doc.get("spending", "obrien_fleming")
    if spending not in gs.SPENDING:
        raise InputError("spending must be obrien_fleming or pocock", file=file, key="design.spending",
                         value=spending)
    if looks > 1 and test != "two_sided":
        raise InputError("group-sequential looks are for test = \"two_sided\" (symmetric boundaries)", file=file,
                         key="design.looks", value=looks)
    spec.looks, spec.spending = int(looks), spending
    futility = doc.get("futility")
    if futility is not None:
        if futility not in gs.SPENDING:
            raise InputError("futility must be obrien_fleming or pocock (the beta-spending shape)", file=file,
                             key="design.futility", value=futility)
        if looks < 2:
            raise InputError("a futility bound needs looks >= 2 (interim analyses)", file=file,
                             key="design.futility", value=futility)
    spec.futility = futility
    margin = doc.get("margin")
    if test != "non_inferiority":
        if margin is not None:
            raise InputError("margin is only for test = \"non_inferiority\"", file=file, key="design.margin",
                             value=margin)
        return
    if margin is None:
        raise InputError("a non-inferiority test needs a margin (the loss of benefit tolerated)", file=file,
                         key="design.margin", value=None)
    if isinstance(margin, bool) or not isinstance(margin, int | float) or not math.isfinite(margin):
        raise InputError("margin must be a number", file=file, key="design.margin", value=margin)
    if spec.effects[0].kind == "multiply":
        harmful_above = spec.direction < 0
        if margin <= 0 or margin == 1 or (margin > 1) != harmful_above:
            side = "above 1 (a decrease is the benefit)" if harmful_above else "below 1 (an increase is the benefit)"
            raise InputError(f"for a ratio effect the margin is a ratio {side}", file=file, key="design.margin",
                             value=margin)
    elif margin <= 0:
        raise InputError("margin must be > 0, in the endpoint's canonical unit (the loss of benefit tolerated)",
                         file=file, key="design.margin", value=margin)
    spec.margin = float(margin)


def check_bayes(spec: DesignSpec) -> None:
    """Refuse ``bayes_width`` / ``bayes_success`` where the Bayesian sample size does not apply.

    It needs a normal design prior over the effect on the endpoint itself: a quantity endpoint (the prior is
    over the effect on that quantity), not a model output (the prior is over the effect on a parameter) and
    not a responder endpoint.

    Parameters
    ----------
    spec : DesignSpec
        A parsed section.

    Raises
    ------
    InputError
        Naming the key (``design.bayes_width`` or ``design.bayes_success``).
    """
    if spec.bayes_width is None and spec.bayes_success is None:
        return
    key, value = (("design.bayes_width", spec.bayes_width) if spec.bayes_width is not None else
                  ("design.bayes_success", spec.bayes_success))
    why = None
    if spec.design_prior is None or spec.design_prior.get("dist", Normal.name) != Normal.name:
        why = "the Bayesian sample size needs a normal design_prior"
    elif spec.endpoint_kind != "quantity":
        why = (f"the Bayesian sample size needs a quantity endpoint: the design prior is over the effect on "
               f"{spec.effects[0].parameter}, not on {spec.endpoint}")
    elif spec.responder is not None:
        why = "the Bayesian sample size is for a normal endpoint, not a responder endpoint"
    if why:
        raise InputError(why, file=spec.file, key=key, value=value)


def check_prior_scale(spec: DesignSpec) -> None:
    """Check the design prior against the point effect; refuse one on the wrong scale, note an odd one.

    The design prior is over the analysis-scale effect: the shift itself, or the natural log of a
    ratio. A prior whose median lies nearer the ratio than its log while the log lies outside the
    prior's central 99.9 % (e.g. ``mean = 0.75`` for ``multiply = 0.75``) was written on the ratio
    scale: InputError. Otherwise a point effect outside the prior's central 99 % is kept with a note
    in ``spec.notes`` (a prior that disagrees with the effect it is meant to describe).

    Parameters
    ----------
    spec : DesignSpec
        A parsed section (design prior, effects; effect on its analysis scale: canonical unit or log ratio).

    Raises
    ------
    InputError
        For a design prior on the ratio scale (key ``design.design_prior``).
    """
    prior = spec.design_prior_frozen()
    if prior is None or not spec.effects:
        return
    eff = spec.effects[0]
    point = eff.analysis_value()
    lo, hi = (float(v) for v in prior.ppf([0.0005, 0.9995]))
    med = float(prior.median())
    outside = not lo <= point <= hi
    if eff.kind == "multiply" and outside and abs(med - eff.value) < abs(med - point):
        raise InputError(f"design_prior is over the log ratio, but its median {med:.3g} is near the ratio "
                         f"{eff.value:g} itself: for a ratio {eff.value:g} use mean = ln({eff.value:g}) = "
                         f"{point:.3f} (sd on the log scale)", file=spec.file, key="design.design_prior",
                         value=spec.design_prior)
    lo, hi = (float(v) for v in prior.ppf([0.005, 0.995]))
    if not lo <= point <= hi:
        scale = "log ratio" if eff.kind == "multiply" else "shift"
        spec.notes.append(f"the point effect ({scale} {point:.3g}) lies outside the design prior's central 99 % "
                          f"[{lo:.3g}, {hi:.3g}]: check that the prior is on the {scale} scale")


def typical_values(study: Any, spec: DesignSpec) -> dict[str, float]:
    """The stated typical subject: ``[design] typical`` where given, else each prior's median.

    Parameters
    ----------
    study : Study
        The study (its priors).
    spec : DesignSpec
        The parsed section.

    Returns
    -------
    dict
        Quantity -> typical value (canonical units) at which conditional power is computed.
    """
    return {sym: spec.typical.get(sym, float(p.median())) for sym, p in study.priors.items()}


def _model_outputs() -> set[str]:
    """Every output name of every model form (the form catalogue)."""
    return set(all_outputs())


# --------------------------------------------------------------------------------------------
# simulating trials


def _typical(study: Any, trials: int, rng: np.random.Generator) -> dict[str, np.ndarray]:
    """Typical-subject values, one per simulated trial (canonical units)."""

    seed = int(rng.integers(2**63 - 1))
    return sampling.draw(study, trials, method="mc", seed=seed, layer="typical")


def _spread_prior(study: Any, sym: str, spread: dict[str, float] | None) -> Any:
    prior = study.priors[sym]
    return prior.replace(between_subject=spread) if spread is not None else prior


def _endpoint(study: Any, spec: DesignSpec, values: dict[str, np.ndarray], shape: tuple) -> np.ndarray:
    """The endpoint read from each subject-occasion's values (canonical unit), shape ``shape``."""
    if spec.endpoint_kind == "quantity":
        return np.broadcast_to(values[spec.output], shape)
    flat = {k: np.broadcast_to(v, shape).reshape(-1) for k, v in values.items()}
    if spec.timepoint is not None:
        return values_at(study, spec.timepoint, flat).reshape(shape)
    return np.asarray(model_evaluate(study, flat)[spec.output]).reshape(shape)


def _measure(study: Any, spec: DesignSpec, y: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    """Add measurement error: sd additive, cv multiplicative lognormal (median at the true value)."""
    m = spec.measurement
    if not m:
        return y
    z = rng.standard_normal(y.shape)
    spread = Spread.from_declaration(m)
    return y if spread is None else spread.individual(y, z)


def simulate_trials(study: Any, spec: DesignSpec, n: int, trials: int, rng: np.random.Generator,
                    delta: np.ndarray | None = None, typical: dict[str, float] | None = None) -> dict[str, np.ndarray]:
    """Simulated trial data on the analysis scale: arrays (trials, n).

    Keys: ``y0``, ``y1`` (control and treated follow-up; for paired, before and after in the same
    subjects) and, for ANCOVA, ``x0``, ``x1`` (baselines). ``delta`` (trials,) replaces the first
    effect's point value (analysis scale), e.g. drawn from the design prior. ``typical`` (canonical
    units) fixes the typical subject in every trial (conditional power); None draws it from the prior
    once per trial (expected power). The random draws do not depend on the effect, so the same
    generator state gives the same subjects and errors with and without treatment.
    """
    if typical is None:
        typ = _typical(study, trials, rng)
    else:
        typ = {k: np.full(trials, float(v)) for k, v in typical.items()}
    two_occasions = spec.design == "paired" or spec.baseline
    groups = 1 if spec.design == "paired" else 2
    shape = (trials, groups * n)

    # subjects: typical + between-subject spread (scores correlated as the study's between-subject pairs say)
    subj, spread = {}, {}
    for sym, prior in study.priors.items():
        t = np.asarray(typ[sym], dtype=float)[:, None] if sym in typ else None
        if t is None:
            continue
        sp = spec.between.get(sym)
        pr = _spread_prior(study, sym, sp) if sp is not None else prior
        if pr.between_subject:
            spread[sym] = (pr, t, rng.standard_normal(shape))
        else:
            subj[sym] = np.broadcast_to(t, shape)
    scores = sampling.correlate_between(study, {sym: z for sym, (_, _, z) in spread.items()})
    for sym, (pr, t, _) in spread.items():
        subj[sym] = np.asarray(pr.individual(t, scores[sym]))

    def occasion(treated: np.ndarray) -> np.ndarray:
        vals = dict(subj)
        for sym, sp in spec.within.items():
            vals[sym] = np.asarray(_spread_prior(study, sym, sp).individual(vals[sym], rng.standard_normal(shape)))
        for i, eff in enumerate(spec.effects):
            d = delta[:, None] if (i == 0 and delta is not None) else None
            vals[eff.parameter] = np.where(treated, eff.apply(vals[eff.parameter], d), vals[eff.parameter])
        return _measure(study, spec, _endpoint(study, spec, vals, shape), rng)

    none = np.zeros(shape, dtype=bool)
    if spec.design == "crossover":
        # sequence AB (the first n subjects): treated in period 1; sequence BA: treated in period 2
        seq_ab = np.zeros(shape, dtype=bool)
        seq_ab[:, :n] = True
        p1, p2 = occasion(seq_ab), occasion(~seq_ab)
        if spec.scale == "log":
            with np.errstate(invalid="ignore", divide="ignore"):
                p1, p2 = (np.log(np.where(v > 0, v, np.nan)) for v in (p1, p2))
        d = (p1 - p2) / 2  # halved period differences: AB has mean (delta + period) / 2, BA (-delta + period) / 2
        return {"y0": d[:, n:], "y1": d[:, :n]}
    if spec.design == "paired":
        before = occasion(none)
        after = occasion(~none)
        out = {"y0": before, "y1": after}
    else:
        arm = np.zeros(shape, dtype=bool)
        arm[:, n:] = True
        # repeated measures: the mean of the follow-ups on the analysis scale (one follow-up: that reading)
        follow = np.mean([_to_scale(occasion(arm), spec.scale) for _ in range(spec.followups)], axis=0)
        out = {"y0": follow[:, :n], "y1": follow[:, n:]}
        if two_occasions:
            base = _to_scale(occasion(none), spec.scale)
            out.update(x0=base[:, :n], x1=base[:, n:])
        return out
    if spec.scale == "log":
        for k, v in out.items():
            with np.errstate(invalid="ignore", divide="ignore"):
                out[k] = np.log(np.where(v > 0, v, np.nan))
    return out


def _to_scale(v: np.ndarray, scale: str) -> np.ndarray:
    """Endpoint values on the analysis scale: their natural log (NaN where <= 0) on the log scale."""
    if scale != "log":
        return v
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.log(np.where(v > 0, v, np.nan))


def analyse_fast(data: dict[str, np.ndarray], analysis: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Closed-form analysis of each simulated trial: (estimate, standard error, df), each (trials,).

    ``parallel``: difference of means, pooled sd; ``ancova``: pooled within-arm regression on the
    baseline; ``paired``: mean and sd of the differences; ``crossover``: the two-sample t test on the halved
    period differences of the two sequences (``y1`` sequence AB, ``y0`` BA, as :func:`simulate_trials` gives
    them). Trials with non-finite data give NaN.
    """
    if analysis == "crossover":
        analysis = "parallel"
    y0, y1 = data["y0"], data["y1"]
    n = y0.shape[1]
    if analysis == "paired":
        d = y1 - y0
        return d.mean(axis=1), d.std(axis=1, ddof=1) / np.sqrt(n), np.full(len(d), n - 1.0)
    if analysis == "parallel":
        s2 = (y0.var(axis=1, ddof=1) + y1.var(axis=1, ddof=1)) / 2
        return y1.mean(axis=1) - y0.mean(axis=1), np.sqrt(s2 * 2 / n), np.full(len(y0), 2 * n - 2.0)
    x0, x1 = data["x0"], data["x1"]
    xc0, xc1 = x0 - x0.mean(axis=1, keepdims=True), x1 - x1.mean(axis=1, keepdims=True)
    yc0, yc1 = y0 - y0.mean(axis=1, keepdims=True), y1 - y1.mean(axis=1, keepdims=True)
    sxx = (xc0**2).sum(axis=1) + (xc1**2).sum(axis=1)
    sxy = (xc0 * yc0).sum(axis=1) + (xc1 * yc1).sum(axis=1)
    syy = (yc0**2).sum(axis=1) + (yc1**2).sum(axis=1)
    b = sxy / sxx
    dx = x1.mean(axis=1) - x0.mean(axis=1)
    est = y1.mean(axis=1) - y0.mean(axis=1) - b * dx
    s2 = (syy - b * sxy) / (2 * n - 3)
    se = np.sqrt(s2 * (2 / n + dx**2 / sxx))
    return est, se, np.full(len(y0), 2 * n - 3.0)


def _responder_success(data: dict[str, np.ndarray], spec: DesignSpec) -> dict[str, np.ndarray]:
    """Per-trial success of a responder endpoint: counts beyond the cut, continuity-corrected z test."""
    cut = spec.responder_cut_analysis
    below = spec.responder["side"] == "below"
    with np.errstate(invalid="ignore"):
        x0, x1 = ((np.nan_to_num(y, nan=-np.inf) < cut) if below else (y > cut) for y in (data["y0"], data["y1"]))
    n = data["y0"].shape[1]
    ok = binary.success(x0.sum(axis=1), x1.sum(axis=1), n, spec.alpha, spec.test, spec.responder_sign)
    return {"success": ok, "half_width": np.full(len(ok), np.inf)}


def _fast_success(est: np.ndarray, se: np.ndarray, df: np.ndarray, spec: DesignSpec) -> dict[str, np.ndarray]:
    a_tail = tp.tail_alpha(spec.alpha, spec.test)
    tc = stats.t.ppf(1 - a_tail, df)
    m = spec.margin_analysis
    ok = np.isfinite(est) & np.isfinite(se) & (se > 0)
    # a significant result counts only in the direction of benefit (a harmful one is never a success);
    # non-inferiority: direction * estimate + margin significant at the one-sided level
    out = {"success": ok & (spec.direction * est + m > tc * np.where(ok, se, 1.0)),
           "half_width": np.where(ok, stats.t.ppf(1 - spec.alpha / 2, df) * se, np.inf)}
    if spec.analysis_prior is not None:
        a0, s0 = spec.analysis_prior["mean"], spec.analysis_prior["sd"]
        with np.errstate(all="ignore"):
            prec = 1 / s0**2 + 1 / se**2
            pm = (a0 / s0**2 + est / se**2) / prec
            p_benefit = stats.norm.cdf((spec.direction * pm + m) * np.sqrt(prec))
        out["bayes"] = ok & (p_benefit > 1 - a_tail)
    return out


# --------------------------------------------------------------------------------------------
# exact path: full MCMC per simulated trial

_COMPILED: dict[str, Any] = {}


def _compiled_model(analysis: str) -> Any:
    """The PyMC trial model for one analysis, compiled once per process (nutpie)."""
    if analysis == "crossover":
        analysis = "parallel"  # a two-group model of the halved period differences
    if analysis in _COMPILED:
        return _COMPILED[analysis]
    import nutpie
    import pymc as pm

    with pm.Model() as m:
        y = pm.Data("y", np.zeros(6))
        g = pm.Data("g", np.zeros(6))
        x = pm.Data("x", np.zeros(6))
        a0 = pm.Data("a0", 0.0)
        s0 = pm.Data("s0", 10.0)
        delta = pm.Normal("delta", a0, s0)
        sigma = pm.HalfNormal("sigma", 5.0)
        if analysis == "paired":
            mean = delta
        else:
            mu = pm.Normal("mu", 0.0, 10.0)
            mean = mu + delta * g
            if analysis == "ancova":
                beta = pm.Normal("beta", 0.0, 10.0)
                mean = mean + beta * x
        pm.Normal("obs", mean, sigma, observed=y, shape=y.shape)
    _COMPILED[analysis] = nutpie.compile_pymc_model(m)
    return _COMPILED[analysis]


def analyse_mcmc(data: dict[str, np.ndarray], analysis: str, spec: DesignSpec, seed: int,
                 draws: int = 500, tune: int = 400) -> dict[str, np.ndarray]:
    """Refit each simulated trial with NUTS (2 chains, sequential) and decide success per trial.

    The data are standardised (centred, divided by the pooled sd) so that the vague priors
    (Normal(0, 10) on mean and effect, HalfNormal(5) on sigma) are vague for any unit; the
    analysis prior, when given, is carried to the same scale. Success: the posterior probability of
    an effect in the direction of benefit (beyond minus the margin, for non-inferiority) exceeds 1 - a'
    (a' = alpha/2 for a two-sided test, alpha for the one-sided ones: the Bayesian analogue of the test
    counted in that direction);
    ``bayes``: the posterior probability of benefit exceeds 1 - a' under the analysis prior.
    Each refit passes the inference quality gate (R-hat, bulk and tail ESS of the effect and sigma,
    no divergences) or is marked in ``converged`` (False), so that it is counted as a failed refit
    and left out of the power estimate rather than trusted.
    """
    import nutpie

    compiled = _compiled_model(analysis)
    if analysis == "crossover":
        analysis = "parallel"
    y0, y1 = data["y0"], data["y1"]
    trials, n = y0.shape
    success = np.zeros(trials, dtype=bool)
    bayes = np.zeros(trials, dtype=bool)
    converged = np.ones(trials, dtype=bool)
    gate = Gate()
    for i in range(trials):
        if analysis == "paired":
            y = y1[i] - y0[i]
            scale = y.std(ddof=1)
            y_s, g, x = y / scale, np.zeros(n), np.zeros(n)
        else:
            y = np.concatenate([y0[i], y1[i]])
            g = np.repeat([0.0, 1.0], n)
            scale = math.sqrt((y0[i].var(ddof=1) + y1[i].var(ddof=1)) / 2)
            y_s = (y - y.mean()) / scale
            if analysis == "ancova":
                xx = np.concatenate([data["x0"][i], data["x1"][i]])
                x = (xx - xx.mean()) / xx.std(ddof=1)
            else:
                x = np.zeros(2 * n)
        if not (np.all(np.isfinite(y_s)) and np.isfinite(scale) and scale > 0):
            continue
        ap = spec.analysis_prior
        a0, s0 = (ap["mean"] / scale, ap["sd"] / scale) if ap else (0.0, 10.0)
        updates = {"y": y_s, "g": g, "x": x, "a0": a0, "s0": s0}
        fit = compiled.with_data(**{k: v for k, v in updates.items() if k in compiled.shared_data})
        trace = nutpie.sample(fit, draws=draws, tune=tune, chains=2, cores=1, seed=int(seed) + i,
                              progress_bar=False)
        converged[i] = diagnose(trace, ["delta", "sigma"], gate)["passed"]
        d = np.asarray(trace.posterior["delta"]).ravel() * scale
        # benefit: direction * effect > -margin (0 but for non-inferiority), in the endpoint's unit
        p_benefit = float(np.mean(spec.direction * d > -spec.margin_analysis))
        success[i] = p_benefit > 1 - tp.tail_alpha(spec.alpha, spec.test)
        bayes[i] = success[i]
    out = {"success": success, "converged": converged}
    if spec.analysis_prior is not None:
        out["bayes"] = bayes
    return out


# --------------------------------------------------------------------------------------------
# design points


@dataclass(frozen=True)
class _Point:
    n: int
    trials: int
    exact: bool
    what: str  # "power" (point effect) | "assurance" (effect from the design prior)
    conditional: bool = False  # typical subject fixed at the stated values (else drawn per trial)


def _mean_se(x: np.ndarray) -> tuple[float, float]:
    """Mean and Monte Carlo standard error of per-trial values; for successes (booleans) the proportion and
    the sd of its Jeffreys posterior Beta(k + 1/2, n - k + 1/2), which stays above zero when every trial
    (or none) succeeds (Brown, Cai & DasGupta 2001, Stat Sci 16:101, the Jeffreys interval)."""
    x = np.asarray(x)
    n = len(x)
    if x.dtype == bool:
        a, b = x.sum() + 0.5, n - x.sum() + 0.5
        return float(x.mean()), float(math.sqrt(a * b / ((a + b) ** 2 * (a + b + 1))))
    x = x.astype(float)
    return float(x.mean()), float(x.std(ddof=1) / math.sqrt(n)) if n > 1 else float("nan")


def _run_point(study: Any, spec: DesignSpec, point: _Point, ss: np.random.SeedSequence) -> dict[str, Any]:
    """Simulate ``point.trials`` trials at one n and analyse them (fast, and exact when asked)."""
    rng = np.random.default_rng(ss)
    delta = None
    if point.what == "assurance":
        delta = spec.design_prior_frozen().ppf(rng.uniform(size=point.trials))
    fixed = point.conditional or (spec.responder is not None and spec.endpoint_kind == "quantity")
    typ = typical_values(study, spec) if fixed else None
    data = simulate_trials(study, spec, point.n, point.trials, rng, delta, typical=typ)
    if spec.responder is not None:
        fast = _responder_success(data, spec)
    else:
        fast = _fast_success(*analyse_fast(data, spec.analysis), spec)
    out: dict[str, Any] = {"n": point.n, "what": point.what, "conditional": point.conditional,
                           "fast": {k: np.asarray(v) for k, v in fast.items()}}
    if point.exact:
        seed = int(ss.generate_state(1)[0])
        out["exact"] = analyse_mcmc(data, spec.analysis, spec, seed)
    return out


class _PointTask:
    """Picklable task function bound to a study and a spec (for dask workers)."""

    def __init__(self, study: Any, spec: DesignSpec) -> None:
        self.study, self.spec = study, spec

    def __call__(self, point: _Point, ss: np.random.SeedSequence) -> dict[str, Any]:
        return _run_point(self.study, self.spec, point, ss)

    @property
    def checkpoint_key(self) -> str:
        """Digest of what the points depend on beyond (n, trials, path): the study file's hash, the
        resolved priors, correlations and model form, the validated section, the package version and
        the hash of its sources (a checkpoint of a changed study or changed code is never reused)."""
        import dataclasses
        import hashlib

        release = (package_version(), code_hash())
        st = self.study
        spec = {f.name: getattr(self.spec, f.name) for f in dataclasses.fields(self.spec) if f.name != "prior_frozen"}
        priors = {k: (p.dist, sorted(p.params.items()), p.between_subject) for k, p in sorted(st.priors.items())}
        corr = getattr(st, "correlation", None)
        parts = (getattr(st, "hash", None), getattr(st, "model", None), getattr(st, "tissue", None), priors,
                 None if corr is None else np.asarray(corr).round(12).tolist(), spec, release)
        return hashlib.sha256(repr(parts).encode()).hexdigest()


def curve_sizes(n_range: tuple[int, int], points: int) -> list[int]:
    """About ``points`` distinct sample sizes spread geometrically over ``n_range`` (per arm)."""
    lo, hi = n_range
    return sorted({int(round(v)) for v in np.geomspace(lo, hi, points)})


def enrolled(n: int | None, dropout: float) -> int | None:
    """Subjects to enrol per arm so that ``n`` complete: ceil(n / (1 - dropout))."""
    return None if n is None else int(math.ceil(n / (1 - dropout) - 1e-9))


# --------------------------------------------------------------------------------------------
# analytic sd of the endpoint on the analysis scale


def _level(study: Any, sym: str) -> float:
    return float(study.priors[sym].median())


def _sd_on_scale(spread: dict[str, float] | None, scale: str, level: float) -> float:
    if not spread:
        return 0.0
    kind, v = next(iter(spread.items()))
    if scale == "log":
        return log_sd_from_cv(v) if kind == "cv" else v / abs(level)
    return v * abs(level) if kind == "cv" else v


def analytic_sd(study: Any, spec: DesignSpec) -> tuple[float | None, str]:
    """The sd that the closed forms use (analysis scale) and how it was found.

    Quantity endpoint: from the between-subject, within-subject and measurement spreads
    (parallel: total; ANCOVA: total * sqrt(1 - rho^2), rho = between^2 / total^2; paired:
    sqrt(2 (within^2 + measurement^2))). Other endpoints: None (simulation gives the figures; a
    pilot-based sd is computed by :func:`pilot_sd`).
    """
    if spec.endpoint_kind != "quantity":
        return None, "simulation"
    sym = spec.output
    level = _level(study, sym)
    b = _sd_on_scale(spec.between.get(sym) or study.priors[sym].between_subject, spec.scale, level)
    w = _sd_on_scale(spec.within.get(sym), spec.scale, level)
    m = _sd_on_scale(spec.measurement, spec.scale, level)
    total2 = b**2 + w**2 + m**2
    if spec.followups > 1:
        # compound symmetry across occasions: sigma^2 = total2, rho = between^2 / total2; the mean of k follow-ups
        # has variance sigma^2 (1 + (k - 1) rho) / k (Diggle, Heagerty, Liang & Zeger 2002, Analysis of
        # Longitudinal Data, 2nd ed.; from memory) and, adjusted for one baseline, sigma^2 ((1 + (k - 1) rho) / k
        # - rho^2) (Frison & Pocock 1992, Stat Med 11:1685; from memory)
        k = spec.followups
        rho = b**2 / total2 if total2 > 0 else 0.0
        f = (1 + (k - 1) * rho) / k
        if spec.analysis == "ancova":
            return (math.sqrt(total2 * (f - rho**2)),
                    f"closed form (ANCOVA of the mean of {k} follow-ups on baseline, compound symmetry rho {rho:.3f}: "
                    f"variance factor (1 + (k - 1) rho) / k - rho^2 = {f - rho**2:.4f})")
        return (math.sqrt(total2 * f), f"closed form (mean of {k} follow-ups, compound symmetry rho {rho:.3f}: "
                                       f"variance factor (1 + (k - 1) rho) / k = {f:.4f})")
    if spec.analysis == "paired":
        return math.sqrt(2 * (w**2 + m**2)), "closed form (paired differences)"
    if spec.analysis == "crossover":
        rho = b**2 / total2 if total2 > 0 else 0.0
        return (math.sqrt(2 * (w**2 + m**2)),
                f"closed form (crossover: sd of a period difference sqrt(2 (1 - rho)) sigma, sigma "
                f"{math.sqrt(total2):.4g}, between-period correlation rho {rho:.3f})")
    if spec.analysis == "ancova":
        rho = b**2 / total2 if total2 > 0 else 0.0
        return math.sqrt(total2 * (1 - rho**2)), "closed form (ANCOVA residual)"
    return math.sqrt(total2), "closed form"


#: Subjects per arm in the pilot that gives the sd and effect at the typical values (sd error about
#: 1/sqrt(2 * 2 * 20000) = 0.35 %, so n, proportional to sd^2, moves well under 10 % between seeds).
PILOT_N = 20000


def pilot_sd(study: Any, spec: DesignSpec, seed: int, n: int = PILOT_N) -> tuple[float, float]:
    """(sd, effect) of the endpoint on the analysis scale at the stated typical values.

    One large simulated trial with the typical subject fixed at :func:`typical_values`: the sd is
    that of the analysed contrast per subject (pooled arms, differences, or ANCOVA residuals); the
    effect is the mean per-subject effect, from the same subjects and errors simulated again without
    treatment (common random numbers: no sampling noise from between-subject spread). Used for the
    conditional (analytic, noncentral t) power of endpoints without a closed form.

    Parameters
    ----------
    study, spec : the study and its parsed section.
    seed : int
        Seed of the pilot.
    n : int
        Subjects per arm (default :data:`PILOT_N`).

    Returns
    -------
    tuple of float
        (sd, effect) on the analysis scale (log units, or the endpoint's canonical unit).
    """
    import dataclasses

    typ = typical_values(study, spec)
    data = simulate_trials(study, spec, n, 1, np.random.default_rng(seed), typical=typ)
    null = dataclasses.replace(spec, effects=[Effect(e.parameter, e.kind, 1.0 if e.kind == "multiply" else 0.0)
                                              for e in spec.effects])
    data0 = simulate_trials(study, null, n, 1, np.random.default_rng(seed), typical=typ)
    _, se, _ = analyse_fast(data, spec.analysis)
    k = {"paired": math.sqrt(n), "crossover": math.sqrt(2 * n)}.get(spec.analysis, math.sqrt(n / 2))
    diff = data["y1"] - data0["y1"]
    effect = float(np.nanmean(diff)) * (2.0 if spec.analysis == "crossover" else 1.0)
    return float(se[0] * k), effect


def refine_n(ns: np.ndarray, k: np.ndarray, m: np.ndarray, target: float) -> tuple[float | None, float | None]:
    """n where a simulated success probability reaches ``target``, between the grid points.

    Fits P(n) = Phi(a + b sqrt(n)) by maximum likelihood to ``k`` successes of ``m`` trials at each
    n (the normal-approximation shape of power, Phi(|delta| sqrt(n/2)/sd - z), common practice), over
    the grid points around the crossing, and solves P(n) = target. The Monte Carlo error of that n
    comes from the fit's inverse information (delta method).

    Parameters
    ----------
    ns : array
        Subjects per arm (completing) at the grid points.
    k, m : array
        Successes and trials at each point.
    target : float
        Target probability (power or assurance).

    Returns
    -------
    tuple
        (n, its Monte Carlo standard error) in subjects per arm (not rounded), or (None, None) when
        the fit does not cross the target inside the grid.
    """
    from scipy import optimize

    ns, k, m = (np.asarray(v, dtype=float) for v in (ns, k, m))
    p = k / m
    above = np.nonzero(p >= target)[0]
    if above.size == 0 or np.all(p >= target):
        return None, None
    j = int(above[0])
    sel = slice(max(j - 2, 0), min(j + 2, len(ns)))
    x, kk, mm = np.sqrt(ns[sel]), k[sel], m[sel]
    if len(x) < 2:
        return None, None

    def nll(th: np.ndarray) -> float:
        q = np.clip(stats.norm.cdf(th[0] + th[1] * x), 1e-12, 1 - 1e-12)
        return float(-(kk * np.log(q) + (mm - kk) * np.log1p(-q)).sum())

    z = stats.norm.ppf(np.clip((kk + 0.5) / (mm + 1), 1e-6, 1 - 1e-6))
    b0 = np.polyfit(x, z, 1) if len(x) > 1 and np.ptp(x) > 0 else (1.0, 0.0)
    fit = optimize.minimize(nll, np.array([b0[1], b0[0]]), method="Nelder-Mead",
                            options={"xatol": 1e-8, "fatol": 1e-10, "maxiter": 4000})
    a, b = fit.x
    if not b > 0:
        return None, None
    zt = stats.norm.ppf(target)
    root = (zt - a) / b
    n_star = root**2
    # observed information by finite differences, then the delta method for n* = ((zt - a)/b)^2
    h = 1e-4 * np.maximum(1.0, np.abs(fit.x))
    H = np.zeros((2, 2))
    for i in range(2):
        for j2 in range(2):
            e_i, e_j = np.eye(2)[i] * h[i], np.eye(2)[j2] * h[j2]
            H[i, j2] = (nll(fit.x + e_i + e_j) - nll(fit.x + e_i - e_j) - nll(fit.x - e_i + e_j)
                        + nll(fit.x - e_i - e_j)) / (4 * h[i] * h[j2])
    try:
        cov = np.linalg.inv(H)
    except np.linalg.LinAlgError:
        return float(n_star), None
    grad = np.array([-2 * root / b, -2 * root**2 / b])
    var = float(grad @ cov @ grad)
    return float(n_star), (math.sqrt(var) if var > 0 else None)


# --------------------------------------------------------------------------------------------
# the analysis

def _groups(spec: DesignSpec) -> int:
    return 1 if spec.analysis == "paired" else 2


def _fill_rows(by_n: dict[int, dict[str, Any]], results: list[dict[str, Any]], spec: DesignSpec, exact: bool,
               prior: Any) -> int:
    """Put simulated figures (with Monte Carlo errors and success counts) into the curve rows; return the
    number of exact refits that failed the quality gate (left out of the figures)."""
    path = "exact" if exact else "fast"
    refits_failed = 0
    for r in results:
        row = by_n[r["n"]]
        res = r[path]
        if exact and "converged" in res:
            # refits that failed the quality gate are counted and left out, never trusted
            ok = np.asarray(res["converged"], dtype=bool)
            row["refits_failed" if r["what"] == "power" else "assurance_refits_failed"] = int((~ok).sum())
            refits_failed += int((~ok).sum())
            res = {k: np.asarray(v)[ok] for k, v in res.items() if k != "converged"}
            r = {**r, "fast": {k: np.asarray(v)[ok] if np.shape(v)[:1] == ok.shape else v
                               for k, v in r["fast"].items()}}
        if r.get("conditional"):
            row["power_conditional"], row["power_conditional_mc_se"] = _mean_se(res["success"])
            continue
        if r["what"] == "power":
            row["power"], row["power_mc_se"] = _mean_se(res["success"])
            row["_power_k"] = (int(np.sum(res["success"])), len(res["success"]))
            if exact:
                row["power_fast"], _ = _mean_se(r["fast"]["success"])
                row["power_exact_minus_fast_mc_se"] = _mean_se(res["success"].astype(float)
                                                               - r["fast"]["success"])[1]
            if "bayes" in res and prior is None:
                row["bayesian_success"], row["bayesian_success_mc_se"] = _mean_se(res["bayes"])
            if spec.target_half_width is not None:
                row["p_half_width"], row["p_half_width_mc_se"] = _mean_se(
                    r["fast"]["half_width"] <= spec.target_half_width)
        else:
            row["assurance"], row["assurance_mc_se"] = _mean_se(res["success"])
            row["_assurance_k"] = (int(np.sum(res["success"])), len(res["success"]))
            if "bayes" in res:
                row["bayesian_success"], row["bayesian_success_mc_se"] = _mean_se(res["bayes"])
    return refits_failed


def _new_row(n: int, spec: DesignSpec) -> dict[str, Any]:
    e = enrolled(n, spec.dropout)
    return {"n_per_arm": n, "n_enrolled": e, "n_per_arm_completing": n, "n_per_arm_enrolled": e,
            "total_n_enrolled": _groups(spec) * e}


def _refined(curve: list[dict[str, Any]], key: str, target: float) -> tuple[int | None, float | None, str]:
    """(n, its MC error, how) for the simulated ``key`` (power or assurance) to reach ``target``."""
    rows = [r for r in curve if f"_{key}_k" in r]
    if not rows:
        return None, None, "not simulated"
    ns = np.array([r["n_per_arm"] for r in rows])
    k = np.array([r[f"_{key}_k"][0] for r in rows])
    m = np.array([r[f"_{key}_k"][1] for r in rows])
    if k[0] / m[0] >= target:
        return int(ns[0]), None, "reached at the lowest n of n_range"
    n_star, se = refine_n(ns, k, m, target)
    if n_star is None:
        return None, None, "not reached within n_range"
    lo_hi = (int(ns[0]), int(ns[-1]))
    # allow for the Monte Carlo error: one standard error above the fitted crossing (about 84 % sure that the
    # target is reached there), rounded up
    n_int = int(min(max(math.ceil(n_star + (se or 0.0) - 1e-9), lo_hi[0]), lo_hi[1]))
    return n_int, se, ("simulated: probit fit in sqrt(n) between the grid points around the crossing, plus one "
                       "Monte Carlo standard error of n")


def design(study: Any, seed: int | None = None, exact: bool = False, executor: Any = None,
           trials: int | None = None) -> DesignResult:
    """Power, assurance, Bayesian success and sample size for the study's ``[design]`` section.

    Parameters
    ----------
    study : Study
        A study with a ``[design]`` section.
    seed : int, optional
        Seed (default the study's).
    exact : bool
        Refit every simulated trial with full MCMC.
    executor : optional
        An :mod:`uncertainty.core.parallel` executor (in-process when None).
    trials : int, optional
        Simulated trials per design point (default ``[design] trials`` or 1000; on the exact path
        ``exact_trials`` or 40).

    Returns
    -------
    DesignResult
        n per arm enrolled and completing, total N, power (analytic and simulated; for model-output
        endpoints conditional at the typical values and expected over the prior), assurance, Bayesian
        success, curves (dimensionless probabilities, subjects).
    """

    spec = parse_design(study)
    if exact and spec.responder is not None:
        raise InputError("the exact (MCMC) path refits a continuous endpoint; a responder endpoint's power is already "
                         "exact (binomial sums): leave out --exact", file=spec.file, key="design.responder",
                         value=spec.responder)
    seed = int(seed if seed is not None else getattr(study, "seed", 0) or 0)
    executor = executor or InProcess()
    notes: list[str] = list(spec.notes)
    n_trials = int(trials or (spec.exact_trials if exact else spec.trials))
    output = spec.endpoint_kind != "quantity"

    # analytic figures
    sd, sd_method = analytic_sd(study, spec)
    effect = spec.effects[0].analysis_value()
    if sd is None and spec.scale == "log":
        spec.scale_forced = "natural"
        probe = simulate_trials(study, spec, 500, 4, np.random.default_rng(seed + 104729))
        if all(np.all(v > 0) for v in probe.values()):
            spec.scale_forced = None
        else:
            notes.append(f"{spec.endpoint} takes values <= 0 in this population: analysed on the natural scale")
    typical = typical_values(study, spec) if output else None
    if sd is None:
        sd, effect = pilot_sd(study, spec, seed + 7919)
        if not math.isfinite(sd) and spec.scale == "log":  # the pilot met values <= 0 that the probe missed
            spec.scale_forced = "natural"
            notes.append(f"{spec.endpoint} takes values <= 0 in this population: analysed on the natural scale")
            sd, effect = pilot_sd(study, spec, seed + 7919)
        sd_method = (f"conditional at the typical values: simulated pilot of {PILOT_N} subjects per arm "
                     "(the effect from the same subjects without treatment)")
        notes.append("power_analytic and power_conditional are conditional on the typical subject (its values in "
                     "typical_values); power is the expected power, the typical subject drawn from the prior in "
                     "every trial; the headline n is for the expected power")
        if effect * spec.direction <= 0:
            notes.append(f"at the typical values the effect on {spec.endpoint} ({effect:.3g}) is not in the direction "
                         "of benefit")
    lo, hi = spec.n_range
    prior = spec.design_prior_frozen()
    test, margin = spec.test, spec.margin_analysis
    resp = responder_plan(study, spec, sd, effect, seed + 7919) if spec.responder is not None else None
    if resp is not None:
        p0, p1, sgn = resp["p_control"], resp["p_treated"], spec.responder_sign
        n_pow = binary.n_for_power(p0, p1, spec.alpha, spec.target_power, test, lo, hi, sgn)
        resp["n_per_arm_fleiss"] = (binary.fleiss_n(p0, p1, spec.alpha, spec.target_power, test)
                                    if sgn * (p1 - p0) > 0 else None)
        if not output:
            typical = typical_values(study, spec)
            notes.append("responder endpoint: the response probabilities, the exact power and the simulated power are "
                         f"at the typical value of {spec.output} (typical_values); assurance draws the effect from "
                         "the design prior at that value")
    else:
        n_pow = tp.n_for_power(effect, sd, spec.alpha, spec.target_power, spec.analysis, lo, hi,
                               spec.direction, test, margin) if sd > 0 else lo
    n_pow_analytic = n_pow
    n_ass = None
    if spec.target_assurance is not None and not output and resp is None:
        ns = np.arange(lo, hi + 1)
        a = tp.t_assurance(ns, prior, sd, spec.alpha, spec.analysis, direction=spec.direction, test=test,
                           margin=margin)
        hit = np.nonzero(a >= spec.target_assurance)[0]
        n_ass = int(ns[hit[0]]) if hit.size else None

    sizes = curve_sizes(spec.n_range, spec.n_points)
    for extra in (n_pow, n_ass):
        if extra is not None and extra not in sizes:
            sizes = sorted({*sizes, extra})

    def points_for(ns: list[int]) -> list[_Point]:
        pts = [_Point(n, n_trials, exact, "power") for n in ns]
        if output:
            pts += [_Point(n, n_trials, exact, "power", conditional=True) for n in ns]
        if prior is not None:
            pts += [_Point(n, n_trials, exact, "assurance") for n in ns]
        return pts

    label = f"design-{'exact' if exact else 'fast'}"
    results = executor.map(_PointTask(study, spec), points_for(sizes), seed=seed, label=label)
    by_n: dict[int, dict[str, Any]] = {n: _new_row(n, spec) for n in sizes}
    refits_failed = _fill_rows(by_n, results, spec, exact, prior)
    path = "exact" if exact else "fast"

    n_pow_se = n_ass_se = None
    n_method = ("analytic: exact noncentral t (the smallest n whose power reaches the target); simulated figures "
                "at that n beside it")
    n_ass_method = "analytic: exact t power averaged over the design prior (quadrature)" if n_ass else None
    if resp is not None and not output:
        n_method = ("analytic: exact power of the continuity-corrected z test of two proportions (binomial sums; the "
                    "smallest n whose power reaches the target); simulated figures at that n beside it")
        if spec.target_assurance is not None:
            n_ass, n_ass_se, n_ass_method = _refined([by_n[n] for n in sizes], "assurance", spec.target_assurance)
            if n_ass is not None and n_ass not in by_n:
                more = executor.map(_PointTask(study, spec), points_for([n_ass]), seed=seed + 1,
                                    label=label + "-refine")
                by_n[n_ass] = _new_row(n_ass, spec)
                refits_failed += _fill_rows(by_n, more, spec, exact, prior)
                sizes = sorted(by_n)
    if output:
        # the simulated (expected) curve decides; refined between grid points, then simulated at the refined n
        curve0 = [by_n[n] for n in sizes]
        n_pow, n_pow_se, n_method = _refined(curve0, "power", spec.target_power)
        if spec.target_assurance is not None:
            n_ass, n_ass_se, n_ass_method = _refined(curve0, "assurance", spec.target_assurance)
        new = sorted({n for n in (n_pow, n_ass) if n is not None and n not in by_n})
        if new:
            more = executor.map(_PointTask(study, spec), points_for(new), seed=seed + 1, label=label + "-refine")
            for n in new:
                by_n[n] = _new_row(n, spec)
            refits_failed += _fill_rows(by_n, more, spec, exact, prior)
            sizes = sorted(by_n)
    if refits_failed:
        notes.append(f"{refits_failed} MCMC refits failed the quality gate (R-hat, bulk or tail ESS, divergences) "
                     "and were left out of the exact power and assurance; see refits_failed per design point")
    for n, row in by_n.items():
        if resp is not None:
            row["power_analytic"] = float(binary.exact_power(n, resp["p_control"], resp["p_treated"], spec.alpha,
                                                             test, spec.responder_sign))
        else:
            row["power_analytic"] = (float(tp.t_power(n, effect, sd, spec.alpha, spec.analysis, spec.direction,
                                                      test, margin))
                                     if sd > 0 else None)
        if output:
            row["power_expected"], row["power_expected_mc_se"] = row.get("power"), row.get("power_mc_se")
        if prior is not None:
            row.setdefault("assurance", None)
            row.setdefault("assurance_mc_se", None)
            if not output and resp is None:
                row["assurance_analytic"] = float(tp.t_assurance(n, prior, sd, spec.alpha, spec.analysis,
                                                                 direction=spec.direction, test=test,
                                                                 margin=margin))
        else:
            row["assurance"], row["assurance_mc_se"] = None, None
    curve = [{k: v for k, v in by_n[n].items() if not k.startswith("_")} for n in sizes]
    if n_pow is None:
        notes.append(f"target power {spec.target_power} not reached within n_range {list(spec.n_range)}")

    at = by_n.get(n_pow) if n_pow is not None else None
    at_a = by_n.get(n_ass) if n_ass is not None else None
    groups = _groups(spec)
    e_pow, e_ass = enrolled(n_pow, spec.dropout), enrolled(n_ass, spec.dropout)
    doc: dict[str, Any] = {
        "design": spec.design,
        "analysis": {"parallel": "two-sample t test", "ancova": "ANCOVA on baseline",
                     "paired": "paired t test",
                     "crossover": "AB/BA crossover, t test on period differences"}[spec.analysis],
        "followups": spec.followups,
        "endpoint": spec.endpoint,
        "endpoint_reads": spec.output,
        "scale": spec.scale,
        "benefit": "increase" if spec.direction > 0 else "decrease",
        "effect": [{"parameter": e.parameter, e.kind: e.value, "analysis_scale": e.analysis_value()}
                   for e in spec.effects],
        "effect_analysis_scale": effect,
        "alpha": spec.alpha,
        "sided": ("two-sided test, success only in the direction of benefit" if test == "two_sided" else
                  "one-sided test in the direction of benefit"),
        "test": test,
        "test_text": spec.test_text,
        "margin": spec.margin,
        "margin_analysis_scale": margin if test == "non_inferiority" else None,
        "target_power": spec.target_power,
        "target_assurance": spec.target_assurance,
        "dropout": spec.dropout,
        "sd_analysis_scale": sd,
        "sd_method": sd_method,
        "n_per_arm": e_pow,
        "n_per_arm_analysed": n_pow,
        "n_per_arm_enrolled": e_pow,
        "n_per_arm_completing": n_pow,
        "total_n_enrolled": None if e_pow is None else groups * e_pow,
        "total_n_completing": None if n_pow is None else groups * n_pow,
        "groups": groups,
        "n_method": n_method,
        "n_per_arm_mc_se": n_pow_se,
        "n_per_arm_assurance": e_ass,
        "n_per_arm_assurance_analysed": n_ass,
        "n_per_arm_assurance_enrolled": e_ass,
        "n_per_arm_assurance_completing": n_ass,
        "total_n_assurance_enrolled": None if e_ass is None else groups * e_ass,
        "n_assurance_method": n_ass_method,
        "n_per_arm_assurance_mc_se": n_ass_se,
        "power": at["power"] if at else None,
        "power_mc_se": at["power_mc_se"] if at else None,
        "power_analytic": at["power_analytic"] if at else None,
        "assurance": at["assurance"] if at else None,
        "assurance_mc_se": at["assurance_mc_se"] if at else None,
        "assurance_at_n_assurance": at_a["assurance"] if at_a else None,
        "assurance_at_n_assurance_mc_se": at_a["assurance_mc_se"] if at_a else None,
        "assurance_analytic_at_n_assurance": at_a.get("assurance_analytic") if at_a else None,
        "bayesian_success": at.get("bayesian_success") if at else None,
        "bayesian_success_mc_se": at.get("bayesian_success_mc_se") if at else None,
        "path": path,
        "trials_per_point": n_trials,
        "seed": seed,
        "curve": curve,
        "notes": notes,
        "units": {"n_per_arm": "subjects per arm (enrolled, after dropout); the curve's n_per_arm is completing",
                  "n_per_arm_enrolled": "subjects per arm to enrol: ceil(completing / (1 - dropout))",
                  "n_per_arm_completing": "subjects per arm analysed (completing)",
                  "total_n_enrolled": "subjects in all arms together (enrolled)", "power": "1",
                  "sd_analysis_scale": "log units" if spec.scale == "log" else _unit_of(spec)},
    }
    if output:
        doc["power_conditional"] = at.get("power_conditional") if at else None
        doc["power_conditional_mc_se"] = at.get("power_conditional_mc_se") if at else None
        doc["power_expected"] = doc["power"]
        doc["power_expected_mc_se"] = doc["power_mc_se"]
        doc["typical_values"] = typical
        doc["n_per_arm_conditional_completing"] = n_pow_analytic
        doc["n_per_arm_conditional_enrolled"] = enrolled(n_pow_analytic, spec.dropout)
    if spec.target_half_width is not None and sd > 0:
        n_hw = tp.n_for_half_width(sd, spec.target_half_width, spec.half_width_probability, spec.alpha,
                                   spec.analysis, lo, hi)
        doc["half_width"] = {
            "target": spec.target_half_width, "probability_target": spec.half_width_probability,
            "n_per_arm": enrolled(n_hw, spec.dropout), "n_per_arm_analysed": n_hw,
            "probability": (float(tp.half_width_probability(n_hw, sd, spec.target_half_width, spec.alpha,
                                                            spec.analysis)) if n_hw else None),
        }
    if resp is not None:
        doc["analysis"] = "responders, z test of two proportions with continuity correction"
        doc["responder"] = resp
        doc.setdefault("typical_values", typical)
    if resp is None and not output:
        bayes = bayes_n.plan(spec, sd, n_pow, spec.bayes_width, spec.bayes_success)
        if bayes is not None:
            doc["bayesian_sample_size"] = bayes
    if spec.looks > 1 and n_pow is not None:
        doc["group_sequential"] = sequential_plan(spec, n_pow)
    doc["assumptions"] = assumptions(study, spec, doc)
    return DesignResult(doc)


def responder_plan(study: Any, spec: DesignSpec, sd: float, effect: float, seed: int) -> dict[str, Any]:
    """Response probabilities of a responder endpoint in the control and treated arms.

    Quantity endpoint: the endpoint is normal on the analysis scale (log for a ratio effect), centred on the
    typical value (``[design] typical`` or the prior median) with the total sd ``sd`` (between-subject,
    within-subject and measurement spreads), shifted by ``effect`` on treatment
    (:func:`binary.proportions`). Model-output endpoint: the fractions beyond the cut in a pilot of
    :data:`PILOT_N` subjects per arm at the typical values.

    Parameters
    ----------
    study, spec : the study and its parsed section (``spec.responder`` set).
    sd, effect : float
        sd and effect on the analysis scale (log units or the endpoint's canonical unit).
    seed : int
        Seed of the pilot (model-output endpoints).

    Returns
    -------
    dict
        ``cut`` (canonical unit), ``side``, ``p_control``, ``p_treated`` (dimensionless), ``more_is_benefit``
        (bool), ``method``.
    """
    cut, side = spec.responder["cut"], spec.responder["side"]
    if spec.endpoint_kind == "quantity":
        level = typical_values(study, spec)[spec.output]
        mean = math.log(level) if spec.scale == "log" else level
        p0, p1 = binary.proportions(mean, sd, effect, spec.responder_cut_analysis, side)
        how = (f"normal on the {spec.scale} scale around the typical {spec.output} {level:.4g} with sd {sd:.4g} "
               "(closed form)")
    else:
        typ = typical_values(study, spec)
        data = simulate_trials(study, spec, PILOT_N, 1, np.random.default_rng(seed), typical=typ)
        c = spec.responder_cut_analysis
        with np.errstate(invalid="ignore"):
            frac = [float(np.mean(data[k] < c if side == "below" else data[k] > c)) for k in ("y0", "y1")]
        p0, p1 = frac
        how = f"fractions beyond the cut in a simulated pilot of {PILOT_N} subjects per arm at the typical values"
    return {"cut": cut, "side": side, "p_control": p0, "p_treated": p1,
            "more_is_benefit": spec.responder_sign > 0, "method": how}


def sequential_plan(spec: DesignSpec, n_fixed: int) -> dict[str, Any]:
    """The group-sequential version of a fixed design of ``n_fixed`` completing subjects per arm.

    ``spec.looks`` equally spaced looks, two-sided Lan-DeMets boundaries of ``spec.spending`` shape at
    ``spec.alpha``, power ``spec.target_power`` at the upper (benefit) boundary
    (:func:`group_sequential.design_summary`, normal statistics with independent increments). With
    ``spec.futility`` a non-binding beta-spending futility bound of that shape is added
    (:func:`group_sequential.futility_design`): the power then holds with the futility rule followed, and
    the type I error stays at most ``alpha`` whether or not it is followed.

    Parameters
    ----------
    spec : DesignSpec
        The parsed section (looks, spending, futility, alpha, target power, dropout).
    n_fixed : int
        Completing subjects per arm of the fixed design.

    Returns
    -------
    dict
        ``looks``, ``spending``, ``futility``, ``information_fractions``, ``boundaries_z`` (dimensionless),
        ``futility_z`` (Z in the direction of benefit, or None), ``alpha_spent`` / ``beta_spent``
        (cumulative), ``inflation`` (dimensionless), ``n_per_arm_max_completing`` / ``_enrolled`` (subjects
        per arm, rounded up), ``n_per_arm_at_looks`` (completing, cumulative), ``expected_n_per_arm_null`` /
        ``_alternative`` (completing, subjects per arm), ``stop_null`` / ``stop_alternative`` (per look: the
        probability of stopping for efficacy, for futility or harm, and in all, dimensionless).
    """
    t = np.arange(1, spec.looks + 1) / spec.looks
    if spec.futility:
        s = gs.futility_design(t, spec.alpha, spec.target_power, spec.spending, spec.futility, float(n_fixed))
        ex0, ex1 = s["stop_null"], s["stop_alternative"]
        stop0 = {"efficacy": ex0["efficacy"], "futility": ex0["futility"]}
        stop1 = {"efficacy": ex1["efficacy"], "futility": ex1["futility"]}
        method = ("Lan-DeMets alpha spending, equally spaced looks, normal approximation (independent increments); "
                  f"non-binding futility bound by {spec.futility} beta spending (Pampallona, Tsiatis & Kim 2001): "
                  "the efficacy bounds ignore it, the maximum n gives the target power with it followed")
    else:
        s = gs.design_summary(t, spec.alpha, spec.target_power, spec.spending, float(n_fixed))
        theta = (stats.norm.ppf(1 - spec.alpha / 2) + stats.norm.ppf(spec.target_power)) * math.sqrt(s["inflation"])
        e0, e1 = gs.exit_probabilities(t, s["boundaries"], 0.0), gs.exit_probabilities(t, s["boundaries"], theta)
        stop0 = {"efficacy": e0["upper"], "futility": e0["lower"]}
        stop1 = {"efficacy": e1["upper"], "futility": e1["lower"]}
        method = ("Lan-DeMets alpha spending, equally spaced looks, normal approximation (independent "
                  "increments); the maximum n is the fixed n times the inflation factor")

    def stops(d: dict[str, np.ndarray]) -> dict[str, list[float]]:
        tot = d["efficacy"] + d["futility"]
        tot[-1] = 1 - tot[:-1].sum()
        return {"efficacy": [float(v) for v in d["efficacy"]], "futility_or_harm": [float(v) for v in d["futility"]],
                "any": [float(v) for v in tot]}

    n_max = int(math.ceil(float(s["n_max"]) - 1e-9))
    return {"looks": spec.looks, "spending": spec.spending, "futility": spec.futility,
            "information_fractions": t.tolist(),
            "boundaries_z": [float(c) for c in s["boundaries"]],
            "futility_z": [float(b) for b in s["futility_z"]] if spec.futility else None,
            "alpha_spent": [float(a) for a in s["alpha_spent"]],
            "beta_spent": [float(a) for a in s["beta_spent"]] if spec.futility else None,
            "inflation": float(s["inflation"]),
            "n_per_arm_fixed_completing": int(n_fixed), "n_per_arm_max_completing": n_max,
            "n_per_arm_max_enrolled": enrolled(n_max, spec.dropout),
            "n_per_arm_at_looks": [int(math.ceil(n_max * f - 1e-9)) for f in t],
            "expected_n_per_arm_null": float(s["expected_n_null"]) * n_max / float(s["n_max"]),
            "expected_n_per_arm_alternative": float(s["expected_n_alternative"]) * n_max / float(s["n_max"]),
            "stop_null": stops(stop0), "stop_alternative": stops(stop1),
            "method": method}


def assumptions(study: Any, spec: DesignSpec, doc: dict[str, Any]) -> list[dict[str, str]]:
    """The design assumptions a protocol states, each with its value and where it comes from.

    Parameters
    ----------
    study : Study
        The study (priors with their origins).
    spec : DesignSpec
        The parsed section.
    doc : dict
        The result document so far (sd, effect on the analysis scale).

    Returns
    -------
    list of dict
        ``{"what", "value", "source"}`` rows (values in canonical units, log units for ratios).
    """
    src = "study [design]" + (f" ({spec.file})" if spec.file else "")
    rows = [{"what": "design and analysis", "value": f"{spec.design}, {doc['analysis']}", "source": src},
            {"what": "endpoint", "value": f"{spec.endpoint} (reads {spec.output}, {spec.scale} scale)", "source": src}]
    for e in spec.effects:
        rows.append({"what": f"effect on {e.parameter}", "value": f"{e.kind} {e.value:g}", "source": src})
    rows.append({"what": "direction of benefit", "value": doc["benefit"],
                 "source": src if spec.benefit else "the sign of the effect"})
    rows.append({"what": "significance", "value": spec.test_text, "source": src})
    if spec.test == "non_inferiority":
        rows.append({"what": "non-inferiority margin", "value": f"{spec.margin:g} ({doc['margin_analysis_scale']:.4g} "
                     f"on the {spec.scale} scale)", "source": src})
    rows.append({"what": "target power", "value": f"{spec.target_power:g}", "source": src})
    if spec.looks > 1:
        rows.append({"what": "interim analyses", "value": f"{spec.looks} equally spaced looks, Lan-DeMets "
                     f"{spec.spending} spending", "source": src})
        if spec.futility:
            rows.append({"what": "futility rule", "value": f"non-binding, {spec.futility}-shaped beta spending",
                         "source": src})
    if spec.target_assurance is not None:
        rows.append({"what": "target assurance", "value": f"{spec.target_assurance:g}", "source": src})
    rows.append({"what": "dropout", "value": f"{spec.dropout:g}", "source": src})
    for sym in sorted({spec.output, *(e.parameter for e in spec.effects)} & set(study.priors)):
        pr = study.priors[sym]
        bs = spec.between.get(sym) or pr.between_subject
        origin = getattr(pr, "origin", "") or "study [parameters]"
        rows.append({"what": f"between-subject spread of {sym}", "value": _spec_text(bs),
                     "source": "study [design]" if spec.between.get(sym) else origin})
    for sym, sp in spec.within.items():
        rows.append({"what": f"within-subject (occasion) spread of {sym}", "value": _spec_text(sp), "source": src})
    if spec.followups > 1:
        rows.append({"what": "repeated measures", "value": f"{spec.followups} follow-up readings per subject, their "
                     "mean analysed; compound symmetry (one between-subject correlation rho for every pair of "
                     "occasions)", "source": src})
    if spec.design == "crossover":
        rows.append({"what": "crossover periods", "value": "two periods, sequences AB and BA of equal size; no "
                     "carry-over (an adequate washout); a period effect cancels in the analysis", "source": src})
    rows.append({"what": "measurement error", "value": _spec_text(spec.measurement), "source": src})
    resp = doc.get("responder")
    if resp:
        unit = units.CANONICAL.get(spec.output, "")
        rows.append({"what": "responder", "value": f"{spec.output} {resp['side']} {resp['cut']:g} {unit}".strip(),
                     "source": src})
        rows.append({"what": "response probabilities (control, treated)",
                     "value": f"{resp['p_control']:.4f}, {resp['p_treated']:.4f}", "source": resp["method"]})
    for sym, v in (doc.get("typical_values") or {}).items():
        pr = study.priors[sym]
        unit = "" if units.CANONICAL.get(sym) == "1" else units.CANONICAL.get(sym, "")   # no "1" after a ratio
        rows.append({"what": f"typical {sym} (conditional power)", "value": f"{v:.4g} {unit}".strip(),
                     "source": src + " typical" if sym in spec.typical else _prior_source(pr)})
    rows.append({"what": "sd of the endpoint (analysis scale)", "value": f"{doc['sd_analysis_scale']:.4g}",
                 "source": doc["sd_method"]})
    if spec.design_prior is not None:
        rows.append({"what": "design prior (analysis-scale effect)", "value": _spec_text(spec.design_prior),
                     "source": src})
    if spec.analysis_prior is not None:
        rows.append({"what": "analysis prior", "value": _spec_text(spec.analysis_prior), "source": src})
    return rows


def _unit_of(spec: DesignSpec) -> str:
    if spec.timepoint is not None:
        return spec.timepoint.unit
    return units.CANONICAL.get(spec.output, "")


def _spec_text(spec: Any) -> str:
    """A spread, error or prior specification as protocol text: ``{'dist': 'normal', 'mean': -0.29, 'sd':
    0.15}`` -> ``normal, mean -0.29, sd 0.15``; ``{'cv': 0.38}`` -> ``cv 0.38``; nothing -> ``none``."""
    if not spec:
        return "none"
    if isinstance(spec, Mapping):
        parts = [str(spec["dist"])] if "dist" in spec else []
        parts += [f"{k} {v:g}" if isinstance(v, float | int) else f"{k} {v}" for k, v in spec.items() if k != "dist"]
        return ", ".join(parts)
    return str(spec)


def _prior_source(prior: Any) -> str:
    """Source of a prior median in the protocol table: its origin, and a condition's change where the
    study's conditions moved it (recorded in the prior's note)."""
    origin = getattr(prior, "origin", "") or "study [parameters]"
    note = getattr(prior, "note", "") or ""
    changed = f"; {note.strip('[]')}" if "modified by condition" in note else ""
    return f"prior median{changed}; {origin}"
