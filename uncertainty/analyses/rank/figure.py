"""Figure of a rank result: expected 95% interval narrowing per candidate, beside its cost.

matplotlib is imported inside the function (Agg back-end).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.core.plotting import pyplot, save_figure


def plot_rank(doc: dict[str, Any], out_dir: str) -> list[str]:
    """Horizontal bars: expected variance reduction (with +-2 MC se) and the perfect-information bound."""
    plt = pyplot()
    rows = doc["candidates"]
    names = [f"{r['name']} ({r['parameter']}, cost {r['cost']:g})" for r in rows][::-1]
    red = np.array([r["expected_variance_reduction"] for r in rows])[::-1]
    se = np.array([r["mc_se"] for r in rows])[::-1]
    bound = np.array([r["perfect_information_bound"] for r in rows])[::-1]
    # a power of ten in the axis label, not matplotlib's offset text (which sat on top of the label)
    top = float(np.nanmax(np.abs(np.concatenate([bound, red + 2 * se])))) if len(rows) else 0.0
    exp10 = int(np.floor(np.log10(top))) if top > 0 and np.isfinite(top) else 0
    exp10 = exp10 if abs(exp10) >= 3 else 0
    scale = 10.0 ** -exp10
    y = np.arange(len(rows))
    fig, ax = plt.subplots(figsize=(6.4, 0.45 * len(rows) + 1.4))
    ax.barh(y, bound * scale, color="#dddddd", label="perfect-information bound")
    ax.barh(y, red * scale, xerr=2 * se * scale, color="#3b6ea5", capsize=2, height=0.5, label="expected reduction")
    ax.axvline(0.0, color="#444444", lw=0.8)
    ax.set_yticks(y, names, fontsize=7)
    unit = doc.get("units", {}).get("expected_var_post", "")
    factor = f" in units of 1e{exp10}" if exp10 else ""
    ax.set_xlabel(f"expected reduction of Var({doc.get('output', 'Jv')}){factor} {unit}".rstrip())
    ax.legend(frameon=False, fontsize=8)
    ax.spines[["top", "right"]].set_visible(False)
    fig.tight_layout()
    return save_figure(fig, out_dir, f"rank_{doc.get('output', 'Jv')}")
