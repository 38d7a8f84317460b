"""Figure of the validation section: one small panel per published measurement, its band beside the form's
median and 95 % interval, each in the measurement's own unit.

matplotlib is imported inside the function (Agg back-end).
"""

from __future__ import annotations

import math
from typing import Any

from uncertainty.core.plotting import pyplot, save_figure

#: Colour of a row's prediction by verdict.
COLOURS = {"inside": "#3b6ea5", "known gap": "#d08a2e", "outside": "#b22222"}


def _finite(x: Any) -> bool:
    return isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x)


def plot_validation(doc: dict[str, Any], out_dir: str) -> list[str]:
    """Write ``validation.png`` / ``.svg``: a grid of panels (two columns), one per row of ``doc["rows"]``; the
    band shaded grey (open on the right for a one-sided band), the median a dot and the 95 % interval a line,
    coloured by verdict; the panel's title names the quantity and the conditions.

    Parameters
    ----------
    doc : dict
        ``FormValidationResult.to_dict()`` (``rows[]`` with ``low``, ``high`` (None: open), ``median``, ``ci95``,
        ``unit``, ``verdict``, ``quantity``, ``conditions_text``).
    out_dir : str
        Folder for the files.

    Returns
    -------
    list of str
        The files written (none without rows).
    """
    rows = doc.get("rows") or []
    if not rows:
        return []
    plt = pyplot()
    ncol = 2 if len(rows) > 1 else 1
    nrow = math.ceil(len(rows) / ncol)
    fig, axes = plt.subplots(nrow, ncol, figsize=(5.2 * ncol, 0.95 * nrow + 0.5), squeeze=False)
    for ax in axes.ravel()[len(rows):]:
        ax.set_visible(False)
    for ax, r in zip(axes.ravel(), rows, strict=False):
        low, high = r.get("low"), r.get("high")
        ci = [c for c in (r.get("ci95") or []) if _finite(c)]
        med = r.get("median")
        pts = [v for v in (low, high, med, *ci) if _finite(v)]
        lo, hi = (min(pts), max(pts)) if pts else (0.0, 1.0)
        pad = 0.15 * (hi - lo) if hi > lo else max(abs(hi), 1.0) * 0.1
        left, right = lo - pad, hi + pad
        band_hi = high if _finite(high) else right
        band_lo = low if _finite(low) else left
        ax.axvspan(band_lo, band_hi, color="#d9d9d9", lw=0)
        if not _finite(high):
            ax.annotate("", xy=(right, 0.0), xytext=(band_lo + 0.8 * (right - band_lo), 0.0),
                        arrowprops={"arrowstyle": "->", "color": "#888888"})
        colour = COLOURS.get(str(r.get("verdict")), "#555555")
        if len(ci) == 2:
            ax.plot(ci, [0.0, 0.0], color=colour, lw=2)
        if _finite(med):
            ax.plot([med], [0.0], "o", color=colour, ms=6)
        else:
            ax.text(0.5, 0.0, "not predicted", transform=ax.get_yaxis_transform(), ha="center", fontsize=7)
        ax.set_xlim(left, right)
        ax.set_ylim(-1.0, 1.0)
        ax.set_yticks([])
        ax.tick_params(axis="x", labelsize=7)
        ax.set_xlabel(str(r.get("unit") or ""), fontsize=7, labelpad=1)
        title = f"{r.get('quantity')}: {r.get('conditions_text') or 'normal'}"
        ax.set_title(title if len(title) <= 70 else title[:67] + "...", fontsize=7, loc="left")
        ax.spines[["top", "right", "left"]].set_visible(False)
    fig.suptitle(f"{doc.get('form')} form of {doc.get('tissue')} against published measurements (shipped priors, "
                 "typical subject)", fontsize=9)
    fig.tight_layout()
    return save_figure(fig, out_dir, "validation")
