"""Figure of a forward-uncertainty result: the Jv distribution, individual beside typical.

matplotlib is imported inside core.plotting only (Agg back-end), so the command line stays light.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.core.plotting import pyplot, save_figure

STYLE = {"individual": "#3b6ea5", "typical": "#b5651d", "zero": "#444444", "interval": "#222222"}


def plot_distribution(result: Any, out_dir: str, output: str = "Jv") -> list[str]:
    """Histogram of one output (default Jv, canonical unit) for the individual and the typical
    subject, side by side, each with its 95% interval and the zero line; PNG and SVG paths."""
    plt = pyplot()
    if output not in result.outputs:
        output = result.outputs[0]
    unit = result.units.get(output, "")
    fig, axes = plt.subplots(1, 2, figsize=(9, 3.4), sharex=True, sharey=False)
    finite = [result.draws[layer][output][np.isfinite(result.draws[layer][output])]
              for layer in ("individual", "typical")]
    allv = np.concatenate(finite) if any(f.size for f in finite) else np.zeros(1)
    lo, hi = np.quantile(allv, [0.001, 0.999])
    lo, hi = min(lo, 0.0), max(hi, 0.0)
    bins = np.linspace(lo, hi, 80)
    for ax, layer, y in zip(axes, ("individual", "typical"), finite, strict=True):
        s = result.summaries[layer][output]
        ax.hist(y, bins=bins, color=STYLE[layer], alpha=0.75, density=True)
        ax.axvline(0.0, color=STYLE["zero"], lw=1.0, ls="--")
        for q in s.ci95:
            ax.axvline(q, color=STYLE["interval"], lw=1.0)
        ax.axvline(s.median, color=STYLE["interval"], lw=1.6)
        title = "individual (both layers)" if layer == "individual" else "typical subject"
        ax.set_title(f"{title}\nmedian {s.median:.3g}, 95% [{s.ci95[0]:.3g}, {s.ci95[1]:.3g}]", fontsize=9)
        ax.set_xlabel(f"{output} ({unit})" if unit else output)
        ax.spines[["top", "right"]].set_visible(False)
        ax.set_yticks([])
    p = result.summaries["individual"][output].p_negative if output == "Jv" else None
    if p is not None:
        fig.suptitle(f"P(absorption, Jv < 0) for the individual: {p:.3g}", fontsize=10)
    fig.tight_layout()
    return save_figure(fig, out_dir, f"propagate_{output}")


def plot_timeline(tl: dict[str, Any], out_dir: str, layer: str = "typical",
                  stem: str = "propagate_timeline", title: str | None = None) -> list[str]:
    """Fan charts of a ``whole_body`` timeline: for each reported time course the median line and the 95%
    band over time (min) for the typical subject (``layer``), units as ``tl["units"]``; the interventions are
    shaded. Observed points are drawn when ``tl["observed"]`` maps a name to ``{"times_min", "values"}`` (optional
    ``subjects``: one marker line per subject; ``series`` and ``legends``: one colour and legend entry per series,
    saying how it is shown; without them ``relative_to_first`` / ``change_from_first``: readings over / minus each
    subject's first, said in the legend). ``title`` above the panels when given. PNG and SVG paths, named
    ``stem``."""
    plt = pyplot()
    names = list((tl.get(layer) or {}).keys())
    t = np.asarray(tl.get("times_min") or [], dtype=float)
    cols = 3
    rows = max(1, -(-len(names) // cols))
    fig, axes = plt.subplots(rows, cols, figsize=(11, 3.0 * rows), squeeze=False)
    for ax, name in zip(axes.ravel(), names, strict=False):
        draw_band(ax, t, tl[layer][name], STYLE["typical"], labels=True)
        for iv in tl.get("interventions") or []:
            a = iv["start_min"]
            b = a + max(iv["duration_min"], 0.5)
            ax.axvspan(a, b, color="#dd3333" if iv["kind"] == "bleed" else "#3b6ea5", alpha=0.08, lw=0)
        obs = (tl.get("observed") or {}).get(name)
        if obs:
            draw_observed(ax, obs)
        unit = (tl.get("units") or {}).get(name, "")
        ax.set_title(f"{name} ({unit})" if unit and unit != "1" else name, fontsize=9)
        ax.set_xlabel("time (min)", fontsize=8)
        ax.spines[["top", "right"]].set_visible(False)
    for ax in axes.ravel()[len(names):]:
        ax.set_visible(False)
    if title:
        fig.suptitle(title, fontsize=10)
    fig.tight_layout()
    return save_figure(fig, out_dir, stem)


def draw_band(ax: Any, t: np.ndarray, band: dict[str, Any], colour: str, labels: bool = False) -> None:
    """One time course's band on ``ax``: the 95 % interval shaded and the median line over the times ``t`` (min);
    ``band`` as ``propagate.timeline.band_over_time`` makes it (None where no draw was finite: a gap)."""
    med = np.array([np.nan if m is None else m for m in band["median"]], dtype=float)
    ci = np.array([[np.nan if x is None else x for x in pair] for pair in band["ci95"]], dtype=float)
    ax.fill_between(t, ci[:, 0], ci[:, 1], color=colour, alpha=0.25, lw=0, label="95% interval" if labels else None)
    ax.plot(t, med, color=colour, lw=1.6 if labels else 1.2, label="median" if labels else None)


#: Marker cycle for the subjects of observed points.
_MARKERS = ("o", "s", "^", "D", "v", "P", "X", "<", ">", "*")
#: Colour of each series of points on one chart, in order of appearance.
_SERIES_COLOURS = (STYLE["interval"], "#6a3d9a", "#1b7837", "#b2182b")


def draw_observed(ax: Any, obs: dict[str, Any]) -> None:
    """Observed points on one fan chart: each subject's readings of one series (an observation kind, urine flows
    apart) joined by a thin line, a marker per subject (the first ten subjects get their own marker, the rest share
    them; a subject keeps its marker across series) and a colour per series; the legend says how each series is
    shown (``obs["legends"]``; without it, from ``relative_to_first`` / ``change_from_first``)."""
    t = np.asarray(obs.get("times_min") or [], dtype=float)
    y = np.asarray([np.nan if v is None else v for v in obs.get("values") or []], dtype=float)
    subjects = list(obs.get("subjects") or [""] * t.size)
    series = list(obs.get("series") or [""] * t.size)
    legends = obs.get("legends") or {}
    fallback = ("observed (over each subject's first)" if obs.get("relative_to_first") else
                "observed (minus each subject's first)" if obs.get("change_from_first") else "observed")
    marker = {s: _MARKERS[k % len(_MARKERS)] for k, s in enumerate(dict.fromkeys(subjects))}
    for j, name in enumerate(dict.fromkeys(series)):
        label = f"observed: {legends[name]}" if name in legends else fallback
        colour = _SERIES_COLOURS[j % len(_SERIES_COLOURS)]
        for k, s in enumerate(dict.fromkeys(x for x, z in zip(subjects, series, strict=True) if z == name)):
            idx = [i for i, (x, z) in enumerate(zip(subjects, series, strict=True)) if x == s and z == name]
            ax.plot(t[idx], y[idx], marker=marker[s], color=colour, ms=3.5, lw=0.6, alpha=0.8,
                    label=label if k == 0 else None)
    ax.legend(fontsize=7, frameon=False)
