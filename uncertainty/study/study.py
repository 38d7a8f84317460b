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

import hashlib
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
from pydantic import BaseModel, ValidationError

from uncertainty.core.errors import StudyError, UnitError, study_error
from uncertainty.core.toml_io import parse_toml_bytes
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
    convert_unit,
    load_conditions,
    load_instruments,
    load_prior_set,
    parse_entry,
    parse_prior,
)
from uncertainty.study.data_files import read_csv
from uncertainty.study.schema import (
    CSV_COLUMNS,
    OBS_SYMBOL,
    SECTIONS,
    TOP_LEVEL,
    CorrelationsSection,
    DesignSection,
    InferSection,
    Observation,
    PropagateSection,
    RankSection,
    ScheduleSection,
    SensitivitySection,
    StudySection,
)


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
        """Output names ``forms.evaluate`` gives for this study (from the form catalogue)."""
        return study_outputs(self)

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


def _build(doc: Mapping[str, Any], file: str, path: Path | None, base_dir: Path,
           file_hash: str | None) -> Study:
    from uncertainty.core import units

    if not isinstance(doc, Mapping):
        raise study_error("a study is a TOML table", file, None, None)
    for k in doc:
        if k not in TOP_LEVEL:
            raise study_error("unknown section (allowed: " + ", ".join(TOP_LEVEL) + ")", file, str(k), None)
    if "study" not in doc:
        raise study_error("missing [study] section", file, "study", None)
    head: StudySection = _section_model(StudySection, doc["study"], file, "study")
    notes: list[str] = []

    tissue_mass_kg = None
    if head.tissue_mass is not None:
        try:
            tissue_mass_kg = units.to_canonical("tissue_mass", head.tissue_mass)
        except UnitError as exc:
            raise study_error(exc.reason, file, "study.tissue_mass", head.tissue_mass) from None
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
    density = pset.density
    priors = dict(pset.priors)
    derived = dict(pset.derived)

    height_cm = None
    if head.posture_height is not None:
        key = "study.posture_height"
        if "posture" not in head.conditions:
            raise study_error("posture_height applies with the posture condition (add \"posture\" to conditions)",
                       file, key, head.posture_height)
        try:
            height_cm = units.to_canonical("height", head.posture_height)
        except UnitError as exc:
            raise study_error(exc.reason, file, key, head.posture_height) from None
        if not 0 < height_cm <= 200:
            raise study_error("posture_height is a height below the heart, above 0 and at most 200 cm", file, key,
                       head.posture_height)

    # ---- conditions
    conditions = load_conditions() if head.conditions else {}
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
        raise study_error("[parameters] must be a table", file, "parameters", params)
    ctx = Context(file=file, density=density, tissue_mass_kg=tissue_mass_kg)
    solved = SOLVED[head.model]
    overridden: set[str] = set()
    declared_here: dict[str, str] = {}
    for sym, decl in params.items():
        key = f"parameters.{sym}"
        if not isinstance(sym, str) or sym not in units.CANONICAL or sym in OUTPUT_ONLY:
            raise study_error("unknown quantity (use a trade symbol such as Pc, Pi, pi_c, pi_i, sigma, Kf)", file, key,
                       sym)
        if sym in solved:
            what = "always derived, never a prior" if sym == "pi_g" and head.model == "classic" else \
                f"solved by the {head.model} form (lymph balance and protein flux), not sampled; remove it " \
                "or use model = \"classic\""
            raise study_error(f"{sym} is {what}", file, key, decl)
        new, der = parse_entry(sym, decl, ctx=ctx, key=key)
        for s in new:
            if s in declared_here:
                raise study_error(f"duplicate quantity: {s} is also declared by parameters.{declared_here[s]}", file,
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
    tissue_only = tissue_inputs(head.model, head.tissue)
    for s in wanted:
        if s in derived:
            used_derived[s] = derived[s]
            for inp in derived[s].inputs:
                if inp not in priors:
                    raise study_error(f"{s} is derived from {inp}, which has no prior", file, f"parameters.{inp}", None)
                if inp not in needed:
                    needed.append(inp)
        elif s in priors:
            if s not in needed:
                needed.append(s)
        else:
            why = f" for {head.tissue}" if s in tissue_only else ""
            raise study_error(f"the {head.tissue} prior set gives no prior for {s}, which the {head.model} form needs"
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
            raise study_error("observations are [[observations]] tables", file, "observations", None)
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
        raise study_error(f"not a quantity of this study (known: {', '.join(sorted(known))})", file, key, sym)

    def need_instrument(name: str, key: str, measures: str | None) -> Instrument:
        inst = instruments().get(name)
        if inst is None:
            known_i = ", ".join(sorted(instruments())) or "none installed"
            raise study_error(f"unknown instrument (known: {known_i})", file, key, name)
        if measures is not None and inst.measures != measures:
            raise study_error(f"instrument {name} measures {inst.measures}, not {measures}", file, key, name)
        if inst.tissues is not None and head.tissue not in inst.tissues:
            notes.append(f"instrument {name} is listed for {', '.join(inst.tissues)}, not {head.tissue}")
        study.instruments[name] = inst
        return inst

    def convert(sym: str, value: float, unit: str | None, key: str) -> float:
        try:
            return convert_unit(sym, value, unit, density=density, tissue_mass_kg=tissue_mass_kg)
        except UnitError as exc:
            raise study_error(exc.reason, file, key, unit if unit is not None else value) from None

    if study.propagate is not None:
        for i, o in enumerate(study.propagate.outputs or []):
            if o not in study.outputs():
                raise study_error(f"unknown output (the {head.model} form gives {', '.join(study.outputs())})", file,
                           f"propagate.outputs[{i}]", o)
    if study.sensitivity is not None and study.sensitivity.output not in study.outputs():
        raise study_error(f"unknown output (the {head.model} form gives {', '.join(study.outputs())})", file,
                   "sensitivity.output", study.sensitivity.output)

    for i, ob in enumerate(study.observations or []):
        key = f"observations[{i}]"
        if ob.kind == "lymph_flow" and head.tissue in NO_LYMPH:
            raise study_error(f"lymph-flow observations are refused for {head.tissue}: {NO_LYMPH[head.tissue]}", file,
                       f"{key}.kind", ob.kind)
        predicting = forms_predicting(ob.kind)
        if predicting and head.model not in predicting:
            wanted = " or ".join(f"model = \"{m}\"" for m in predicting)
            raise study_error(f"a {ob.kind} observation needs {wanted} (the {head.model} form does not predict it)",
                              file, f"{key}.kind", ob.kind)
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
                    raise study_error("unknown quantity", file, f"{skey}.parameter", st.parameter)
                st.to = convert(st.parameter, st.to, st.unit, f"{skey}.unit" if st.unit else f"{skey}.to")
                st.unit = units.CANONICAL[st.parameter]
        if ob.file is not None:
            ob._path, ob._data = read_csv(ob, base_dir, file, key)

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
            raise study_error("unknown output", file, "rank.output", study.rank.output)

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
                raise study_error("a pair is [quantity, quantity, rho]", file, key, pair)
            a, b, rho = pair[0], pair[1], float(pair[2])
            if not math.isfinite(rho) or not -1 <= rho <= 1:
                raise study_error("a correlation lies between -1 and 1", file, f"{key}[2]", pair[2])
            if a == b:
                raise study_error("a quantity paired with itself", file, key, pair)
            a2, b2 = alias.get(a, a), alias.get(b, b)
            for j, (s, s2) in enumerate(((a, a2), (b, b2))):
                if s2 not in names:
                    why = "fixed" if s2 in study.priors else "not an uncertain input of this study"
                    raise study_error(f"cannot correlate {s}: it is {why}", file, f"{key}[{j}]", s)
            fs = frozenset((a2, b2))
            if fs in seen_pairs:
                raise study_error("this pair is given twice", file, key, pair)
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
            raise study_error("the correlations do not form a valid (positive-definite) correlation matrix; "
                       f"smallest eigenvalue {eig:.3g}; revise the pairs (it is not repaired)", file,
                       "correlations.pairs", [list(p) for p in kept.values()])
    study.names = names
    study.correlation = corr
    study.correlations = list(kept.values())
    return study


def resolved_rows(study: Study) -> list[dict[str, Any]]:
    """Rows of the resolved priors for ``fluidshift check`` (as ``priors show``), derived ones after."""
    from uncertainty.priors import prior_rows

    rows = prior_rows(study.priors, study.derived)
    for row in rows:
        row["uncertain"] = row["symbol"] in study.names
    return rows
