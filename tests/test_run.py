"""Whole-study runner and bundle, against light stand-ins (tests/run_fakes.py): atomic bundle, schema,
reuse of unchanged sections, --force, quality gate, crashes, interruption by SIGINT / SIGKILL."""

from __future__ import annotations

import importlib
import io
import json
import os
import signal
import subprocess
import sys
import time
from pathlib import Path

import pandas as pd
import pytest
import run_fakes

from uncertainty.app import bundle as bundle_mod
from uncertainty.core.errors import FluidshiftError, InputError, QualityGateError, StudyError

# the module itself: the package attribute uncertainty.app.run is the API function
run_mod = importlib.import_module("uncertainty.app.run")

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent


@pytest.fixture
def fakes(monkeypatch):
    monkeypatch.setattr(run_mod, "LOADER", run_fakes.load_fake)
    monkeypatch.setattr(run_mod, "ANALYSES", {**run_mod.ANALYSES, "propagate": run_fakes.fake_propagate,
                                              "sensitivity": run_fakes.fake_sensitivity,
                                              "design": run_fakes.fake_design, "rank": run_fakes.fake_rank})
    run_fakes.CALLS.clear()
    return run_fakes


@pytest.fixture
def study(tmp_path):
    p = tmp_path / "study.toml"
    p.write_text(run_fakes.STUDY_TEXT)
    return p


def assert_complete_files(out: Path) -> None:
    """Every visible file in the bundle is whole: JSON parses, PNG ends with IEND, SVG closes, CSV reads."""
    for p in out.rglob("*"):
        if not p.is_file() or any(part.startswith(".") for part in p.relative_to(out).parts):
            continue
        data = p.read_bytes()
        if p.suffix == ".json":
            json.loads(data)
        elif p.suffix == ".png":
            assert data.startswith(b"\x89PNG") and data.rstrip().endswith(b"IEND\xaeB`\x82"), p
        elif p.suffix == ".svg":
            assert data.rstrip().endswith(b"</svg>"), p
        elif p.suffix == ".csv":
            pd.read_csv(p)
        elif p.suffix == ".html":
            assert data.rstrip().endswith(b"</html>"), p


def test_run_writes_valid_bundle(fakes, study, tmp_path):
    out = tmp_path / "out"
    res = run_mod.run(study, out, progress=False)
    doc = bundle_mod.read_results(out)  # validated against the schema on read
    assert doc["complete"] is True
    assert list(doc["sections"]) == ["check", "propagate", "sensitivity", "design"]  # run order, absent rank/infer
    assert fakes.CALLS == ["propagate", "sensitivity", "design"]
    assert doc["provenance"]["study_hash"] == res.doc["study"]["hash"]
    assert doc["provenance"]["seed"] == 7
    assert doc["provenance"]["dependencies"]["numpy"]
    assert doc["provenance"]["finished"] >= doc["provenance"]["started"]
    for rec in doc["sections"].values():
        for f in rec["files"]:
            assert bundle_mod.sha256_file(out / f["path"]) == f["sha256"]
    kinds = {f["path"] for r in doc["sections"].values() for f in r["files"]}
    assert {"figures/propagate_figure.png", "figures/propagate_figure.svg", "tables/propagate.csv"} <= kinds
    assert (out / "report.html").is_file()
    assert not (out / ".partial").exists()
    assert_complete_files(out)
    mask = os.umask(0o22)
    os.umask(mask)
    for name in ("results.json", "report.html", "tables/propagate.csv"):  # not mkstemp's private 0600
        assert (out / name).stat().st_mode & 0o777 == 0o666 & ~mask, name
    assert res.passed and res.summary == doc["summary"]
    assert any("Jv, individual" in line for line in doc["summary"])


def test_schema_rejects_bad_documents(fakes, study, tmp_path):
    out = tmp_path / "out"
    run_mod.run(study, out, progress=False)
    doc = json.loads((out / "results.json").read_text())
    bad = json.loads(json.dumps(doc))
    bad["sections"]["propagate"]["status"] = "finished-ish"
    with pytest.raises(InputError, match="status"):
        bundle_mod.validate(bad)
    bad = json.loads(json.dumps(doc))
    del bad["provenance"]["seed"]
    with pytest.raises(InputError):
        bundle_mod.validate(bad)
    (out / "results.json").write_text('{"schema": "fluidshift-results/1"')  # truncated
    with pytest.raises(InputError, match="not valid JSON"):
        bundle_mod.read_results(out)
    schema = bundle_mod.results_schema()
    assert "sections" in schema["properties"] and "provenance" in schema["properties"]


def test_rerun_reuses_unchanged_sections_and_force_recomputes(fakes, study, tmp_path):
    out = tmp_path / "out"
    run_mod.run(study, out, progress=False)
    fakes.CALLS.clear()
    res = run_mod.run(study, out, progress=False)
    assert fakes.CALLS == []
    assert all(r["reused"] for n, r in res.doc["sections"].items() if n != "check")
    # editing one section recomputes that section only
    study.write_text(run_fakes.STUDY_TEXT.replace("n_range = [10, 100]", "n_range = [10, 120]"))
    res = run_mod.run(study, out, progress=False)
    assert fakes.CALLS == ["design"]
    # a new seed recomputes every section
    fakes.CALLS.clear()
    run_mod.run(study, out, progress=False, seed=8)
    assert fakes.CALLS == ["propagate", "sensitivity", "design"]
    fakes.CALLS.clear()
    run_mod.run(study, out, progress=False, seed=8, force=True)
    assert fakes.CALLS == ["propagate", "sensitivity", "design"]
    # a damaged figure makes its section recompute
    fakes.CALLS.clear()
    (out / "figures" / "sensitivity_figure.png").write_bytes(b"junk")
    run_mod.run(study, out, progress=False, seed=8)
    assert fakes.CALLS == ["sensitivity"]


def test_same_seed_same_numbers(fakes, study, tmp_path):
    a = run_mod.run(study, tmp_path / "a", progress=False).doc
    b = run_mod.run(study, tmp_path / "b", progress=False).doc
    assert {n: r["result"] for n, r in a["sections"].items()} == {n: r["result"] for n, r in b["sections"].items()}
    c = run_mod.run(study, tmp_path / "c", progress=False, seed=99).doc
    assert c["sections"]["propagate"]["result"] != a["sections"]["propagate"]["result"]


def test_quality_gate_flags_but_writes_bundle(fakes, study, tmp_path):
    study.write_text(run_fakes.STUDY_TEXT + "fail_gate = true\n")
    out = tmp_path / "out"
    with pytest.raises(QualityGateError) as info:
        run_mod.run(study, out, progress=False)
    assert info.value.exit_code == 3
    doc = bundle_mod.read_results(out)
    assert doc["complete"] and doc["quality_gate"] == {"passed": False, "failed": ["design"], "errors": []}
    assert doc["sections"]["design"]["result"]["n_per_arm"] == 42
    assert "Quality gate failed" in (out / "report.html").read_text()
    assert info.value.result.doc["sections"]["design"]["status"] == "gate_failed"


def test_crashing_section_keeps_the_others(fakes, study, tmp_path):
    study.write_text(run_fakes.STUDY_TEXT + "\n[rank]\ncrash = true\n")
    out = tmp_path / "out"
    with pytest.raises(FluidshiftError, match="fake crash") as info:
        run_mod.run(study, out, progress=False)
    assert info.value.exit_code == 1
    doc = bundle_mod.read_results(out)
    assert doc["sections"]["rank"]["status"] == "error"
    assert doc["sections"]["design"]["status"] == "done"  # after the crash, still run


def test_bad_study_writes_nothing(fakes, tmp_path):
    p = tmp_path / "bad.toml"
    p.write_text('[study]\nseed = "seven"\n')
    with pytest.raises(StudyError) as info:
        run_mod.run(p, tmp_path / "out", progress=False)
    assert info.value.exit_code == 2 and info.value.key == "study.seed"
    assert not (tmp_path / "out").exists()


def test_output_path_that_is_a_file(fakes, study, tmp_path):
    f = tmp_path / "afile"
    f.write_text("x")
    with pytest.raises(InputError):
        run_mod.run(study, f, progress=False)


def test_removed_section_files_are_deleted(fakes, study, tmp_path):
    out = tmp_path / "out"
    run_mod.run(study, out, progress=False)
    assert (out / "figures" / "design_figure.png").exists()
    study.write_text(run_fakes.STUDY_TEXT.split("[design]")[0])
    run_mod.run(study, out, progress=False)
    assert not (out / "figures" / "design_figure.png").exists()
    assert "design" not in bundle_mod.read_results(out)["sections"]


@pytest.mark.parametrize("planted", ["../victim.txt", "ABSOLUTE", "figures/../../victim.txt"])
def test_a_bundle_naming_files_outside_is_refused_and_nothing_is_deleted(fakes, study, tmp_path, planted):
    out = tmp_path / "out"
    victim = tmp_path / "victim.txt"
    victim.write_text("not yours")
    run_mod.run(study, out, progress=False)
    doc = json.loads((out / "results.json").read_text())
    name = str(victim) if planted == "ABSOLUTE" else planted
    doc["sections"]["design"]["files"][0]["path"] = name  # as if tampered with, or written by someone else
    (out / "results.json").write_text(json.dumps(doc))
    study.write_text(run_fakes.STUDY_TEXT.split("[design]")[0])  # the design section's files become stale
    with pytest.raises(InputError, match="outside the bundle"):
        run_mod.run(study, out, progress=False)
    assert victim.read_text() == "not yours"
    run_mod.run(study, out, progress=False, force=True)  # --force starts afresh and deletes nothing outside
    assert victim.read_text() == "not yours"
    with pytest.raises(InputError, match="inside the bundle"):
        bundle_mod.Bundle(out).remove(name)
    assert victim.exists()


def _start(study: Path, out: Path, slow: float, hold: str = "") -> subprocess.Popen:
    env = {**os.environ, "FAKE_SLOW": str(slow), "FAKE_HOLD": hold,
           "PYTHONPATH": os.pathsep.join([str(HERE), str(ROOT)])}
    return subprocess.Popen([sys.executable, str(HERE / "run_fakes.py"), str(study), str(out)], env=env,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE)


def _wait_for(condition, proc: subprocess.Popen, timeout: float = 120.0) -> None:
    """Poll until ``condition()`` holds while ``proc`` still runs (a condition, not a timing check)."""
    t0 = time.monotonic()
    while time.monotonic() - t0 < timeout:
        if condition():
            return
        assert proc.poll() is None, proc.communicate()
        time.sleep(0.05)
    raise AssertionError("the run never got there")


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGKILL], ids=["SIGINT", "SIGKILL"])
def test_interrupted_run_leaves_whole_files_and_resumes(sig, study, tmp_path):
    out = tmp_path / "out"
    held = tmp_path / "held"
    proc = _start(study, out, slow=0.2, hold=f"sensitivity:{held}")
    _wait_for(lambda: held.exists(), proc)  # sensitivity's SVG half-written, the run waiting for the signal
    assert len(bundle_mod.read_results(out)["sections"]) >= 2  # check + propagate were checkpointed
    proc.send_signal(sig)
    proc.communicate(timeout=60)
    assert proc.returncode != 0
    assert_complete_files(out)
    doc = bundle_mod.read_results(out)
    assert doc["complete"] is False
    assert "propagate" in doc["sections"]
    if sig == signal.SIGINT:
        assert not (out / ".partial").exists()  # temporary files removed on Ctrl-C
    assert not (out / "report.html").exists()
    # the next run finishes the study, reusing what was complete
    proc = _start(study, out, slow=0.0)
    proc.communicate(timeout=120)
    assert proc.returncode == 0
    doc = bundle_mod.read_results(out)
    assert doc["complete"] is True
    assert doc["sections"]["propagate"]["reused"] is True
    assert set(doc["sections"]) == {"check", "propagate", "sensitivity", "design"}
    assert not (out / ".partial").exists()
    assert_complete_files(out)


def test_atomic_write_leaves_old_file_on_failure(tmp_path):
    b = bundle_mod.Bundle(tmp_path / "b").open()
    b.write_text("tables/x.csv", "a\n1\n", "table")

    with pytest.raises(TypeError):  # the write fails half-way (not bytes): the old file stays whole
        b.write_bytes("tables/x.csv", 12345, "table")  # type: ignore[arg-type]
    assert list((tmp_path / "b" / ".partial").iterdir()) == []  # its temporary file removed
    assert (tmp_path / "b" / "tables" / "x.csv").read_text() == "a\n1\n"
    b.close()
    assert not (tmp_path / "b" / ".partial").exists()


def test_a_code_change_changes_every_section_key(monkeypatch) -> None:
    # results computed by other code must not be reused under the same version number
    from uncertainty.study import Study

    s = Study.from_dict({"study": {"tissue": "skeletal_muscle"}, "propagate": {"samples": 1024}})
    before = run_mod.section_key(s, "propagate", 1)
    assert run_mod.section_key(s, "propagate", 1) == before
    monkeypatch.setattr(run_mod, "code_hash", lambda: "0" * 64)
    assert run_mod.section_key(s, "propagate", 1) != before


def test_tables_neutralise_spreadsheet_formulas():
    # OWASP "CSV injection" (common practice): text starting with = + - @ is written with a leading apostrophe
    df = pd.DataFrame({"name": ["=cmd|' /C calc'!A0", "+1", "@SUM(A1)", "-2+3", "plain"],
                       "value": [1.0, -2.0, 3, 4, 5]})
    text = bundle_mod.table_csv(df)
    back = pd.read_csv(io.StringIO(text))
    assert list(back["name"]) == ["'=cmd|' /C calc'!A0", "'+1", "'@SUM(A1)", "'-2+3", "plain"]
    assert list(back["value"]) == [1.0, -2.0, 3, 4, 5]  # numbers, negative ones included, are untouched


def test_a_foreign_folder_is_refused_unless_forced(fakes, study, tmp_path):
    out = tmp_path / "mine"
    (out / ".partial").mkdir(parents=True)
    (out / ".partial" / "notes.txt").write_text("a user's own file")
    (out / "thesis.docx").write_text("a user's own file")
    with pytest.raises(InputError, match="not a fluidshift bundle"):
        run_mod.run(study, out, progress=False)
    assert (out / ".partial" / "notes.txt").exists() and not (out / "results.json").exists()
    empty = tmp_path / "empty"
    empty.mkdir()
    run_mod.run(study, empty, progress=False)  # an empty folder is fine, and so is a bundle run again
    run_mod.run(study, empty, progress=False)
    run_mod.run(study, out, progress=False, force=True)
    assert (out / "thesis.docx").exists() and (out / "results.json").exists()


def test_a_second_run_into_a_locked_folder_is_refused(fakes, study, tmp_path):
    out = tmp_path / "out"
    holder = bundle_mod.Bundle(out).open()  # as if another run were writing the folder
    try:
        with pytest.raises(InputError, match="another fluidshift run"):
            run_mod.run(study, out, progress=False)
    finally:
        holder.close()
    run_mod.run(study, out, progress=False)  # released: the next run goes ahead
    assert bundle_mod.read_results(out)["complete"] is True


def test_a_full_disk_is_a_clean_refusal_and_the_checkpoint_stays_valid(fakes, study, tmp_path, monkeypatch):
    out = tmp_path / "out"
    real_replace, calls = os.replace, {"n": 0}

    def full_disk(src, dst):
        calls["n"] += 1
        if calls["n"] > 3:  # the first few files land, then the disk is full
            raise OSError(28, "No space left on device")
        return real_replace(src, dst)

    monkeypatch.setattr(bundle_mod.os, "replace", full_disk)
    with pytest.raises(InputError, match="No space left"):
        run_mod.run(study, out, progress=False)
    monkeypatch.setattr(bundle_mod.os, "replace", real_replace)
    doc = bundle_mod.read_results(out, missing_ok=True)
    assert doc is None or doc["complete"] is False  # whatever landed is a valid, flagged checkpoint
    run_mod.run(study, out, progress=False)  # and the next run completes
    assert bundle_mod.read_results(out)["complete"] is True
