"""Figures of a sensitivity result: index bars with interval whiskers; convergence against N.

matplotlib is imported here only (Agg back-end).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.core.plotting import pyplot, save_figure

COLOURS = {"S1": "#3b6ea5", "ST": "#b5651d", "Sh": "#4d7f3b", "mu_star": "#3b6ea5"}


def plot_indices(result: Any, out_dir: str) -> list[str]:
    """Bars of the indices (in ranking order) with 95% whiskers, and the convergence table when
    there is one; PNG and SVG paths."""
    plt = pyplot()
    keys = {"sobol": ["S1", "ST"], "shapley": ["Sh", "S1", "ST"], "morris": ["mu_star"]}[result.method]
    names = list(result.ranking)
    x = np.arange(len(names))
    width = 0.8 / len(keys)
    fig, ax = plt.subplots(figsize=(max(4.0, 0.9 * len(names) + 2), 3.4))
    for i, key in enumerate(keys):
        v = np.array([result.indices[p][key] for p in names])
        ci = np.array([result.indices[p][f"{key}_ci"] for p in names])
        err = np.vstack([v - ci[:, 0], ci[:, 1] - v]).clip(min=0)
        ax.bar(x + (i - (len(keys) - 1) / 2) * width, v, width, yerr=err, capsize=2,
               color=COLOURS.get(key, "#777777"), alpha=0.85 if i == 0 else 0.6, label=key)
    ax.axhline(0, color="#444444", lw=0.8)
    ax.set_xticks(x, names)
    ylabel = "mu* (output per cube unit)" if result.method == "morris" else "index"
    ax.set_ylabel(ylabel)
    ax.set_title(f"{result.method} indices of {result.output}", fontsize=10)
    ax.legend(frameon=False, fontsize=8)
    ax.spines[["top", "right"]].set_visible(False)
    fig.tight_layout()
    paths = save_figure(fig, out_dir, f"sensitivity_{result.output}")
    if result.convergence:
        paths += plot_convergence(result, out_dir)
    return paths


def plot_convergence(result: Any, out_dir: str) -> list[str]:
    """The ranking index (ST for Sobol', Sh for Shapley, mu* for Morris) of each input with its 95%
    interval against the sample size (log2 axis)."""
    plt = pyplot()
    key = result.rank_key
    fig, ax = plt.subplots(figsize=(6, 3.4))
    n = np.array([row["samples"] for row in result.convergence])
    for p in result.ranking:
        v = np.array([row["indices"][p][key] for row in result.convergence])
        ci = np.array([row["indices"][p][f"{key}_ci"] for row in result.convergence])
        line = ax.plot(n, v, marker="o", ms=3, label=p)[0]
        ax.fill_between(n, ci[:, 0], ci[:, 1], color=line.get_color(), alpha=0.15)
    ax.set_xscale("log", base=2)
    ax.set_xlabel({"sobol": "base samples N", "morris": "trajectories",
                   "shapley": "random orders"}[result.method])
    ax.set_ylabel(key)
    ax.set_title(f"convergence of {key} of {result.output}", fontsize=10)
    ax.legend(frameon=False, fontsize=8, ncol=2)
    ax.spines[["top", "right"]].set_visible(False)
    fig.tight_layout()
    return save_figure(fig, out_dir, f"sensitivity_{result.output}_convergence")


def plot_over_time(result: Any, out_dir: str, most: int = 6) -> list[str]:
    """Indices against time for ``NAME over time``: the ranking index (ST, Sh or mu*) of the ``most`` players
    that reach the largest values, each with its 95% band, and S1 dashed (Sobol', Shapley); PNG and SVG paths."""
    plt = pyplot()
    ot = result.over_time
    t = np.asarray(ot["times_min"], dtype=float)
    key = ot["key"]
    ix = ot["indices"]

    def arr(v: Any) -> np.ndarray:
        return np.array([np.nan if x is None else x for x in v], dtype=float)

    top = sorted(ix, key=lambda p: -np.nanmax(np.append(arr(ix[p][key]), -np.inf)))[:most]
    fig, ax = plt.subplots(figsize=(7.5, 3.6))
    cycle = plt.rcParams["axes.prop_cycle"].by_key().get("color", ["#333333"])
    for k, p in enumerate(top):
        c = cycle[k % len(cycle)]
        ax.plot(t, arr(ix[p][key]), color=c, lw=1.6, label=f"{p} {key}")
        ci = np.array([[np.nan, np.nan] if v is None else v for v in ix[p].get(f"{key}_ci") or []], dtype=float)
        if ci.size:
            ax.fill_between(t, ci[:, 0], ci[:, 1], color=c, alpha=0.15, lw=0)
        if key != "S1" and "S1" in ix[p]:
            ax.plot(t, arr(ix[p]["S1"]), color=c, lw=1.0, ls="--")
    ax.set_xlabel("time (min)")
    ax.set_ylabel(key + ("" if key == "mu_star" else " (share of variance)"))
    ax.set_title(f"{result.output}: indices against time" + (" (S1 dashed)" if key != "mu_star" else ""),
                 fontsize=9)
    ax.spines[["top", "right"]].set_visible(False)
    ax.legend(fontsize=7, frameon=False, ncol=2)
    fig.tight_layout()
    return save_figure(fig, out_dir, f"sensitivity_{result.output.replace(' over time', '')}_over_time")
