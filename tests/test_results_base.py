"""The Result base and the analysis registry: every result rebuilds from its document, its table and
report section come from that document, the report shell finds every analysis through the registry,
and the one JSON serialiser keeps the NaN policy."""

from __future__ import annotations

import dataclasses
import json
import math

import numpy as np
from fakes_uncertainty import classic_study, evaluate

from uncertainty.analyses import registry
from uncertainty.analyses.design.result import DesignResult
from uncertainty.analyses.propagate import propagate
from uncertainty.analyses.propagate.result import PropagateResult
from uncertainty.analyses.rank.result import RankResult
from uncertainty.analyses.result import DocumentResult, Result
from uncertainty.analyses.sensitivity import sensitivity
from uncertainty.analyses.sensitivity.result import SensitivityResult
from uncertainty.app import report
from uncertainty.core.serialise import jsonable, to_json


def test_every_analysis_is_registered_once_in_run_order() -> None:
    names = [a.name for a in registry.ANALYSES]
    assert names == ["propagate", "sensitivity", "infer", "rank", "design", "schedule", "scenarios",
                     "calibrate",  # calibrate runs only with a [calibrate] section (issue 18 item 13)
                     "validation"]  # only where the validation table has rows for the study's tissue and form
    assert all(registry.analysis(n).name == n for n in names)
    assert registry.analysis("check") is None
    assert [a.name for a in registry.DIAGNOSTICS] == ["infer", "propagate"]
    assert {sec for sec, *_ in report.CAPTIONS} == set(names)


def test_propagate_result_rebuilds_from_its_document() -> None:
    r = propagate(classic_study(), samples=2**10, seed=3, evaluate=evaluate)
    doc = r.to_dict()
    back = PropagateResult.from_dict(doc)
    assert isinstance(back, Result)
    assert back.to_dict() == doc
    assert back.table() == r.table()
    assert r.html_section() == registry.analysis("propagate").section_html(jsonable(doc))


def test_sensitivity_result_rebuilds_from_its_document() -> None:
    r = sensitivity(classic_study(), method="sobol", samples=256, seed=5, evaluate=evaluate)
    doc = r.to_dict()
    back = SensitivityResult.from_dict(doc)
    assert back.to_dict() == doc
    assert back.table() == r.table()
    assert r.html_section() == registry.analysis("sensitivity").section_html(jsonable(doc))


def test_document_results_hold_their_document() -> None:
    doc = {"candidates": [], "output": "Jv"}
    for cls in (RankResult, DesignResult):
        res = cls.from_dict(doc)
        assert isinstance(res, DocumentResult) and res.to_dict() is doc


def test_serialiser_nan_numpy_and_dataclasses() -> None:
    @dataclasses.dataclass
    class Point:
        x: float
        y: tuple

    doc = {"a": float("nan"), "b": np.float64(1.5), "c": np.arange(3), "d": (1, np.inf), 4: Point(2.0, (np.int64(7),)),
           "e": {np.bool_(True)}}
    out = jsonable(doc)
    assert out == {"a": None, "b": 1.5, "c": [0, 1, 2], "d": [1, None], "4": {"x": 2.0, "y": [7]}, "e": [True]}
    assert type(out["b"]) is float
    text = to_json(doc)
    assert json.loads(text) == out and "NaN" not in text and text.startswith("{\n  ")
    assert math.isnan(doc["a"])  # the input is not changed
