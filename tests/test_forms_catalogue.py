"""The form catalogue is honest: every form's declared outputs are the keys evaluate() returns, for
every tissue that offers it, and every unit is one pint reads."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from uncertainty.core import units
from uncertainty.core.errors import StudyError
from uncertainty.forms import catalogue
from uncertainty.forms.catalogue import (
    FORMS,
    GENERAL_FORMS,
    MODEL_FORMS,
    OUTPUT_UNITS,
    form,
    forms_predicting,
    output_unit,
    outputs,
    study_outputs,
)
from uncertainty.forms.evaluate import evaluate
from uncertainty.priors.library import list_prior_sets, load_prior_set
from uncertainty.study import Study


def _offers() -> list[tuple[str, str]]:
    """(form, tissue) for every prior set and every form it lists."""
    return [(m, t) for t in list_prior_sets() for m in load_prior_set(t).models]


def _study(model: str, tissue: str, mass: str | None) -> Study:
    head = {"tissue": tissue, "model": model}
    if mass is not None:
        head["tissue_mass"] = mass
    return Study.from_dict({"study": head})


def _medians(study: Study) -> dict[str, float]:
    return {s: p.median() for s, p in study.priors.items()}


@pytest.mark.parametrize(("model", "tissue"), _offers())
@pytest.mark.parametrize("mass", [None, "1 kg"])  # "1 kg": an invented round organ mass
def test_declared_outputs_are_what_evaluate_returns(model, tissue, mass):
    if mass is None and catalogue.tissue_mass_reason(model) is not None:
        with pytest.raises(StudyError) as exc:  # the form needs a tissue mass: the study is refused
            _study(model, tissue, mass)
        assert exc.value.key == "study.tissue_mass"
        return
    s = _study(model, tissue, mass)
    out = evaluate(s, _medians(s))
    assert list(out) == study_outputs(s) == s.outputs()
    for name, value in out.items():
        assert np.all(np.isfinite(np.asarray(value, dtype=float))), (model, tissue, name)


@pytest.mark.parametrize(("model", "tissue"), [(m, t) for m, t in _offers() if m in ("steady_state", "revised")])
def test_volumes_need_c_tis_and_a_reference_pressure(model, tissue):
    s = _study(model, tissue, None)
    assert "C_tis" in s.priors and s.Pi_ref is not None
    for cut in (dataclasses.replace(s, priors={k: p for k, p in s.priors.items() if k != "C_tis"}),
                dataclasses.replace(s, Pi_ref=None)):
        out = evaluate(cut, _medians(cut))
        assert list(out) == study_outputs(cut)
        assert "oedema_volume" not in out and "EVLW" not in out


def test_every_tissue_specific_form_is_offered_where_the_catalogue_says():
    for model, tissue in _offers():
        assert catalogue.offered_in(model, tissue), (model, tissue)
    assert set(GENERAL_FORMS) <= set(MODEL_FORMS) == set(FORMS)
    assert all(FORMS[m].tissues is None for m in GENERAL_FORMS)


def test_units_are_pint_parsable_and_match_the_quantities():
    ureg = units.registry()
    for name, unit in OUTPUT_UNITS.items():
        stem = unit.removesuffix("/100g")
        ureg.parse_expression(stem)  # raises on a unit pint does not read
        if name in units.CANONICAL:  # the same quantity has one canonical unit everywhere
            assert units.CANONICAL[name] == unit, name
    assert output_unit("Jv") == "mL/min/100g" and output_unit("Pc") == "mmHg" and output_unit("nope") == ""


def test_lookups_and_unknown_form():
    with pytest.raises(StudyError) as exc:
        form("nope")
    assert exc.value.key == "study.model"
    assert forms_predicting("GFR") == ("glomerular",) and forms_predicting("lymph_flow") == ()
    assert "EVLW" in outputs("steady_state", "lung", have={"C_tis", "Pi_ref"})
    assert "EVLW" not in outputs("steady_state", "skeletal_muscle", have={"C_tis", "Pi_ref"})
    assert outputs("classic", have={"tissue_mass"}, derived=("Pc",))[-3:] == ["Jv_mL_per_h", "Jv_L_per_day", "Pc"]


def test_notes_read_only_declared_outputs():
    for name, spec in FORMS.items():
        assert (spec.notes is None) == (not spec.note_outputs), name
        assert set(spec.note_outputs) <= {o.name for o in spec.outputs}, name
        assert catalogue.output_notes(name, {}) == []
