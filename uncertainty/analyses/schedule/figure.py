"""Figure of a schedule result: cuff protocol and expected limb-volume course with the reading times.

matplotlib is imported inside the function (Agg back-end).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.core.plotting import pyplot, save_figure


def plot_schedule(doc: dict[str, Any], model: Any, out_dir: str) -> list[str]:
    """Two panels: cuff pressure (mmHg) against time (min), and the limb-volume change (mL/100 g) at
    the prior median with the readings marked, for the searched schedule, the user's protocol and equal spacing."""
    plt = pyplot()
    fig, (ax_p, ax_v) = plt.subplots(2, 1, figsize=(6.4, 5.2), sharex=True)
    total = doc["steps"] * doc["step_min"]
    t = np.linspace(0.0, total, 400)
    styles = {"optimised": ("#3b6ea5", "-"), "user_protocol": ("#b5651d", "-."), "equal_spacing": ("#999999", "--")}
    names = {"optimised": f"searched ({str(doc.get('status', 'optimised')).replace('_', ' ')})",
             "user_protocol": "your protocol", "equal_spacing": "equal spacing"}
    for label, (colour, ls) in styles.items():
        d = doc.get(label)
        if not isinstance(d, dict):
            continue
        sd = d["posterior_sd"]
        name = (f"{names[label]}: sd Kf {sd.get('Kf', float('nan')):.2g}, "
                f"sd Pvi {sd.get('Pvi', float('nan')):.2g} mmHg")
        edges = [k * doc["step_min"] for k in range(doc["steps"])] + [total]
        ax_p.step(edges, list(d["pressures"]) + [d["pressures"][-1]], where="post", color=colour, ls=ls,
                  label=name)
        if model is not None:
            centre = model.points[:1]
            f = model.forward(d["pressures"], t)
            ax_v.plot(t, f(centre)[0], color=colour, ls=ls)
            times = np.asarray(d["times"])
            ax_v.plot(times, model.forward(d["pressures"], times)(centre)[0], "o", color=colour, ms=4)
    ax_p.set_ylabel("cuff pressure (mmHg)")
    ax_p.legend(frameon=False, fontsize=7)
    ax_v.set_ylabel("limb volume change (mL/100 g)")
    ax_v.set_xlabel("time (min); dots: readings")
    for ax in (ax_p, ax_v):
        ax.spines[["top", "right"]].set_visible(False)
    fig.suptitle(f"cuff schedule, criterion {doc['criterion']} (prior median)", fontsize=9)
    fig.tight_layout()
    return save_figure(fig, out_dir, "schedule")
