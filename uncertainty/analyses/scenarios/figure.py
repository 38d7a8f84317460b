"""Figure of a scenarios result: the paired change of Jv per scenario, source and layer, with 95 % intervals.

matplotlib is imported inside the function (Agg back-end).
"""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.scenarios.rows import rows
from uncertainty.core.plotting import pyplot, save_figure


def plot_scenarios(doc: dict[str, Any], out_dir: str) -> list[str]:
    """Forest plot of the paired change of Jv (mL/min per basis): median and 95 % interval per scenario, for
    the prior (typical subject, individual) and the posterior (typical subject); subjects are left to the
    CSV. Returns the PNG and SVG paths (none without Jv)."""
    pick = [r for r in rows(doc, ("Jv",)) if not r["who"].startswith("subject ")]
    if not pick:
        return []
    plt = pyplot()
    fig, ax = plt.subplots(figsize=(6.4, 0.9 + 0.32 * len(pick)))
    colours = {("prior", "typical"): "#999999", ("prior", "individual"): "#c7c7c7",
               ("posterior", "typical"): "#3b6ea5"}
    labels = []
    for k, r in enumerate(pick):
        y = len(pick) - 1 - k
        lo, hi, med = r["ci95_low"], r["ci95_high"], r["median"]
        colour = colours.get((r["source"], r["who"]), "#555555")
        ax.plot([lo, hi], [y, y], color=colour, lw=2.5, solid_capstyle="butt")
        ax.plot([med], [y], "o", color="black", ms=3.5)
        labels.append(f"{r['scenario']} ({r['source']}, {r['who']})")
    ax.axvline(0.0, color="#444444", lw=0.8, ls=":")
    ax.set_yticks(range(len(pick)), list(reversed(labels)), fontsize=7)
    ax.set_xlabel(f"change in Jv ({doc.get('units', {}).get('Jv', '')}); dot: median; bar: 95% interval")
    ax.spines[["top", "right"]].set_visible(False)
    fig.suptitle("scenarios: paired change of Jv (same draws, scenario minus baseline)", fontsize=9)
    fig.tight_layout()
    return save_figure(fig, out_dir, "scenarios_Jv")
