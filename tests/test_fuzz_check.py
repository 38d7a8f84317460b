"""Fuzzing `fluidshift check`: mutated bundled studies and data files end in exit 0 or a clean exit 2.

The generator (tests/fuzz_studies.py, seeded) swaps types, makes numbers extreme, deletes, duplicates and
renames keys, lengthens strings, breaks units, nests values deeply and damages data files and the TOML
text. Every case must end in exit 0 or exit 2 with one line on stderr: never a traceback, never past the
per-case time limit (a generous limit for a shared CPU; no wall-clock assertion on speed).
"""

from __future__ import annotations

import pytest
from fuzz_studies import figures, run_corpus

LIMIT = 180.0  # seconds before a case counts as a hang (a FIFO or /dev/zero would block forever); building
# the inference model of a steady form with a lymph reading takes about a minute of CPU


def _check(cases: int, seed: int) -> None:
    outcomes = run_corpus(cases, seed=seed, limit=LIMIT)
    bad = [(o.kind, o.case.study, o.case.mutations, o.stderr[-300:]) for o in outcomes
           if o.kind not in ("refused", "accepted")]
    assert not bad, (figures(outcomes), bad[:5])
    counts = figures(outcomes)
    assert counts["refused cleanly"] > counts["cases"] // 2  # the mutations do break most studies


def test_fuzz_check_quick() -> None:
    _check(60, seed=20261203)


@pytest.mark.slow
def test_fuzz_check_more_cases() -> None:
    # check builds the inference model of every accepted study with observations (seconds each), so the
    # suite runs 300 cases; `python tests/fuzz_studies.py --cases 1000` runs the full corpus and prints its figures
    _check(300, seed=17)
