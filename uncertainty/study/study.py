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
strict types, never changed once validated). The resolution is a chain of pure steps in
:mod:`uncertainty.study.resolve`; this module holds the frozen :class:`Study` that composes them.
"""

from __future__ import annotations

import dataclasses
import hashlib
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from uncertainty.core.errors import InputError, StudyError, UnitError
from uncertainty.core.files import MAX_STUDY_BYTES, read_limited
from uncertainty.core.toml_io import parse_toml_bytes
from uncertainty.forms.catalogue import study_outputs
from uncertainty.priors import Derivation, Instrument, Prior, prior_rows
from uncertainty.study.endpoints import check_time_endpoints
from uncertainty.study.interventions import TimelinePlan, resolve_timeline
from uncertainty.study.resolve import (
    StudyInput,
    apply_conditions,
    apply_overrides,
    check_prior_magnitudes,
    resolve_between_correlations,
    resolve_correlations,
    resolve_scenarios,
    resolve_sections,
    select_inputs,
    steady_references,
    tissue_base,
    unused_declarations,
    validate_document,
)
from uncertainty.study.schema import (
    CalibrateSection,
    DesignSection,
    InferSection,
    InterventionList,
    Observation,
    PropagateSection,
    RankSection,
    Scenario,
    ScheduleSection,
    SensitivitySection,
    TimelineSection,
)


@dataclass(frozen=True, eq=False)
class Study:
    """A validated study: resolved priors and analysis sections (frozen; see :mod:`uncertainty.study.resolve`).

    A study is never changed after it is made: :meth:`with_model` and :meth:`with_overrides` give
    new studies resolved again from the validated sections (``source``), and ``dataclasses.replace``
    gives a copy with other fields (e.g. simulated observations).

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
        between_correlations: the (a, b, rho) normal-score correlations of the between-subject layer
            kept (quantities with a between-subject spread; empty: independent deviations).
        notes: what was dropped or set aside, in plain words.
        propagate, sensitivity, observations, infer, rank, design, schedule, calibrate: section models or None.
        instruments: the instruments the observations and candidates name.
        steady_Cp: the plasma protein input passed to the steady state (pi_i through the protein cubic),
            or None for proportional scaling.
        Pi_ref: reference (normally hydrated) interstitial pressure for ``oedema_volume`` in the steady
            forms: the median of the tissue prior set's own Pi prior, before conditions (mmHg), or None.
        scenarios: the ``[[scenarios]]`` what-ifs with their changes in canonical units, or None without them.
        source: the validated sections as written that the study was resolved from (and, for
            provenance, the document as written: ``source.document``), or None.
        timeline: the ``whole_body`` form's interventions and timeline in canonical units, or None.
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
    between_correlations: list[tuple[str, str, float]] = field(default_factory=list)
    propagate: PropagateSection | None = None
    sensitivity: SensitivitySection | None = None
    observations: list[Observation] | None = None
    rank: RankSection | None = None
    design: DesignSection | None = None
    schedule: ScheduleSection | None = None
    calibrate: CalibrateSection | None = None
    infer: InferSection | None = None
    instruments: dict[str, Instrument] = field(default_factory=dict)
    steady_Cp: str | None = None
    Pi_ref: float | None = None
    source: StudyInput | None = field(default=None, repr=False)
    scenarios: list[Scenario] | None = None
    timeline: TimelinePlan | None = None

    @property
    def interventions(self) -> tuple[Any, ...] | None:
        """The ``whole_body`` form's interventions in canonical units (``physiology.whole_body.Dose``), or None."""
        return self.timeline.doses if self.timeline is not None and self.timeline.doses else None

    @property
    def file(self) -> str | None:
        """The study file as a string (for messages)."""
        return str(self.path) if self.path else None

    def outputs(self) -> list[str]:
        """Output names ``forms.evaluate`` gives for this study (from the form catalogue)."""
        return study_outputs(self)

    def known_quantities(self) -> set[str]:
        """Inputs, derived quantities and outputs a section may name."""
        return set(self.priors) | set(self.derived) | set(self.outputs())

    def with_model(self, model_form: str) -> Study:
        """The same study with another model form, resolved again from its validated sections.

        Parameters
        ----------
        model_form : str
            ``classic``, ``steady_state``, ``revised`` or ``glomerular`` (as ``[study] model``).

        Returns
        -------
        Study
            A new study, equal to the one an edited study file (``model = model_form``) gives.

        Raises
        ------
        StudyError
            The form is unknown, not offered by the tissue's prior set, or the study does not fit it
            (e.g. a prior on a quantity the form solves); naming the file, key path and value.
        """
        source = self._source()
        return _resolving(source.file, lambda: _study_from(source.with_head(model=model_form)))

    def with_overrides(self, overrides: Mapping[str, Any]) -> Study:
        """The same study with ``[parameters]`` entries added or replaced, resolved again.

        Each entry replaces the whole declaration of its quantity, between-subject spread included
        unless it states one (DESIGN.md section 2); the study's other overrides stay.

        Parameters
        ----------
        overrides : Mapping of str to Any
            Trade symbol -> declaration as a study file writes it (units as declared there).

        Returns
        -------
        Study
            A new study, equal to the one the study file with these ``[parameters]`` entries gives.

        Raises
        ------
        StudyError
            A declaration the study file would refuse, naming the file, key path and value.
        """
        source = self._source()
        return _resolving(source.file, lambda: _study_from(source.with_parameters(overrides)))

    def with_conditions(self, conditions: list[str]) -> Study:
        """The same study with other ``[study] conditions``, resolved again (without its scenarios).

        Parameters
        ----------
        conditions : list of str
            Condition names of ``priors/conditions.toml``, in the order they apply.

        Returns
        -------
        Study
            A new study, equal to the one the study file with ``conditions = [...]`` gives, less its
            ``[[scenarios]]`` (a scenario study is not itself a set of scenarios).

        Raises
        ------
        StudyError
            A condition the study file would refuse, naming the file, key path and value.
        """
        source = self._source()
        changed = dataclasses.replace(source.with_head(conditions=list(conditions)), scenarios=())
        return _resolving(source.file, lambda: _study_from(changed))

    def _source(self) -> StudyInput:
        if self.source is None:
            raise StudyError("this study was not resolved from study-file sections; it cannot be resolved again",
                             file=self.file)
        return self.source

    @classmethod
    def from_dict(cls, doc: Mapping[str, Any], path: str | Path | None = None,
                  base_dir: str | Path | None = None, *, file_hash: str | None = None) -> Study:
        """Validate and resolve a parsed study document.

        Parameters
        ----------
        doc : Mapping of str to Any
            The parsed TOML document.
        path : str or Path, optional
            Names the study in messages.
        base_dir : str or Path, optional
            Data files resolve relative to it (default: the folder of ``path``, else the working
            directory).
        file_hash : str, optional
            sha256 of the file's bytes.

        Returns
        -------
        Study
            The resolved study.

        Raises
        ------
        StudyError
            Naming the file, the dotted key path and the value.
        """
        label = str(path) if path is not None else "<study>"
        p = Path(path) if path is not None else None
        folder = Path(base_dir) if base_dir is not None else (Path(path).parent if path else Path.cwd())
        return _resolving(label, lambda: _study_from(validate_document(doc, label, p, folder, file_hash)))


def _resolving(label: str, make: Callable[[], Study]) -> Study:
    """Run ``make``; name the study file in every StudyError it raises."""
    try:
        return make()
    except StudyError as exc:
        if exc.file is None:
            raise StudyError(exc.reason, file=label, key=exc.key, value=exc.value) from None
        raise
    except UnitError as exc:  # pragma: no cover (converted where raised)
        raise StudyError(exc.reason, file=label, key=exc.key, value=exc.value) from None
    except (RecursionError, MemoryError):  # pragma: no cover
        raise StudyError("the study document is too deeply nested or too large", file=label) from None


def _study_from(inp: StudyInput) -> Study:
    """Resolve validated sections into a Study: prior set, conditions, overrides, the form's inputs,
    sections, correlations (each step in :mod:`uncertainty.study.resolve`)."""
    head, file = inp.head, inp.file
    base = tissue_base(head, file)
    declared = apply_overrides(apply_conditions(base.declared(), head, base, file), inp.parameters, head, base, file)
    form = select_inputs(declared, head, file)
    Pi_ref, steady_Cp = steady_references(head, base, form.derived)
    sections = resolve_sections(inp, form, base, Pi_ref)
    priors = {**form.priors, **dict(sections.kept.priors)}
    check_prior_magnitudes(priors, form.derived, declared.overridden, head, file)
    scenarios = resolve_scenarios(inp.scenarios, head, set(form.priors) | set(form.derived), base, file)
    plan = resolve_timeline(head, inp.section("interventions", InterventionList),
                            inp.section("timeline", TimelineSection), file)
    check_time_endpoints(sections, plan, file)  # "NAME at 60 min" against the timeline's end
    corr = resolve_correlations(priors, form.declared.derived, base.prior_set.correlations, declared.overridden,
                                inp.correlations, head.model, file)
    between = resolve_between_correlations(priors, form.declared.derived, base.prior_set.between_correlations,
                                           declared.overridden, inp.correlations, file)
    return Study(path=inp.path, hash=inp.file_hash, title=head.title, tissue=head.tissue,
                 conditions=list(head.conditions), model=head.model, seed=head.seed,
                 tissue_mass_kg=base.tissue_mass_kg, basis=base.prior_set.basis, density=base.density,
                 priors=priors, derived=dict(form.derived), names=corr.names, correlation=corr.matrix,
                 correlations=corr.pairs, notes=[*form.declared.notes,
                        *unused_declarations(form, sections.kept, head.model), *sections.kept.notes,
                        *corr.notes, *between.notes, *(plan.notes if plan is not None else ())],
                 between_correlations=between.pairs,
                 propagate=sections.propagate, sensitivity=sections.sensitivity,
                 observations=sections.observations, rank=sections.rank, design=sections.design,
                 schedule=sections.schedule, calibrate=sections.calibrate, infer=sections.infer,
                 instruments=dict(sections.kept.instruments),
                 steady_Cp=steady_Cp, Pi_ref=Pi_ref, source=inp, scenarios=scenarios or None,
                 timeline=plan)


def load_study(path: str | Path) -> Study:
    """Read, validate and resolve a study file (TOML).

    Parameters
    ----------
    path : str or Path
        The study file.

    Returns
    -------
    Study
        The resolved study (``hash`` is the sha256 of the file's bytes).

    Raises
    ------
    StudyError
        Naming the file, the key path and the value; also a path that is missing, a folder, a FIFO or
        device, a symbolic-link loop, or a file over 1 MB (read without blocking, never past the bound).
    """
    p = Path(path)
    try:
        data = read_limited(p, MAX_STUDY_BYTES, what="study file")
    except InputError as exc:
        raise StudyError(exc.reason, file=exc.file) from None
    doc = parse_toml_bytes(data, str(p))
    return Study.from_dict(doc, p, p.parent, file_hash=hashlib.sha256(data).hexdigest())


def resolved_rows(study: Study) -> list[dict[str, Any]]:
    """Rows of the resolved priors for ``fluidshift check`` (as ``priors show``), derived ones after.

    Parameters
    ----------
    study : Study
        A resolved study.

    Returns
    -------
    list of dict
        One row per prior (canonical units) with ``uncertain`` set, then one per derivation.
    """
    rows = prior_rows(study.priors, study.derived)
    for row in rows:
        row["uncertain"] = row["symbol"] in study.names
    return rows

