"""Observation kinds: one module per kind, registered in :data:`KINDS`.

Each module exposes ``validate(obs, problem)`` (raises InputError naming file, key and value),
``add(ctx, obs)`` (adds the likelihood inside the model context) and optionally
``subjects(obs, problem)`` (subject and group labels found in the observation's data),
``prepare(ctx, obs)`` (re-parameterise per-subject quantities before any term is added),
``OWN_SPREAD`` (quantities whose between-subject spread the readings inform on their own: each keeps its own
spread factor outside the joint one) and
``NOTE`` (a sentence printed with the results; ``kind_note(obs, problem)`` where it depends on the study).
"""

from __future__ import annotations

import importlib
from types import ModuleType
from typing import Any

#: observation kind -> module under uncertainty.analyses.inference.observations
KINDS: dict[str, str] = {
    "measurement": "measurement",
    "lymph_flow": "lymph_flow",
    "clearance_rate": "clearance_rate",
    "swelling_rate": "swelling_rate",
    "volume_time_course": "volume_time_course",
    "protein_ratio": "protein_ratio",
    "GFR": "glomerular",
    "RPF": "glomerular",
    "filtration_fraction": "glomerular",
    "body_weight": "fluid_balance",
    "fluid_balance": "fluid_balance",
    "haemoglobin": "haemoglobin",
    "haematocrit": "haematocrit",
    "urine": "urine",
    "plasma_protein": "plasma_protein",
}


def kind_module(obs: Any) -> ModuleType:
    """The module that models ``obs.kind``; an unknown kind raises InputError at ``.kind``."""
    name = KINDS.get(obs.kind)
    if name is None:
        raise obs.error(f"unknown observation kind (known: {', '.join(KINDS)})", "kind", obs.kind)
    return importlib.import_module(f"uncertainty.analyses.inference.observations.{name}")
