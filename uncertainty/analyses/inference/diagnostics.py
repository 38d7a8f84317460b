"""Convergence diagnostics (ArviZ) and the quality gate.

R-hat (rank-normalised split R-hat), bulk and tail ESS (Vehtari et al. 2021, Bayesian Analysis
16:667-718), divergent transitions and the energy BFMI (Betancourt 2016) for every free quantity.
The gate's defaults: R-hat <= 1.01 and bulk ESS >= 400 (Vehtari et al. 2021 recommendations,
from memory), no divergences (common practice).
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np


@dataclasses.dataclass(frozen=True)
class Gate:
    """Thresholds of the quality gate (configurable)."""

    r_hat_max: float = 1.01          # Vehtari et al. 2021 (from memory)
    ess_bulk_min: float = 400.0      # Vehtari et al. 2021 (from memory)
    ess_tail_min: float = 0.0        # tail ESS reported, not gated by default
    divergences_max: int = 0         # common practice
    bfmi_min: float = 0.0            # reported; 0.3 is the usual warning level (common practice)

    @classmethod
    def coerce(cls, gate: Any) -> Gate:
        """A Gate from None (defaults), a Gate, a dict of fields, or False (gate off)."""
        if gate is None or gate is True:
            return cls()
        if gate is False:
            return cls(r_hat_max=np.inf, ess_bulk_min=0.0, divergences_max=2**31)
        if isinstance(gate, Gate):
            return gate
        return cls(**dict(gate))


def diagnose(idata: Any, var_names: list[str], gate: Gate) -> dict[str, Any]:
    """Diagnostics per quantity and the gate's verdict.

    Returns ``{r_hat_max, ess_bulk_min, ess_tail_min, divergences, bfmi_min, passed, failing,
    per_quantity: {name: {r_hat, ess_bulk, ess_tail}}}``.
    """
    import arviz as az

    post = idata.posterior
    names = [v for v in var_names if v in post]
    rhat = az.rhat(idata, var_names=names)
    ess_b = az.ess(idata, var_names=names, method="bulk")
    ess_t = az.ess(idata, var_names=names, method="tail")
    per: dict[str, dict[str, float]] = {}
    failing: list[str] = []
    for v in names:
        r = np.atleast_1d(np.asarray(rhat[v].values, dtype=float)).ravel()
        eb = np.atleast_1d(np.asarray(ess_b[v].values, dtype=float)).ravel()
        et = np.atleast_1d(np.asarray(ess_t[v].values, dtype=float)).ravel()
        per[v] = {"r_hat": float(np.nanmax(r)), "ess_bulk": float(np.nanmin(eb)),
                  "ess_tail": float(np.nanmin(et))}
        reasons = []
        if not per[v]["r_hat"] <= gate.r_hat_max:
            reasons.append(f"R-hat {per[v]['r_hat']:.3f} > {gate.r_hat_max}")
        if not per[v]["ess_bulk"] >= gate.ess_bulk_min:
            reasons.append(f"bulk ESS {per[v]['ess_bulk']:.0f} < {gate.ess_bulk_min:.0f}")
        if gate.ess_tail_min and not per[v]["ess_tail"] >= gate.ess_tail_min:
            reasons.append(f"tail ESS {per[v]['ess_tail']:.0f} < {gate.ess_tail_min:.0f}")
        if reasons:
            failing.append(f"{v} ({', '.join(reasons)})")
    stats = idata.sample_stats
    div_name = "diverging" if "diverging" in stats else None
    divergences = int(np.asarray(stats[div_name].values).sum()) if div_name else 0
    try:
        bfmi = np.asarray(az.bfmi(idata), dtype=float)
        bfmi_min = float(np.min(bfmi))
    except Exception:  # noqa: BLE001 - energy not recorded by every sampler
        bfmi_min = float("nan")
    if divergences > gate.divergences_max:
        failing.append(f"{divergences} divergent transitions (allowed {gate.divergences_max})")
    if gate.bfmi_min and not bfmi_min >= gate.bfmi_min:
        failing.append(f"BFMI {bfmi_min:.2f} < {gate.bfmi_min}")
    r_all = [p["r_hat"] for p in per.values()]
    eb_all = [p["ess_bulk"] for p in per.values()]
    et_all = [p["ess_tail"] for p in per.values()]
    return {
        "r_hat_max": float(np.nanmax(r_all)) if r_all else float("nan"),
        "ess_bulk_min": float(np.nanmin(eb_all)) if eb_all else float("nan"),
        "ess_tail_min": float(np.nanmin(et_all)) if et_all else float("nan"),
        "divergences": divergences,
        "bfmi_min": bfmi_min,
        "passed": not failing,
        "failing": failing,
        "per_quantity": per,
    }
