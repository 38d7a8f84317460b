"""The study's resolution steps one by one (uncertainty/study/resolve.py) and the frozen Study.

Check values are the numbers of the shipped prior files (priors/skeletal_muscle.toml, the
venous_congestion row of priors/conditions.toml, each with its origin there) and closed-form unit
conversions (1 kg = 1000 g; 1 h = 60 min; 1 kPa = 7.50062 mmHg; common practice). Declarations
given as study inputs (e.g. Pv normal 12 +- 2 mmHg) are test inputs, not physiological claims.
"""

from __future__ import annotations

import dataclasses
import textwrap
import tomllib
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from uncertainty.analyses.inference.problem import problem_from_study
from uncertainty.core.errors import StudyError
from uncertainty.priors import load_prior_set
from uncertainty.study import Observation, Study, load_study
from uncertainty.study.resolve import (
    Declared,
    FormInputs,
    apply_conditions,
    apply_overrides,
    resolve_correlations,
    resolve_sections,
    select_inputs,
    steady_references,
    tissue_base,
    validate_document,
)
from uncertainty.study.schema import CorrelationsSection, StudySection

MUSCLE = load_prior_set("skeletal_muscle")
FILE = "<test>"
KPA = 7.50062  # mmHg per kPa (common practice)


def _head(**kw: Any) -> StudySection:
    return StudySection.model_validate({"tissue": "skeletal_muscle", **kw})


def _input(doc: dict[str, Any], base_dir: Path = Path(".")):
    return validate_document(doc, FILE, None, base_dir)


# ---- 1. the document, as written ----------------------------------------------------------------

def test_validate_document_keeps_sections_as_written() -> None:
    doc = {"study": {"tissue": "skeletal_muscle", "tissue_mass": "300 g"},
           "parameters": {"Pv": 12},
           "observations": [{"kind": "measurement", "parameter": "Pc", "value": 3.0, "sd": 0.2, "unit": "kPa"}],
           "propagate": {"samples": 1024}}
    inp = _input(doc)
    assert inp.head.tissue_mass == "300 g" and inp.parameters == {"Pv": 12}
    assert inp.observations is not None and inp.observations[0].value == 3.0  # not converted here
    assert inp.observations[0].unit == "kPa"
    assert set(inp.sections) == {"propagate"}
    assert inp.document == doc
    with pytest.raises(TypeError):
        inp.document["study"] = {}  # type: ignore[index]
    doc["parameters"]["Pv"] = 99  # the caller's document may change; the input does not
    assert inp.parameters == {"Pv": 12}


def test_validate_document_names_key_path() -> None:
    with pytest.raises(StudyError) as exc:
        _input({"study": {"tissue": "skeletal_muscle"}, "propagate": {"samples": "many"}})
    assert exc.value.key == "propagate.samples" and exc.value.value == "many"


# ---- 2. tissue base ---------------------------------------------------------------------------

def test_tissue_base_mass_and_prior_set() -> None:
    base = tissue_base(_head(tissue_mass="300 g"), FILE)
    assert base.tissue_mass_kg == pytest.approx(0.3)  # 1 kg = 1000 g
    assert base.prior_set.name == "skeletal_muscle" and base.density == MUSCLE.density
    assert base.declared().priors["Pv"] == MUSCLE.priors["Pv"]


# ---- 3. conditions ----------------------------------------------------------------------------

def test_a_condition_shifts_a_prior_and_leaves_its_input_alone() -> None:
    head = _head(conditions=["venous_congestion"])
    base = tissue_base(head, FILE)
    before = base.declared()
    after = apply_conditions(before, head, base, FILE)
    # venous_congestion: Pv shift 20 mmHg, extra_sd 2 (priors/conditions.toml)
    assert after.priors["Pv"].params["mean"] == pytest.approx(MUSCLE.priors["Pv"].params["mean"] + 20.0)
    assert after.priors["Pv"].params["sd"] == pytest.approx(np.hypot(MUSCLE.priors["Pv"].params["sd"], 2.0))
    assert before.priors["Pv"] is MUSCLE.priors["Pv"]
    assert after is not before and after.priors is not before.priors


def test_unknown_condition_names_its_position() -> None:
    head = _head(conditions=["venous_congestion", "no_such_condition"])
    base = tissue_base(head, FILE)
    with pytest.raises(StudyError) as exc:
        apply_conditions(base.declared(), head, base, FILE)
    assert exc.value.key == "study.conditions[1]" and exc.value.value == "no_such_condition"


# ---- 4. overrides -----------------------------------------------------------------------------

def test_an_override_replaces_the_whole_declaration() -> None:
    head = _head()
    base = tissue_base(head, FILE)
    declared = base.declared()
    assert MUSCLE.priors["Pv"].between_subject == {"cv": 0.37}  # priors/skeletal_muscle.toml
    out = apply_overrides(declared, {"Pv": {"dist": "normal", "mean": 12, "sd": 2, "unit": "mmHg"}}, head, base,
                          FILE)
    assert out.priors["Pv"].params == {"mean": 12.0, "sd": 2.0}
    assert out.priors["Pv"].between_subject is None  # the spread goes with the declaration it belonged to
    assert out.overridden == {"Pv"}
    assert declared.priors["Pv"] is MUSCLE.priors["Pv"]  # input untouched
    stated = apply_overrides(declared, {"Pv": {"dist": "normal", "mean": 12, "sd": 2, "between_subject": {"cv": 0.2}}},
                             head, base, FILE)
    assert stated.priors["Pv"].between_subject == {"cv": 0.2}


def test_override_of_a_solved_quantity_is_refused() -> None:
    head = _head(model="steady_state")
    base = tissue_base(head, FILE)
    with pytest.raises(StudyError) as exc:
        apply_overrides(base.declared(), {"Pi": -1}, head, base, FILE)
    assert exc.value.key == "parameters.Pi" and "solved" in exc.value.reason


# ---- 5. what the form needs -------------------------------------------------------------------

def test_select_inputs_sets_aside_solved_quantities() -> None:
    head = _head(model="steady_state")
    base = tissue_base(head, FILE)
    form = select_inputs(base.declared(), head, FILE)
    assert "Pi" not in form.priors and "pi_i" not in form.derived and "Pi" not in form.declared.priors
    assert any("solves" in n and "Pi" in n for n in form.declared.notes)
    classic = select_inputs(base.declared(), _head(), FILE)
    assert "Pi" in classic.priors
    Pi_ref, _ = steady_references(head, base, form.derived)
    assert Pi_ref == pytest.approx(MUSCLE.priors["Pi"].median())  # the prior set's own Pi, -1.0 mmHg


def test_select_inputs_names_the_missing_prior() -> None:
    head = _head()
    declared = tissue_base(head, FILE).declared()
    without = Declared(priors={k: v for k, v in declared.priors.items() if k != "Kf"}, derived=declared.derived)
    with pytest.raises(StudyError) as exc:
        select_inputs(without, head, FILE)
    assert exc.value.key == "parameters.Kf" and exc.value.value is None


# ---- 6. sections ------------------------------------------------------------------------------

def test_sections_convert_copies_not_the_validated_input() -> None:
    doc = {"study": {"tissue": "skeletal_muscle"},
           "observations": [{"kind": "measurement", "parameter": "Pc", "value": 3.0, "sd": 0.2, "unit": "kPa"},
                            {"kind": "lymph_flow", "value": 0.12, "sd": 0.03, "unit": "mL/h/100g"}]}
    inp = _input(doc)
    base = tissue_base(inp.head, FILE)
    form = select_inputs(base.declared(), inp.head, FILE)
    sections = resolve_sections(inp, form, base, None)
    assert sections.observations is not None
    pc, lymph = sections.observations
    assert pc.value == pytest.approx(3.0 * KPA, rel=1e-5) and pc.unit == "mmHg" and pc.declared_unit == "kPa"
    assert lymph.value == pytest.approx(0.12 / 60)  # 1 h = 60 min
    assert inp.observations is not None
    assert inp.observations[0].value == 3.0 and inp.observations[0].unit == "kPa"  # as written still
    assert inp.observations[0].declared_unit is None


def test_sections_keep_a_declared_prior_the_form_does_not_need() -> None:
    inp = _input({"study": {"tissue": "skeletal_muscle"},
                  "observations": [{"kind": "measurement", "parameter": "Pa", "value": 90.0, "sd": 5.0}]})
    base = tissue_base(inp.head, FILE)
    declared = base.declared()
    # Pc as a plain prior: the arterial pressure it is otherwise derived from is then not needed
    declared = apply_overrides(declared, {"Pc": {"dist": "normal", "mean": 25, "sd": 3}}, inp.head, base, FILE)
    form = select_inputs(declared, inp.head, FILE)
    assert "Pa" not in form.priors and "Pa" in form.declared.priors
    sections = resolve_sections(inp, form, base, None)
    assert dict(sections.kept.priors)["Pa"] is form.declared.priors["Pa"]


def test_sections_refuse_an_unknown_output() -> None:
    inp = _input({"study": {"tissue": "skeletal_muscle"}, "sensitivity": {"output": "nothing"}})
    base = tissue_base(inp.head, FILE)
    form = select_inputs(base.declared(), inp.head, FILE)
    with pytest.raises(StudyError) as exc:
        resolve_sections(inp, form, base, None)
    assert exc.value.key == "sensitivity.output" and exc.value.value == "nothing"


# ---- 7. correlations --------------------------------------------------------------------------

def _form() -> tuple[FormInputs, Declared]:
    head = _head(model="steady_state")
    base = tissue_base(head, FILE)
    declared = apply_overrides(base.declared(), {}, head, base, FILE)
    return select_inputs(declared, head, FILE), declared


def test_correlations_from_the_prior_set_and_the_study() -> None:
    form, declared = _form()
    out = resolve_correlations(form.priors, form.declared.derived, MUSCLE.correlations, declared.overridden, None,
                               "steady_state", FILE)
    assert ("Kf", "PS", 0.5) in out.pairs  # priors/skeletal_muscle.toml
    i, j = out.names.index("Kf"), out.names.index("PS")
    assert out.matrix[i, j] == out.matrix[j, i] == 0.5
    section = CorrelationsSection(pairs=[["Kf", "PS", 0.3]])
    out = resolve_correlations(form.priors, form.declared.derived, MUSCLE.correlations, declared.overridden,
                               section, "steady_state", FILE)
    assert out.matrix[i, j] == 0.3 and any("replaces" in n for n in out.notes)


def test_correlations_drop_overridden_pairs_and_refuse_bad_matrices() -> None:
    form, _ = _form()
    out = resolve_correlations(form.priors, form.declared.derived, MUSCLE.correlations, {"Kf"}, None,
                               "steady_state", FILE)
    assert not any({a, b} == {"Kf", "PS"} for a, b, _ in out.pairs)
    assert any("Kf-PS" in n and "dropped" in n for n in out.notes)
    # three inputs pairwise at -0.9: not positive definite (eigenvalue 1 - 2 * 0.9 < 0, closed form)
    bad = CorrelationsSection(pairs=[["Kf", "PS", -0.9], ["Kf", "Pv", -0.9], ["PS", "Pv", -0.9]])
    with pytest.raises(StudyError) as exc:
        resolve_correlations(form.priors, form.declared.derived, (), frozenset(), bad, "steady_state", FILE)
    assert exc.value.key == "correlations.pairs"


# ---- the frozen Study, with_model and with_overrides --------------------------------------------

STUDY = textwrap.dedent("""
    [study]
    title = "resolution check"
    tissue = "skeletal_muscle"
    conditions = ["venous_congestion"]
    seed = 5

    [parameters]
    Pv = { dist = "normal", mean = 12, sd = 2, unit = "mmHg" }

    [correlations]
    pairs = [["Kf", "sigma", 0.2]]

    [[observations]]
    kind = "measurement"
    parameter = "Pc"
    value = 3.2
    sd = 0.3
    unit = "kPa"

    [[observations]]
    kind = "volume_time_course"
    file = "v.csv"
    step = { to = 4.0, unit = "kPa" }

    [propagate]
    samples = 1024

    [rank]
    candidates = [{ name = "pc", parameter = "Pc", sd = 0.2, unit = "kPa" }]
""")


def _write(folder: Path, text: str, name: str = "s.toml") -> Path:
    (folder / "v.csv").write_text("subject,time_min,volume\nA,0,0\nA,2,0.1\n")
    path = folder / name
    path.write_text(text)
    return path


def _resolved(s: Study) -> dict[str, Any]:
    """Every resolved field (not the file's identity: path, hash, source)."""
    skip = {"path", "hash", "source", "correlation", "observations", "propagate", "sensitivity", "rank",
            "design", "schedule", "infer"}
    out: dict[str, Any] = {f.name: getattr(s, f.name) for f in dataclasses.fields(s) if f.name not in skip}
    out["correlation"] = s.correlation.tolist()
    out["observations"] = None if s.observations is None else [
        (o.model_dump(), o.path, o.data) for o in s.observations]
    for name in ("propagate", "sensitivity", "rank", "design", "schedule", "infer"):
        sec = getattr(s, name)
        out[name] = None if sec is None else sec.model_dump()
    return out


def test_with_model_equals_loading_the_edited_file(tmp_path: Path) -> None:
    s = load_study(_write(tmp_path, STUDY))
    edited = load_study(_write(tmp_path, STUDY.replace("seed = 5", "seed = 5\nmodel = \"steady_state\""), "e.toml"))
    other = s.with_model("steady_state")
    assert other.model == "steady_state" and s.model == "classic"
    assert _resolved(other) == _resolved(edited)
    assert "Pi" not in other.priors and "Pi" in s.priors
    assert other.source is not None and other.source.document["study"]["model"] == "steady_state"
    assert "model" not in s.source.document["study"]  # the original is untouched
    assert _resolved(other.with_model("classic")) == _resolved(s)


def test_with_overrides_equals_loading_the_edited_file(tmp_path: Path) -> None:
    s = load_study(_write(tmp_path, STUDY))
    new = {"Kf": {"dist": "lognormal", "median": 0.004, "gsd": 1.3, "unit": "mL/min/mmHg/100g"}}
    text = STUDY.replace('Pv = { dist', 'Kf = { dist = "lognormal", median = 0.004, gsd = 1.3, '
                                        'unit = "mL/min/mmHg/100g" }\nPv = { dist')
    edited = load_study(_write(tmp_path, text, "e.toml"))
    # the same declarations in another order of [parameters]: the resolved study does not depend on it
    assert _resolved(s.with_overrides(new)) == _resolved(edited)
    replaced = s.with_overrides({"Pv": 15})
    assert replaced.priors["Pv"].params == {"value": 15.0} and "Pv" not in replaced.names
    assert s.priors["Pv"].params == {"mean": 12.0, "sd": 2.0}
    with pytest.raises(StudyError) as exc:
        s.with_overrides({"Pv": {"dist": "normal", "mean": 12, "sd": -1}})
    assert exc.value.file == str(tmp_path / "s.toml") and exc.value.key.startswith("parameters.Pv")


def test_with_model_refuses_an_unknown_form(tmp_path: Path) -> None:
    s = load_study(_write(tmp_path, STUDY))
    with pytest.raises(StudyError) as exc:
        s.with_model("no_such_form")
    assert exc.value.key == "study.model" and exc.value.value == "no_such_form"
    assert exc.value.file == str(tmp_path / "s.toml")


def test_study_is_frozen(tmp_path: Path) -> None:
    s = load_study(_write(tmp_path, STUDY))
    with pytest.raises(dataclasses.FrozenInstanceError):
        s.model = "revised"  # type: ignore[misc]
    with pytest.raises(dataclasses.FrozenInstanceError):
        s.names = []  # type: ignore[misc]
    copy = dataclasses.replace(s, observations=[])
    assert copy.observations == [] and s.observations is not None and len(s.observations) == 2


def test_loaded_study_converts_copies(tmp_path: Path) -> None:
    s = load_study(_write(tmp_path, STUDY))
    assert s.source is not None and s.source.observations is not None and s.observations is not None
    assert s.observations[0].value == pytest.approx(3.2 * KPA, rel=1e-5)
    assert s.source.observations[0].value == 3.2  # the validated input as written
    assert s.observations[1].step is not None and s.observations[1].step.to == pytest.approx(4.0 * KPA, rel=1e-5)
    assert s.rank is not None and s.rank.candidates[0].sd == pytest.approx(0.2 * KPA, rel=1e-5)
    assert s.source.document == tomllib.loads(STUDY)


def test_problem_for_another_form_uses_with_model(tmp_path: Path) -> None:
    s = load_study(_write(tmp_path, STUDY))
    problem = problem_from_study(s, model="steady_state")
    assert problem.model_form == "steady_state" and problem.study.model == "steady_state"
    assert problem_from_study(s).study is s


def test_observation_and_design_copies_carry_their_extras() -> None:
    ob = Observation.model_validate({"kind": "lymph_flow", "value": 0.1, "sd": 0.02})
    new = ob.with_data(Path("x.csv"), {"subject": ["A"], "value": [0.1]})
    assert new.path == Path("x.csv") and new.data == {"subject": ["A"], "value": [0.1]}
    assert ob.path is None and ob.data is None
