"""The terminal's whole-body time-course table: the typical subject's median and 95% interval at the
shown times, read from the stored timeline (hand-made timeline below, invented numbers)."""

from uncertainty.analyses.propagate.table import timeline_lines


def _timeline() -> dict:
    times = [float(t) for t in range(0, 181, 5)]  # 0..180 min every 5 min
    med = [t * 2.0 for t in times]                # invented: median = 2 x time
    return {"times_min": times, "units": {"plasma_volume_change": "mL"},
            "typical": {"plasma_volume_change": {"median": med, "ci95": [[m - 1, m + 1] for m in med]}}}


def test_shown_times_are_the_standard_ones_up_to_the_last_reported():
    lines = timeline_lines(_timeline())
    head = lines[1]
    for t in ("0 min", "30 min", "60 min", "120 min", "180 min"):
        assert t in head
    assert "240 min" not in head  # beyond the last reported time


def test_cells_are_median_and_interval_at_that_time():
    row = timeline_lines(_timeline())[3]
    assert row.startswith("plasma_volume_change (mL)")
    assert "60 [59, 61]" in row and "120 [119, 121]" in row and "240 [239, 241]" in row


def test_no_timeline_no_lines():
    assert timeline_lines(None) == [] and timeline_lines({"times_min": []}) == []
