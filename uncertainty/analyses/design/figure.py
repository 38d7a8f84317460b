"""Figures of a design result: power and assurance against n per arm, with MC error bands.

matplotlib is imported inside the function (Agg back-end).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.core.plotting import pyplot, save_figure


def plot_design(doc: dict[str, Any], out_dir: str) -> list[str]:
    """Power (simulated, with +-2 MC se, and analytic) and assurance curves; PNG and SVG paths."""
    plt = pyplot()
    curve = doc["curve"]
    n = np.array([r["n_per_arm"] for r in curve], dtype=float)
    fig, ax = plt.subplots(figsize=(5.2, 3.4))
    for key, colour, label in (("power", "#3b6ea5", "power (simulated)"),
                               ("assurance", "#b5651d", "assurance (simulated)")):
        v = np.array([np.nan if r.get(key) is None else r[key] for r in curve], dtype=float)
        if np.all(np.isnan(v)):
            continue
        se = np.array([np.nan if r.get(f"{key}_mc_se") is None else r[f"{key}_mc_se"] for r in curve], dtype=float)
        ax.plot(n, v, "o-", color=colour, ms=3, label=label)
        ax.fill_between(n, v - 2 * se, v + 2 * se, color=colour, alpha=0.2, lw=0)
    pa = np.array([np.nan if r.get("power_analytic") is None else r["power_analytic"] for r in curve], dtype=float)
    if not np.all(np.isnan(pa)):
        ax.plot(n, pa, "--", color="#3b6ea5", lw=1, label="power (noncentral t)")
    ax.axhline(doc.get("target_power", 0.8), color="#777777", lw=0.8, ls=":")
    if doc.get("n_per_arm_analysed"):
        ax.axvline(doc["n_per_arm_analysed"], color="#777777", lw=0.8, ls=":")
    ax.set_xlabel("subjects per arm (completing)")
    ax.set_ylabel("probability of success")
    ax.set_ylim(0, 1.02)
    ax.set_title(f"{doc['design']} design, endpoint {doc['endpoint']} ({doc['path']} path)", fontsize=10)
    ax.legend(frameon=False, fontsize=8)
    ax.spines[["top", "right"]].set_visible(False)
    fig.tight_layout()
    return save_figure(fig, out_dir, f"design_{doc['endpoint']}")
