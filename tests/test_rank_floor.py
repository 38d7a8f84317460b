"""rank --samples below its floor is raised to the floor with a note (fewer draws gave large errors)."""

from __future__ import annotations

from uncertainty.analyses.rank import MIN_SAMPLES, rank
from uncertainty.study import Study


def test_too_few_samples_are_raised_to_the_floor_with_a_note(tmp_path) -> None:
    # invented prior-only study: Pc normal, the other forces fixed; one candidate reading of Pc
    doc = {"study": {"title": "rank floor (invented)", "tissue": "skeletal_muscle", "model": "classic", "seed": 3},
           "parameters": {"Pc": {"dist": "normal", "mean": 20.0, "sd": 3.0, "unit": "mmHg"}, "Kf": 0.01,
                          "Pi": -1.0, "pi_c": 25.0, "pi_i": 10.0, "sigma": 0.9},
           "rank": {"candidates": [{"name": "Pc", "parameter": "Pc", "sd": 2.0, "unit": "mmHg"}]}}
    out = rank(Study.from_dict(doc, base_dir=tmp_path), samples=10).to_dict()
    assert out["samples"] == MIN_SAMPLES
    assert any(f"raised from 10 to {MIN_SAMPLES}" in n for n in out["notes"])
