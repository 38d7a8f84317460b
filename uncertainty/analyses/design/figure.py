"""Figures of a design result: power, assurance and Bayesian success against enrolled n per arm.

matplotlib is imported inside the function (Agg back-end).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.core.plotting import pyplot, save_figure

#: what the figure title calls each analysis
DESIGN_NAMES = {"two-sample t test": "parallel groups, two-sample t test",
                "ANCOVA on baseline": "parallel groups, ANCOVA on baseline",
                "paired t test": "paired (before/after), paired t test",
                "responders, z test of two proportions with continuity correction":
                    "parallel groups, responders (two proportions)",
                "AB/BA crossover, t test on period differences": "AB/BA two-period crossover, t test on period "
                                                                  "differences"}


def title(doc: dict[str, Any]) -> str:
    """Figure title naming the design and its analysis, the endpoint and the path."""
    name = DESIGN_NAMES.get(doc.get("analysis", ""), f"{doc['design']} design")
    if (doc.get("followups") or 1) > 1:
        name += f", mean of {doc['followups']} follow-ups"
    return f"{name}; endpoint {doc['endpoint']} ({doc['path']} path)"


def caption(doc: dict[str, Any]) -> str:
    """One-line assumptions caption under the figure: effect, sd, alpha, benefit, dropout, trials."""
    eff = ", ".join(f"{e['parameter']} {'x' if 'multiply' in e else '+'}"
                    f"{e.get('multiply', e.get('shift'))}" for e in doc.get("effect", []))
    test = doc.get("test_text") or f"alpha {doc['alpha']:g} two-sided, success = benefit ({doc.get('benefit', '-')})"
    return (f"effect {eff}; sd {doc['sd_analysis_scale']:.3g} ({doc['scale']} scale); {test}; "
            f"dropout {doc.get('dropout', 0):g}; "
            f"{doc['trials_per_point']} trials per point, bands +-2 MC se")


def plot_design(doc: dict[str, Any], out_dir: str) -> list[str]:
    """Power (simulated with +-2 MC se, noncentral t), conditional power, assurance and Bayesian
    success against enrolled subjects per arm, with the target lines and the headline n; PNG and SVG
    paths."""
    plt = pyplot()
    curve = doc["curve"]
    n = np.array([r.get("n_per_arm_enrolled", r.get("n_enrolled", r["n_per_arm"])) for r in curve], dtype=float)
    fig, ax = plt.subplots(figsize=(5.6, 3.9))
    series = (("power", "#3b6ea5", "-", "power (simulated" + (", expected)" if doc.get("power_conditional")
                                                              is not None else ")")),
              ("power_conditional", "#6a9fd4", "-.", "power at the typical values (simulated)"),
              ("assurance", "#b5651d", "-", "assurance (simulated)"),
              ("bayesian_success", "#4d8c57", "-", "Bayesian success (simulated)"))
    for key, colour, ls, label in series:
        v = np.array([np.nan if r.get(key) is None else r[key] for r in curve], dtype=float)
        if np.all(np.isnan(v)):
            continue
        se = np.array([np.nan if r.get(f"{key}_mc_se") is None else r[f"{key}_mc_se"] for r in curve], dtype=float)
        ax.plot(n, v, "o", ls=ls, color=colour, ms=3, label=label)
        ax.fill_between(n, v - 2 * se, v + 2 * se, color=colour, alpha=0.2, lw=0)
    pa = np.array([np.nan if r.get("power_analytic") is None else r["power_analytic"] for r in curve], dtype=float)
    if not np.all(np.isnan(pa)):
        ax.plot(n, pa, "--", color="#3b6ea5", lw=1, label="power (noncentral t)")
    ax.axhline(doc.get("target_power", 0.8), color="#3b6ea5", lw=0.8, ls=":")
    if doc.get("target_assurance") is not None:
        ax.axhline(doc["target_assurance"], color="#b5651d", lw=0.8, ls=":")
    head = doc.get("n_per_arm_enrolled", doc.get("n_per_arm"))
    if head:
        ax.axvline(head, color="#777777", lw=0.8, ls=":")
        ax.annotate(f"n = {head} enrolled/arm", (head, 0.03), fontsize=7, color="#555555",
                    xytext=(3, 0), textcoords="offset points")
    ax.set_xlabel("subjects per arm (enrolled, after dropout)")
    ax.set_ylabel("probability of success")
    ax.set_ylim(0, 1.02)
    ax.set_title(title(doc), fontsize=9)
    ax.legend(frameon=False, fontsize=7)
    ax.spines[["top", "right"]].set_visible(False)
    fig.text(0.01, 0.01, caption(doc), fontsize=6, color="#444444", wrap=True)
    fig.tight_layout(rect=(0, 0.05, 1, 1))
    return save_figure(fig, out_dir, f"design_{doc['endpoint']}")
