"""The study-file schema: one strict pydantic model per section (unknown keys and wrong types are errors).
"""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any, Literal

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    PrivateAttr,
    RootModel,
    ValidationInfo,
    field_validator,
    model_validator,
)

from uncertainty.core import units
from uncertainty.core.errors import UnitError
from uncertainty.forms.catalogue import MODEL_FORMS, OUTPUT_UNITS
from uncertainty.priors import (
    Prior,
)
from uncertainty.study.thresholds import threshold_in_unit

#: Longest text a study key may hold (characters): titles and descriptions are a few hundred
#: (common practice: an absurdity bound); names have their own, shorter bound (:data:`MAX_NAME`).
MAX_TEXT = 10_000
#: Longest name (tissue, quantity, file, candidate...), characters (common practice: file systems cap a
#: file name at 255 bytes).
MAX_NAME = 200
#: Largest coefficient of variation accepted for an error or a spread (dimensionless): 10 is 1000 %,
#: past any measurement or between-subject spread (common practice: an absurdity bound).
MAX_CV = 10.0

STRICT_CONFIG = ConfigDict(extra="forbid", strict=True, allow_inf_nan=False, str_max_length=MAX_TEXT)


Number = float  # strict mode accepts int for float

#: Most subjects per arm a design may consider (common practice: an absurdity bound; the largest
#: trials enrol tens of thousands).
MAX_ARM = 100_000


def max_at_least_samples(cls: type, v: int | None, info: ValidationInfo) -> int | None:
    """Field validator of ``max_samples`` (propagate, rank): not below ``samples`` (draws)."""
    samples = info.data.get("samples")
    if v is not None and isinstance(samples, int) and v < samples:
        raise ValueError(f"max_samples is below samples ({samples})")
    return v


class StudySection(BaseModel):
    """``[study]``: what the study is about. ``tissue`` is required; ``seed`` defaults to 1."""

    model_config = STRICT_CONFIG
    title: str = ""
    tissue: str = Field(max_length=64, pattern=r"^[A-Za-z0-9_-]+$")
    conditions: list[str] = Field(default_factory=list, max_length=50)
    model: Literal[MODEL_FORMS] = "classic"  # type: ignore[valid-type]  # the form catalogue's names
    seed: int = Field(default=1, ge=0, lt=2**63)
    tissue_mass: float | str | None = None
    posture_height: float | str | None = None
    body_mass: float | str | None = None  # whole_body form: body mass (kg, or "73 kg"); scales the tissue beds
    description: str = ""
    note: str = ""


class CorrelationsSection(BaseModel):
    """``[correlations]``: ``pairs = [[a, b, rho], ...]`` (normal-score correlations of the typical
    values) and ``between_subject = [[a, b, rho], ...]`` (of the between-subject layer)."""

    model_config = STRICT_CONFIG
    pairs: list[list[str | float]] = Field(default_factory=list)
    between_subject: list[list[str | float]] = Field(default_factory=list)


class Threshold(BaseModel):
    """One threshold question: ``{ output = "Jv", above = "0.02 mL/min/100g" }`` (or ``below =``)."""

    model_config = STRICT_CONFIG
    output: str = Field(description="the output asked about (an output name of the model form)")
    above: float | str | None = Field(default=None, description=(
        "P(output > above): a number in the output's canonical unit or a string with a unit"))
    below: float | str | None = Field(default=None, description=(
        "P(output < below): a number in the output's canonical unit or a string with a unit"))

    @field_validator("output")
    @classmethod
    def _known(cls, v: str) -> str:
        if v not in OUTPUT_UNITS:
            raise ValueError(f"no such output; outputs are {', '.join(sorted(OUTPUT_UNITS))}")
        return v

    @field_validator("above", "below")
    @classmethod
    def _value(cls, v: float | str | None, info: ValidationInfo) -> float | str | None:
        # a whole-organ value is converted with the study's tissue_mass when propagate runs; here the
        # number and the unit's dimension are checked (1 kg stands in for the mass)
        output = info.data.get("output")
        if v is not None and output is not None:
            try:
                threshold_in_unit(output, v, tissue_mass_kg=1.0, key=info.field_name or "value")
            except UnitError as exc:
                raise ValueError(exc.reason) from None
        return v

    @model_validator(mode="after")
    def _one_side(self) -> Threshold:
        if (self.above is None) == (self.below is None):
            raise ValueError("give exactly one of `above` and `below`")
        return self


class PropagateSection(BaseModel):
    """``[propagate]``: forward uncertainty; every key is optional (``uncertainty.analyses.propagate`` defaults)."""

    model_config = STRICT_CONFIG
    samples: int = Field(default=16384, gt=0, le=2**26, description=(
        "draws per randomised replicate set in all; a power of two for qmc (rounded up with a note)"))
    method: Literal["mc", "qmc", "lhs"] = Field(default="qmc", description=(
        "mc (plain Monte Carlo), qmc (scrambled Sobol' points), lhs (Latin hypercube)"))
    outputs: list[str] | None = Field(default=None, min_length=1, max_length=100, description=(
        "outputs to summarise; default every output of the model form (Jv, net_pressure and each force first)"))
    replicates: int = Field(default=16, ge=16, le=1024, description=(
        "independent randomised replicates for the Monte Carlo standard errors (at least 16 scrambles)"))
    tol: float | None = Field(default=None, gt=0, description=(
        "keep doubling the sample until the 95% Monte Carlo margin of the 95% interval ends is below tol "
        "(output units)"))
    max_samples: int | None = Field(default=None, gt=0, le=2**26, description=(
        "with tol: the largest sample; reaching it first exits 3"))
    thresholds: list[Threshold] = Field(default_factory=list, description=(
        "threshold questions, e.g. [{ output = \"Jv\", above = \"0.02 mL/min/100g\" }]: P(output above or below "
        "the value) per layer with its Monte Carlo error and each input's first-order share of the indicator's "
        "variance"))

    _max_samples = field_validator("max_samples")(max_at_least_samples)


class SensitivitySection(BaseModel):
    """``[sensitivity]``: global sensitivity of one output; every key is optional."""

    model_config = STRICT_CONFIG
    method: Literal["sobol", "morris", "shapley"] | None = Field(default=None, description=(
        "default: sobol for independent inputs, shapley when the study correlates inputs (sobol and morris "
        "refuse correlated inputs)"))
    samples: int | None = Field(default=None, gt=0, le=2**24, description=(
        "base sample size; default 8192 (sobol), 64 trajectories (morris), 8192 random orders (shapley)"))
    output: str = Field(default="Jv", description=(
        "the output whose variance is apportioned; in a whole_body study also a time course at a time, written "
        "\"NAME at TIME\" (e.g. \"infused_retained_fraction at 60 min\", \"hb_ratio at 2 h\"; the time after 0 "
        "and at most [timeline] end), or \"NAME over time\" for the indices at every report time"))
    layer: Literal["individual", "typical"] = Field(default="individual", description=(
        "individual: each quantity's typical and between-subject parts as one factor; typical: the "
        "typical-subject uncertainty only"))
    second_order: bool = Field(default=False, description="sobol: also the second-order indices S2")
    levels: int = Field(default=4, ge=2, le=64, description=(
        "morris: grid levels (even), kept inside the open unit cube"))

    @field_validator("levels")
    @classmethod
    def _even(cls, v: int) -> int:
        if v % 2:
            raise ValueError("Morris levels must be even")
        return v


class StepSpec(BaseModel):
    """One venous-cuff step: ``{ parameter = "Pv", to = 30, unit = "mmHg" }`` (``at_min`` in a protocol)."""

    model_config = STRICT_CONFIG
    parameter: str = "Pv"
    to: float
    unit: str | None = None
    at_min: float | None = Field(default=None, ge=0)


#: Time units a data file's time column may be in, with their length in minutes (exact).
TIME_UNITS: dict[str, float] = {"s": 1.0 / 60.0, "min": 1.0, "h": 60.0, "day": 1440.0}


class TimeColumn(BaseModel):
    """A time column with its unit: ``time = { column = "t_s", unit = "s" }``."""

    model_config = STRICT_CONFIG
    column: str = Field(min_length=1, description="the column's name in the file's first line")
    unit: Literal["s", "min", "h", "day"] = Field(description="unit of the times: s, min, h or day")


class ColumnMap(BaseModel):
    """``columns = { subject = "patient_id", time = "day", value = "COP_mmHg" }``: which column of an
    observation's data file plays which part. Every key is optional; a key left out means the column of
    that name (``subject``, ``group``, one of ``time_s`` / ``time_min`` / ``time_h`` / ``time_day``,
    ``value`` (``volume`` for a volume_time_course), ``sd``). Columns the map does not name are not read,
    so one wide file (a column per quantity) serves several observations, each naming its value column."""

    model_config = STRICT_CONFIG
    subject: str | None = Field(default=None, min_length=1)
    group: str | None = Field(default=None, min_length=1)
    time: str | TimeColumn | None = None
    value: str | None = Field(default=None, min_length=1)
    sd: str | None = Field(default=None, min_length=1)


class Observation(BaseModel):
    """One ``[[observations]]`` entry. ``kind`` decides which keys are required (see ``_check_kind``).

    Values are converted to canonical units after validation (``value``, ``sd``; ``unit`` becomes the
    canonical unit and ``declared_unit`` keeps what was written). CSV rows of ``file`` are in ``data``.
    """

    model_config = STRICT_CONFIG
    kind: Literal["measurement", "lymph_flow", "clearance_rate", "swelling_rate", "volume_time_course",
                  "protein_ratio", "GFR", "RPF", "filtration_fraction", "body_weight", "fluid_balance",
                  "haemoglobin", "haematocrit", "urine", "plasma_protein"]
    name: str | None = None
    parameter: str | None = None
    value: float | None = None
    sd: float | None = Field(default=None, gt=0)
    cv: float | None = Field(default=None, gt=0, le=MAX_CV)
    unit: str | None = None
    instrument: str | None = Field(default=None, min_length=1, max_length=MAX_NAME)
    file: str | None = Field(default=None, max_length=MAX_NAME)
    columns: ColumnMap | None = None
    subject: str | int | None = None
    group: str | None = None
    step: StepSpec | None = None
    steps: list[StepSpec] | None = None
    note: str = ""
    declared_unit: str | None = None
    # inference extras (uncertainty/analyses/inference/observations/*): a distribution-volume prior for
    # clearance_rate, a lymph-flow prior for swelling_rate, quantities given a group effect,
    # and where lymph was collected for lymph_flow
    volume: Any = None
    lymph: Any = None
    effects: list[str] | None = Field(default=None, max_length=20)
    site: Literal["pre_nodal", "post_nodal"] | None = None
    # plasma_protein: which plasma protein the readings measure (total protein when left out)
    protein: Literal["total", "albumin"] | None = None
    # urine: what each reading is, the cumulative volume since time 0 (default) or the mean flow since the
    # subject's previous reading
    how: Literal["cumulative", "rate"] | None = None
    # body_weight / fluid_balance: the organ's share of the body's net fluid gain (a prior declaration)
    share: Any = None
    # volume_time_course: fit every k-th reading of each subject (1 = all)
    every: int | None = Field(default=None, ge=1)
    _data: dict[str, list] | None = PrivateAttr(default=None)
    _path: Path | None = PrivateAttr(default=None)

    @field_validator("declared_unit")
    @classmethod
    def _declared_unit_is_the_loaders(cls, v: str | None) -> str | None:
        # the loader records the unit as written here after converting value and sd; written in a study
        # file it would mark a reading as converted when it is not
        if v is not None:
            raise ValueError("declared_unit is set by the loader, not in a study file: give the unit as unit = ...")
        return v

    @field_validator("cv")
    @classmethod
    def _cv_needs_positive_value(cls, v: float | None, info: ValidationInfo) -> float | None:
        value = info.data.get("value")
        if v is not None and isinstance(value, int | float) and not value > 0:
            raise ValueError(f"a cv (lognormal) error needs a positive value (value = {value:g})")
        return v

    @property
    def data(self) -> dict[str, list] | None:
        """Columns of the validated CSV file (numeric columns as floats), or None."""
        return self._data

    @property
    def path(self) -> Path | None:
        """The resolved data file, or None."""
        return self._path

    def with_data(self, path: Path, data: dict[str, list]) -> Observation:
        """A copy that carries its validated data file.

        Parameters
        ----------
        path : Path
            The resolved CSV file.
        data : dict of str to list
            Its columns (numeric columns as floats, in the canonical units the file states).

        Returns
        -------
        Observation
            A new record; this one is not changed.
        """
        new = self.model_copy()
        new._path, new._data = path, data
        return new

    @model_validator(mode="after")
    def _check_kind(self) -> Observation:
        k = self.kind
        if self.sd is not None and self.cv is not None:
            raise ValueError("give sd or cv, not both")
        if self.columns is not None and self.file is None:
            raise ValueError("columns maps the columns of a data file: give file = ... too")
        if k == "measurement" and self.parameter is None:
            raise ValueError("a measurement names its parameter")
        if k != "measurement" and k != "volume_time_course" and self.parameter is not None and k != "clearance_rate":
            raise ValueError(f"a {k} observation takes no parameter")
        if k == "volume_time_course":
            if self.file is None:
                raise ValueError("a volume_time_course needs a data file (file = ...)")
            if (self.step is None) == (self.steps is None):
                raise ValueError("give step = {...} or steps = [...] (one of them)")
            if self.steps is not None:
                if not self.steps:
                    raise ValueError("steps is empty")
                times = [s.at_min if s.at_min is not None else math.nan for s in self.steps]
                if any(math.isnan(t) for t in times):
                    raise ValueError("each step of a protocol needs at_min")
                if any(b <= a for a, b in zip(times, times[1:], strict=False)):
                    raise ValueError("step times (at_min) must increase")
        else:
            if self.step is not None or self.steps is not None:
                raise ValueError(f"a {k} observation takes no step / steps")
            if self.every is not None:
                raise ValueError(f"a {k} observation takes no every (volume_time_course only)")
            if self.value is None and self.file is None:
                raise ValueError(f"a {k} observation needs value (or a data file)")
            if self.value is not None and self.file is not None:
                raise ValueError("give value or file, not both")
            if self.sd is None and self.cv is None and self.instrument is None and self.file is None:
                raise ValueError("give the measurement error: sd, cv or instrument")
        if self.protein is not None and k != "plasma_protein":
            raise ValueError(f"a {k} observation takes no protein (plasma_protein only)")
        if self.how is not None and k != "urine":
            raise ValueError(f"a {k} observation takes no how (urine only: cumulative or rate)")
        if k in ("haemoglobin", "haematocrit", "urine", "plasma_protein") and self.file is None:
            raise ValueError(f"a {k} observation needs a data file (subject, time, value)")
        if k in ("body_weight", "fluid_balance"):
            if self.file is None:
                raise ValueError(f"a {k} observation needs a data file (subject, time, value)")
            # the share is required in resolve: a whole_body study balances the body itself and takes none
            if self.cv is not None:
                raise ValueError(f"a {k} reading takes a normal error (sd): a change can be zero or negative")
        elif self.share is not None:
            raise ValueError(f"a {k} observation takes no share (body_weight / fluid_balance only)")
        if k == "filtration_fraction" and self.value is not None and not 0 < self.value < 1:
            raise ValueError("a filtration fraction lies strictly between 0 and 1 (GFR below renal plasma flow)")
        if k == "protein_ratio" and self.value is not None and not 0 < self.value <= 1.5:
            raise ValueError("a protein concentration ratio lies between 0 and about 1")
        return self


class Candidate(BaseModel):
    """One ``[rank]`` candidate measurement: parameter, noise (sd / cv / instrument), cost (default 1)."""

    model_config = STRICT_CONFIG
    name: str = Field(min_length=1, max_length=MAX_NAME)
    parameter: str
    sd: float | None = Field(default=None, gt=0)
    cv: float | None = Field(default=None, gt=0, le=MAX_CV)
    unit: str | None = None
    instrument: str | None = Field(default=None, min_length=1, max_length=MAX_NAME)
    cost: float = Field(default=1.0, gt=0)
    n: int = Field(default=1, gt=0, le=10**6)

    @model_validator(mode="after")
    def _noise(self) -> Candidate:
        given = sum(x is not None for x in (self.sd, self.cv, self.instrument))
        if given == 0:
            raise ValueError("give the candidate's noise: sd, cv or instrument")
        if self.sd is not None and self.cv is not None:
            raise ValueError("give sd or cv, not both")
        return self


class RankSection(BaseModel):
    """``[rank]``: candidate measurements; optional ``budget``; output Jv; 4096 samples by default; optional
    ``tol`` (relative) and ``max_samples`` for precision on demand."""

    model_config = STRICT_CONFIG
    candidates: list[Candidate] = Field(default_factory=list, max_length=100)  # empty: instruments.toml for the tissue
    budget: float | None = Field(default=None, gt=0)
    output: str = Field(default="Jv", description=(
        "the output whose interval the readings narrow; in a whole_body study also a time course at a time, "
        "\"NAME at TIME\" (e.g. \"infused_retained_fraction at 60 min\")"))
    samples: int = Field(default=4096, gt=0, le=2**22)
    tol: float | None = Field(default=None, gt=0, lt=1, description=(
        "keep doubling the draws until the 95% Monte Carlo half-width of every candidate's expected variance "
        "reduction is below tol times that reduction (relative)"))
    max_samples: int | None = Field(default=None, gt=0, le=2**22, description=(
        "with tol: the most draws; reaching it first exits 3"))

    _max_samples = field_validator("max_samples")(max_at_least_samples)

    @field_validator("candidates")
    @classmethod
    def _unique(cls, v: list[Candidate]) -> list[Candidate]:
        names = [c.name for c in v]
        dup = {n for n in names if names.count(n) > 1}
        if dup:
            raise ValueError(f"candidate names must be unique: {sorted(dup)}")
        return v


class Spread(BaseModel):
    """``{ sd = .. }`` or ``{ cv = .. }`` (sd in the quantity's canonical unit)."""

    model_config = STRICT_CONFIG
    sd: float | None = Field(default=None, gt=0)
    cv: float | None = Field(default=None, gt=0, le=MAX_CV)

    @model_validator(mode="after")
    def _one(self) -> Spread:
        if (self.sd is None) == (self.cv is None):
            raise ValueError("give exactly one of sd or cv")
        return self


class Effect(BaseModel):
    """``effect = { parameter = "Kf", multiply = 0.7 }`` or ``{ parameter = "Pc", shift = -3 }``."""

    model_config = STRICT_CONFIG
    parameter: str
    multiply: float | None = Field(default=None, gt=0, le=1000, ge=1e-3)  # absurdity bound: a 1000-fold change
    shift: float | None = None
    unit: str | None = None

    @model_validator(mode="after")
    def _one(self) -> Effect:
        if (self.multiply is None) == (self.shift is None):
            raise ValueError("give exactly one of multiply or shift")
        return self


class Responder(BaseModel):
    """``[design] responder``: a binary endpoint; a subject responds when the endpoint lies ``side`` of ``cut``."""

    model_config = STRICT_CONFIG
    cut: float = Field(allow_inf_nan=False)
    side: Literal["below", "above"] | None = None


class DesignSection(BaseModel):
    """``[design]``: trial sizing. Defaults: parallel, endpoint Jv, two-sided test, alpha 0.05, power 0.8,
    no dropout, n from 10 to 200 per arm; ``design_prior`` / ``analysis_prior`` are declarations
    (parsed into ``Prior`` objects in ``design_prior_obj`` / ``analysis_prior_obj``)."""

    model_config = STRICT_CONFIG
    design: Literal["parallel", "paired", "crossover"] = "parallel"
    endpoint: str = Field(default="Jv", description=(
        "a quantity, a model output or an observation kind; in a whole_body study also a time course at a time, "
        "\"NAME at TIME\" (e.g. \"hb_ratio at 60 min\")"))
    effect: Effect
    between_subject: dict[str, Spread] = Field(default_factory=dict)
    within_subject: dict[str, Spread] = Field(default_factory=dict)
    measurement: Spread | None = None
    alpha: float = Field(default=0.05, gt=0, lt=1)
    target_power: float = Field(default=0.8, gt=0, lt=1)
    target_assurance: float | None = Field(default=None, gt=0, lt=1)
    dropout: float = Field(default=0.0, ge=0, lt=1)
    n_range: list[int] = Field(default_factory=lambda: [10, 200], min_length=2, max_length=2)
    design_prior: dict[str, Any] | None = None
    analysis_prior: dict[str, Any] | None = None
    simulations: int = Field(default=2000, ge=100, le=10**7)
    # trial-design extensions (uncertainty/analyses/design/): ANCOVA on a baseline, further effects of the same
    # treatment (fixed; the design prior is over `effect`), curve points, exact-path trials, half-width
    baseline: bool = False
    extra_effects: list[Effect] = Field(default_factory=list)
    n_points: int = Field(default=10, ge=2, le=100)
    exact_trials: int = Field(default=40, ge=2, le=10**5)
    target_half_width: float | None = Field(default=None, gt=0)
    half_width_probability: float = Field(default=0.8, gt=0, lt=1)
    benefit: Literal["increase", "decrease"] | None = None
    typical: dict[str, float] = Field(default_factory=dict)
    # the test of one trial: two-sided (alpha two-sided), one-sided or non-inferiority (alpha one-sided);
    # margin: the loss of benefit tolerated, in the endpoint's unit for a shift, a ratio for a ratio effect
    test: Literal["two_sided", "one_sided", "non_inferiority"] = "two_sided"
    margin: float | None = None
    # group-sequential: K equally spaced looks (1 = a fixed design), Lan-DeMets alpha spending shape
    looks: int = Field(default=1, ge=1, le=20)
    spending: Literal["obrien_fleming", "pocock"] = "obrien_fleming"
    # non-binding futility bound for looks > 1: the beta-spending shape (none by default)
    futility: Literal["obrien_fleming", "pocock"] | None = None
    # binary responder endpoint: responder when the endpoint (canonical unit) lies below / above the cut
    responder: Responder | None = None
    # repeated measures: follow-up readings per subject (parallel designs), their mean analysed
    followups: int = Field(default=1, ge=1, le=50)
    # Bayesian sample size (normal design prior): target width of the 95 % posterior interval (analysis scale)
    # and target probability that the interval excludes no effect in the direction of benefit
    bayes_width: float | None = Field(default=None, gt=0, allow_inf_nan=False)
    bayes_success: float | None = Field(default=None, gt=0, lt=1)
    _design_prior: Prior | None = PrivateAttr(default=None)
    _analysis_prior: Prior | None = PrivateAttr(default=None)

    @property
    def design_prior_obj(self) -> Prior | None:
        """The design prior over the effect (shift, or log ratio) as a Prior, or None."""
        return self._design_prior

    @property
    def analysis_prior_obj(self) -> Prior | None:
        """The analysis prior as a Prior, or None."""
        return self._analysis_prior

    def with_priors(self, design_prior: Prior | None, analysis_prior: Prior | None) -> DesignSection:
        """A copy that carries the parsed design and analysis priors.

        Parameters
        ----------
        design_prior, analysis_prior : Prior or None
            ``design_prior`` / ``analysis_prior`` parsed into Prior objects (canonical units of the effect).

        Returns
        -------
        DesignSection
            A new section; this one is not changed.
        """
        new = self.model_copy()
        new._design_prior, new._analysis_prior = design_prior, analysis_prior
        return new

    @field_validator("n_range")
    @classmethod
    def _range(cls, v: list[int]) -> list[int]:
        if not 2 <= v[0] <= v[1]:
            raise ValueError("n_range is [low, high] with 2 <= low <= high")
        if v[1] > MAX_ARM:
            raise ValueError(f"n_range goes up to {MAX_ARM:,} subjects per arm at most")
        return v


class InferSection(BaseModel):
    """``[infer]``: sampler settings and quality gate for Bayesian updating. Every key is optional; a
    command-line flag of ``fluidshift infer`` overrides the key, and ``fluidshift run`` uses the section
    as it stands. Defaults are those of ``fluidshift infer``."""

    model_config = STRICT_CONFIG
    sampler: Literal["nutpie", "pymc"] = Field(default="nutpie", description=(
        "nutpie (default) or PyMC's own NUTS"))
    chains: int = Field(default=4, ge=1, le=64, description="number of chains")
    draws: int = Field(default=1000, ge=50, le=10**6, description=(
        "posterior draws per chain; the gate asks a bulk ESS of ess_bulk_min over all chains, so when a fit "
        "reports several times that, fewer draws serve (benchmarks/benchmark_whole_body_inference.py)"))
    tune: int = Field(default=1000, ge=50, le=10**6, description=(
        "warm-up steps per chain; nutpie's adaptation often settles sooner (its own default is 400), so fewer "
        "steps can save much of a long fit, but read the gate: a 20-subject whole_body fit with 300 passed on one "
        "invented dataset and failed on R-hat (1.012) on another"))
    target_accept: float = Field(default=0.95, ge=0.5, le=0.999, description=(
        "NUTS target acceptance rate; raise it (e.g. 0.99) when a few divergences remain. The default is 0.95, "
        "not the samplers' 0.8: a lymph-flow reading pins only the product Kf x net pressure, a curved ridge "
        "on which 0.8 gave tens of divergences (common practice: raise target_accept before trusting chains "
        "with divergences). Lower costs fewer steps per draw: a 20-subject whole_body fit of haemoglobin took 31 "
        "leapfrog steps per draw at 0.9 against 36 at 0.95, both without divergences (one invented dataset)"))
    start: Literal["auto", "mode", "prior"] = Field(default="auto", description=(
        "where chains start: around the posterior mode (mode), at the priors' central points (prior), or "
        "the mode only for observation kinds that need it, such as volume time courses (auto)"))
    r_hat_max: float = Field(default=1.01, gt=1, le=2, description=(
        "quality gate: largest R-hat allowed (Vehtari et al. 2021: 1.01)"))
    ess_bulk_min: float = Field(default=400.0, ge=0, description=(
        "quality gate: smallest bulk effective sample size (Vehtari et al. 2021: 400 over 4 chains)"))
    divergences_max: int = Field(default=0, ge=0, description=(
        "quality gate: divergent transitions allowed (common practice: none)"))

    def gate(self) -> dict[str, float]:
        """The quality-gate thresholds as the ``gate`` argument of ``inference.infer``."""
        return {"r_hat_max": self.r_hat_max, "ess_bulk_min": self.ess_bulk_min,
                "divergences_max": self.divergences_max}


def _default_targets() -> list[Literal["Kf", "Pvi"]]:
    return ["Kf", "Pvi"]


class ScheduleSection(BaseModel):
    """``[schedule]``: optimise a venous-cuff protocol (uncertainty/analyses/schedule/; `fluidshift design STUDY
    --schedule`). ``steps`` cuff steps of ``step_min`` minutes each, pressures from ``pressure_grid``,
    ``measurements`` limb-volume readings on a grid of ``time_step_min``; criterion ``A`` (default) or
    ``D`` over ``targets`` (Kf, Pvi). Kf, C_tis, L, Pv and r priors come from the study / its tissue;
    venous compliance C_v and filling time constant tau_v are lognormal with the medians and gsds here.

    In a ``whole_body`` study the section chooses blood-sampling times instead
    (``uncertainty.analyses.schedule.blood``): ``samples`` of the ``candidates`` times (a baseline at 0 is always
    drawn) that most narrow ``target`` from serial haemoglobin with reading sd ``hb_sd``; the venous-cuff keys are
    refused there, and these keys in a study of another form (``linearisation_draws`` serves both)."""

    model_config = STRICT_CONFIG
    # the upper bounds (le=) of the settings below are absurdity bounds (common practice)
    steps: int = Field(default=5, ge=1, le=12, description="number of cumulative cuff steps")
    step_min: float = Field(default=4.0, gt=0, le=60, description=(
        "duration of each step, min (from memory: cumulative protocols hold each step about 4 min)"))
    pressure_grid: list[float] = Field(
        default_factory=lambda: [10.0, 20.0, 30.0, 40.0, 50.0, 60.0, 70.0, 80.0], min_length=1, max_length=100,
        description="cuff pressures allowed for a step, mmHg (common practice: up to about 80 mmHg, below "
                    "diastolic pressure, in 10 mmHg steps)")
    increasing: bool = Field(default=True, description="each step at or above the previous (cumulative protocol)")
    measurements: int = Field(default=10, ge=1, le=200, description="number K of limb-volume readings")
    time_step_min: float = Field(default=0.5, gt=0, le=60, description="spacing of the candidate reading times, min")
    noise_sd: float = Field(default=0.01, gt=0, le=100, description=(
        "sd of one limb-volume reading, mL per 100 g of tissue (from memory: strain-gauge resolution about "
        "0.01 mL/100 mL)"))
    criterion: Literal["A", "D"] = Field(default="A", description=(
        "A: sum of posterior/prior variance ratios of the targets; D: log det of their posterior block over "
        "the prior block (both with the prior precision added to the Fisher information)"))
    targets: list[Literal["Kf", "Pvi"]] = Field(default_factory=_default_targets, min_length=1,
                                                 description="quantities whose posterior sd is minimised")
    linearisation_draws: int = Field(default=16, ge=1, le=512, description=(
        "prior points (the median and further prior draws) the criterion is averaged over"))
    transmission: float = Field(default=0.9, gt=0, le=1, description=(
        "cuff-to-vein pressure transmission (Christ et al. 1997 J Physiol 503:463, abstract: 0.91)"))
    C_v_median: float = Field(default=0.06, gt=0, le=100, description=(
        "median venous compliance, mL/mmHg per 100 g (from memory: forearm venous volume rises about "
        "2-3 mL/100 mL under 40 mmHg congestion)"))
    C_v_gsd: float = Field(default=1.5, gt=1, le=10, description="geometric sd of the venous compliance (from memory)")
    tau_v_median: float = Field(default=1.0, gt=0, le=1000, description=(
        "median venous filling time constant, min (from memory: veins fill within 1-2 min)"))
    tau_v_gsd: float = Field(default=1.5, gt=1, le=10, description="geometric sd of tau_v (from memory)")
    candidates: list[float | str] | None = Field(default=None, min_length=1, max_length=500, description=(
        "whole_body: candidate blood-sampling times after 0, min (numbers) or strings with a unit (\"2 h\"), at or "
        "before the [timeline] end; default every report time of the timeline after 0"))
    samples: int = Field(default=4, ge=1, le=200, description=(
        "whole_body: number K of blood samples chosen among the candidates, after the baseline at 0 min"))
    target: str = Field(default="Kf", min_length=1, max_length=MAX_NAME, description=(
        "whole_body: what the samples should narrow: an uncertain quantity of the study (e.g. \"Kf\") or a time "
        "course at a time, \"NAME at TIME\" (e.g. \"infused_retained_fraction at 60 min\")"))
    hb_sd: float = Field(default=0.2, gt=0, le=5, description=(
        "whole_body: sd of one haemoglobin reading, g/dL (from memory: automated analysers repeat to about 1-2 % "
        "at 14 g/dL)"))
    hb_baseline: float = Field(default=14.0, gt=1, le=30, description=(
        "whole_body: resting haemoglobin, g/dL, which scales the error of the ratio Hb(t)/Hb(0) (common practice: "
        "adult reference about 12-17 g/dL)"))

    @field_validator("candidates")
    @classmethod
    def _times(cls, v: list[float | str] | None) -> list[float | str] | None:
        for x in v or []:
            if isinstance(x, str):
                try:
                    t = float(units.registry().Quantity(x).to("min").magnitude)
                except Exception:  # pint raises several error kinds for a bad string or dimension
                    raise ValueError(f"{x!r} is not a time with its unit (e.g. \"30 min\", \"2 h\")") from None
            else:
                t = float(x)
            if not (math.isfinite(t) and t > 0):
                raise ValueError(f"candidate times lie after 0 (the baseline at 0 is always drawn): {x!r}")
        return v

    @field_validator("pressure_grid")
    @classmethod
    def _grid(cls, v: list[float]) -> list[float]:
        if any(p < 0 or p > 200 for p in v):
            raise ValueError("cuff pressures lie between 0 and 200 mmHg")
        return v


class CalibrateSection(BaseModel):
    """``[calibrate]``: settings of the simulation-based calibration of the study's inference model
    (uncertainty/analyses/calibrate/; `fluidshift calibrate STUDY`, whose flags override these keys). Each
    replicate draws truths from the prior, simulates the ``[[observations]]`` and refits with the sampler
    settings and quality gate of ``[infer]``."""

    model_config = STRICT_CONFIG
    replicates: int = Field(default=200, ge=10, le=100_000, description=(
        "N simulated data sets, each refitted; at least 5 per bin (common practice for the chi-square test). "
        "200 with 10 bins detects a posterior 30 % too narrow with power 0.99 at level 0.01 (noncentral "
        "chi-square, uncertainty.analyses.calibrate.stats.chi2_power)"))
    bins: int = Field(default=10, ge=2, le=1000, description=(
        "B rank-histogram bins; must divide draws + 1 so that every bin is equally likely"))
    draws: int = Field(default=99, ge=1, le=100_000, description=(
        "L thinned posterior draws each truth is ranked among (ranks 0..L)"))

    @model_validator(mode="after")
    def _even_bins(self) -> CalibrateSection:
        if (self.draws + 1) % self.bins:
            raise ValueError(f"bins ({self.bins}) must divide draws + 1 ({self.draws + 1})")
        if self.replicates < 5 * self.bins:
            raise ValueError(f"replicates ({self.replicates}) must be at least 5 per bin ({5 * self.bins})")
        return self


class ScenarioChange(BaseModel):
    """One resolved change of a scenario: ``symbol`` shifted by ``shift`` (its canonical unit) or
    multiplied by ``multiply`` (dimensionless); ``text`` is the change as written (``"+1 g/dL"``)."""

    model_config = ConfigDict(frozen=True, extra="forbid")
    symbol: str
    text: str
    shift: float | None = None
    multiply: float | None = None


class Scenario(BaseModel):
    """One ``[[scenarios]]`` entry: a what-if evaluated on the same draws as the baseline.

    ``changes`` maps a quantity to a change written as a string: ``"+1 g/dL"`` / ``"-5 mmHg"`` (a shift,
    any unit pint converts to the quantity's canonical unit; no unit means the canonical one) or
    ``"x0.9"`` (a multiplier > 0, no unit). ``conditions_add`` / ``conditions_remove`` name conditions of
    ``priors/conditions.toml`` to add to or take from ``[study] conditions``. The changes are parsed and
    converted when the study is resolved (``changes_resolved``)."""

    model_config = STRICT_CONFIG
    name: str = Field(min_length=1, description="the scenario's label in tables, JSON and the report")
    changes: dict[str, str] = Field(default_factory=dict, description=(
        "quantity -> change: \"+1 g/dL\" or \"-5 mmHg\" (a shift, any unit pint converts to the quantity's "
        "canonical unit; no unit: the canonical one) or \"x0.9\" (a multiplier > 0)"))
    conditions_add: list[str] = Field(default_factory=list, description=(
        "conditions (priors/conditions.toml) added to [study] conditions in this scenario"))
    conditions_remove: list[str] = Field(default_factory=list, description=(
        "conditions of [study] conditions taken away in this scenario"))
    note: str = Field(default="", description="free text")
    _resolved: tuple[ScenarioChange, ...] = PrivateAttr(default=())

    @property
    def changes_resolved(self) -> tuple[ScenarioChange, ...]:
        """The changes in canonical units (set when the study is resolved; empty before)."""
        return self._resolved

    def with_changes(self, changes: tuple[ScenarioChange, ...]) -> Scenario:
        """A copy that carries its resolved changes.

        Parameters
        ----------
        changes : tuple of ScenarioChange
            The changes in canonical units, in the order written.

        Returns
        -------
        Scenario
            A new record; this one is not changed.
        """
        new = self.model_copy()
        new._resolved = tuple(changes)
        return new

    @model_validator(mode="after")
    def _something(self) -> Scenario:
        if not self.changes and not self.conditions_add and not self.conditions_remove:
            raise ValueError("a scenario changes something: give changes, conditions_add or conditions_remove")
        both = sorted(set(self.conditions_add) & set(self.conditions_remove))
        if both:
            raise ValueError(f"a condition is both added and removed: {', '.join(both)}")
        return self


#: Fluids an infusion may give, with their protein content (``physiology.whole_body.FLUID_PROTEIN_G_PER_DL``).
FLUIDS = ("crystalloid", "albumin_5", "albumin_20")


class Intervention(BaseModel):
    """One ``[[interventions]]`` entry of the ``whole_body`` form: an infusion of a fluid or a bleed.

    ``volume`` (e.g. ``"1750 mL"``, or a number in mL), ``start`` and ``duration`` (e.g. ``"30 min"``, or a
    number in min) are converted to canonical units (mL, min) when the study is resolved
    (``uncertainty.study.interventions``)."""

    model_config = STRICT_CONFIG
    kind: Literal["infusion", "bleed"] = Field(description="infusion (of ``fluid``) or bleed (whole blood lost)")
    fluid: Literal["crystalloid", "albumin_5", "albumin_20"] | None = Field(default=None, description=(
        "infused fluid: crystalloid (no protein), albumin_5 (5 g/dL), albumin_20 (20 g/dL); infusions only"))
    volume: float | str = Field(description="volume given or lost, mL (a number) or a string with its unit")
    start: float | str = Field(default=0.0, description="when it starts, min (a number) or with its unit")
    duration: float | str = Field(default=0.0, description=(
        "how long it lasts, min (0: given at once, within the first time step)"))
    note: str = ""

    @model_validator(mode="after")
    def _fluid(self) -> Intervention:
        if self.kind == "infusion" and self.fluid is None:
            raise ValueError("an infusion names its fluid: crystalloid, albumin_5 or albumin_20")
        if self.kind == "bleed" and self.fluid is not None:
            raise ValueError("a bleed takes no fluid")
        return self


class InterventionList(RootModel[list[Intervention]]):
    """``[[interventions]]``: the infusions and bleeds of a ``whole_body`` study, in any order."""


class TimelineSection(BaseModel):
    """``[timeline]``: how long the ``whole_body`` time courses run and how often they are reported."""

    model_config = STRICT_CONFIG
    end: float | str = Field(default=240.0, description="end of the time courses, min (or with its unit)")
    report_every: float | str = Field(default=5.0, description="reporting interval, min (or with its unit)")
    draws: int = Field(default=2048, ge=16, le=2**20, description=(
        "draws of the time courses per layer (typical, individual) in propagate"))


SECTIONS: dict[str, type[BaseModel]] = {
    "propagate": PropagateSection,
    "sensitivity": SensitivitySection,
    "rank": RankSection,
    "design": DesignSection,
    "schedule": ScheduleSection,
    "calibrate": CalibrateSection,
    "infer": InferSection,
    "timeline": TimelineSection,
}


TOP_LEVEL = ("study", "parameters", "correlations", "propagate", "sensitivity", "observations", "infer",
             "rank", "design", "schedule", "calibrate", "scenarios", "interventions", "timeline")


#: Required CSV columns per observation kind; a time column is one of TIME_COLUMNS.
#: Clinical endpoint names a ``[design]`` may use for a model output: the limb volume a lymphoedema trial
#: measures (e.g. by perometry) is the steady forms' ``oedema_volume`` (mL per 100 g).
NAMED_ENDPOINTS: dict[str, str] = {"limb_volume": "oedema_volume"}

CSV_COLUMNS: dict[str, tuple[str, ...]] = {
    "volume_time_course": ("subject", "volume"),
    "measurement": ("subject", "value"),
    "lymph_flow": ("subject", "value"),
    "clearance_rate": ("subject", "value"),
    "swelling_rate": ("subject", "value"),
    "protein_ratio": ("subject", "value"),
    "GFR": ("subject", "value"),
    "RPF": ("subject", "value"),
    "filtration_fraction": ("subject", "value"),
    "body_weight": ("subject", "value"),
    "fluid_balance": ("subject", "value"),
    "haemoglobin": ("subject", "value"),
    "haematocrit": ("subject", "value"),
    "urine": ("subject", "value"),
    "plasma_protein": ("subject", "value"),
}


#: Time column names that carry their unit (a ``columns`` map may name another column and its unit).
TIME_COLUMNS = ("time_s", "time_min", "time_h", "time_day")


TEXT_COLUMNS = ("subject", "group", "arm", "note")


#: Quantities an observation kind's likelihood needs beyond the model form's inputs: a declared prior
#: of one of them that the form does not use is kept (uncertain) for the inference. swelling_rate's
#: lymph relation JL = L (Pi - Pi_L0) applies only without ``lymph = {...}`` on the observation.
OBS_NEEDS: dict[str, tuple[str, ...]] = {"swelling_rate": ("Pi", "L", "Pi_L0"), "protein_ratio": ("sigma", "PS")}


#: Quantity whose canonical unit an observation's value takes.
OBS_SYMBOL = {"lymph_flow": "JL", "swelling_rate": "swelling_rate", "protein_ratio": "ratio",
              "clearance_rate": "k_clear", "GFR": "GFR", "RPF": "RPF", "filtration_fraction": "FF",
              "body_weight": "body_weight", "fluid_balance": "fluid_balance", "haemoglobin": "Hb",
              "haematocrit": "Hct", "urine": "urine_volume", "plasma_protein": "Cp"}
#: Quantity whose canonical unit an observation's value takes when its ``how`` says what a reading is: urine read
#: as a rate is a flow (mL/min), not a volume.
OBS_SYMBOL_HOW = {("urine", "rate"): "urine_flow"}


def obs_symbol(kind: str, how: str | None = None) -> str | None:
    """The quantity whose canonical unit an observation's value (and sd) takes.

    Parameters
    ----------
    kind : str
        ``[[observations]] kind`` (not ``measurement``, whose ``parameter`` names it).
    how : str or None
        ``[[observations]] how`` (``urine``: ``cumulative`` or ``rate``).

    Returns
    -------
    str or None
        A key of ``core.units.CANONICAL`` (``urine_flow``, mL/min, for urine read as a rate), or None for a kind
        without one.
    """
    return OBS_SYMBOL_HOW.get((kind, how or ""), OBS_SYMBOL.get(kind))
