"""`fluidshift run` and `fluidshift demo`: thin commands over uncertainty.app.run.run; exit statuses 0 / 2 / 3."""

from __future__ import annotations

import importlib
import json

import pytest
import run_fakes
from click.testing import CliRunner

from uncertainty.app.cli import main

# the module itself: the package attribute uncertainty.app.run is the API function
run_mod = importlib.import_module("uncertainty.app.run")


@pytest.fixture
def fakes(monkeypatch):
    monkeypatch.setattr(run_mod, "LOADER", run_fakes.load_fake)
    monkeypatch.setattr(run_mod, "ANALYSES", {**run_mod.ANALYSES, **run_fakes.FAKES})
    run_fakes.CALLS.clear()


@pytest.fixture
def study(tmp_path):
    p = tmp_path / "study.toml"
    p.write_text(run_fakes.STUDY_TEXT)
    return p


def test_run_prints_summary(fakes, study, tmp_path):
    out = tmp_path / "out"
    res = CliRunner().invoke(main, ["run", str(study), "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert "Jv, individual" in res.output and "report.html" in res.output
    assert (out / "results.json").is_file()


def test_run_json_is_the_results_document(fakes, study, tmp_path):
    out = tmp_path / "out"
    res = CliRunner().invoke(main, ["run", str(study), "--out", str(out), "--json", "--seed", "3"])
    assert res.exit_code == 0
    doc = json.loads(res.stdout)
    assert doc == json.loads((out / "results.json").read_text())
    assert doc["study"]["seed"] == 3


def test_run_default_out_folder(fakes, study, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    res = CliRunner().invoke(main, ["run", str(study), "--quiet"])
    assert res.exit_code == 0 and res.output == ""
    assert (tmp_path / "study-results" / "report.html").is_file()


def test_gate_failure_exits_3_with_bundle(fakes, study, tmp_path):
    study.write_text(run_fakes.STUDY_TEXT + "fail_gate = true\n")
    res = CliRunner().invoke(main, ["run", str(study), "--out", str(tmp_path / "out")])
    assert res.exit_code == 3
    assert "quality gate failed" in res.stderr
    assert "ATTENTION" in res.stdout  # the summary is still printed
    assert (tmp_path / "out" / "report.html").is_file()


def test_bad_study_exits_2_in_one_line(fakes, tmp_path):
    p = tmp_path / "bad.toml"
    p.write_text("[study\n")
    res = CliRunner().invoke(main, ["run", str(p), "--out", str(tmp_path / "out")])
    assert res.exit_code == 2
    assert len(res.stderr.strip().splitlines()) == 1 and "Traceback" not in res.output


def test_force_recomputes(fakes, study, tmp_path):
    out = str(tmp_path / "out")
    CliRunner().invoke(main, ["run", str(study), "--out", out, "--quiet"])
    run_fakes.CALLS.clear()
    CliRunner().invoke(main, ["run", str(study), "--out", out, "--quiet"])
    assert run_fakes.CALLS == []
    CliRunner().invoke(main, ["run", str(study), "--out", out, "--quiet", "--force"])
    assert run_fakes.CALLS == ["propagate", "sensitivity", "design"]


def test_demo_runs_the_bundled_study(fakes, tmp_path):
    from uncertainty.core.resources import studies_dir

    out = tmp_path / "demo"
    res = CliRunner().invoke(main, ["demo", "--out", str(out), "--quiet"])
    assert res.exit_code == 0, res.output
    doc = json.loads((out / "results.json").read_text())
    assert doc["study"]["path"] == str(studies_dir() / "demo.toml")


def test_library_chatter_is_hidden_unless_verbose(capfd):
    """PyMC's "Sampling: [...]" log lines and library warnings (PyTensor's BLAS UserWarning) are hidden by
    default and with --quiet; with --verbose they show, so this test can fail."""
    import logging
    import sys
    import warnings

    import click

    from uncertainty.app.commands.common import handle_errors

    @click.command()
    @click.option("--quiet", is_flag=True)
    @click.option("--verbose", is_flag=True)
    @handle_errors
    def chatty(quiet: bool) -> None:
        log = logging.getLogger("pymc")
        log.setLevel(logging.INFO)  # as pymc does on import
        handler = logging.StreamHandler(sys.stderr)
        log.addHandler(handler)
        try:
            log.info("Sampling: [Kf__z]")
            warnings.warn("PyTensor could not link to a BLAS installation.", UserWarning, stacklevel=1)
        finally:
            log.removeHandler(handler)

    for args in (["--quiet"], []):
        with warnings.catch_warnings(record=True) as seen, pytest.raises(SystemExit) as info:
            warnings.simplefilter("always")
            chatty.main(args, standalone_mode=True)
        assert info.value.code == 0
        assert capfd.readouterr().err == "" and seen == []
    with pytest.warns(UserWarning, match="BLAS"), pytest.raises(SystemExit):
        chatty.main(["--verbose"], standalone_mode=True)
    assert "Sampling: [Kf__z]" in capfd.readouterr().err
    assert logging.root.manager.disable == logging.NOTSET  # restored after the command
