"""The report's validation section: the published measurements of a study's tissue and model form beside the
form's predictions (``analyses.validation.validate_study``), as ``fluidshift validate`` gives them."""

from __future__ import annotations

import re
from types import SimpleNamespace

import pandas as pd
import pytest

from uncertainty.analyses import registry
from uncertainty.analyses.validation import load_table, validate
from uncertainty.analyses.validation.report_section import first_sentence, summary
from uncertainty.analyses.validation.result import COLUMNS, FormValidationResult
from uncertainty.analyses.validation.section import validate_study
from uncertainty.app import report
from uncertainty.core.errors import StudyError
from uncertainty.study import Study


def _study(tissue: str, model: str) -> Study:
    return Study.from_dict({"study": {"tissue": tissue, "model": model, "seed": 3},
                            "propagate": {"samples": 128, "outputs": ["Jv"]}})


@pytest.fixture(scope="module")
def muscle_classic() -> FormValidationResult:
    return validate_study(_study("skeletal_muscle", "classic"))


def test_section_gives_the_commands_rows_and_numbers(muscle_classic) -> None:
    # the same rows, medians and verdicts as `fluidshift validate --tissue skeletal_muscle --form classic`
    doc = muscle_classic.to_dict()
    ref = validate("skeletal_muscle", form="classic").to_dict()
    assert [r["id"] for r in doc["rows"]] == [r["id"] for r in ref["rows"]]
    assert [r["median"] for r in doc["rows"]] == [r["median"] for r in ref["rows"]]
    assert [r["verdict"] for r in doc["rows"]] == [r["verdict"] for r in ref["rows"]]
    assert (doc["tissue"], doc["form"]) == ("skeletal_muscle", "classic") and doc["counts"] == ref["counts"]


def test_section_is_present_only_where_the_table_has_rows() -> None:
    present = registry.analysis("validation").present
    assert present(_study("skeletal_muscle", "classic"))
    assert not present(SimpleNamespace(tissue="fake_tissue", model="classic"))  # a stand-in tissue: no rows
    assert not present(object())                     # a stand-in without tissue or form
    assert not present(_study("myocardium", "classic"))   # the table checks the myocardium in its steady form only
    assert not load_table(tissue="brain", form="steady_state")
    with pytest.raises(StudyError, match="no validation rows"):
        validate_study(_study("myocardium", "classic"))


def test_round_trip_html_table_csv_and_figure(muscle_classic, tmp_path) -> None:
    doc = muscle_classic.to_dict()
    again = FormValidationResult.from_dict(doc)
    html = again.html_section()
    for r in doc["rows"]:
        assert r["quantity"] in html and r["source"][:40].replace("'", "&#x27;") in html
    assert html.count('<tr class="entry verdict-') == len(doc["rows"])
    text = again.table()
    assert len(text.splitlines()) == len(doc["rows"]) + 2 and "published measurements" in text.splitlines()[-1]
    saved = pd.read_csv(again.save(str(tmp_path))["table"])
    assert list(saved.columns) == list(COLUMNS) and len(saved) == len(doc["rows"])
    files = again.plot(str(tmp_path))
    assert sorted(p.rsplit(".", 1)[1] for p in files) == ["png", "svg"]
    cap = report.caption("validation", "validation")
    assert cap.endswith(".") and ". " not in cap


def test_known_gap_shows_the_first_sentence_of_its_reason(tmp_path) -> None:
    # an invented reason: the abbreviation "et al." does not end the first sentence
    reason = "the cause here (Smith et al. 2001 J Invented Physiol 1:1). What was tried. More."
    assert first_sentence(reason) == "the cause here (Smith et al. 2001 J Invented Physiol 1:1)."
    doc = {"form": "whole_body", "tissue": "skeletal_muscle", "counts": {"inside": 1, "outside": 0, "known gap": 1},
           "rows": [{"quantity": "q at 15 min", "verdict": "known gap", "known_gap": reason, "source": "s 2001",
                     "low": 0.4, "high": None, "median": 0.7, "ci95": [0.6, 0.8], "unit": "1"},
                    {"quantity": "q at 30 min", "verdict": "inside", "source": "s 2001", "low": 0.4, "high": 0.7,
                     "median": 0.5, "ci95": [0.45, 0.6], "unit": "1"}]}
    html = FormValidationResult.from_dict(doc).html_section()
    assert "Known gap:</span> the cause here (Smith et al. 2001 J Invented Physiol 1:1)." in html
    assert "What was tried" not in html
    assert re.search(r"\[0\.4, inf\]", html)   # a one-sided band
    # the figure draws an open band with its arrow and a row the form could not predict (no median, no interval)
    doc["rows"].append({"quantity": "q at 60 min", "verdict": "outside", "source": "s 2001", "low": 1.0,
                        "high": 2.0, "median": float("nan"), "ci95": [float("nan"), float("nan")], "unit": "1"})
    files = FormValidationResult.from_dict(doc).plot(str(tmp_path))
    assert sorted(p.rsplit(".", 1)[1] for p in files) == ["png", "svg"]
    svg = next(p for p in files if p.endswith(".svg"))
    assert "not predicted" in open(svg, encoding="utf-8").read()
    doc["rows"].pop()
    (line,) = summary(doc)
    assert "2 published measurements: 1 inside their band, 0 outside, 1 known gaps" in line
    assert line.endswith("known gaps: q at 15 min.")
