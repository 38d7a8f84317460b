"""Checks of analysis sections that need their analysis module's rules (run by `fluidshift check` and by
the check step of `fluidshift run`, so that bad input stops before any work starts, exit 2).

The pydantic schema in ``uncertainty.study`` checks each key on its own; the rules here need the
resolved study as well: a paired design without within-subject spread, an effect on an unknown
quantity (``design.parse_design``), a rank budget below the cheapest candidate (``rank.candidates_of``).
"""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.design import parse_design
from uncertainty.analyses.rank import candidates_of


def check_sections(study: Any) -> None:
    """Raise InputError (file, key, value) when the study's [design] or [rank] section cannot run."""
    if getattr(study, "design", None) is not None:
        parse_design(study)
    if getattr(study, "rank", None) is not None:
        candidates_of(study)
