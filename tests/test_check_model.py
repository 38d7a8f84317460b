"""`fluidshift check` declares the inference model (not compiled, not sampled): what `infer` would refuse
stops at check time (the refusals themselves are fixtures in tests/bad_studies/infer_*.toml); what it
accepts is converted as the study says."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from click.testing import CliRunner

from uncertainty.analyses.inference import problem_from_study
from uncertainty.app.cli import main
from uncertainty.study import load_study

ORGAN = """
[study]
title = "per-organ lymph flow (invented)"
tissue = "skeletal_muscle"
tissue_mass = "25 kg"

[[observations]]
kind = "lymph_flow"
value = 0.5
cv = 0.3
unit = "mL/min"
"""


def test_per_organ_unit_with_tissue_mass_is_converted(tmp_path: Path) -> None:
    path = tmp_path / "organ.toml"
    path.write_text(ORGAN)
    result = CliRunner().invoke(main, ["check", str(path), "--json"])
    assert result.exit_code == 0, result.output
    doc = json.loads(result.stdout)
    assert doc["inference_model"]["terms"] and doc["inference_model"]["subjects"] == 1
    obs = problem_from_study(load_study(path)).observations[0]
    # 0.5 mL/min over 25 kg = 250 x 100 g: 0.002 mL/min/100g (hand arithmetic)
    assert obs.value == pytest.approx(0.5 / 250.0)


def test_swelling_rate_keeps_the_lymph_relation_of_the_prior_set() -> None:
    # the bundled arm study: the classic form has no L or Pi_L0, swelling_rate's JL(Pi) needs them and
    # protein_ratio needs PS; the skin prior set declares all three, so they are kept as uncertain
    s = load_study(Path(__file__).parents[1] / "studies" / "arm_after_node_surgery.toml")
    assert {"L", "Pi_L0", "PS"} <= set(s.names)
    result = CliRunner().invoke(main, ["check", str(s.path)])
    assert result.exit_code == 0, result.output
    assert "inference model (declared, not sampled): 12 subject(s)" in result.stdout


def test_check_without_observations_builds_nothing(tmp_path: Path) -> None:
    path = tmp_path / "plain.toml"
    path.write_text('[study]\ntitle = "no data (invented)"\ntissue = "skeletal_muscle"\n')
    doc = json.loads(CliRunner().invoke(main, ["check", str(path), "--json"]).stdout)
    assert doc["inference_model"] is None
