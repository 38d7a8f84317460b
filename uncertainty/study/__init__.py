"""Study files: validate a TOML study (DESIGN.md section 4) into a :class:`Study` every analysis takes.

Order of resolution: the tissue's prior set, then each condition in the order listed, then the
``[parameters]`` overrides. An override replaces the whole declaration (its between-subject spread
included, unless it states one); the prior set's correlations that involve an overridden quantity
are dropped, with a note in ``Study.notes``. In the ``steady_state`` and ``revised`` forms Pi and
pi_i (and pi_g) are solved, so the prior set's declarations of them are set aside and a study that
gives them priors is refused.

Correlations are correlations of normal scores (Gaussian copula) over ``Study.names``; a correlation
named on a derived oncotic pressure with a single protein input (pi_c from Cp) applies to that input
(a monotone map keeps normal-score correlations). The matrix must be a valid correlation matrix
(symmetric, unit diagonal, positive definite); it is refused, never repaired.

Every error is a :class:`uncertainty.core.errors.StudyError` naming the file, the dotted key path and
the offending value. Analysis sections are pydantic models (one class per section, ``extra="forbid"``,
strict types); other modules extend them here.
"""

from __future__ import annotations

import csv
import hashlib
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, PrivateAttr, ValidationError, field_validator, model_validator

from uncertainty.core.errors import StudyError, UnitError
from uncertainty.priors import (
    MODEL_FORMS,
    Context,
    Derivation,
    Instrument,
    Prior,
    convert_unit,
    load_conditions,
    load_instruments,
    load_prior_set,
    parse_entry,
    parse_prior,
    parse_toml_bytes,
)

# --------------------------------------------------------------------------- model forms

#: Inputs each model form needs (after derivations), and inputs it uses when present.
REQUIRED_INPUTS: dict[str, tuple[str, ...]] = {
    "classic": ("Kf", "Pc", "Pi", "pi_c", "pi_i", "sigma"),
    "steady_state": ("Kf", "Pc", "sigma", "PS", "pi_c", "L", "Pi_L0"),
    "revised": ("Kf", "Pc", "sigma", "PS", "pi_c", "L", "Pi_L0"),
    # glomerular (physiology.glomerulus): Pc = P_GC, Pi = Bowman's space pressure, Cp = afferent plasma
    # protein, RPF = renal plasma flow (whole kidney, mL/min; needs study.tissue_mass)
    "glomerular": ("Kf", "Pc", "Pi", "Cp", "RPF"),
}
OPTIONAL_INPUTS: dict[str, tuple[str, ...]] = {
    "classic": (),
    "steady_state": ("C_tis", "C_tis_high", "Pi_break"),
    "revised": ("C_tis", "C_tis_high", "Pi_break", "PS_large"),
    "glomerular": (),
}
#: Inputs a form needs for one tissue only, (form, tissue) -> symbols: the revised form of the absorbing
#: intestinal mucosa takes the epithelial fluid input J_epi (``physiology.mucosa.absorbing_steady_state``).
TISSUE_INPUTS: dict[tuple[str, str], tuple[str, ...]] = {
    ("revised", "intestinal_mucosa"): ("J_epi",),
}
#: Optional inputs of a form that one tissue does not use, (form, tissue) -> symbols (the absorbing mucosa
#: has no large-pore route: ``absorbing_steady_state`` takes no PS_large).
TISSUE_UNUSED: dict[tuple[str, str], tuple[str, ...]] = {
    ("revised", "intestinal_mucosa"): ("PS_large",),
}
#: Optional inputs a form uses for one tissue only: the steady lung forms take EVLW0, the extravascular
#: lung water at the reference Pi (``physiology.lung.extravascular_water``).
TISSUE_OPTIONAL: dict[tuple[str, str], tuple[str, ...]] = {
    ("steady_state", "lung"): ("EVLW0",),
    ("revised", "lung"): ("EVLW0",),
}
#: Outputs a form gives for one tissue only (with C_tis and the reference Pi, as ``oedema_volume``).
TISSUE_OUTPUTS: dict[tuple[str, str], tuple[str, ...]] = {
    ("steady_state", "lung"): ("EVLW",),
    ("revised", "lung"): ("EVLW",),
}
#: Quantities a form solves (never sampled there).
SOLVED: dict[str, tuple[str, ...]] = {
    "classic": ("pi_g",),
    "steady_state": ("Pi", "pi_i", "pi_g"),
    "revised": ("Pi", "pi_i", "pi_g"),
    "glomerular": ("pi_i", "pi_g"),
}
#: Quantities that are results, never inputs.
OUTPUT_ONLY = frozenset({"Jv", "JL", "net_pressure", "oedema_volume", "EVLW", "Jv_organ", "GFR", "ratio", "volume",
                         "swelling_rate", "time", "tissue_mass", "density", "osmotic_pressure"})

#: Display order of inputs (others follow alphabetically).
INPUT_ORDER = ("Kf", "Pc", "Pa", "Pv", "r", "LAP", "PAP", "Pi", "pi_c", "Cp", "C_alb", "C_glob", "pi_i",
               "Ci", "Ci_alb", "Ci_glob", "sigma", "PS", "PS_large", "C_tis", "L", "Pi_L0", "JL_max")


def required_inputs(model_form: str, tissue: str | None = None) -> tuple[str, ...]:
    """Quantities the model form needs as inputs (before derivations such as Pc from Pa, Pv, r); with
    ``tissue``, plus the ones that tissue's form needs (:data:`TISSUE_INPUTS`, e.g. J_epi for the revised
    form of the intestinal mucosa)."""
    if model_form not in REQUIRED_INPUTS:
        raise StudyError("unknown model form; use one of " + ", ".join(MODEL_FORMS), key="study.model",
                         value=model_form)
    return REQUIRED_INPUTS[model_form] + TISSUE_INPUTS.get((model_form, tissue or ""), ())


def optional_inputs(model_form: str, tissue: str | None = None) -> tuple[str, ...]:
    """Quantities the model form uses when the study has them (``OPTIONAL_INPUTS`` less ``TISSUE_UNUSED``,
    plus ``TISSUE_OPTIONAL``)."""
    unused = TISSUE_UNUSED.get((model_form, tissue or ""), ())
    return tuple(s for s in OPTIONAL_INPUTS[model_form] if s not in unused) + \
        TISSUE_OPTIONAL.get((model_form, tissue or ""), ())


#: Outputs of the glomerular form beyond the common ones (``physiology.glomerulus``).
GLOMERULAR_OUTPUTS = ["GFR", "FF", "pi_eff", "x_equilibrium", "equilibrium", "Kf_lower_bound", "no_filtration"]

#: Tissues without conventional lymphatics: lymph-flow observations are refused there, with the reason.
NO_LYMPH = {"brain": "the brain has no conventional lymphatics (interstitial fluid leaves by perivascular "
                     "and CSF routes), so a lymph flow does not measure its filtration"}

#: Observation kinds that only the glomerular form predicts.
GLOMERULAR_KINDS = ("GFR", "RPF", "filtration_fraction")


def output_names(model_form: str, tissue_mass: bool = False, derived: tuple[str, ...] = (),
                 tissue: str | None = None) -> list[str]:
    """Outputs ``model.evaluate`` returns for a model form (``derived``: derived quantities shown too;
    ``tissue``: plus that tissue's own, :data:`TISSUE_OUTPUTS`, e.g. EVLW for the steady lung forms)."""
    out = ["Jv", "net_pressure", "force_Pc", "force_Pi", "force_pi_c", "force_pi_i"]
    if model_form in ("steady_state", "revised"):
        out += ["Pi", "pi_i", "ratio", "JL", "oedema_volume"]
        out += list(TISSUE_OUTPUTS.get((model_form, tissue or ""), ()))
    if model_form == "revised":
        out += ["pi_g"]
    if model_form == "glomerular":
        out += GLOMERULAR_OUTPUTS
    if tissue_mass:
        out += ["Jv_mL_per_h", "Jv_L_per_day"]
    out += [d for d in derived if d not in out]
    return out


# --------------------------------------------------------------------------- pydantic sections

_CFG = ConfigDict(extra="forbid", strict=True)
Number = float  # strict mode accepts int for float


class StudySection(BaseModel):
    """``[study]``: what the study is about. ``tissue`` is required; ``seed`` defaults to 1."""

    model_config = _CFG
    title: str = ""
    tissue: str
    conditions: list[str] = Field(default_factory=list)
    model: Literal["classic", "steady_state", "revised", "glomerular"] = "classic"
    seed: int = Field(default=1, ge=0, lt=2**63)
    tissue_mass: float | str | None = None
    posture_height: float | str | None = None
    description: str = ""
    note: str = ""


class CorrelationsSection(BaseModel):
    """``[correlations]``: ``pairs = [[a, b, rho], ...]`` (normal-score correlations)."""

    model_config = _CFG
    pairs: list[list[str | float]] = Field(default_factory=list)


class PropagateSection(BaseModel):
    """``[propagate]``: forward uncertainty; every key is optional (``uncertainty.analyses.propagate`` defaults)."""

    model_config = _CFG
    samples: int = Field(default=16384, gt=0, le=2**26, description=(
        "draws per randomised replicate set in all; a power of two for qmc (rounded up with a note)"))
    method: Literal["mc", "qmc", "lhs"] = Field(default="qmc", description=(
        "mc (plain Monte Carlo), qmc (scrambled Sobol' points), lhs (Latin hypercube)"))
    outputs: list[str] | None = Field(default=None, min_length=1, description=(
        "outputs to summarise; default every output of the model form (Jv, net_pressure and each force first)"))
    replicates: int = Field(default=16, ge=16, le=1024, description=(
        "independent randomised replicates for the Monte Carlo standard errors (at least 16 scrambles)"))
    tol: float | None = Field(default=None, gt=0, description=(
        "keep doubling the sample until the standard error of the 95% interval ends is below tol (output units)"))
    max_samples: int | None = Field(default=None, gt=0, description=(
        "with tol: the largest sample; reaching it first exits 3"))


class SensitivitySection(BaseModel):
    """``[sensitivity]``: global sensitivity of one output; every key is optional."""

    model_config = _CFG
    method: Literal["sobol", "morris", "shapley"] | None = Field(default=None, description=(
        "default: sobol for independent inputs, shapley when the study correlates inputs (sobol and morris "
        "refuse correlated inputs)"))
    samples: int | None = Field(default=None, gt=0, le=2**24, description=(
        "base sample size; default 8192 (sobol), 64 trajectories (morris), 2048 outer draws (shapley)"))
    output: str = Field(default="Jv", description="the output whose variance is apportioned")
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

    model_config = _CFG
    parameter: str = "Pv"
    to: float
    unit: str | None = None
    at_min: float | None = Field(default=None, ge=0)


class Observation(BaseModel):
    """One ``[[observations]]`` entry. ``kind`` decides which keys are required (see ``_check_kind``).

    Values are converted to canonical units after validation (``value``, ``sd``; ``unit`` becomes the
    canonical unit and ``declared_unit`` keeps what was written). CSV rows of ``file`` are in ``data``.
    """

    model_config = _CFG
    kind: Literal["measurement", "lymph_flow", "clearance_rate", "swelling_rate", "volume_time_course",
                  "protein_ratio", "GFR", "RPF", "filtration_fraction"]
    name: str | None = None
    parameter: str | None = None
    value: float | None = None
    sd: float | None = Field(default=None, gt=0)
    cv: float | None = Field(default=None, gt=0)
    unit: str | None = None
    instrument: str | None = None
    file: str | None = None
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
    effects: list[str] | None = None
    site: Literal["pre_nodal", "post_nodal"] | None = None
    # volume_time_course: fit every k-th reading of each subject (1 = all)
    every: int | None = Field(default=None, ge=1)
    _data: dict[str, list] | None = PrivateAttr(default=None)
    _path: Path | None = PrivateAttr(default=None)

    @property
    def data(self) -> dict[str, list] | None:
        """Columns of the validated CSV file (numeric columns as floats), or None."""
        return self._data

    @property
    def path(self) -> Path | None:
        """The resolved data file, or None."""
        return self._path

    @model_validator(mode="after")
    def _check_kind(self) -> Observation:
        k = self.kind
        if self.sd is not None and self.cv is not None:
            raise ValueError("give sd or cv, not both")
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
            if self.sd is None and self.cv is None and self.instrument is None:
                raise ValueError("give the measurement error: sd, cv or instrument")
        if k == "filtration_fraction" and self.value is not None and not 0 < self.value < 1:
            raise ValueError("a filtration fraction lies strictly between 0 and 1 (GFR below renal plasma flow)")
        if k == "protein_ratio" and self.value is not None and not 0 < self.value <= 1.5:
            raise ValueError("a protein concentration ratio lies between 0 and about 1")
        return self


class Candidate(BaseModel):
    """One ``[rank]`` candidate measurement: parameter, noise (sd / cv / instrument), cost (default 1)."""

    model_config = _CFG
    name: str
    parameter: str
    sd: float | None = Field(default=None, gt=0)
    cv: float | None = Field(default=None, gt=0)
    unit: str | None = None
    instrument: str | None = None
    cost: float = Field(default=1.0, gt=0)
    n: int = Field(default=1, gt=0)

    @model_validator(mode="after")
    def _noise(self) -> Candidate:
        given = sum(x is not None for x in (self.sd, self.cv, self.instrument))
        if given == 0:
            raise ValueError("give the candidate's noise: sd, cv or instrument")
        if self.sd is not None and self.cv is not None:
            raise ValueError("give sd or cv, not both")
        return self


class RankSection(BaseModel):
    """``[rank]``: candidate measurements; optional ``budget``; output Jv; 4096 samples by default."""

    model_config = _CFG
    candidates: list[Candidate] = Field(default_factory=list)  # empty: instruments.toml for the tissue
    budget: float | None = Field(default=None, gt=0)
    output: str = "Jv"
    samples: int = Field(default=4096, gt=0, le=2**22)

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

    model_config = _CFG
    sd: float | None = Field(default=None, gt=0)
    cv: float | None = Field(default=None, gt=0)

    @model_validator(mode="after")
    def _one(self) -> Spread:
        if (self.sd is None) == (self.cv is None):
            raise ValueError("give exactly one of sd or cv")
        return self


class Effect(BaseModel):
    """``effect = { parameter = "Kf", multiply = 0.7 }`` or ``{ parameter = "Pc", shift = -3 }``."""

    model_config = _CFG
    parameter: str
    multiply: float | None = Field(default=None, gt=0)
    shift: float | None = None
    unit: str | None = None

    @model_validator(mode="after")
    def _one(self) -> Effect:
        if (self.multiply is None) == (self.shift is None):
            raise ValueError("give exactly one of multiply or shift")
        return self


class DesignSection(BaseModel):
    """``[design]``: trial sizing. Defaults: parallel, endpoint Jv, alpha 0.05 (two-sided), power 0.8,
    no dropout, n from 10 to 200 per arm; ``design_prior`` / ``analysis_prior`` are declarations
    (parsed into ``Prior`` objects in ``design_prior_obj`` / ``analysis_prior_obj``)."""

    model_config = _CFG
    design: Literal["parallel", "paired"] = "parallel"
    endpoint: str = "Jv"
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
    simulations: int = Field(default=2000, gt=0, le=10**7)
    # trial-design extensions (uncertainty/analyses/design/): ANCOVA on a baseline, further effects of the same
    # treatment (fixed; the design prior is over `effect`), curve points, exact-path trials, half-width
    baseline: bool = False
    extra_effects: list[Effect] = Field(default_factory=list)
    n_points: int = Field(default=10, ge=2, le=100)
    exact_trials: int = Field(default=40, ge=2, le=10**5)
    target_half_width: float | None = Field(default=None, gt=0)
    half_width_probability: float = Field(default=0.8, gt=0, lt=1)
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

    @field_validator("n_range")
    @classmethod
    def _range(cls, v: list[int]) -> list[int]:
        if not 2 <= v[0] <= v[1]:
            raise ValueError("n_range is [low, high] with 2 <= low <= high")
        return v


class InferSection(BaseModel):
    """``[infer]``: sampler settings and quality gate for Bayesian updating. Every key is optional; a
    command-line flag of ``fluidshift infer`` overrides the key, and ``fluidshift run`` uses the section
    as it stands. Defaults are those of ``fluidshift infer``."""

    model_config = _CFG
    sampler: Literal["nutpie", "pymc"] = Field(default="nutpie", description=(
        "nutpie (default) or PyMC's own NUTS"))
    chains: int = Field(default=4, ge=1, le=64, description="number of chains")
    draws: int = Field(default=1000, ge=50, le=10**6, description="posterior draws per chain")
    tune: int = Field(default=1000, ge=50, le=10**6, description="warm-up steps per chain")
    target_accept: float = Field(default=0.95, ge=0.5, le=0.999, description=(
        "NUTS target acceptance rate; raise it (e.g. 0.99) when a few divergences remain. The default is 0.95, "
        "not the samplers' 0.8: a lymph-flow reading pins only the product Kf x net pressure, a curved ridge "
        "on which 0.8 gave tens of divergences (common practice: raise target_accept before trusting chains "
        "with divergences)"))
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


class ScheduleSection(BaseModel):
    """``[schedule]``: optimise a venous-cuff protocol (uncertainty/analyses/schedule/; `fluidshift design STUDY
    --schedule`). ``steps`` cuff steps of ``step_min`` minutes each, pressures from ``pressure_grid``,
    ``measurements`` limb-volume readings on a grid of ``time_step_min``; criterion ``A`` (default) or
    ``D`` over ``targets`` (Kf, Pvi). Kf, C_tis, L, Pv and r priors come from the study / its tissue;
    venous compliance C_v and filling time constant tau_v are lognormal with the medians and gsds here."""

    model_config = _CFG
    steps: int = Field(default=5, ge=1, le=12, description="number of cumulative cuff steps")
    step_min: float = Field(default=4.0, gt=0, le=60, description=(
        "duration of each step, min (from memory: cumulative protocols hold each step about 4 min)"))
    pressure_grid: list[float] = Field(
        default_factory=lambda: [10.0, 20.0, 30.0, 40.0, 50.0, 60.0, 70.0, 80.0], min_length=1,
        description="cuff pressures allowed for a step, mmHg (common practice: up to about 80 mmHg, below "
                    "diastolic pressure, in 10 mmHg steps)")
    increasing: bool = Field(default=True, description="each step at or above the previous (cumulative protocol)")
    measurements: int = Field(default=10, ge=1, le=200, description="number K of limb-volume readings")
    time_step_min: float = Field(default=0.5, gt=0, description="spacing of the candidate reading times, min")
    noise_sd: float = Field(default=0.01, gt=0, description=(
        "sd of one limb-volume reading, mL per 100 g of tissue (from memory: strain-gauge resolution about "
        "0.01 mL/100 mL)"))
    criterion: Literal["A", "D"] = Field(default="A", description=(
        "A: sum of posterior/prior variance ratios of the targets; D: log det of their posterior block over "
        "the prior block (both with the prior precision added to the Fisher information)"))
    targets: list[Literal["Kf", "Pvi"]] = Field(default_factory=lambda: ["Kf", "Pvi"], min_length=1,
                                                 description="quantities whose posterior sd is minimised")
    linearisation_draws: int = Field(default=16, ge=1, le=512, description=(
        "prior points (the median and further prior draws) the criterion is averaged over"))
    transmission: float = Field(default=0.9, gt=0, le=1, description=(
        "cuff-to-vein pressure transmission (Christ et al. 1997 J Physiol 503:463, abstract: 0.91)"))
    C_v_median: float = Field(default=0.06, gt=0, description=(
        "median venous compliance, mL/mmHg per 100 g (from memory: forearm venous volume rises about "
        "2-3 mL/100 mL under 40 mmHg congestion)"))
    C_v_gsd: float = Field(default=1.5, gt=1, description="geometric sd of the venous compliance (from memory)")
    tau_v_median: float = Field(default=1.0, gt=0, description=(
        "median venous filling time constant, min (from memory: veins fill within 1-2 min)"))
    tau_v_gsd: float = Field(default=1.5, gt=1, description="geometric sd of tau_v (from memory)")

    @field_validator("pressure_grid")
    @classmethod
    def _grid(cls, v: list[float]) -> list[float]:
        if any(p < 0 or p > 200 for p in v):
            raise ValueError("cuff pressures lie between 0 and 200 mmHg")
        return v


SECTIONS: dict[str, type[BaseModel]] = {
    "propagate": PropagateSection,
    "sensitivity": SensitivitySection,
    "rank": RankSection,
    "design": DesignSection,
    "schedule": ScheduleSection,
    "infer": InferSection,
}
TOP_LEVEL = ("study", "parameters", "correlations", "propagate", "sensitivity", "observations", "infer",
             "rank", "design", "schedule")

#: Required CSV columns per observation kind; a time column is one of TIME_COLUMNS.
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
}
TIME_COLUMNS = ("time_min", "time_h", "time_day")
TEXT_COLUMNS = ("subject", "group", "arm", "note")

#: Quantity whose canonical unit an observation's value takes.
OBS_SYMBOL = {"lymph_flow": "JL", "swelling_rate": "swelling_rate", "protein_ratio": "ratio",
              "clearance_rate": "k_clear", "GFR": "GFR", "RPF": "RPF", "filtration_fraction": "FF"}


# --------------------------------------------------------------------------- Study


@dataclass
class Study:
    """A validated study: resolved priors and analysis sections (DEVELOPERS.md "study.py").

    Attributes:
        path: the study file (None for a document built in memory); hash: sha256 of its bytes.
        title, tissue, conditions, model, seed: from ``[study]``.
        tissue_mass_kg: organ or limb mass (kg), or None.
        basis, density: the prior set's basis (``100g``/``100mL``) and tissue density (g/mL).
        priors: every quantity the model form needs (canonical units), fixed values as ``fixed``.
        derived: target -> Derivation (pi_c / pi_i from protein, Pc from pressures).
        names: the uncertain inputs, in order (columns of ``correlation``).
        correlation: normal-score correlation matrix over ``names``.
        correlations: the (a, b, rho) pairs kept.
        notes: what was dropped or set aside, in plain words.
        propagate, sensitivity, observations, infer, rank, design, schedule: section models or None.
        instruments: the instruments the observations and candidates name.
        steady_Cp: the plasma protein input passed to the steady state (pi_i through the protein cubic),
            or None for proportional scaling.
        Pi_ref: reference (normally hydrated) interstitial pressure for ``oedema_volume`` in the steady
            forms: the median of the tissue prior set's own Pi prior, before conditions (mmHg), or None.
    """

    path: Path | None
    hash: str | None
    title: str
    tissue: str
    conditions: list[str]
    model: str
    seed: int
    tissue_mass_kg: float | None
    basis: str
    density: float
    priors: dict[str, Prior]
    derived: dict[str, Derivation]
    names: list[str]
    correlation: np.ndarray
    correlations: list[tuple[str, str, float]] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    propagate: PropagateSection | None = None
    sensitivity: SensitivitySection | None = None
    observations: list[Observation] | None = None
    rank: RankSection | None = None
    design: DesignSection | None = None
    schedule: ScheduleSection | None = None
    infer: InferSection | None = None
    instruments: dict[str, Instrument] = field(default_factory=dict)
    steady_Cp: str | None = None
    Pi_ref: float | None = None
    doc: dict[str, Any] = field(default_factory=dict, repr=False)

    @property
    def file(self) -> str | None:
        """The study file as a string (for messages)."""
        return str(self.path) if self.path else None

    def outputs(self) -> list[str]:
        """Output names ``model.evaluate`` gives for this study."""
        names = output_names(self.model, self.tissue_mass_kg is not None, tuple(self.derived), self.tissue)
        if self.model in ("steady_state", "revised") and ("C_tis" not in self.priors or self.Pi_ref is None):
            for name in ("oedema_volume", *TISSUE_OUTPUTS.get((self.model, self.tissue), ())):
                names.remove(name)
        return names

    def known_quantities(self) -> set[str]:
        """Inputs, derived quantities and outputs a section may name."""
        return set(self.priors) | set(self.derived) | set(self.outputs())

    @classmethod
    def from_dict(cls, doc: Mapping[str, Any], path: str | Path | None = None,
                  base_dir: str | Path | None = None, *, file_hash: str | None = None) -> Study:
        """Validate a parsed study document. ``path`` names it in messages; data files resolve
        relative to ``base_dir`` (default: the folder of ``path``, else the working directory).

        Raises:
            StudyError: naming the file, the dotted key path and the value.
        """
        label = str(path) if path is not None else "<study>"
        try:
            return _build(doc, label, Path(path) if path is not None else None,
                          Path(base_dir) if base_dir is not None else (Path(path).parent if path else Path.cwd()),
                          file_hash)
        except StudyError as exc:
            if exc.file is None:
                raise StudyError(exc.reason, file=label, key=exc.key, value=exc.value) from None
            raise
        except UnitError as exc:  # pragma: no cover (converted where raised)
            raise StudyError(exc.reason, file=label, key=exc.key, value=exc.value) from None
        except (RecursionError, MemoryError):  # pragma: no cover
            raise StudyError("the study document is too deeply nested or too large", file=label) from None


def load_study(path: str | Path) -> Study:
    """Read and validate a study file (TOML). Raises StudyError (file, key path, value)."""
    p = Path(path)
    try:
        data = p.read_bytes()
    except FileNotFoundError:
        raise StudyError("no such study file", file=str(p)) from None
    except OSError as exc:
        raise StudyError(f"cannot read the study file ({exc.strerror})", file=str(p)) from None
    doc = parse_toml_bytes(data, str(p))
    return Study.from_dict(doc, p, p.parent, file_hash=hashlib.sha256(data).hexdigest())


# --------------------------------------------------------------------------- building


def _err(msg: str, file: str, key: str | None, value: Any = None) -> StudyError:
    return StudyError(msg, file=file, key=key, value=value)


def _loc(prefix: str, loc: tuple) -> str:
    out = prefix
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out = f"{out}.{part}" if out else str(part)
    return out


def _section_model(model: type[BaseModel], data: Any, file: str, prefix: str) -> Any:
    if not isinstance(data, Mapping):
        raise _err("must be a table", file, prefix, data)
    try:
        return model.model_validate(dict(data))
    except ValidationError as exc:
        e = exc.errors(include_url=False)[0]
        loc = tuple(p for p in e.get("loc", ()) if not (isinstance(p, str) and p.startswith("function-")))
        msg = e.get("msg", "invalid")
        if e.get("type") == "extra_forbidden":
            msg = "unknown key"
        value = e.get("input")
        if isinstance(value, Mapping) and e.get("type") not in ("extra_forbidden",):
            value = None if len(str(value)) > 200 else value
        raise _err(msg.replace("Value error, ", ""), file, _loc(prefix, loc), value) from None


def _build(doc: Mapping[str, Any], file: str, path: Path | None, base_dir: Path,
           file_hash: str | None) -> Study:
    from uncertainty.core import units

    if not isinstance(doc, Mapping):
        raise _err("a study is a TOML table", file, None, None)
    for k in doc:
        if k not in TOP_LEVEL:
            raise _err("unknown section (allowed: " + ", ".join(TOP_LEVEL) + ")", file, str(k), None)
    if "study" not in doc:
        raise _err("missing [study] section", file, "study", None)
    head: StudySection = _section_model(StudySection, doc["study"], file, "study")
    notes: list[str] = []

    tissue_mass_kg = None
    if head.tissue_mass is not None:
        try:
            tissue_mass_kg = units.to_canonical("tissue_mass", head.tissue_mass)
        except UnitError as exc:
            raise _err(exc.reason, file, "study.tissue_mass", head.tissue_mass) from None
        if not 0 < tissue_mass_kg < 1000 or not math.isfinite(tissue_mass_kg):
            raise _err("tissue_mass must be a positive mass below 1000 kg", file, "study.tissue_mass",
                       head.tissue_mass)

    try:
        pset = load_prior_set(head.tissue)
    except StudyError as exc:
        if exc.key == "tissue":
            raise _err(exc.reason, file, "study.tissue", head.tissue) from None
        raise
    if head.model not in pset.models:
        raise _err(f"the {head.tissue} prior set supports the model forms {', '.join(pset.models)} only",
                   file, "study.model", head.model)
    if head.model == "glomerular" and tissue_mass_kg is None:
        raise _err("the glomerular form needs tissue_mass (the kidney mass) to relate renal plasma flow (mL/min) "
                   "to Kf per 100 g", file, "study.tissue_mass", None)
    density = pset.density
    priors = dict(pset.priors)
    derived = dict(pset.derived)

    height_cm = None
    if head.posture_height is not None:
        key = "study.posture_height"
        if "posture" not in head.conditions:
            raise _err("posture_height applies with the posture condition (add \"posture\" to conditions)",
                       file, key, head.posture_height)
        try:
            height_cm = units.to_canonical("height", head.posture_height)
        except UnitError as exc:
            raise _err(exc.reason, file, key, head.posture_height) from None
        if not 0 < height_cm <= 200:
            raise _err("posture_height is a height below the heart, above 0 and at most 200 cm", file, key,
                       head.posture_height)

    # ---- conditions
    conditions = load_conditions() if head.conditions else {}
    seen: set[str] = set()
    for i, cname in enumerate(head.conditions):
        key = f"study.conditions[{i}]"
        if cname in seen:
            raise _err("condition listed twice", file, key, cname)
        seen.add(cname)
        if cname not in conditions:
            known = ", ".join(sorted(conditions)) or "none installed"
            raise _err(f"unknown condition (known: {known})", file, key, cname)
        cond = conditions[cname]
        if cond.applies_to is not None and head.tissue not in cond.applies_to:
            raise _err(f"condition {cname} applies to {', '.join(cond.applies_to)} only", file, key, cname)
        before = dict(priors)
        priors = cond.apply(priors, tissue=head.tissue, notes=notes, derived=derived, density=density,
                            height_cm=height_cm if cname == "posture" else None)
        for sym in SOLVED[head.model]:
            if sym in priors and priors[sym] is not before.get(sym):
                notes.append(f"condition {cname} changes {sym}, but the {head.model} form solves {sym}; "
                             "that change does not apply (its effect comes through the other quantities)")

    # ---- overrides
    params = doc.get("parameters", {})
    if not isinstance(params, Mapping):
        raise _err("[parameters] must be a table", file, "parameters", params)
    ctx = Context(file=file, density=density, tissue_mass_kg=tissue_mass_kg)
    solved = SOLVED[head.model]
    overridden: set[str] = set()
    declared_here: dict[str, str] = {}
    for sym, decl in params.items():
        key = f"parameters.{sym}"
        if not isinstance(sym, str) or sym not in units.CANONICAL or sym in OUTPUT_ONLY:
            raise _err("unknown quantity (use a trade symbol such as Pc, Pi, pi_c, pi_i, sigma, Kf)", file, key,
                       sym)
        if sym in solved:
            what = "always derived, never a prior" if sym == "pi_g" and head.model == "classic" else \
                f"solved by the {head.model} form (lymph balance and protein flux), not sampled; remove it " \
                "or use model = \"classic\""
            raise _err(f"{sym} is {what}", file, key, decl)
        new, der = parse_entry(sym, decl, ctx=ctx, key=key)
        for s in new:
            if s in declared_here:
                raise _err(f"duplicate quantity: {s} is also declared by parameters.{declared_here[s]}", file,
                           key, s)
            declared_here[s] = sym
        if sym in derived:
            notes.append(f"parameters.{sym} replaces the derivation {derived[sym].describe()}")
            del derived[sym]
        if der is not None:
            derived[sym] = der
            priors.pop(sym, None)
        priors.update(new)
        overridden.update(new)
        overridden.add(sym)

    # ---- what the model form needs
    set_aside = [s for s in solved if s in priors or s in derived]
    for s in set_aside:
        priors.pop(s, None)
        derived.pop(s, None)
    if set_aside and head.model != "classic":
        notes.append(f"the {head.model} form solves {', '.join(set_aside)}; the prior set's declarations "
                     "of them are not used")
    needed: list[str] = []
    used_derived: dict[str, Derivation] = {}
    wanted = list(required_inputs(head.model, head.tissue)) + [s for s in optional_inputs(head.model, head.tissue)
                                                               if s in priors or s in derived]
    tissue_only = TISSUE_INPUTS.get((head.model, head.tissue), ())
    for s in wanted:
        if s in derived:
            used_derived[s] = derived[s]
            for inp in derived[s].inputs:
                if inp not in priors:
                    raise _err(f"{s} is derived from {inp}, which has no prior", file, f"parameters.{inp}", None)
                if inp not in needed:
                    needed.append(inp)
        elif s in priors:
            if s not in needed:
                needed.append(s)
        else:
            why = f" for {head.tissue}" if s in tissue_only else ""
            raise _err(f"the {head.tissue} prior set gives no prior for {s}, which the {head.model} form needs"
                       f"{why}; declare it under [parameters]", file, f"parameters.{s}", None)
    unused = [s for s in priors if s not in needed and s not in set_aside]
    unused_changed = sorted(s for s in unused if s in overridden)
    if unused_changed:
        notes.append(f"declared but not used by the {head.model} form: {', '.join(unused_changed)}")

    # ---- sections (parsed before correlations so that observations can keep referenced priors)
    instruments_all: dict[str, Instrument] | None = None

    def instruments() -> dict[str, Instrument]:
        nonlocal instruments_all
        if instruments_all is None:
            instruments_all = load_instruments()
        return instruments_all

    def order_key(s: str) -> tuple[int, str]:
        return (INPUT_ORDER.index(s), "") if s in INPUT_ORDER else (len(INPUT_ORDER), s)

    study_priors = {s: priors[s] for s in sorted(needed, key=order_key)}
    study = Study(path=path, hash=file_hash, title=head.title, tissue=head.tissue, conditions=list(head.conditions),
                  model=head.model, seed=head.seed, tissue_mass_kg=tissue_mass_kg, basis=pset.basis,
                  density=density, priors=study_priors, derived=used_derived, names=[],
                  correlation=np.eye(0), notes=notes, doc=dict(doc))
    if head.model in ("steady_state", "revised"):
        if "Pi" in pset.priors:
            study.Pi_ref = pset.priors["Pi"].median()
        d = used_derived.get("pi_c")
        if d is not None and d.formula == "total":
            study.steady_Cp = d.inputs[0]
    pool = priors

    for name in SECTIONS:
        if name in doc:
            setattr(study, name, _section_model(SECTIONS[name], doc[name], file, name))
    if study.infer is not None and "observations" not in doc:
        notes.append("[infer] is set but the study has no [[observations]]: no inference runs")
    if "observations" in doc:
        obs = doc["observations"]
        if not isinstance(obs, list):
            raise _err("observations are [[observations]] tables", file, "observations", None)
        study.observations = [_section_model(Observation, o, file, f"observations[{i}]")
                              for i, o in enumerate(obs)]

    known = study.known_quantities()

    def need_known(sym: str, key: str) -> None:
        if sym in known:
            return
        if sym in pool:
            study.priors[sym] = pool[sym]  # kept so the analysis can use it
            known.add(sym)
            return
        raise _err(f"not a quantity of this study (known: {', '.join(sorted(known))})", file, key, sym)

    def need_instrument(name: str, key: str, measures: str | None) -> Instrument:
        inst = instruments().get(name)
        if inst is None:
            known_i = ", ".join(sorted(instruments())) or "none installed"
            raise _err(f"unknown instrument (known: {known_i})", file, key, name)
        if measures is not None and inst.measures != measures:
            raise _err(f"instrument {name} measures {inst.measures}, not {measures}", file, key, name)
        if inst.tissues is not None and head.tissue not in inst.tissues:
            notes.append(f"instrument {name} is listed for {', '.join(inst.tissues)}, not {head.tissue}")
        study.instruments[name] = inst
        return inst

    def convert(sym: str, value: float, unit: str | None, key: str) -> float:
        try:
            return convert_unit(sym, value, unit, density=density, tissue_mass_kg=tissue_mass_kg)
        except UnitError as exc:
            raise _err(exc.reason, file, key, unit if unit is not None else value) from None

    if study.propagate is not None:
        for i, o in enumerate(study.propagate.outputs or []):
            if o not in study.outputs():
                raise _err(f"unknown output (the {head.model} form gives {', '.join(study.outputs())})", file,
                           f"propagate.outputs[{i}]", o)
    if study.sensitivity is not None and study.sensitivity.output not in study.outputs():
        raise _err(f"unknown output (the {head.model} form gives {', '.join(study.outputs())})", file,
                   "sensitivity.output", study.sensitivity.output)

    for i, ob in enumerate(study.observations or []):
        key = f"observations[{i}]"
        if ob.kind == "lymph_flow" and head.tissue in NO_LYMPH:
            raise _err(f"lymph-flow observations are refused for {head.tissue}: {NO_LYMPH[head.tissue]}", file,
                       f"{key}.kind", ob.kind)
        if ob.kind in GLOMERULAR_KINDS and head.model != "glomerular":
            raise _err(f"a {ob.kind} observation needs model = \"glomerular\" (the {head.model} form does not "
                       "predict it)", file, f"{key}.kind", ob.kind)
        sym = ob.parameter if ob.kind == "measurement" else OBS_SYMBOL.get(ob.kind)
        if ob.kind == "measurement":
            need_known(ob.parameter, f"{key}.parameter")
        inst = need_instrument(ob.instrument, f"{key}.instrument", sym if ob.kind == "measurement" else None) \
            if ob.instrument else None
        if ob.kind == "clearance_rate" and ob.unit is not None:
            try:
                units.to_canonical("k_clear", 1.0, ob.unit)
            except UnitError:
                sym = "JL"  # a clearance in flow units (mL/min per basis)
        if ob.kind != "volume_time_course" and sym is not None:
            ob.declared_unit = ob.unit
            if ob.value is not None:
                ob.value = convert(sym, ob.value, ob.unit, f"{key}.unit" if ob.unit else f"{key}.value")
            if ob.sd is not None:
                ob.sd = convert(sym, ob.sd, ob.unit, f"{key}.unit" if ob.unit else f"{key}.sd")
            if ob.sd is None and ob.cv is None and inst is not None:
                ob.sd, ob.cv = inst.sd, inst.cv
            ob.unit = units.CANONICAL[sym]
        if ob.kind == "volume_time_course":
            for j, st in enumerate([ob.step] if ob.step is not None else (ob.steps or [])):
                skey = f"{key}.step" if ob.step is not None else f"{key}.steps[{j}]"
                if st.parameter not in units.CANONICAL:
                    raise _err("unknown quantity", file, f"{skey}.parameter", st.parameter)
                st.to = convert(st.parameter, st.to, st.unit, f"{skey}.unit" if st.unit else f"{skey}.to")
                st.unit = units.CANONICAL[st.parameter]
        if ob.file is not None:
            ob._path, ob._data = _read_csv(ob, base_dir, file, key)

    if study.rank is not None:
        for i, c in enumerate(study.rank.candidates):
            key = f"rank.candidates[{i}]"
            need_known(c.parameter, f"{key}.parameter")
            inst = need_instrument(c.instrument, f"{key}.instrument", c.parameter) if c.instrument else None
            if c.sd is not None:
                c.sd = convert(c.parameter, c.sd, c.unit, f"{key}.unit" if c.unit else f"{key}.sd")
                c.unit = units.CANONICAL[c.parameter]
            elif c.cv is None and inst is not None:
                c.sd, c.cv = inst.sd, inst.cv
        if study.rank.output not in study.outputs():
            raise _err("unknown output", file, "rank.output", study.rank.output)

    if study.design is not None:
        dsn = study.design
        for ekey, eff in [("design.effect", dsn.effect)] + [
                (f"design.extra_effects[{i}]", e) for i, e in enumerate(dsn.extra_effects)]:
            need_known(eff.parameter, f"{ekey}.parameter")
            if eff.shift is not None and eff.unit:
                eff.shift = convert(eff.parameter, eff.shift, eff.unit, f"{ekey}.unit")
                eff.unit = units.CANONICAL[eff.parameter]
        if dsn.endpoint not in known and dsn.endpoint not in CSV_COLUMNS:
            need_known(dsn.endpoint, "design.endpoint")
        for part in ("between_subject", "within_subject"):
            for sym in getattr(dsn, part):
                need_known(sym, f"design.{part}.{sym}")
        for part in ("design_prior", "analysis_prior"):
            spec = getattr(dsn, part)
            if spec is not None:
                pr = parse_prior("dP", spec, ctx=Context(file, density), key=f"design.{part}", check_sign=False)
                setattr(dsn, f"_{part}", pr)

    # ---- correlations
    names = [s for s, p in study.priors.items() if not p.is_fixed]
    alias = {t: d.inputs[0] for t, d in derived.items() if len(d.inputs) == 1 and d.formula != "gaar"}
    kept: dict[frozenset, tuple[str, str, float]] = {}
    for (a, b, rho) in pset.correlations:
        if a in overridden or b in overridden:
            notes.append(f"prior-set correlation {a}-{b} ({rho:g}) dropped: {a if a in overridden else b} "
                         "is overridden by the study")
            continue
        a2, b2 = alias.get(a, a), alias.get(b, b)
        if a2 not in names or b2 not in names:
            missing = a if a2 not in names else b
            notes.append(f"prior-set correlation {a}-{b} ({rho:g}) not used: {missing} is not an uncertain "
                         f"input of the {head.model} form")
            continue
        kept[frozenset((a2, b2))] = (a2, b2, rho)
    if "correlations" in doc:
        csec: CorrelationsSection = _section_model(CorrelationsSection, doc["correlations"], file, "correlations")
        seen_pairs: set[frozenset] = set()
        for i, pair in enumerate(csec.pairs):
            key = f"correlations.pairs[{i}]"
            if len(pair) != 3 or not isinstance(pair[0], str) or not isinstance(pair[1], str) \
                    or isinstance(pair[2], str):
                raise _err("a pair is [quantity, quantity, rho]", file, key, pair)
            a, b, rho = pair[0], pair[1], float(pair[2])
            if not math.isfinite(rho) or not -1 <= rho <= 1:
                raise _err("a correlation lies between -1 and 1", file, f"{key}[2]", pair[2])
            if a == b:
                raise _err("a quantity paired with itself", file, key, pair)
            a2, b2 = alias.get(a, a), alias.get(b, b)
            for j, (s, s2) in enumerate(((a, a2), (b, b2))):
                if s2 not in names:
                    why = "fixed" if s2 in study.priors else "not an uncertain input of this study"
                    raise _err(f"cannot correlate {s}: it is {why}", file, f"{key}[{j}]", s)
            fs = frozenset((a2, b2))
            if fs in seen_pairs:
                raise _err("this pair is given twice", file, key, pair)
            seen_pairs.add(fs)
            if fs in kept:
                notes.append(f"[correlations] {a}-{b} replaces the prior set's value {kept[fs][2]:g}")
            kept[fs] = (a2, b2, rho)
    corr = np.eye(len(names))
    idx = {n: i for i, n in enumerate(names)}
    for a, b, rho in kept.values():
        corr[idx[a], idx[b]] = corr[idx[b], idx[a]] = rho
    if len(names):
        eig = float(np.linalg.eigvalsh(corr).min())
        if not eig > 1e-10:
            raise _err("the correlations do not form a valid (positive-definite) correlation matrix; "
                       f"smallest eigenvalue {eig:.3g}; revise the pairs (it is not repaired)", file,
                       "correlations.pairs", [list(p) for p in kept.values()])
    study.names = names
    study.correlation = corr
    study.correlations = list(kept.values())
    return study


def _read_csv(ob: Observation, base_dir: Path, file: str, key: str) -> tuple[Path, dict[str, list]]:
    """Resolve and validate an observation's CSV: required columns, numeric cells, no NaN, times rising."""
    fkey = f"{key}.file"
    p = Path(ob.file)
    p = p if p.is_absolute() else (base_dir / p)
    if not p.is_file():
        raise _err(f"data file not found (looked for {p})", file, fkey, ob.file)
    try:
        text = p.read_text(encoding="utf-8-sig")
    except (OSError, UnicodeDecodeError) as exc:
        raise _err(f"cannot read the data file ({exc})", file, fkey, ob.file) from None
    rows = list(csv.reader(line for line in text.splitlines() if line.strip() and not line.startswith("#")))
    if not rows:
        raise _err("the data file is empty", file, fkey, ob.file)
    header = [h.strip() for h in rows[0]]
    if len(set(header)) != len(header):
        raise _err("the data file repeats a column name", file, fkey, header)
    required = list(CSV_COLUMNS[ob.kind])
    missing = [c for c in required if c not in header]
    if ob.kind == "volume_time_course" and not any(t in header for t in TIME_COLUMNS):
        missing.append(" or ".join(TIME_COLUMNS))
    if missing:
        raise _err(f"the data file lacks column(s) {', '.join(missing)} (has {', '.join(header)})", file, fkey,
                   ob.file)
    if len(rows) < 2:
        raise _err("the data file has no data rows", file, fkey, ob.file)
    cols: dict[str, list] = {h: [] for h in header}
    for r, row in enumerate(rows[1:], start=2):
        if len(row) != len(header):
            raise _err(f"{p.name} line {r}: expected {len(header)} cells, found {len(row)}", file, fkey, row)
        for h, cell in zip(header, row, strict=True):
            cell = cell.strip()
            if h in TEXT_COLUMNS:
                if not cell:
                    raise _err(f"{p.name} line {r}: empty {h}", file, fkey, cell)
                cols[h].append(cell)
                continue
            try:
                x = float(cell)
            except ValueError:
                raise _err(f"{p.name} line {r}, column {h}: not a number", file, fkey, cell) from None
            if not math.isfinite(x):
                raise _err(f"{p.name} line {r}, column {h}: NaN or infinite value", file, fkey, cell)
            cols[h].append(x)
    tcol = next((t for t in TIME_COLUMNS if t in header), None)
    if tcol is not None:
        last: dict[str, float] = {}
        for i, (s, t) in enumerate(zip(cols["subject"], cols[tcol], strict=True)):
            if s in last and not t > last[s]:
                raise _err(f"{p.name} line {i + 2}: {tcol} must increase within subject {s}", file, fkey, t)
            last[s] = t
    if "volume" in cols:
        for i, v in enumerate(cols["volume"]):
            if v < 0:
                raise _err(f"{p.name} line {i + 2}: volume must be non-negative", file, fkey, v)
    return p, cols


def resolved_rows(study: Study) -> list[dict[str, Any]]:
    """Rows of the resolved priors for ``fluidshift check`` (as ``priors show``), derived ones after."""
    from uncertainty.priors import prior_rows

    rows = prior_rows(study.priors, study.derived)
    for row in rows:
        row["uncertain"] = row["symbol"] in study.names
    return rows
