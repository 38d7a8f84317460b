"""Figure of a blood-sampling schedule: the prior haemoglobin-ratio course with the chosen times, and the target's
posterior sd against the number of samples.

matplotlib is imported inside the function (Agg back-end).
"""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.core.plotting import pyplot, save_figure


def plot_blood_schedule(doc: dict[str, Any], out_dir: str) -> list[str]:
    """Two panels: the individual's prior haemoglobin ratio (median, 95% band) against time (min) with the
    searched and equally spaced sampling times marked; the target's posterior sd (its unit) against the number
    of samples after the baseline.

    Parameters
    ----------
    doc : dict
        ``BloodScheduleResult.to_dict()``.
    out_dir : str
        Folder for ``blood_schedule.png`` and ``.svg``.

    Returns
    -------
    list of str
        The files written.
    """
    plt = pyplot()
    fig, (ax_c, ax_k) = plt.subplots(2, 1, figsize=(6.4, 5.6))
    band = doc["hb_course"]
    t = np.asarray(band["times"], dtype=float)
    ci = np.asarray(band["ci95"], dtype=float)
    ax_c.fill_between(t, ci[:, 0], ci[:, 1], color="#3b6ea5", alpha=0.2, lw=0, label="prior 95% band")
    ax_c.plot(t, band["median"], color="#3b6ea5", lw=1.2, label="prior median")
    for x in doc["candidates"]:
        ax_c.axvline(x, color="#cccccc", lw=0.6, zorder=0)
    opt, eq = doc["optimised"], doc["equal_spacing"]
    ax_c.plot([0.0, *opt["times"]], [1.0, *opt["hb_ratio"]], "o", color="#b5651d", ms=6,
              label="searched times (0 min: baseline)")
    ax_c.plot(eq["times"], eq["hb_ratio"], "o", mfc="none", color="#555555", ms=9, label="equal spacing")
    ax_c.set_xlabel("time (min); grey lines: candidate times")
    ax_c.set_ylabel("Hb / Hb at 0 min")
    ax_c.legend(frameon=False, fontsize=7)
    c = doc["by_samples"]
    target, unit = doc["target"], doc.get("unit") or ""
    ax_k.plot(c["samples"], c["optimised"], "o-", color="#b5651d", label="searched")
    ax_k.plot(c["samples"], c["equal_spacing"], "s--", color="#999999", mfc="none", label="equal spacing")
    ax_k.axhline(doc["prior_sd"][target], color="#3b6ea5", ls=":", lw=1, label="prior sd")
    ax_k.axvline(doc["samples"], color="#cccccc", lw=0.8, zorder=0)
    ax_k.set_xlabel("samples after the baseline (grey: the study's number)")
    ax_k.set_ylabel(f"posterior sd {target} ({unit})")
    ax_k.set_ylim(bottom=0)
    ax_k.legend(frameon=False, fontsize=7)
    for ax in (ax_c, ax_k):
        ax.spines[["top", "right"]].set_visible(False)
    fig.suptitle(f"blood sampling for {target}: {doc['samples']} samples, sd ratio vs equal spacing "
                 f"{doc['sd_ratio'][target]:.3g}", fontsize=9)
    fig.tight_layout()
    return save_figure(fig, out_dir, "blood_schedule")
