"""Inputs of the whole-body course for tests: a subject at the skeletal-muscle prior medians, and doses."""

from __future__ import annotations

import numpy as np

from uncertainty.analyses.propagate.timeline import bed_ratios
from uncertainty.forms.whole_body import timeline_parameters
from uncertainty.physiology import whole_body as wb
from uncertainty.priors import prior_medians

BODY_KG = 73.0  # ICRP Publication 89 (2002) reference adult male


def params(n: int = 1, scale: dict[str, float] | None = None):
    """Body, beds and Cp0 at the skeletal-muscle prior medians (n equal draws, some optionally scaled)."""
    m = prior_medians("skeletal_muscle")
    v = {k: np.full(n, val) for k, val in m.items()}
    for k, f in (scale or {}).items():
        v[k] = v[k] * np.asarray(f)
    return timeline_parameters(v, BODY_KG, bed_ratios("skeletal_muscle"))


def dose(fluid: str, volume: float, duration: float, start: float = 0.0) -> list[wb.Dose]:
    """One intervention as a list: ``fluid`` a key of ``FLUID_PROTEIN_G_PER_DL`` or ``"bleed"`` (mL, min)."""
    if fluid == "bleed":
        return [wb.Dose("bleed", volume, start, duration)]
    return [wb.infusion(fluid, volume, start, duration)]
