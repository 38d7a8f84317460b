"""The headless matplotlib import and the PNG + SVG save every figure shares.

matplotlib is imported inside these functions only (Agg back-end), so importing a figure module, and
the command line, stays light.
"""

from __future__ import annotations

import os
import re
from typing import Any


def pyplot() -> Any:
    """``matplotlib.pyplot`` on the non-interactive Agg back-end.

    Returns
    -------
    module
        matplotlib.pyplot, imported on first use.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def save_figure(fig: Any, out_dir: str, stem: str) -> list[str]:
    """Save a figure as PNG (150 dpi) and SVG under ``out_dir`` and close it.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
        The figure to write.
    out_dir : str
        Folder, created when missing.
    stem : str
        File name without extension; every character other than a letter, digit, ``_``, ``-`` or ``.`` becomes
        ``_`` (an endpoint such as ``"hb_ratio at 60 min"`` gives ``hb_ratio_at_60_min``).

    Returns
    -------
    list of str
        The PNG and SVG paths.
    """
    os.makedirs(out_dir, exist_ok=True)
    stem = re.sub(r"[^A-Za-z0-9_.-]", "_", stem)
    paths = []
    for ext in ("png", "svg"):
        p = os.path.join(out_dir, f"{stem}.{ext}")
        fig.savefig(p, dpi=150 if ext == "png" else None, bbox_inches="tight")
        paths.append(p)
    pyplot().close(fig)
    return paths
