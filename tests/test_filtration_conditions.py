"""`fluidshift filtration`: --conditions on the tissue's medians, and a warning for every unused --set.

Check values are read straight from priors/skeletal_muscle.toml and priors/conditions.toml (each value's
origin is beside it there); Pc = (r Pa + Pv)/(1 + r) is Pappenheimer & Soto-Rivera 1948.
"""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

import pytest
from click.testing import CliRunner

from uncertainty.app.cli import main

PRIORS = Path(__file__).resolve().parents[1] / "priors"


def _muscle() -> dict:
    return tomllib.loads((PRIORS / "skeletal_muscle.toml").read_text())["priors"]


def _sepsis(parameter: str) -> dict:
    rows = tomllib.loads((PRIORS / "conditions.toml").read_text())["conditions"]["sepsis"]["modify"]
    return next(r for r in rows if r["parameter"] == parameter)


def _run(args: list[str]) -> object:
    return CliRunner().invoke(main, ["filtration", *args])


def _pc(pa: float, pv: float, r: float) -> float:
    return (r * pa + pv) / (1 + r)   # Pappenheimer & Soto-Rivera 1948


def test_pa_alone_is_used_with_the_tissue_medians_of_pv_and_r() -> None:
    pr = _muscle()
    assert pr["Pv"]["dist"] == "normal" and pr["r"]["dist"] == "lognormal"
    res = _run(["--set", "Pa=68", "--tissue", "skeletal_muscle", "--json"])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    assert doc["inputs"]["Pc"] == pytest.approx(_pc(68.0, pr["Pv"]["mean"], pr["r"]["median"]))
    assert doc["sources"]["Pc"].startswith("derived from Pa, Pv, r")
    assert doc["warnings"] == [] and "warning" not in res.stderr


def test_every_unused_set_gives_a_warning_line() -> None:
    args = ["--set", "Pc=20", "--set", "Pa=68", "--set", "Pv=10", "--set", "pi_c=25", "--set", "Cp=7",
            "--tissue", "skeletal_muscle"]
    res = _run(args)
    assert res.exit_code == 0, res.output
    lines = [ln for ln in res.stderr.splitlines() if ln.startswith("warning:")]
    assert lines == ["warning: --set Pa is not used: Pc is set directly",
                     "warning: --set Pv is not used: Pc is set directly",
                     "warning: --set Cp is not used: pi_c is set directly"]
    doc = json.loads(_run([*args, "--json"]).stdout)
    assert len(doc["warnings"]) == 3 and doc["inputs"]["Pc"] == 20.0


def test_a_lung_set_does_not_use_pa() -> None:
    res = _run(["--set", "Pa=68", "--tissue", "lung", "--json"])
    assert res.exit_code == 0, res.output
    assert json.loads(res.stdout)["warnings"] == [
        "--set Pa is not used: the lung prior set does not derive Pc from Pa, Pv and r"]


def test_conditions_change_the_medians_before_they_fill_gaps() -> None:
    pr = _muscle()
    kf, r = _sepsis("Kf"), _sepsis("r")
    res = _run(["--set", "Pa=68", "--tissue", "skeletal_muscle", "--conditions", "sepsis", "--json"])
    assert res.exit_code == 0, res.output
    doc = json.loads(res.stdout)
    # lognormal priors: multiply scales the median; the extra gsd widens without moving it
    assert doc["inputs"]["Kf"] == pytest.approx(pr["Kf"]["median"] * kf["multiply"])
    assert doc["inputs"]["Pc"] == pytest.approx(_pc(68.0, pr["Pv"]["mean"], pr["r"]["median"] * r["multiply"]))
    assert doc["conditions"] == ["sepsis"] and doc["sources"]["Kf"] == "skeletal_muscle prior median (sepsis)"
    # no conditions: the medians as before
    plain = json.loads(_run(["--set", "Pa=68", "--tissue", "skeletal_muscle", "--json"]).stdout)
    assert plain["inputs"]["Kf"] == pytest.approx(pr["Kf"]["median"])


@pytest.mark.parametrize("args,word", [
    (["--set", "Pc=20", "--conditions", "sepsis"], "--tissue"),
    (["--set", "Pc=20", "--tissue", "skeletal_muscle", "--conditions", "nope"], "unknown condition"),
    (["--set", "Pc=20", "--tissue", "skeletal_muscle", "--conditions", "sepsis,sepsis"], "twice"),
    (["--set", "Pc=20", "--tissue", "lung", "--conditions", "burns"], "applies to"),
    (["--set", "Pa=68", "--set", "Pi=1", "--set", "pi_c=25", "--set", "pi_i=8", "--set", "sigma=0.9",
      "--set", "Kf=0.004"], "Pa, Pv and r"),
])
def test_bad_conditions_exit_2(args: list[str], word: str) -> None:
    res = _run(args)
    assert res.exit_code == 2 and word in res.stderr and "Traceback" not in res.output
