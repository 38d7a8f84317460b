"""`fluidshift run` runs every check `fluidshift check` runs (the inference model declared without sampling
included) before it opens the bundle; the "declared but not used" note agrees with what sections keep."""

from __future__ import annotations

from pathlib import Path

import pytest
from click.testing import CliRunner

from uncertainty.app.cli import main
from uncertainty.study import load_study

BAD = Path(__file__).parent / "bad_studies"
STUDIES = Path(__file__).parent.parent / "studies"
UNUSED = "declared but not used"

# an override of the lymph quantities; numbers invented (test fixture), only their presence matters
LYMPH_OVERRIDE = """
[parameters]
L = { dist = "lognormal", median = 0.001, gsd = 2.5, unit = "mL/min/mmHg/100g", origin = "invented" }
Pi_L0 = { dist = "normal", mean = -2.0, sd = 1.0, unit = "mmHg", origin = "invented" }
"""


@pytest.mark.parametrize("name", ["infer_swelling_rate_without_L.toml", "infer_unlabelled_among_subjects.toml",
                                  "infer_without_observations.toml"])
def test_run_refuses_what_check_refuses_before_writing(name: str, tmp_path: Path) -> None:
    path = str(BAD / name)
    checked = CliRunner().invoke(main, ["check", path])
    assert checked.exit_code == 2
    out = tmp_path / "out"
    ran = CliRunner().invoke(main, ["run", path, "--out", str(out)])
    assert ran.exit_code == 2, ran.output
    line = ran.stderr.strip()
    assert line == checked.stderr.strip() and len(line.splitlines()) == 1
    assert "Traceback" not in ran.output
    assert not out.exists()


def _with_lymph_override(src: Path, tmp_path: Path) -> Path:
    text = src.read_text()
    head, sep, rest = text.partition("\n[propagate]")
    assert sep, "the study has a [propagate] section to insert [parameters] before"
    p = tmp_path / src.name
    p.write_text(head + "\n" + LYMPH_OVERRIDE + sep + rest)
    return p


def test_kept_lymph_quantities_are_not_called_unused(tmp_path: Path) -> None:
    # swelling_rate observations keep L and Pi_L0 (OBS_NEEDS), although the classic form does not use them
    path = _with_lymph_override(STUDIES / "arm_after_node_surgery.toml", tmp_path)
    res = CliRunner().invoke(main, ["check", str(path)])
    assert res.exit_code == 0, res.output
    assert "uncertain inputs:" in res.output and "L, Pi_L0" in res.output
    assert UNUSED not in res.output


def test_unkept_override_is_still_called_unused(tmp_path: Path) -> None:
    # the demo study has no section that needs L or Pi_L0: the note names both
    s = load_study(_with_lymph_override(STUDIES / "demo.toml", tmp_path))
    assert "L" not in s.names
    assert f"{UNUSED} by the classic form: L, Pi_L0" in s.notes
