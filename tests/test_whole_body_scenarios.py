"""The shipped whole-body scenarios (invented subjects: crystalloid, 20 % albumin, a bleed) end to end with
``fluidshift run``: exit 0, the fan charts in the bundle and the report, and the summary's answer to the job (where
the volume is over time); and the summary lines on a hand-made timeline."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from click.testing import CliRunner

from uncertainty.analyses.propagate.report_section import timeline_summary
from uncertainty.app.cli import main
from uncertainty.core.resources import studies_dir

SCENARIOS = {"ringer_infusion_volunteer": "the infused volume in the plasma",
             "albumin_20_volunteer": "the infused volume in the plasma",
             "blood_loss_volunteer": "the plasma lost still missing"}


@pytest.mark.parametrize("stem", sorted(SCENARIOS))
def test_scenario_runs_end_to_end_with_fan_charts(tmp_path: Path, stem: str) -> None:
    out = tmp_path / stem
    res = CliRunner().invoke(main, ["run", str(studies_dir() / f"{stem}.toml"), "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert (out / "figures" / "propagate_timeline.png").is_file()
    report = (out / "report.html").read_text(encoding="utf-8")
    assert "Fan charts of the whole-body time courses" in report
    summary = json.loads((out / "results.json").read_text(encoding="utf-8"))["summary"]
    share = next(line for line in summary if line.startswith("Share of"))
    assert SCENARIOS[stem] in share and "30 min" in share and "120 min" in share
    assert any(line.startswith("Volume changes at") for line in summary)


def _band(values: list[float]) -> dict:
    return {"median": values, "ci95": [[v - 0.1, v + 0.1] for v in values]}


def test_timeline_summary_reads_the_printed_times_and_the_end_of_the_interventions() -> None:
    # report every 15 min to 150 min: printed at 30, 60, 120 and the end (150); the infusion ends at 45 min, so the
    # volumes are given at the first printed time after it, 60 min
    times = [15.0 * k for k in range(11)]
    tl = {"times_min": times, "units": {},
          "interventions": [{"kind": "infusion", "start_min": 0.0, "duration_min": 45.0}],
          "typical": {"infused_retained_fraction": _band([0.01 * k for k in range(11)]),
                      "plasma_volume_change": _band([10.0 * k for k in range(11)]),
                      "interstitial_volume_change_muscle": _band([-2.4 * k for k in range(11)]),
                      "urine_volume": _band([5.0 * k for k in range(11)])}}
    share, volumes = timeline_summary(tl)
    assert share.startswith("Share of the infused volume in the plasma")
    assert "30 min 0.02 [-0.08, 0.12], 60 min 0.04" in share and "120 min 0.08" in share and "150 min 0.1 " in share
    assert "90 min" not in share
    assert volumes == ("Volume changes at 60 min (typical subject, medians): plasma +40 mL, muscle interstitium "
                       "-10 mL, urine since 0 20 mL")
    tl["interventions"] = [{"kind": "bleed", "start_min": 0.0, "duration_min": 10.0}]
    share, volumes = timeline_summary(tl)
    assert "the plasma lost still missing" in share and volumes.startswith("Volume changes at 30 min")
    assert timeline_summary({"times_min": times, "typical": {}}) == []
