"""The study's [infer] section: sampler settings and gate, overridden key by key by the caller.

Order: a value given to ``inference.infer`` (or a ``fluidshift infer`` flag) wins, then the study's
``[infer]`` key, then the section's defaults. ``fluidshift run`` calls ``infer(study, seed=...)`` and so
uses the section as it stands.
"""

from __future__ import annotations

import importlib
from typing import Any

import pytest
from click.testing import CliRunner

from uncertainty.analyses.inference.api import settings
from uncertainty.app.cli import main
from uncertainty.study import Study

api = importlib.import_module("uncertainty.analyses.inference.api")

BASE = {"study": {"tissue": "skeletal_muscle", "seed": 3},
        "observations": [{"kind": "measurement", "parameter": "Pc", "value": 20.0, "sd": 2.0, "unit": "mmHg"}]}


def _study(infer: dict[str, Any] | None = None) -> Study:
    doc = dict(BASE)
    if infer is not None:
        doc["infer"] = infer
    return Study.from_dict(doc)


def test_defaults_without_a_section() -> None:
    got = settings(_study())
    assert got == {"sampler": "nutpie", "chains": 4, "draws": 1000, "tune": 1000, "target_accept": 0.95,
                   "start": "auto", "gate": {"r_hat_max": 1.01, "ess_bulk_min": 400.0, "divergences_max": 0}}


def test_study_keys_then_given_values() -> None:
    s = _study({"target_accept": 0.99, "draws": 1500, "divergences_max": 2, "sampler": "pymc"})
    got = settings(s)
    assert (got["target_accept"], got["draws"], got["sampler"], got["tune"]) == (0.99, 1500, "pymc", 1000)
    assert got["gate"]["divergences_max"] == 2 and got["gate"]["r_hat_max"] == 1.01
    over = settings(s, draws=300, target_accept=None, sampler="nutpie")
    assert (over["draws"], over["target_accept"], over["sampler"]) == (300, 0.99, "nutpie")


def test_section_without_observations_is_noted() -> None:
    s = Study.from_dict({"study": {"tissue": "skeletal_muscle"}, "infer": {"draws": 500}})
    assert any("[infer]" in n for n in s.notes)


def test_infer_passes_the_study_settings_to_the_sampler(monkeypatch: pytest.MonkeyPatch) -> None:
    seen: dict[str, Any] = {}

    class _Passed:
        passed = True
        doc: dict[str, Any] = {}

    def fake_fit(study: Any, observations: Any, **kw: Any) -> Any:
        seen.update(kw)
        return _Passed()

    monkeypatch.setattr(api, "fit", fake_fit)
    api.infer(_study({"target_accept": 0.99, "tune": 2000, "start": "mode", "ess_bulk_min": 800}), seed=5,
              checks=False)
    assert seen["target_accept"] == 0.99 and seen["tune"] == 2000 and seen["start"] == "mode"
    assert seen["draws"] == 1000 and seen["gate"]["ess_bulk_min"] == 800 and seen["seed"] == 5


def test_cli_flags_override_study_keys(monkeypatch: pytest.MonkeyPatch, tmp_path: Any) -> None:
    seen: dict[str, Any] = {}
    inference = importlib.import_module("uncertainty.analyses.inference")

    def fake_infer(study: Any, **kw: Any) -> Any:
        seen.update(kw)
        seen["resolved"] = settings(study, **{k: kw[k] for k in ("sampler", "draws", "target_accept")})
        raise SystemExit(0)

    monkeypatch.setattr(inference, "infer", fake_infer)
    path = tmp_path / "s.toml"
    path.write_text('[study]\ntissue = "skeletal_muscle"\n[infer]\ntarget_accept = 0.99\ndraws = 1500\n'
                    'divergences_max = 1\n[[observations]]\nkind = "measurement"\nparameter = "Pc"\n'
                    'value = 20.0\nsd = 2.0\nunit = "mmHg"\n')
    CliRunner().invoke(main, ["infer", str(path), "--draws", "400", "--ess-min", "100"])
    assert seen["resolved"]["draws"] == 400 and seen["resolved"]["target_accept"] == 0.99
    assert seen["gate"] == {"r_hat_max": 1.01, "ess_bulk_min": 100.0, "divergences_max": 1}
