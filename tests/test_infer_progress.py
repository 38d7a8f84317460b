"""The sampler's live progress table is asked for only when stderr is a terminal (and not --quiet); the
sampler functions pass the flag to nutpie (progress_bar) and PyMC (progressbar)."""

from __future__ import annotations

import importlib
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner

from uncertainty.analyses.inference import samplers
from uncertainty.app.cli import main

STUDY = ('[study]\ntitle = "progress (invented)"\ntissue = "skeletal_muscle"\n[[observations]]\n'
         'kind = "measurement"\nparameter = "Pc"\nvalue = 20.0\nsd = 2.0\nunit = "mmHg"\n')


def _seen_progress(monkeypatch: pytest.MonkeyPatch, tmp_path: Path, args: list[str], tty: bool) -> Any:
    seen: dict[str, Any] = {}
    inference = importlib.import_module("uncertainty.analyses.inference")

    def fake_infer(study: Any, **kw: Any) -> Any:
        seen.update(kw)
        raise SystemExit(0)

    monkeypatch.setattr(inference, "infer", fake_infer)
    infer_cmd = importlib.import_module("uncertainty.app.commands.infer")
    monkeypatch.setattr(infer_cmd, "stderr_is_terminal", lambda: tty)
    path = tmp_path / "s.toml"
    path.write_text(STUDY)
    CliRunner().invoke(main, ["infer", str(path), *args])
    return seen.get("progress")


def test_no_progress_when_stderr_is_not_a_terminal(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    assert _seen_progress(monkeypatch, tmp_path, [], tty=False) is False


def test_progress_on_a_terminal_unless_quiet(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    assert _seen_progress(monkeypatch, tmp_path, [], tty=True) is True
    assert _seen_progress(monkeypatch, tmp_path, ["--quiet"], tty=True) is False


def test_sample_passes_the_flag_to_nutpie(monkeypatch: pytest.MonkeyPatch) -> None:
    nutpie = pytest.importorskip("nutpie")
    seen: dict[str, Any] = {}

    def fake_sample(model: Any, **kw: Any) -> Any:
        seen.update(kw)
        return "idata"

    monkeypatch.setattr(nutpie, "sample", fake_sample)
    run = samplers.sample(None, compiled=object(), progress=True, chains=1, draws=10, tune=10)
    assert run.idata == "idata" and seen["progress_bar"] is True
