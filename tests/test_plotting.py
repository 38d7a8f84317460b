"""Figure files: names safe to use in a shell and a URL."""

from __future__ import annotations

from pathlib import Path

from uncertainty.core.plotting import pyplot, save_figure


def test_an_endpoint_at_a_time_gives_a_file_name_without_spaces(tmp_path: Path) -> None:
    fig, _ = pyplot().subplots()
    paths = save_figure(fig, str(tmp_path), "design_hb_ratio at 60 min")
    assert [Path(p).name for p in paths] == ["design_hb_ratio_at_60_min.png", "design_hb_ratio_at_60_min.svg"]
    assert all(Path(p).is_file() for p in paths)
