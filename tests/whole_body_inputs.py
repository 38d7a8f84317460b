"""Inputs of the whole-body course for tests: a subject at the skeletal-muscle prior medians, and doses."""

from __future__ import annotations

import importlib.util
from pathlib import Path
from typing import Any

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


BENCHMARK = Path(__file__).resolve().parents[1] / "benchmarks" / "benchmark_whole_body_inference.py"


def invented_infusion_study(folder: Path, subjects: int, samples: int = 10, seed: int = 20, urine: bool = False
                            ) -> tuple[Path, dict[str, Any]]:
    """The whole-body inference benchmark's invented study (``write_study`` of
    ``benchmarks/benchmark_whole_body_inference.py``, loaded by file path so that tests and benchmark simulate with
    one function): ``subjects`` invented volunteers of one population, 25 mL/kg crystalloid over 30 min,
    ``samples`` haemoglobin readings each (g/dL, 0-180 min), with ``urine`` also cumulative urine (mL) at those times.
    Returns the study file and the true values."""
    spec = importlib.util.spec_from_file_location("benchmark_whole_body_inference", BENCHMARK)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module.write_study(folder, subjects, samples, seed=seed, urine=urine)
