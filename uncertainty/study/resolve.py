"""Resolution of a study as pure steps (DESIGN.md sections 2 and 4).

Each step is a function from its inputs to a new value; none changes its arguments, and the
validated pydantic sections are never modified (a step that converts units returns a copy):

1. :func:`validate_document`: the parsed TOML document -> :class:`StudyInput` (each section
   validated as written, nothing converted).
2. :func:`tissue_base`: ``[study]`` -> :class:`TissueBase` (the tissue's prior set, the tissue mass
   and the posture height in canonical units).
3. :func:`apply_conditions`: the prior set's declarations -> :class:`Declared` after each condition
   in the order listed.
4. :func:`apply_overrides`: ``[parameters]`` on top. An override replaces the whole declaration,
   its between-subject spread included, unless it states one (DESIGN.md section 2).
5. :func:`select_inputs`: what the model form needs (:class:`FormInputs`); the quantities the form
   solves are set aside. (:func:`unused_declarations`, after step 6, notes the declared quantities
   neither the form nor a section uses.)
6. :func:`resolve_sections`: the analysis sections and observations, converted to canonical units,
   with their data files and instruments (:class:`Sections`).
7. :func:`resolve_correlations`: the prior set's and the study's normal-score correlations over the
   uncertain inputs (:class:`Correlations`); :func:`resolve_between_correlations`: those of the
   between-subject layer, over the quantities with a between-subject spread.

Every error is a :class:`uncertainty.core.errors.StudyError` naming the file, the dotted key path
and the offending value.
"""

from __future__ import annotations

import copy
import math
import re
from collections.abc import Mapping, Sequence, Set
from dataclasses import dataclass, field
from pathlib import Path
from types import MappingProxyType
from typing import Any, TypeVar

import numpy as np
from pydantic import BaseModel, ValidationError

from uncertainty.core import units
from uncertainty.core.bounds import magnitude_problem, plausible
from uncertainty.core.errors import StudyError, UnitError, study_error
from uncertainty.forms.catalogue import (
    INPUT_ORDER,
    NO_LYMPH,
    OUTPUT_ONLY,
    SOLVED,
    forms_predicting,
    optional_inputs,
    required_inputs,
    study_outputs,
    tissue_inputs,
    tissue_mass_reason,
)
from uncertainty.priors import (
    Context,
    Derivation,
    Instrument,
    Prior,
    PriorSet,
    capacity_forces,
    convert_unit,
    hold_capacity,
    load_conditions,
    load_instruments,
    load_prior_set,
    parse_entry,
    parse_prior,
)
from uncertainty.study.data_files import read_csv, shorten
from uncertainty.study.endpoints import is_time_endpoint
from uncertainty.study.interventions import validate_interventions
from uncertainty.study.schema import (
    CSV_COLUMNS,
    MAX_CV,
    NAMED_ENDPOINTS,
    OBS_NEEDS,
    SECTIONS,
    TOP_LEVEL,
    CalibrateSection,
    Candidate,
    CorrelationsSection,
    DesignSection,
    Effect,
    InferSection,
    Observation,
    PropagateSection,
    RankSection,
    Scenario,
    ScenarioChange,
    ScheduleSection,
    SensitivitySection,
    StepSpec,
    StudySection,
    obs_symbol,
)

M = TypeVar("M", bound=BaseModel)

#: the model forms that solve the interstitial pressures (a reference Pi and the protein input matter)
STEADY_FORMS = ("steady_state", "revised", "two_pore")


# --------------------------------------------------------------------------------------------
# 1. The document, validated section by section (as written)
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class StudyInput:
    """A study document validated section by section, as written (no unit converted).

    Attributes
    ----------
    head : StudySection
        ``[study]``.
    parameters : Mapping of str to Any
        ``[parameters]`` declarations as written (each is read by :func:`apply_overrides`).
    correlations : CorrelationsSection or None
        ``[correlations]``.
    sections : Mapping of str to BaseModel
        The analysis sections present (``propagate``, ``sensitivity``, ``rank``, ``design``,
        ``schedule``, ``infer``), validated, in canonical order.
    observations : tuple of Observation, or None
        ``[[observations]]`` as written, or None without them.
    file : str
        The label used in messages (the study file, or ``<study>``).
    path : Path or None
        The study file (None for a document built in memory).
    base_dir : Path
        The folder data files are resolved against.
    file_hash : str or None
        sha256 of the file's bytes.
    document : Mapping of str to Any
        The document as written (read-only), kept for provenance only (cache keys and data-file
        hashes of a run); the resolution never reads it.
    scenarios : tuple of Scenario
        ``[[scenarios]]`` as written (empty without them).
    """

    head: StudySection
    parameters: Mapping[str, Any]
    correlations: CorrelationsSection | None
    sections: Mapping[str, BaseModel]
    observations: tuple[Observation, ...] | None
    file: str
    path: Path | None
    base_dir: Path
    file_hash: str | None
    document: Mapping[str, Any] = field(default_factory=dict, repr=False, compare=False)
    scenarios: tuple[Scenario, ...] = ()

    def section(self, name: str, kind: type[M]) -> M | None:
        """The validated section ``name`` as ``kind``, or None when the study has none.

        Parameters
        ----------
        name : str
            A key of :data:`uncertainty.study.schema.SECTIONS`.
        kind : type
            The section's model class.

        Returns
        -------
        BaseModel or None
            The section as written.
        """
        sec = self.sections.get(name)
        return sec if isinstance(sec, kind) else None

    def with_head(self, **changes: Any) -> StudyInput:
        """A copy with ``[study]`` keys changed (re-validated; the document echo follows).

        Parameters
        ----------
        **changes
            ``[study]`` keys and their new values as a study file would state them.

        Returns
        -------
        StudyInput
            The edited input.

        Raises
        ------
        StudyError
            A value ``[study]`` refuses (key ``study.<key>``).
        """
        data = {**self.head.model_dump(exclude_unset=True), **changes}
        head = validate_section(StudySection, data, self.file, "study")
        doc = dict(self.document)
        doc["study"] = {**dict(doc.get("study", {})), **changes}
        return StudyInput(head=head, parameters=self.parameters, correlations=self.correlations,
                          sections=self.sections, observations=self.observations, file=self.file,
                          path=self.path, base_dir=self.base_dir, file_hash=self.file_hash,
                          document=_read_only(doc), scenarios=self.scenarios)

    def with_parameters(self, overrides: Mapping[str, Any]) -> StudyInput:
        """A copy with ``[parameters]`` entries added or replaced (a whole declaration each).

        Parameters
        ----------
        overrides : Mapping of str to Any
            Trade symbol -> declaration as a study file would state it.

        Returns
        -------
        StudyInput
            The edited input (its entries are read when the study is resolved).

        Raises
        ------
        StudyError
            ``overrides`` is not a table (key ``parameters``).
        """
        if not isinstance(overrides, Mapping):
            raise study_error("[parameters] must be a table", self.file, "parameters", overrides)
        params = {**self.parameters, **copy.deepcopy(dict(overrides))}
        doc = dict(self.document)
        doc["parameters"] = {**dict(doc.get("parameters", {})), **copy.deepcopy(dict(overrides))}
        return StudyInput(head=self.head, parameters=_read_only(params), correlations=self.correlations,
                          sections=self.sections, observations=self.observations, file=self.file,
                          path=self.path, base_dir=self.base_dir, file_hash=self.file_hash,
                          document=_read_only(doc), scenarios=self.scenarios)


def _read_only(doc: Mapping[str, Any]) -> Mapping[str, Any]:
    return MappingProxyType(dict(doc))


def _loc(prefix: str, loc: Sequence[int | str]) -> str:
    out = prefix
    for part in loc:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out = f"{out}.{part}" if out else str(part)
    return out


def validate_section(model: type[M], data: Any, file: str, prefix: str) -> M:
    """Validate one study-file table with its pydantic model.

    Parameters
    ----------
    model : type
        The section's model class (strict, unknown keys forbidden).
    data : Any
        The table as parsed from TOML.
    file : str
        The study file, for messages.
    prefix : str
        The table's key path (``"study"``, ``"observations[2]"``).

    Returns
    -------
    BaseModel
        The validated section (values as written).

    Raises
    ------
    StudyError
        The first problem, with its dotted key path and value.
    """
    if not isinstance(data, Mapping):
        raise study_error("must be a table", file, prefix, data)
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
        raise study_error(msg.replace("Value error, ", ""), file, _loc(prefix, loc), value) from None


def validate_document(doc: Any, file: str, path: Path | None, base_dir: Path,
                      file_hash: str | None = None) -> StudyInput:
    """Validate a parsed study document section by section (nothing is resolved or converted).

    Parameters
    ----------
    doc : Any
        The parsed TOML document (a table).
    file : str
        The label for messages (the study file, or ``<study>``).
    path : Path or None
        The study file, or None for a document built in memory.
    base_dir : Path
        The folder data files are resolved against.
    file_hash : str or None
        sha256 of the file's bytes.

    Returns
    -------
    StudyInput
        The validated sections, and a read-only copy of the document for provenance.

    Raises
    ------
    StudyError
        An unknown section, a missing ``[study]``, or a section its model refuses.
    """
    if not isinstance(doc, Mapping):
        raise study_error("a study is a TOML table", file, None, None)
    for k in doc:
        if k not in TOP_LEVEL:
            raise study_error("unknown section (allowed: " + ", ".join(TOP_LEVEL) + ")", file, str(k), None)
    if "study" not in doc:
        raise study_error("missing [study] section", file, "study", None)
    head = validate_section(StudySection, doc["study"], file, "study")
    params = doc.get("parameters", {})
    if not isinstance(params, Mapping):
        raise study_error("[parameters] must be a table", file, "parameters", params)
    sections = {name: validate_section(model, doc[name], file, name)
                for name, model in SECTIONS.items() if name in doc}
    observations: tuple[Observation, ...] | None = None
    if "observations" in doc:
        obs = doc["observations"]
        if not isinstance(obs, list):
            raise study_error("observations are [[observations]] tables", file, "observations", None)
        observations = tuple(validate_section(Observation, o, file, f"observations[{i}]")
                             for i, o in enumerate(obs))
    correlations = (validate_section(CorrelationsSection, doc["correlations"], file, "correlations")
                    if "correlations" in doc else None)
    scenarios: tuple[Scenario, ...] = ()
    if "scenarios" in doc:
        if not isinstance(doc["scenarios"], list):
            raise study_error("scenarios are [[scenarios]] tables", file, "scenarios", None)
        scenarios = tuple(validate_section(Scenario, sc, file, f"scenarios[{i}]")
                          for i, sc in enumerate(doc["scenarios"]))
        names = [sc.name for sc in scenarios]
        for i, name in enumerate(names):
            if name in names[:i]:
                raise study_error("scenario names must be unique", file, f"scenarios[{i}].name", name)
    if "interventions" in doc:  # a list of tables (whole_body form), resolved by study.interventions
        sections["interventions"] = validate_interventions(doc["interventions"], file)
    kept = copy.deepcopy(dict(doc))
    return StudyInput(head=head, parameters=_read_only(kept.get("parameters", {})), correlations=correlations,
                      sections=MappingProxyType(sections), observations=observations, file=file, path=path,
                      base_dir=base_dir, file_hash=file_hash, document=_read_only(kept), scenarios=scenarios)


# --------------------------------------------------------------------------------------------
# 2. The tissue: prior set, mass, posture height
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class TissueBase:
    """The tissue's prior set with the study's tissue mass and posture height.

    Attributes
    ----------
    prior_set : PriorSet
        ``priors/<tissue>.toml`` as loaded (never changed).
    tissue_mass_kg : float or None
        Organ or limb mass (kg).
    height_cm : float or None
        Height below the heart for the posture condition (cm).
    """

    prior_set: PriorSet
    tissue_mass_kg: float | None
    height_cm: float | None

    @property
    def density(self) -> float:
        """Tissue density of the prior set (g/mL)."""
        return self.prior_set.density

    def declared(self) -> Declared:
        """The prior set's own declarations, before conditions and overrides."""
        return Declared(priors=dict(self.prior_set.priors), derived=dict(self.prior_set.derived))


def _canonical(symbol: str, value: float | str, file: str, key: str) -> float:
    try:
        return float(units.to_canonical(symbol, value))
    except UnitError as exc:
        raise study_error(exc.reason, file, key, value) from None


def tissue_base(head: StudySection, file: str) -> TissueBase:
    """Load the tissue's prior set and read ``tissue_mass`` / ``posture_height`` of ``[study]``.

    Parameters
    ----------
    head : StudySection
        ``[study]``.
    file : str
        The study file, for messages.

    Returns
    -------
    TissueBase
        Prior set, tissue mass (kg) and height below the heart (cm).

    Raises
    ------
    StudyError
        Unknown tissue, a model form the prior set does not support, a glomerular study without a
        kidney mass, or a mass / height out of range.
    """
    tissue_mass_kg = None
    if head.tissue_mass is not None:
        tissue_mass_kg = _canonical("tissue_mass", head.tissue_mass, file, "study.tissue_mass")
        if not 0 < tissue_mass_kg < 1000 or not math.isfinite(tissue_mass_kg):
            raise study_error("tissue_mass must be a positive mass below 1000 kg", file, "study.tissue_mass",
                              head.tissue_mass)
    try:
        pset = load_prior_set(head.tissue)
    except StudyError as exc:
        if exc.key == "tissue":
            raise study_error(exc.reason, file, "study.tissue", head.tissue) from None
        raise
    if head.model not in pset.models:
        raise study_error(f"the {head.tissue} prior set supports the model forms {', '.join(pset.models)} only",
                          file, "study.model", head.model)
    mass_reason = tissue_mass_reason(head.model)
    if mass_reason is not None and tissue_mass_kg is None:
        raise study_error(f"the {head.model} form needs tissue_mass {mass_reason}", file, "study.tissue_mass", None)
    height_cm = None
    if head.posture_height is not None:
        key = "study.posture_height"
        if "posture" not in head.conditions:
            raise study_error("posture_height applies with the posture condition (add \"posture\" to conditions)",
                              file, key, head.posture_height)
        height_cm = _canonical("height", head.posture_height, file, key)
        if not 0 < height_cm <= 200:
            raise study_error("posture_height is a height below the heart, above 0 and at most 200 cm", file, key,
                              head.posture_height)
    return TissueBase(prior_set=pset, tissue_mass_kg=tissue_mass_kg, height_cm=height_cm)


# --------------------------------------------------------------------------------------------
# 3-4. Conditions, then overrides
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class Declared:
    """The declarations at one step of the resolution.

    Attributes
    ----------
    priors : Mapping of str to Prior
        Symbol -> prior (canonical units).
    derived : Mapping of str to Derivation
        Target -> derivation (pi_c / pi_i from protein, Pc from pressures).
    notes : tuple of str
        What was changed, dropped or set aside so far, in plain words.
    overridden : frozenset of str
        The quantities ``[parameters]`` declares (their prior-set correlations are dropped).
    """

    priors: Mapping[str, Prior]
    derived: Mapping[str, Derivation]
    notes: tuple[str, ...] = ()
    overridden: frozenset[str] = frozenset()


def apply_conditions(declared: Declared, head: StudySection, base: TissueBase, file: str) -> Declared:
    """Apply the study's conditions in the order listed.

    Parameters
    ----------
    declared : Declared
        The prior set's declarations.
    head : StudySection
        ``[study]`` (tissue, model form, conditions).
    base : TissueBase
        Density (g/mL) and posture height (cm).
    file : str
        The study file, for messages.

    Returns
    -------
    Declared
        The declarations after every condition, with a note for each change the form cannot use.

    Raises
    ------
    StudyError
        A condition listed twice, unknown, or not for this tissue.
    """
    conditions = load_conditions() if head.conditions else {}
    priors = dict(declared.priors)
    notes = list(declared.notes)
    derived = dict(declared.derived)
    seen: set[str] = set()
    for i, cname in enumerate(head.conditions):
        key = f"study.conditions[{i}]"
        if cname in seen:
            raise study_error("condition listed twice", file, key, cname)
        seen.add(cname)
        if cname not in conditions:
            known = ", ".join(sorted(conditions)) or "none installed"
            raise study_error(f"unknown condition (known: {known})", file, key, cname)
        cond = conditions[cname]
        if cond.applies_to is not None and head.tissue not in cond.applies_to:
            raise study_error(f"condition {cname} applies to {', '.join(cond.applies_to)} only", file, key, cname)
        before = priors
        derived = dict(derived)  # Condition.apply writes the changed derivations into this copy
        priors = cond.apply(before, tissue=head.tissue, notes=notes, derived=derived, density=base.density,
                            height_cm=base.height_cm if cname == "posture" else None)
        for sym in SOLVED[head.model]:
            if sym in priors and priors[sym] is not before.get(sym):
                notes.append(f"condition {cname} changes {sym}, but the {head.model} form solves {sym}; "
                             "that change does not apply (its effect comes through the other quantities)")
    derived, held = hold_capacity(derived, priors, declared.derived, declared.priors)
    return Declared(priors=priors, derived=derived, notes=tuple(notes + held), overridden=declared.overridden)


def apply_overrides(declared: Declared, parameters: Mapping[str, Any], head: StudySection, base: TissueBase,
                    file: str) -> Declared:
    """Apply ``[parameters]``: each entry replaces the whole declaration of its quantity.

    The replaced declaration's between-subject spread is not carried over: an override without
    ``between_subject`` has none (DESIGN.md section 2). A ``from_protein`` entry replaces a prior by
    a derivation; a plain entry replaces a derivation by a prior.

    Parameters
    ----------
    declared : Declared
        The declarations after the conditions.
    parameters : Mapping of str to Any
        ``[parameters]`` as written.
    head : StudySection
        ``[study]`` (model form).
    base : TissueBase
        Density (g/mL) and tissue mass (kg) for unit conversion.
    file : str
        The study file, for messages.

    Returns
    -------
    Declared
        The declarations with the overrides, ``overridden`` naming every quantity declared here.

    Raises
    ------
    StudyError
        An unknown quantity, a quantity the form solves, a bad declaration, or a quantity
        declared twice (``parameters.<symbol>``).
    """
    ctx = Context(file=file, density=base.density, tissue_mass_kg=base.tissue_mass_kg)
    solved = SOLVED[head.model]
    priors = dict(declared.priors)
    derived = dict(declared.derived)
    notes = list(declared.notes)
    overridden = set(declared.overridden)
    declared_here: dict[str, str] = {}
    for sym, decl in parameters.items():
        key = f"parameters.{sym}"
        if not isinstance(sym, str) or sym not in units.CANONICAL or sym in OUTPUT_ONLY:
            raise study_error("unknown quantity (use a trade symbol such as Pc, Pi, pi_c, pi_i, sigma, Kf)", file,
                              key, sym)
        if sym in solved:
            what = "always derived, never a prior" if sym == "pi_g" and head.model == "classic" else \
                f"solved by the {head.model} form (lymph balance and protein flux), not sampled; remove it " \
                "or use model = \"classic\""
            raise study_error(f"{sym} is {what}", file, key, decl)
        new, der = parse_entry(sym, decl, ctx=ctx, key=key)
        for s in new:
            if s in declared_here:
                raise study_error(f"duplicate quantity: {s} is also declared by parameters.{declared_here[s]}",
                                  file, key, s)
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
    read = set(required_inputs(head.model, head.tissue)) | set(optional_inputs(head.model, head.tissue))
    for target, forces in capacity_forces(derived).items():
        if target in read and derived[target].healthy_filtrate is None and forces & set(parameters):
            notes.append(f"parameters.{', parameters.'.join(sorted(forces & set(parameters)))}: the lymph capacity "
                         f"{target} is each draw's resting filtrate with these values plus JL_reserve, as for healthy "
                         f"subjects; where they describe a disease state, use a condition (its capacity stays the "
                         f"healthy one) or declare {target}")
    return Declared(priors=priors, derived=derived, notes=tuple(notes), overridden=frozenset(overridden))


# --------------------------------------------------------------------------------------------
# 5. What the model form needs
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class FormInputs:
    """What the model form takes from the declarations.

    Attributes
    ----------
    priors : Mapping of str to Prior
        The priors the form needs (directly or through a derivation), in input order.
    derived : Mapping of str to Derivation
        The derivations the form uses.
    declared : Declared
        Every declaration left after the solved quantities are set aside (the pool an analysis
        section may still name, and the derivations correlations are read through).
    """

    priors: Mapping[str, Prior]
    derived: Mapping[str, Derivation]
    declared: Declared


def _input_order(s: str) -> tuple[int, str]:
    return (INPUT_ORDER.index(s), "") if s in INPUT_ORDER else (len(INPUT_ORDER), s)


def select_inputs(declared: Declared, head: StudySection, file: str) -> FormInputs:
    """Keep what the model form needs and set aside what it solves.

    Parameters
    ----------
    declared : Declared
        The declarations after conditions and overrides.
    head : StudySection
        ``[study]`` (tissue, model form).
    file : str
        The study file, for messages.

    Returns
    -------
    FormInputs
        The needed priors and derivations, and the remaining declarations.

    Raises
    ------
    StudyError
        A needed quantity without a prior (``parameters.<symbol>``).
    """
    model, tissue = head.model, head.tissue
    priors = dict(declared.priors)
    derived = dict(declared.derived)
    notes = list(declared.notes)
    set_aside = [s for s in SOLVED[model] if s in priors or s in derived]
    for s in set_aside:
        priors.pop(s, None)
        derived.pop(s, None)
    if set_aside and model != "classic":
        notes.append(f"the {model} form solves {', '.join(set_aside)}; the prior set's declarations "
                     "of them are not used")
    needed: list[str] = []
    used_derived: dict[str, Derivation] = {}
    wanted = list(required_inputs(model, tissue)) + [s for s in optional_inputs(model, tissue)
                                                     if s in priors or s in derived]
    tissue_only = tissue_inputs(model, tissue)

    def use(s: str) -> None:  # a derivation and what it reads, a derived input (PAP of the lung's Pc) first
        for inp in derived[s].inputs:
            if inp in derived and inp not in priors:
                if inp not in used_derived:
                    use(inp)
            elif inp not in priors:
                raise study_error(f"{s} is derived from {inp}, which has no prior", file, f"parameters.{inp}",
                                  None)
            elif inp not in needed:
                needed.append(inp)
        used_derived[s] = derived[s]

    for s in wanted:
        if s in derived:
            use(s)
        elif s in priors:
            if s not in needed:
                needed.append(s)
        else:
            why = f" for {tissue}" if s in tissue_only else ""
            raise study_error(f"the {tissue} prior set gives no prior for {s}, which the {model} form needs"
                              f"{why}; declare it under [parameters]", file, f"parameters.{s}", None)
    return FormInputs(priors={s: priors[s] for s in sorted(needed, key=_input_order)}, derived=used_derived,
                      declared=Declared(priors=priors, derived=derived, notes=tuple(notes),
                                        overridden=declared.overridden))


def unused_declarations(form: FormInputs, kept: Kept, model: str) -> tuple[str, ...]:
    """The note on quantities ``[parameters]`` declares that nothing uses: neither the model form nor a
    section that keeps a declared quantity (an observation kind's needs, ``OBS_NEEDS``; a rank
    candidate; a design effect). Made after :func:`resolve_sections`, so a kept quantity is not called
    unused.

    Parameters
    ----------
    form : FormInputs
        What the form takes (:func:`select_inputs`), with the declarations left after it.
    kept : Kept
        What the sections kept (:func:`resolve_sections`).
    model : str
        The model form, for the message.

    Returns
    -------
    tuple of str
        One note naming the unused overridden quantities, or none.
    """
    used = set(form.priors) | {s for s, _ in kept.priors}
    unused = sorted(s for s in form.declared.priors if s not in used and s in form.declared.overridden)
    return (f"declared but not used by the {model} form: {', '.join(unused)}",) if unused else ()


def steady_references(head: StudySection, base: TissueBase, derived: Mapping[str, Derivation]
                      ) -> tuple[float | None, str | None]:
    """The steady forms' reference interstitial pressure and plasma protein input.

    Parameters
    ----------
    head : StudySection
        ``[study]`` (model form).
    base : TissueBase
        The tissue's prior set (its own Pi prior, before conditions).
    derived : Mapping of str to Derivation
        The derivations the form uses.

    Returns
    -------
    Pi_ref : float or None
        Median of the prior set's Pi prior (mmHg) in a steady form, else None.
    steady_Cp : str or None
        The total-protein input of pi_c in a steady form, else None.
    """
    if head.model not in STEADY_FORMS:
        return None, None
    pi = base.prior_set.priors.get("Pi")
    d = derived.get("pi_c")
    return (pi.median() if pi is not None else None,
            d.inputs[0] if d is not None and d.formula == "total" else None)


@dataclass(frozen=True)
class FormFacts:
    """What the form catalogue reads of a study being resolved (a ``forms.study_like.StudyLike``).

    Attributes
    ----------
    model, tissue : str
        Model form and tissue.
    priors : Mapping of str to Prior
        The study's priors so far.
    derived : Mapping of str to Derivation
        The derivations the form uses.
    tissue_mass_kg : float or None
        Organ mass (kg).
    Pi_ref : float or None
        Reference interstitial pressure (mmHg).
    steady_Cp : str or None
        The steady forms' plasma-protein input.
    """

    model: str
    tissue: str
    priors: Mapping[str, Prior]
    derived: Mapping[str, Derivation]
    tissue_mass_kg: float | None
    Pi_ref: float | None
    steady_Cp: str | None = None


def form_outputs(model: str, tissue: str, tissue_mass_kg: float | None, derived: Mapping[str, Derivation],
                 priors: Mapping[str, Prior], Pi_ref: float | None) -> list[str]:
    """Output names the model form gives for a study being resolved (as ``Study.outputs`` will).

    Parameters
    ----------
    model, tissue : str
        Model form and tissue.
    tissue_mass_kg : float or None
        Organ mass (kg); whole-organ outputs need it.
    derived : Mapping of str to Derivation
        The derivations the form uses.
    priors : Mapping of str to Prior
        The study's priors so far (an oedema volume needs C_tis).
    Pi_ref : float or None
        Reference interstitial pressure (mmHg); an oedema volume needs it.

    Returns
    -------
    list of str
        Output names, in the form's order (from the form catalogue).
    """
    return study_outputs(FormFacts(model=model, tissue=tissue, priors=priors, derived=derived,
                                   tissue_mass_kg=tissue_mass_kg, Pi_ref=Pi_ref))


# --------------------------------------------------------------------------------------------
# 6. Analysis sections and observations
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class Kept:
    """What resolving the sections adds to the study, accumulated entry by entry.

    Attributes
    ----------
    priors : tuple of (str, Prior)
        Declared quantities a section names that the form does not need (kept for the analysis).
    instruments : tuple of (str, Instrument)
        The instruments named, in order of first use.
    notes : tuple of str
        Remarks, in plain words.
    """

    priors: tuple[tuple[str, Prior], ...] = ()
    instruments: tuple[tuple[str, Instrument], ...] = ()
    notes: tuple[str, ...] = ()

    def plus(self, *, prior: tuple[str, Prior] | None = None, instrument: tuple[str, Instrument] | None = None,
             note: str | None = None) -> Kept:
        """A copy with one more prior, instrument or note."""
        return Kept(priors=self.priors + ((prior,) if prior else ()),
                    instruments=self.instruments + ((instrument,) if instrument else ()),
                    notes=self.notes + ((note,) if note else ()))


@dataclass(frozen=True)
class SectionContext:
    """What the section steps read: the study so far, read-only.

    Attributes
    ----------
    file : str
        The study file, for messages.
    base_dir : Path
        The folder data files are resolved against.
    tissue, model : str
        From ``[study]``.
    tissue_mass_kg : float or None
        Organ mass (kg).
    density : float
        Tissue density (g/mL).
    known : frozenset of str
        Inputs, derived quantities and outputs of the study before the sections.
    pool : Mapping of str to Prior
        Every declaration left after the solved ones are set aside.
    """

    file: str
    base_dir: Path
    tissue: str
    model: str
    tissue_mass_kg: float | None
    density: float
    known: Set[str]
    pool: Mapping[str, Prior]

    def convert(self, sym: str, value: float, unit: str | None, key: str, value_key: str | None = None) -> float:
        """``value`` in ``unit`` to the canonical unit of ``sym``.

        A StudyError names ``key`` (the unit's key when a unit is given) for a bad unit, and ``value_key``
        (when given) for a value that is out of range once converted, so each is reported where it is.
        """
        try:
            return convert_unit(sym, value, unit, density=self.density, tissue_mass_kg=self.tissue_mass_kg)
        except UnitError as exc:
            if value_key is not None and (unit is None or exc.value != unit):
                raise study_error(exc.reason, self.file, value_key, value) from None
            raise study_error(exc.reason, self.file, key, unit if unit is not None else value) from None


def keep_known(sym: str, key: str, kept: Kept, ctx: SectionContext) -> Kept:
    """Check that a section names a quantity of the study; keep a declared one the form does not use.

    Parameters
    ----------
    sym : str
        The quantity named.
    key : str
        Its key path.
    kept : Kept
        What the sections added so far.
    ctx : SectionContext
        The study so far.

    Returns
    -------
    Kept
        ``kept``, with the prior of ``sym`` added when the form does not need it but it is declared.

    Raises
    ------
    StudyError
        ``sym`` is not a quantity of the study.
    """
    known = set(ctx.known) | {s for s, _ in kept.priors}
    if sym in known:
        return kept
    if sym in ctx.pool:
        return kept.plus(prior=(sym, ctx.pool[sym]))
    raise study_error(f"not a quantity of this study (known: {', '.join(sorted(known))})", ctx.file, key, sym)


def use_instrument(name: str, key: str, measures: str | None, kept: Kept, ctx: SectionContext
                   ) -> tuple[Instrument, Kept]:
    """Look up an instrument a section names.

    Parameters
    ----------
    name : str
        The instrument (``priors/instruments.toml``).
    key : str
        Its key path.
    measures : str or None
        The quantity it must read, or None for any.
    kept : Kept
        What the sections added so far.
    ctx : SectionContext
        The study so far.

    Returns
    -------
    Instrument
        The instrument.
    Kept
        ``kept`` with the instrument (and a note when it is listed for other tissues).

    Raises
    ------
    StudyError
        An unknown instrument, or one that reads another quantity.
    """
    catalogue = load_instruments()
    inst = catalogue.get(name)
    if inst is None:
        known_i = ", ".join(sorted(catalogue)) or "none installed"
        raise study_error(f"unknown instrument (known: {known_i})", ctx.file, key, name)
    if measures is not None and inst.measures != measures:
        raise study_error(f"instrument {name} measures {inst.measures}, not {measures}", ctx.file, key, name)
    if inst.tissues is not None and ctx.tissue not in inst.tissues:
        kept = kept.plus(note=f"instrument {name} is listed for {', '.join(inst.tissues)}, not {ctx.tissue}")
    return inst, kept.plus(instrument=(name, inst))


def check_plausible(symbol: str, x: float | None, file: str, key: str, value: Any = None, *,
                    spread: bool = False) -> None:
    """Refuse a physically impossible magnitude (the table in :mod:`uncertainty.core.bounds`).

    Parameters
    ----------
    symbol : str
        The quantity.
    x : float or None
        The value in the canonical unit of ``symbol`` (an sd or a shift with ``spread``); None is skipped.
    file, key : str
        The study file and the key path, for the message.
    value : Any
        The value as written (default ``x``).
    spread : bool
        ``x`` is an sd or a shift, compared with the width of the plausible range.

    Raises
    ------
    StudyError
        ``x`` lies outside the plausible range (the message names the range and its unit).
    """
    if x is None:
        return
    problem = magnitude_problem(symbol, float(x), spread=spread)
    if problem is not None:
        raise study_error(problem, file, key, x if value is None else value)


def check_prior_magnitudes(priors: Mapping[str, Prior], derived: Mapping[str, Derivation],
                           overridden: Set[str], head: StudySection, file: str) -> None:
    """Refuse a prior whose median or 95% interval ends lie outside the quantity's plausible range.

    Parameters
    ----------
    priors : Mapping of str to Prior
        The study's priors after tissue, conditions and overrides (canonical units).
    derived : Mapping of str to Derivation
        Its derivations (a protein input is reported under the oncotic pressure declared).
    overridden : Set of str
        The quantities ``[parameters]`` declares.
    head : StudySection
        ``[study]`` (a prior changed by a condition is reported under ``study.conditions``).
    file : str
        The study file, for messages.

    Raises
    ------
    StudyError
        At ``parameters.<symbol>`` (or ``study.conditions`` / ``study.tissue``), naming the range.
    """
    owner = {inp: t for t, d in derived.items() for inp in d.inputs if t in overridden}
    for sym, prior in priors.items():
        if sym in overridden:
            key = f"parameters.{sym}"
        elif sym in owner:
            key = f"parameters.{owner[sym]}"
        else:
            key = "study.conditions" if head.conditions else "study.tissue"
        try:
            points = [prior.median()] if prior.is_fixed else [prior.median(), *prior.interval(0.95)]
        except (ValueError, ArithmeticError):  # pragma: no cover - parse_prior checked the parameters
            points = [math.nan]
        for x in points:
            check_plausible(sym, x, file, key)
        spread = prior.spread
        if spread is not None and spread.kind == "sd":
            check_plausible(sym, spread.value, file, f"{key}.between_subject.sd" if key.startswith("parameters.")
                            else key, spread=True)
        elif spread is not None and not spread.value <= MAX_CV:
            raise study_error(f"a between-subject cv above {MAX_CV:g} ({MAX_CV:.0%}) is implausible", file,
                              f"{key}.between_subject.cv" if key.startswith("parameters.") else key, spread.value)


def _step_canonical(st: StepSpec, skey: str, ctx: SectionContext) -> StepSpec:
    if st.parameter not in units.CANONICAL:
        raise study_error("unknown quantity", ctx.file, f"{skey}.parameter", st.parameter)
    to = ctx.convert(st.parameter, st.to, st.unit, f"{skey}.unit" if st.unit is not None else f"{skey}.to",
                    f"{skey}.to")
    check_plausible(st.parameter, to, ctx.file, f"{skey}.to", st.to)
    check_plausible("time", st.at_min, ctx.file, f"{skey}.at_min")
    return st.model_copy(update={"to": to, "unit": units.CANONICAL[st.parameter]})


def resolve_observation(ob: Observation, i: int, kept: Kept, ctx: SectionContext) -> tuple[Observation, Kept]:
    """One ``[[observations]]`` entry in canonical units, with its instrument's noise and data file.

    Parameters
    ----------
    ob : Observation
        The entry as written (not changed).
    i : int
        Its position (key path ``observations[i]``).
    kept : Kept
        What the sections added so far.
    ctx : SectionContext
        The study so far.

    Returns
    -------
    Observation
        A copy: ``value`` / ``sd`` in the canonical unit of the observed quantity, ``unit`` that unit,
        ``declared_unit`` the unit as written; time-course steps in canonical units; the data file read.
    Kept
        ``kept`` with the instrument and any prior the observation names.

    Raises
    ------
    StudyError
        A kind the tissue or form refuses, an unknown quantity or instrument, a bad unit or data file.
    """
    key = f"observations[{i}]"
    if ob.kind == "lymph_flow" and ctx.tissue in NO_LYMPH:
        raise study_error(f"lymph-flow observations are refused for {ctx.tissue}: {NO_LYMPH[ctx.tissue]}",
                          ctx.file, f"{key}.kind", ob.kind)
    if ob.kind in ("body_weight", "fluid_balance") and ctx.model == "whole_body":  # the body's own balance
        if ob.share is not None:
            raise study_error(f"a {ob.kind} observation of a whole_body study takes no share: the form balances "
                              "the whole body's intake and output itself", ctx.file, f"{key}.share", ob.share)
    elif ob.kind in ("body_weight", "fluid_balance"):
        if ctx.tissue_mass_kg is None:
            raise study_error(f"a {ob.kind} observation ties the organ's flow to the body's: set [study] tissue_mass",
                              ctx.file, f"{key}.kind", ob.kind)
        if ob.share is None:
            raise study_error(f"a {ob.kind} observation needs share = {{ <prior of the organ's share of the body's "
                              "net fluid gain> }}", ctx.file, f"{key}.share", None)
    predicting = forms_predicting(ob.kind)
    if predicting and ctx.model not in predicting:
        wanted = " or ".join(f"model = \"{m}\"" for m in predicting)
        raise study_error(f"a {ob.kind} observation needs {wanted} (the {ctx.model} form does not predict it)",
                          ctx.file, f"{key}.kind", ob.kind)
    sym = ob.parameter if ob.kind == "measurement" else obs_symbol(ob.kind, ob.how)
    if ob.kind == "measurement" and ob.parameter is not None:
        kept = keep_known(ob.parameter, f"{key}.parameter", kept, ctx)
    if not (ob.kind == "swelling_rate" and ob.lymph is not None):
        # keep the declared priors the kind's likelihood needs and the form does not use (the
        # inference refuses the observation, naming the quantity, when one is not declared at all)
        for q in OBS_NEEDS.get(ob.kind, ()):
            if q in ctx.pool:
                kept = keep_known(q, f"{key}.kind", kept, ctx)
    inst = None
    if ob.instrument:
        inst, kept = use_instrument(ob.instrument, f"{key}.instrument", sym if ob.kind == "measurement" else None,
                                    kept, ctx)
    if ob.kind == "clearance_rate" and ob.unit is not None:
        try:
            units.to_canonical("k_clear", 1.0, ob.unit)
        except UnitError:
            sym = "JL"  # a clearance in flow units (mL/min per basis)
    update: dict[str, Any] = {}
    # an instrument's readings are in the unit of what it reads (TER in %/h for the escape rate); a difference
    # (the implanted osmometer's pi_i - Pi) is checked as a shift of its quantity
    difference = False
    if inst is not None and ob.kind == "measurement":
        sym, difference = inst.reading_symbol, inst.minus is not None
    if ob.kind != "volume_time_course" and sym is not None:
        update["declared_unit"] = ob.unit
        if ob.value is not None:
            update["value"] = ctx.convert(sym, ob.value, ob.unit, f"{key}.unit" if ob.unit is not None
                                          else f"{key}.value", f"{key}.value")
        if ob.sd is not None:
            update["sd"] = ctx.convert(sym, ob.sd, ob.unit, f"{key}.unit" if ob.unit is not None else f"{key}.sd",
                                       f"{key}.sd")
        check_plausible(sym, update.get("value"), ctx.file, f"{key}.value", ob.value, spread=difference)
        check_plausible(sym, update.get("sd"), ctx.file, f"{key}.sd", ob.sd, spread=True)
        if ob.sd is None and ob.cv is None and inst is not None:
            update["sd"], update["cv"] = inst.sd, inst.cv
            if inst.cv is not None and ob.value is not None and not ob.value > 0:
                raise study_error(f"instrument {ob.instrument} has a cv (lognormal) error, which needs a positive "
                                  "value", ctx.file, f"{key}.value", ob.value)
        update["unit"] = units.CANONICAL[sym]
    if ob.kind == "volume_time_course":
        if ob.step is not None:
            update["step"] = _step_canonical(ob.step, f"{key}.step", ctx)
        else:
            update["steps"] = [_step_canonical(st, f"{key}.steps[{j}]", ctx) for j, st in enumerate(ob.steps or [])]
    for j, q in enumerate(ob.effects or []):
        if q not in ctx.known or q not in ctx.pool or ctx.pool[q].is_fixed:
            known_q = ", ".join(sorted(s for s in ctx.known if s in ctx.pool and not ctx.pool[s].is_fixed))
            raise study_error(f"a group effect names a quantity that is not uncertain in this study (uncertain: "
                              f"{known_q})", ctx.file, f"{key}.effects[{j}]", q)
    new = ob.model_copy(update=update)
    if ob.file is not None:
        path, data = read_csv(ob, ctx.base_dir, ctx.file, key)
        _check_data_magnitudes(ob, sym, data, path, key, ctx, difference=difference)
        if inst is not None and inst.cv is not None and ob.sd is None and ob.cv is None:
            role = "volume" if ob.kind == "volume_time_course" else "value"
            sds = data.get("sd") or [math.nan] * len(data.get(role, []))
            for v, sd, line in zip(data.get(role, []), sds, data.get("line", []), strict=False):
                if not v > 0 and not sd > 0:
                    column = shorten(getattr(data, "headers", {}).get("value", role))
                    raise study_error(f"{path.name} line {line}, column {column}: "
                                      f"instrument {ob.instrument} has a cv (lognormal) error, which needs positive "
                                      "values", ctx.file, f"{key}.file", ob.file)
        new = new.with_data(path, data)
    return new, kept


def _check_data_magnitudes(ob: Observation, sym: str | None, data: Mapping[str, list], path: Path, key: str,
                           ctx: SectionContext, difference: bool = False) -> None:
    """Refuse a data-file reading (or sd) outside the plausible range, naming its file and line only
    (``difference``: the readings are a difference of two quantities, checked as a shift of ``sym``)."""
    if sym is None and ob.kind == "volume_time_course":
        sym = "volume"
    if sym is None:
        return
    role = "volume" if ob.kind == "volume_time_course" else "value"
    for col, spread in ((role, difference), ("sd", True)):
        values = data.get(col) or []
        for x, line in zip(values, data.get("line", []), strict=False):
            if not math.isfinite(x):
                continue
            try:
                canon = convert_unit(sym, x, ob.unit, density=ctx.density, tissue_mass_kg=ctx.tissue_mass_kg)
            except UnitError:
                return  # the unit is checked where it is declared
            if magnitude_problem(sym, canon, spread=spread) is not None:
                rng = plausible(sym)
                header = getattr(data, "headers", {}).get(col if col != role else "value", col)
                what = "an sd wider than" if spread else "outside"
                span = f"{rng.low:.4g} to {rng.high:.4g} {units.CANONICAL[sym]}" if rng else "its range"
                raise study_error(f"{path.name} line {line}, column {shorten(header)}: {what} the plausible range "
                                  f"of {sym} ({span})", ctx.file, f"{key}.file", ob.file)


def resolve_rank(rank: RankSection, kept: Kept, ctx: SectionContext) -> tuple[RankSection, Kept]:
    """``[rank]`` with each candidate's noise in canonical units (or its instrument's).

    Parameters
    ----------
    rank : RankSection
        As written (not changed).
    kept : Kept
        What the sections added so far.
    ctx : SectionContext
        The study so far.

    Returns
    -------
    RankSection
        A copy with resolved candidates.
    Kept
        ``kept`` with the instruments and priors the candidates name.

    Raises
    ------
    StudyError
        An unknown quantity or instrument, or a bad unit.
    """
    candidates: list[Candidate] = []
    for i, c in enumerate(rank.candidates):
        key = f"rank.candidates[{i}]"
        kept = keep_known(c.parameter, f"{key}.parameter", kept, ctx)
        inst = None
        if c.instrument:
            inst, kept = use_instrument(c.instrument, f"{key}.instrument", c.parameter, kept, ctx)
        update: dict[str, Any] = {}
        read_sym = inst.reading_symbol if inst is not None else c.parameter  # the unit of what it reads
        if c.sd is not None:
            update["sd"] = ctx.convert(read_sym, c.sd, c.unit, f"{key}.unit" if c.unit is not None
                                       else f"{key}.sd", f"{key}.sd")
            update["unit"] = units.CANONICAL[read_sym]
            check_plausible(read_sym, update["sd"], ctx.file, f"{key}.sd", c.sd, spread=True)
        elif c.cv is None and inst is not None:
            update["sd"], update["cv"] = inst.sd, inst.cv
        candidates.append(c.model_copy(update=update))
    return rank.model_copy(update={"candidates": candidates}), kept


def resolve_design(dsn: DesignSection, kept: Kept, ctx: SectionContext) -> tuple[DesignSection, Kept]:
    """``[design]`` with effect shifts in canonical units and the design / analysis priors parsed.

    Parameters
    ----------
    dsn : DesignSection
        As written (not changed).
    kept : Kept
        What the sections added so far.
    ctx : SectionContext
        The study so far.

    Returns
    -------
    DesignSection
        A copy with resolved effects and the parsed priors (``design_prior_obj`` / ``analysis_prior_obj``).
    Kept
        ``kept`` with the priors the section names.

    Raises
    ------
    StudyError
        An unknown quantity, a bad unit or a bad prior declaration.
    """
    effects: list[Effect] = []
    for ekey, eff in [("design.effect", dsn.effect)] + [
            (f"design.extra_effects[{i}]", e) for i, e in enumerate(dsn.extra_effects)]:
        kept = keep_known(eff.parameter, f"{ekey}.parameter", kept, ctx)
        if eff.shift is not None and eff.unit is not None:
            eff = eff.model_copy(update={"shift": ctx.convert(eff.parameter, eff.shift, eff.unit, f"{ekey}.unit",
                                                                  f"{ekey}.shift"),
                                         "unit": units.CANONICAL[eff.parameter]})
        check_plausible(eff.parameter, eff.shift, ctx.file, f"{ekey}.shift", spread=True)
        effects.append(eff)
    known = set(ctx.known) | {s for s, _ in kept.priors}
    endpoint = NAMED_ENDPOINTS.get(dsn.endpoint, dsn.endpoint)
    if endpoint not in known and endpoint not in CSV_COLUMNS and not is_time_endpoint(endpoint):
        kept = keep_known(endpoint, "design.endpoint", kept, ctx)
    for part, spreads in (("between_subject", dsn.between_subject), ("within_subject", dsn.within_subject)):
        for sym, spread in spreads.items():
            kept = keep_known(sym, f"design.{part}.{sym}", kept, ctx)
            check_plausible(sym, spread.sd, ctx.file, f"design.{part}.{sym}.sd", spread=True)
    parsed: dict[str, Prior | None] = {}
    for part in ("design_prior", "analysis_prior"):
        spec = getattr(dsn, part)
        parsed[part] = None if spec is None else parse_prior(
            "dP", spec, ctx=Context(ctx.file, ctx.density), key=f"design.{part}", check_sign=False)
    new = dsn.model_copy(update={"effect": effects[0], "extra_effects": effects[1:]})
    return new.with_priors(parsed["design_prior"], parsed["analysis_prior"]), kept


@dataclass(frozen=True)
class Sections:
    """The resolved analysis sections.

    Attributes
    ----------
    propagate, sensitivity, rank, design, schedule, calibrate, infer : section or None
        The analysis sections (rank and design resolved to canonical units).
    observations : list of Observation, or None
        The observations in canonical units, with their data files.
    kept : Kept
        The priors, instruments and notes the sections add.
    """

    propagate: PropagateSection | None
    sensitivity: SensitivitySection | None
    rank: RankSection | None
    design: DesignSection | None
    schedule: ScheduleSection | None
    infer: InferSection | None
    observations: list[Observation] | None
    kept: Kept
    calibrate: CalibrateSection | None = None


def resolve_sections(inp: StudyInput, form: FormInputs, base: TissueBase, Pi_ref: float | None) -> Sections:
    """Check and resolve the analysis sections and observations against the study's quantities.

    Parameters
    ----------
    inp : StudyInput
        The validated sections as written.
    form : FormInputs
        What the model form takes (its priors, derivations and the remaining declarations).
    base : TissueBase
        Tissue mass (kg) and density (g/mL) for unit conversion.
    Pi_ref : float or None
        The steady forms' reference interstitial pressure (mmHg), for the outputs offered.

    Returns
    -------
    Sections
        The resolved sections and what they add to the study.

    Raises
    ------
    StudyError
        An unknown output, quantity or instrument, a bad unit or a bad data file.
    """
    head, file = inp.head, inp.file
    kept = Kept()
    outputs = form_outputs(head.model, head.tissue, base.tissue_mass_kg, form.derived, form.priors, Pi_ref)
    ctx = SectionContext(file=file, base_dir=inp.base_dir, tissue=head.tissue, model=head.model,
                         tissue_mass_kg=base.tissue_mass_kg, density=base.density,
                         known=frozenset(set(form.priors) | set(form.derived) | set(outputs)),
                         pool=form.declared.priors)
    propagate = inp.section("propagate", PropagateSection)
    sensitivity = inp.section("sensitivity", SensitivitySection)
    infer = inp.section("infer", InferSection)
    if infer is not None and inp.observations is None:
        kept = kept.plus(note="[infer] is set but the study has no [[observations]]: no inference runs")
    if propagate is not None:
        for i, o in enumerate(propagate.outputs or []):
            if o not in outputs:
                raise study_error(f"unknown output (the {head.model} form gives {', '.join(outputs)})", file,
                                  f"propagate.outputs[{i}]", o)
    if sensitivity is not None and sensitivity.output not in outputs and not is_time_endpoint(sensitivity.output):
        raise study_error(f"unknown output (the {head.model} form gives {', '.join(outputs)})", file,
                          "sensitivity.output", sensitivity.output)
    observations: list[Observation] | None = None
    if inp.observations is not None:
        observations = []
        for i, ob in enumerate(inp.observations):
            new, kept = resolve_observation(ob, i, kept, ctx)
            observations.append(new)
    rank = inp.section("rank", RankSection)
    if rank is not None:
        rank, kept = resolve_rank(rank, kept, ctx)
        with_kept = {**form.priors, **dict(kept.priors)}  # a kept C_tis offers the oedema volume
        if not is_time_endpoint(rank.output) and rank.output not in form_outputs(
                head.model, head.tissue, base.tissue_mass_kg, form.derived, with_kept, Pi_ref):
            raise study_error("unknown output", file, "rank.output", rank.output)
    design = inp.section("design", DesignSection)
    if design is not None:
        design, kept = resolve_design(design, kept, ctx)
    return Sections(propagate=propagate, sensitivity=sensitivity, rank=rank, design=design,
                    schedule=inp.section("schedule", ScheduleSection), infer=infer, observations=observations,
                    kept=kept, calibrate=inp.section("calibrate", CalibrateSection))


# --------------------------------------------------------------------------------------------
# 7. Correlations
# --------------------------------------------------------------------------------------------

@dataclass(frozen=True)
class Correlations:
    """The normal-score (Gaussian copula) correlations of a study.

    Attributes
    ----------
    names : list of str
        The uncertain inputs, in order (rows and columns of ``matrix``).
    matrix : numpy.ndarray
        The correlation matrix (dimensionless), symmetric, unit diagonal, positive definite.
    pairs : list of (str, str, float)
        The pairs kept.
    notes : tuple of str
        What was dropped or replaced.
    """

    names: list[str]
    matrix: np.ndarray
    pairs: list[tuple[str, str, float]]
    notes: tuple[str, ...] = ()


def _study_pairs(section: CorrelationsSection, names: Sequence[str], priors: Mapping[str, Prior],
                 alias: Mapping[str, str], file: str, *, layer: str = "pairs",
                 derived: Set[str] = frozenset()) -> list[tuple[str, str, str, str, float]]:
    """``[correlations]`` pairs (``layer``: ``pairs`` or ``between_subject``) as (written a, written b,
    input a, input b, rho), checked."""
    out: list[tuple[str, str, str, str, float]] = []
    seen: set[frozenset[str]] = set()
    for i, pair in enumerate(getattr(section, layer)):
        key = f"correlations.{layer}[{i}]"
        if len(pair) != 3 or not isinstance(pair[0], str) or not isinstance(pair[1], str) \
                or isinstance(pair[2], str):
            raise study_error("a pair is [quantity, quantity, rho]", file, key, pair)
        a, b, rho = pair[0], pair[1], float(pair[2])
        if not math.isfinite(rho) or not -1 <= rho <= 1:
            raise study_error("a correlation lies between -1 and 1", file, f"{key}[2]", pair[2])
        if a == b:
            raise study_error("a quantity paired with itself", file, key, pair)
        a2, b2 = alias.get(a, a), alias.get(b, b)
        for j, (s, s2) in enumerate(((a, a2), (b, b2))):
            if s2 not in names:
                if layer == "between_subject":
                    why = ("it has no between-subject spread" if s2 in priors
                           else "it is derived from other quantities (correlate those)" if s2 in derived
                           else "it is not a quantity of this study")
                    raise study_error(f"cannot correlate {s} between subjects: {why}", file,
                                      f"{key}[{j}]", s)
                why = "fixed" if s2 in priors else "not an uncertain input of this study"
                raise study_error(f"cannot correlate {s}: it is {why}", file, f"{key}[{j}]", s)
        fs = frozenset((a2, b2))
        if fs in seen:
            raise study_error("this pair is given twice", file, key, pair)
        seen.add(fs)
        out.append((a, b, a2, b2, rho))
    return out


def resolve_correlations(priors: Mapping[str, Prior], derived: Mapping[str, Derivation],
                         prior_set_pairs: Sequence[tuple[str, str, float]], overridden: Set[str],
                         section: CorrelationsSection | None, model: str, file: str) -> Correlations:
    """The correlation matrix over the uncertain inputs.

    A prior-set pair involving an overridden quantity is dropped; a pair named on a derived
    quantity with a single input (pi_c from Cp) applies to that input; ``[correlations]`` pairs
    replace prior-set pairs over the same inputs. The matrix is refused, never repaired.

    Parameters
    ----------
    priors : Mapping of str to Prior
        The study's priors (fixed ones are not uncertain inputs).
    derived : Mapping of str to Derivation
        Every derivation left after the solved quantities are set aside.
    prior_set_pairs : Sequence of (str, str, float)
        The prior set's correlations.
    overridden : Set of str
        Quantities ``[parameters]`` declares.
    section : CorrelationsSection or None
        ``[correlations]`` as written.
    model : str
        The model form, for notes.
    file : str
        The study file, for messages.

    Returns
    -------
    Correlations
        Names, matrix, kept pairs and notes.

    Raises
    ------
    StudyError
        A malformed pair, a pair on a fixed or unknown quantity, a pair given twice, or a matrix that
        is not positive definite (``correlations.pairs``).
    """
    names = [s for s, p in priors.items() if not p.is_fixed]
    alias = _single_input_aliases(derived)
    given = _study_pairs(section, names, priors, alias, file) if section is not None else []
    return _layer_correlations(names, alias, prior_set_pairs, overridden, given, file=file,
                               what="prior-set correlation", unused=f"is not an uncertain input of the {model} form",
                               replaces="[correlations]", matrix_of="the correlations", key="correlations.pairs")


def _single_input_aliases(derived: Mapping[str, Derivation]) -> dict[str, str]:
    """Derived quantities with a single input (pi_c from Cp): a correlation named on one applies to its input."""
    return {t: d.inputs[0] for t, d in derived.items() if len(d.inputs) == 1 and d.formula != "gaar"}


def _layer_correlations(names: list[str], alias: Mapping[str, str], prior_set_pairs: Sequence[tuple[str, str, float]],
                        overridden: Set[str], given: Sequence[tuple[str, str, str, str, float]], *, file: str,
                        what: str, unused: str, replaces: str, matrix_of: str, key: str) -> Correlations:
    """One layer's correlation matrix over ``names``: the prior set's pairs (dropped with a note when they
    involve an overridden quantity or one outside ``names``), then the study's ``given`` pairs replacing them;
    refused, never repaired, when not positive definite. ``what``, ``unused``, ``replaces``, ``matrix_of`` and
    ``key`` word the notes and the refusal for the layer."""
    notes: list[str] = []
    kept: dict[frozenset[str], tuple[str, str, float]] = {}
    for (a, b, rho) in prior_set_pairs:
        if a in overridden or b in overridden:
            notes.append(f"{what} {a}-{b} ({rho:g}) dropped: {a if a in overridden else b} is overridden by the "
                         "study")
            continue
        a2, b2 = alias.get(a, a), alias.get(b, b)
        if a2 not in names or b2 not in names:
            notes.append(f"{what} {a}-{b} ({rho:g}) not used: {a if a2 not in names else b} {unused}")
            continue
        kept[frozenset((a2, b2))] = (a2, b2, rho)
    for a, b, a2, b2, rho in given:
        fs = frozenset((a2, b2))
        if fs in kept:
            notes.append(f"{replaces} {a}-{b} replaces the prior set's value {kept[fs][2]:g}")
        kept[fs] = (a2, b2, rho)
    corr = np.eye(len(names))
    idx = {n: i for i, n in enumerate(names)}
    for a, b, rho in kept.values():
        corr[idx[a], idx[b]] = corr[idx[b], idx[a]] = rho
    if kept:
        eig = float(np.linalg.eigvalsh(corr).min())
        if not eig > 1e-10:
            raise study_error(f"{matrix_of} do not form a valid (positive-definite) correlation matrix; smallest "
                              f"eigenvalue {eig:.3g}; revise the pairs (it is not repaired)", file, key,
                              [list(p) for p in kept.values()])
    return Correlations(names=names, matrix=corr, pairs=list(kept.values()), notes=tuple(notes))


# --------------------------------------------------------------------------------------------
# 8. Scenarios (what-ifs on the same draws)
# --------------------------------------------------------------------------------------------

#: a scenario change: a sign and a number with an optional unit (a shift), or x / * and a number (a multiplier)
_CHANGE = re.compile(r"^\s*(?P<op>[+\-x*\u00d7])\s*(?P<num>(?:\d+\.?\d*|\.\d+)(?:[eE][+\-]?\d+)?)\s*(?P<unit>.*?)\s*$")


def parse_change(symbol: str, text: str, file: str, key: str, density: float = 1.05,
                 tissue_mass_kg: float | None = None) -> ScenarioChange:
    """One scenario change as written (``"+1 g/dL"``, ``"-5 mmHg"``, ``"x0.9"``) in canonical units.

    Parameters
    ----------
    symbol : str
        The quantity changed (a trade symbol with a canonical unit).
    text : str
        The change as written.
    file, key : str
        The study file and the change's key path, for messages.
    density : float
        Tissue density (g/mL), for per-100 mL units.
    tissue_mass_kg : float or None
        Organ mass (kg), for per-organ units.

    Returns
    -------
    ScenarioChange
        A shift in the canonical unit of ``symbol``, or a multiplier (dimensionless, > 0).

    Raises
    ------
    StudyError
        A change that is neither form, a multiplier with a unit or not above 0, a unit that does not
        convert to the quantity's canonical unit.
    """
    m = _CHANGE.match(text)
    if m is None:
        raise study_error("a change is \"+1 g/dL\" / \"-5 mmHg\" (a shift) or \"x0.9\" (a multiplier)",
                          file, key, text)
    op, num, unit = m.group("op"), float(m.group("num")), m.group("unit") or None
    if op in "x*\u00d7":
        if unit is not None:
            raise study_error("a multiplier takes no unit (\"x0.9\")", file, key, text)
        if not (math.isfinite(num) and num > 0):
            raise study_error("a multiplier must be above 0", file, key, text)
        return ScenarioChange(symbol=symbol, text=text, multiply=num)
    try:
        shift = convert_unit(symbol, num, unit, density=density, tissue_mass_kg=tissue_mass_kg)
    except UnitError as exc:
        raise study_error(exc.reason, file, key, text) from None
    if not math.isfinite(shift):
        raise study_error("the shift is not a finite number", file, key, text)
    return ScenarioChange(symbol=symbol, text=text, shift=-shift if op == "-" else shift)


def resolve_scenarios(scenarios: Sequence[Scenario], head: StudySection, inputs: Set[str], base: TissueBase,
                      file: str) -> list[Scenario]:
    """``[[scenarios]]`` with their changes parsed into canonical units and their conditions checked.

    Parameters
    ----------
    scenarios : sequence of Scenario
        As written (not changed).
    head : StudySection
        ``[study]`` (tissue and the conditions a scenario adds to or removes from).
    inputs : set of str
        The quantities the study's model form reads (priors and derived quantities).
    base : TissueBase
        Density (g/mL) and tissue mass (kg), for unit conversion.
    file : str
        The study file, for messages.

    Returns
    -------
    list of Scenario
        Copies carrying ``changes_resolved``.

    Raises
    ------
    StudyError
        An unknown quantity (not an input of the model), a bad change or unit, an unknown condition,
        one for another tissue, one added that the study already has or removed that it has not.
    """
    out: list[Scenario] = []
    conditions = load_conditions() if any(sc.conditions_add for sc in scenarios) else {}
    for i, sc in enumerate(scenarios):
        key = f"scenarios[{i}]"
        changes = []
        for sym, text in sc.changes.items():
            ckey = f"{key}.changes.{sym}"
            if sym not in inputs:
                raise study_error(f"not an input of this study's model (inputs: {', '.join(sorted(inputs))})",
                                  file, ckey, sym)
            changes.append(parse_change(sym, text, file, ckey, density=base.density,
                                        tissue_mass_kg=base.tissue_mass_kg))
        for j, cname in enumerate(sc.conditions_add):
            ckey = f"{key}.conditions_add[{j}]"
            if cname not in conditions:
                known = ", ".join(sorted(conditions)) or "none installed"
                raise study_error(f"unknown condition (known: {known})", file, ckey, cname)
            if cname in head.conditions:
                raise study_error("the study already has this condition (remove it with conditions_remove)",
                                  file, ckey, cname)
            cond = conditions[cname]
            if cond.applies_to is not None and head.tissue not in cond.applies_to:
                raise study_error(f"condition {cname} applies to {', '.join(cond.applies_to)} only", file, ckey,
                                  cname)
        for j, cname in enumerate(sc.conditions_remove):
            if cname not in head.conditions:
                raise study_error("not a condition of this study ([study] conditions: "
                                  f"{', '.join(head.conditions) or 'none'})", file, f"{key}.conditions_remove[{j}]",
                                  cname)
        out.append(sc.with_changes(tuple(changes)))
    return out


def resolve_between_correlations(priors: Mapping[str, Prior], derived: Mapping[str, Derivation],
                                 prior_set_pairs: Sequence[tuple[str, str, float]], overridden: Set[str],
                                 section: CorrelationsSection | None, file: str) -> Correlations:
    """The normal-score correlation matrix of the between-subject layer.

    Over the quantities with a between-subject spread (``Prior.between_subject``), in ``priors`` order:
    how the deviations of one person from the typical subject go together (quantities coupled between
    people). The rules are those of :func:`resolve_correlations`: a prior-set pair involving an
    overridden quantity, or a quantity without a spread, is dropped with a note; a pair named on a
    derived quantity with a single input applies to that input; ``[correlations] between_subject``
    pairs replace prior-set pairs over the same quantities; the matrix is refused, never repaired.

    Parameters
    ----------
    priors : Mapping of str to Prior
        The study's priors.
    derived : Mapping of str to Derivation
        Every derivation left after the solved quantities are set aside.
    prior_set_pairs : Sequence of (str, str, float)
        The prior set's ``layer = "between_subject"`` correlations.
    overridden : Set of str
        Quantities ``[parameters]`` declares.
    section : CorrelationsSection or None
        ``[correlations]`` as written (its ``between_subject`` pairs).
    file : str
        The study file, for messages.

    Returns
    -------
    Correlations
        Names (the quantities with a spread), matrix (dimensionless), kept pairs and notes; no pairs
        leaves the identity, and the draws are exactly those of a study without the layer.

    Raises
    ------
    StudyError
        A malformed pair, a pair on a quantity without a spread or unknown, a pair given twice, or a
        matrix that is not positive definite (``correlations.between_subject``).
    """
    names = [s for s, p in priors.items() if getattr(p, "between_subject", None)]
    alias = _single_input_aliases(derived)
    given = (_study_pairs(section, names, priors, alias, file, layer="between_subject", derived=set(derived))
             if section is not None else [])
    return _layer_correlations(names, alias, prior_set_pairs, overridden, given, file=file,
                               what="prior-set between-subject correlation",
                               unused="has no between-subject spread in this study",
                               replaces="[correlations] between_subject", matrix_of="the between-subject correlations",
                               key="correlations.between_subject")
