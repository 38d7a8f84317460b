"""`fluidshift design` / `fluidshift rank` on study files: JSON keys, and bad input exits 2 naming file/key/value."""

from __future__ import annotations

import json

import pytest
from click.testing import CliRunner

from uncertainty.app.cli import main

HEAD = '[study]\ntissue = "skeletal_muscle"\nseed = 5\n'
# invented trial settings for command-line checks (the figures are checked elsewhere against closed forms)
DESIGN = ('[design]\nendpoint = "Kf"\neffect = { parameter = "Kf", multiply = 0.7 }\nmeasurement = { cv = 0.2 }\n'
          'n_range = [10, 40]\nsimulations = 200\nn_points = 3\n')


def _run(tmp_path, text: str, *args: str) -> object:
    f = tmp_path / "s.toml"
    f.write_text(text)
    return CliRunner().invoke(main, [*args, str(f)])


def test_design_json_has_the_contract_keys(tmp_path) -> None:
    res = _run(tmp_path, HEAD + DESIGN + 'design_prior = { dist = "normal", mean = -0.357, sd = 0.1 }\n',
               "design", "--json")
    assert res.exit_code == 0, res.output
    doc = json.loads(res.output)
    for key in ("n_per_arm", "n_per_arm_assurance", "power", "assurance", "curve"):
        assert key in doc
    for key in ("n_per_arm", "power", "power_mc_se", "assurance", "assurance_mc_se"):
        assert key in doc["curve"][0]


@pytest.mark.parametrize(("extra", "key"), [
    ("target_power = 1.5\n", "design.target_power"),
    ("design = \"paired\"\n", "design.within_subject"),
])
def test_design_bad_input_exits_2(tmp_path, extra: str, key: str) -> None:
    res = _run(tmp_path, HEAD + DESIGN + extra, "design")
    assert res.exit_code == 2
    assert key in res.output and "s.toml" in res.output


def test_design_empty_n_range_and_unknown_effect_exit_2(tmp_path) -> None:
    res = _run(tmp_path, HEAD + DESIGN.replace("n_range = [10, 40]", "n_range = [40, 10]"), "design")
    assert res.exit_code == 2 and "design.n_range" in res.output
    res = _run(tmp_path, HEAD + DESIGN.replace('parameter = "Kf", multiply', 'parameter = "Qx", multiply'), "design")
    assert res.exit_code == 2 and "design.effect.parameter" in res.output and "Qx" in res.output


def test_rank_budget_below_cheapest_exits_2(tmp_path) -> None:
    text = HEAD + '[rank]\ncandidates = [{ name = "Pi wick", parameter = "Pi", sd = 1.0, cost = 2 }]\nbudget = 1\n'
    res = _run(tmp_path, text, "rank")
    assert res.exit_code == 2
    assert "rank.budget" in res.output and "1" in res.output and "s.toml" in res.output


@pytest.mark.parametrize(("extra", "key"), [
    ('[design]\ndesign = "paired"\nendpoint = "Kf"\neffect = { parameter = "Kf", multiply = 0.7 }\n'
     "n_range = [10, 40]\n", "design.within_subject"),
    ('[rank]\ncandidates = [{ name = "Pi wick", parameter = "Pi", sd = 1.0, cost = 2 }]\nbudget = 1\n', "rank.budget"),
])
def test_check_and_run_stop_on_section_rules_before_any_work(tmp_path, extra: str, key: str) -> None:
    # rules that need the analysis module (paired design needs within_subject; budget >= cheapest candidate)
    f = tmp_path / "s.toml"
    f.write_text(HEAD + '[propagate]\nsamples = 1024\n' + extra)
    res = CliRunner().invoke(main, ["check", str(f)])
    assert res.exit_code == 2 and key in res.output
    out = tmp_path / "out"
    res = CliRunner().invoke(main, ["run", str(f), "--out", str(out), "--quiet"])
    assert res.exit_code == 2 and key in res.output
    assert not out.exists() or not any(p.suffix in (".json", ".csv", ".png") for p in out.rglob("*"))


def test_design_protocol_summary_in_markdown(tmp_path) -> None:
    res = _run(tmp_path, HEAD + DESIGN + "dropout = 0.1\n", "design", "--protocol")
    assert res.exit_code == 0, res.output
    assert "## Sample size" in res.output and "total N = " in res.output
    assert "| assumption | value | source |" in res.output and "| dropout | 0.1 |" in res.output
