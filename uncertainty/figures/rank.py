"""Figure of a rank result: expected 95% interval narrowing per candidate, beside its cost.

matplotlib is imported inside the function (Agg back-end).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.figures.propagate import _pyplot, save


def plot_rank(doc: dict[str, Any], out_dir: str) -> list[str]:
    """Horizontal bars: expected variance reduction (with +-2 MC se) and the perfect-information bound."""
    plt = _pyplot()
    rows = doc["candidates"]
    names = [f"{r['name']} ({r['parameter']}, cost {r['cost']:g})" for r in rows][::-1]
    red = np.array([r["expected_variance_reduction"] for r in rows])[::-1]
    se = np.array([r["mc_se"] for r in rows])[::-1]
    bound = np.array([r["perfect_information_bound"] for r in rows])[::-1]
    y = np.arange(len(rows))
    fig, ax = plt.subplots(figsize=(6.4, 0.45 * len(rows) + 1.4))
    ax.barh(y, bound, color="#dddddd", label="perfect-information bound")
    ax.barh(y, red, xerr=2 * se, color="#3b6ea5", capsize=2, height=0.5, label="expected reduction")
    ax.set_yticks(y, names, fontsize=7)
    unit = doc.get("units", {}).get("expected_var_post", "")
    ax.set_xlabel(f"expected reduction of Var({doc.get('output', 'Jv')}) {unit}")
    ax.legend(frameon=False, fontsize=8)
    ax.spines[["top", "right"]].set_visible(False)
    fig.tight_layout()
    return save(fig, out_dir, f"rank_{doc.get('output', 'Jv')}")
