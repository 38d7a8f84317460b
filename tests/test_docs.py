"""docs/study-file.md cannot drift from the pydantic schema in uncertainty/study/__init__.py."""

from __future__ import annotations

import re
import tomllib
from pathlib import Path

import pytest
from pydantic import BaseModel

from uncertainty import study
from uncertainty.app import docs_gen

DOC = Path(__file__).resolve().parent.parent / "docs" / "study-file.md"


def _tables() -> dict[str, dict[str, list[str]]]:
    """heading (the TOML form) -> key -> table cells, parsed from the committed Markdown."""
    out: dict[str, dict[str, list[str]]] = {}
    current = None
    for line in DOC.read_text(encoding="utf-8").splitlines():
        m = re.match(r"^#{2,3} (.+)$", line)
        if m:
            current = out.setdefault(m.group(1), {})
            continue
        m = re.match(r"^\| `([A-Za-z_0-9]+)` \|(.*)\|$", line)
        if m and current is not None:
            current[m.group(1)] = [c.strip() for c in m.group(2).split("|")]
    return out


def test_doc_is_generated_from_schema():
    assert DOC.read_text(encoding="utf-8") == docs_gen.render(), (
        "docs/study-file.md is out of date with the study schema: run `python -m uncertainty.app.docs_gen`")


def _section_models() -> list[type[BaseModel]]:
    models = [study.StudySection, study.CorrelationsSection, study.Observation, *study.SECTIONS.values()]
    # nested models used inside sections (fields whose type is a model, or a list/dict of one)
    seen: list[type[BaseModel]] = []
    todo = list(models)
    while todo:
        m = todo.pop(0)
        if m in seen:
            continue
        seen.append(m)
        for f in m.model_fields.values():
            for t in re.findall(r"[A-Za-z_]+", str(f.annotation)):
                sub = getattr(study, t, None)
                if isinstance(sub, type) and issubclass(sub, BaseModel) and sub not in seen:
                    todo.append(sub)
    return seen


def test_every_section_model_is_documented():
    documented = {getattr(study, name) for _, _, name, _ in docs_gen.SECTIONS}
    missing = [m.__name__ for m in _section_models() if m not in documented]
    assert not missing, f"study models missing from docs_gen.SECTIONS: {missing}"


@pytest.mark.parametrize("heading,form,model_name", [(h, f, m) for h, f, m, _ in docs_gen.SECTIONS])
def test_every_key_appears_with_its_default(heading, form, model_name):
    tables = _tables()
    assert form in tables, f"no heading for {form}"
    rows = tables[form]
    model = getattr(study, model_name)
    for name, field in model.model_fields.items():
        assert name in rows, f"{form}: key {name} not documented"
        cell = rows[name][1]
        if field.is_required():
            assert cell == "required", (form, name, cell)
            continue
        expected = field.default_factory() if field.default_factory is not None else field.default
        if expected is None:
            assert cell == "none", (form, name, cell)
        else:  # the documented default, read back as TOML, equals the schema's default
            assert cell.startswith("`") and cell.endswith("`"), (form, name, cell)
            assert tomllib.loads(f"x = {cell.strip('`')}")["x"] == expected, (form, name, cell)
        assert rows[name][3] and rows[name][3] != "(not described yet)", f"{form}: {name} has no meaning"


def test_every_distribution_is_documented():
    from uncertainty.priors import DISTRIBUTIONS

    text = DOC.read_text(encoding="utf-8")
    for dist, (required, _) in DISTRIBUTIONS.items():
        row = next(line for line in text.splitlines() if line.startswith(f"| `{dist}` |"))
        for p in required:
            assert f"`{p}`" in row, (dist, p)


def test_results_doc_is_generated_from_bundle_schema():
    from uncertainty.app import bundle

    text = (DOC.parent / "results.md").read_text(encoding="utf-8")
    assert text == docs_gen.render_results(), "docs/results.md is out of date: run `python -m uncertainty.app.docs_gen`"
    for model in (bundle.ResultsDoc, bundle.SectionRecord, bundle.Provenance):
        for name, f in model.model_fields.items():
            assert f"| `{f.alias or name}` |" in text
