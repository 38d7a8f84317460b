"""Rank histograms of a calibration result, one panel per quantity, with the band a uniform histogram stays in.

matplotlib is imported inside the function (Agg back-end).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from uncertainty.core.plotting import pyplot, save_figure


def plot_ranks(doc: dict[str, Any], out_dir: str) -> list[str]:
    """One bar histogram of the binned ranks per quantity, the expected count N/B as a line and the
    per-bin 99 % range of a uniform histogram (Binomial(N, 1/B)) shaded; flagged quantities in red.

    Parameters
    ----------
    doc : dict
        ``CalibrationResult.to_dict()``.
    out_dir : str
        Folder for ``rank_histograms.png`` and ``.svg``.

    Returns
    -------
    list of str
        The paths written.
    """
    plt = pyplot()
    quantities = doc.get("quantities") or {}
    k = max(len(quantities), 1)
    cols = min(k, 3)
    nrows = math.ceil(k / cols)
    fig, axes = plt.subplots(nrows, cols, figsize=(3.2 * cols, 2.6 * nrows), squeeze=False)
    bins = int(doc.get("bins", 1))
    n = int(doc.get("replicates_used", 0))
    lo, hi = (doc.get("band99") or [0, 0])[:2]
    for ax, (name, q) in zip(axes.ravel(), quantities.items(), strict=False):
        counts = np.asarray(q.get("counts") or [0] * bins, dtype=float)
        x = np.arange(counts.size)
        ax.axhspan(lo, hi, color="#dddddd", zorder=0, label="99 % range if uniform")
        ax.axhline(n / max(bins, 1), color="#777777", lw=0.8, zorder=1)
        ax.bar(x, counts, width=0.9, color="#b03a2e" if q.get("flagged") else "#3b6ea5", zorder=2)
        ax.set_title(f"{name}: ranks p = {q.get('p_value', float('nan')):.2g}", fontsize=8)
        ax.set_xticks(x)
        ax.set_xticklabels([str(i + 1) for i in x], fontsize=6)
        ax.set_xlabel("rank bin (low: posterior above the truth)", fontsize=7)
        ax.set_ylabel("replicates", fontsize=7)
        ax.spines[["top", "right"]].set_visible(False)
    for ax in axes.ravel()[len(quantities):]:
        ax.set_visible(False)
    fig.suptitle(f"rank histograms, {n} replicates, {bins} bins (grey: 99 % range of a uniform bin)", fontsize=9)
    fig.tight_layout()
    return save_figure(fig, out_dir, "rank_histograms")
