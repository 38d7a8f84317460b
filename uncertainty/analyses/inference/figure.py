"""Figures of an inference result: prior vs posterior per quantity, Jv interval per subject,
posterior predictive overlay on limb-volume time courses, and the posterior time courses of a whole-body study
(fan charts with the readings). matplotlib is imported here only."""

from __future__ import annotations

from typing import Any

import numpy as np

from uncertainty.analyses.inference.summaries import flat
from uncertainty.analyses.propagate.figure import draw_band, plot_timeline
from uncertainty.core.plotting import pyplot, save_figure


def prior_vs_posterior(result: Any, out_dir: str) -> list[str]:
    """One panel per quantity: prior and posterior histograms (canonical units), contraction in the title."""
    plt = pyplot()
    built, idata, doc = result.built, result.idata, result.doc
    names = [n for n in doc["parameters"] if n in result.prior_draws]
    if not names:
        return []
    cols = min(4, len(names))
    rows = int(np.ceil(len(names) / cols))
    fig, axes = plt.subplots(rows, cols, figsize=(3.2 * cols, 2.5 * rows), squeeze=False)
    for ax, name in zip(axes.ravel(), names, strict=False):
        post = flat(idata, name) if built.hierarchical else flat(idata, f"{name}__subject")[:, 0]
        pri = result.prior_draws[name]
        lo, hi = np.quantile(np.concatenate([pri, post]), [0.005, 0.995])
        bins = np.linspace(lo, hi, 40)
        ax.hist(pri, bins=bins, density=True, alpha=0.45, color="#999999", label="prior")
        ax.hist(post, bins=bins, density=True, alpha=0.7, color="#3b6ea5", label="posterior")
        c = doc["parameters"][name]["contraction"]
        ax.set_title(f"{name} (contraction {c:.2f})", fontsize=9)
        ax.set_xlabel(doc["units"].get(name, ""), fontsize=8)
        ax.tick_params(labelsize=7)
    for ax in axes.ravel()[len(names):]:
        ax.axis("off")
    axes.ravel()[0].legend(fontsize=7)
    fig.tight_layout()
    return save_figure(fig, out_dir, "inference_prior_posterior")


def jv_by_subject(result: Any, out_dir: str) -> list[str]:
    """Jv posterior mean and 95% interval per subject, with the typical and a new subject."""
    plt = pyplot()
    doc = result.doc
    rows = [(sid, b["Jv"]) for sid, b in doc["subjects"].items()]
    rows += [("typical", doc["typical"]["Jv"]), ("new subject", doc["new_subject"]["Jv"])]
    if not doc["subjects"]:
        rows = [("individual", doc["Jv"])] + rows
    fig, ax = plt.subplots(figsize=(6, 0.3 * len(rows) + 1.2))
    y = np.arange(len(rows))
    means = [r[1]["mean"] for r in rows]
    lo = [r[1]["mean"] - r[1]["ci95"][0] for r in rows]
    hi = [r[1]["ci95"][1] - r[1]["mean"] for r in rows]
    ax.errorbar(means, y, xerr=[lo, hi], fmt="o", color="#3b6ea5", ms=4, capsize=2)
    ax.axvline(0.0, color="#444444", lw=0.8, ls=":")
    ax.set_yticks(y, [r[0] for r in rows], fontsize=8)
    ax.invert_yaxis()
    ax.set_xlabel(f"Jv ({doc['units'].get('Jv', '')}), mean and 95% credible interval")
    fig.tight_layout()
    return save_figure(fig, out_dir, "inference_jv_subjects")


def curves_overlay(result: Any, out_dir: str) -> list[str]:
    """Observed limb volume against time per subject with the posterior predictive 95% band."""
    plt = pyplot()
    ctx = result.built.context
    if ctx is None or not ctx.curves or "posterior_predictive" not in result.idata.groups():
        return []
    paths: list[str] = []
    for curve in ctx.curves:
        name = curve["name"]
        if name not in result.idata.posterior_predictive:
            continue
        rep = np.asarray(result.idata.posterior_predictive[name].values)
        rep = rep.reshape(-1, rep.shape[-1])
        lo, mid, hi = np.quantile(rep, [0.025, 0.5, 0.975], axis=0)
        subj = curve["subjects"]
        cols = min(4, len(subj))
        rows = int(np.ceil(len(subj) / cols))
        fig, axes = plt.subplots(rows, cols, figsize=(3.0 * cols, 2.2 * rows), squeeze=False, sharex=True)
        for k, (ax, sid) in enumerate(zip(axes.ravel(), subj, strict=False)):
            m = curve["subject_index"] == k
            t = curve["t"][m]
            ax.fill_between(t, lo[m], hi[m], color="#3b6ea5", alpha=0.25, lw=0)
            ax.plot(t, mid[m], color="#3b6ea5", lw=1)
            ax.plot(t, curve["volume"][m], ".", color="#222222", ms=2)
            ax.set_title(sid, fontsize=8)
            ax.tick_params(labelsize=7)
        for ax in axes.ravel()[len(subj):]:
            ax.axis("off")
        fig.supxlabel("time (min)", fontsize=8)
        fig.supylabel("limb volume change (mL/100 mL)", fontsize=8)
        fig.tight_layout()
        paths += save_figure(fig, out_dir, f"inference_curves_{name}")
    return paths


#: Subjects drawn in the per-subject figure of a posterior time course (the first ones; every subject is in the JSON)
TIMELINE_SUBJECTS_SHOWN = 24


def timeline_fans(result: Any, out_dir: str) -> list[str]:
    """The posterior time courses of a ``whole_body`` study (``doc["timeline"]``): fan charts of every course for the
    typical subject (or the study's individual) with all readings on their courses; and, for each course with
    readings, one panel per subject with that subject's band and readings."""
    tl = result.doc.get("timeline")
    if not tl:
        return []
    layer = "typical" if "typical" in tl else "individual"
    who = "the typical subject" if layer == "typical" else "the study's individual"
    paths = plot_timeline(tl, out_dir, layer=layer, stem="inference_timeline",
                          title=f"posterior time courses of {who} (median and 95% interval of the course; reading "
                                "error not included)")
    plt = pyplot()
    t = np.asarray(tl["times_min"], dtype=float)
    for name, obs in (tl.get("observed") or {}).items():
        subjects = [s for s in (tl.get("subjects") or {}) if s in set(obs.get("subjects") or [])]
        subjects = subjects[:TIMELINE_SUBJECTS_SHOWN]
        if not subjects:
            continue
        cols = min(4, len(subjects))
        rows = -(-len(subjects) // cols)
        fig, axes = plt.subplots(rows, cols, figsize=(3.0 * cols, 2.3 * rows), squeeze=False, sharex=True,
                                 sharey=True)
        for ax, sid in zip(axes.ravel(), subjects, strict=False):
            draw_band(ax, t, (tl.get("as_read") or {}).get(name, {}).get(sid) or tl["subjects"][sid][name], "#3b6ea5")
            pred = (tl.get("predictive") or {}).get(name) or {}   # (posterior_timeline.reading_intervals)
            bars = [k for k, s in enumerate(pred.get("subjects", [])) if s == sid]
            ax.vlines([pred["times_min"][k] for k in bars], [pred["ci95"][k][0] for k in bars],
                      [pred["ci95"][k][1] for k in bars], color="#8a8a8a", lw=1.6, zorder=2)
            out = [k for k in bars if not pred["inside"][k]]
            if out:   # rings drawn over the axes' edge too (an empty unclipped line upsets the tight layout)
                ax.plot([pred["times_min"][k] for k in out], [pred["values"][k] for k in out], "o", mfc="none",
                        mec="#c0392b", ms=7, mew=1.4, zorder=4, clip_on=False)
            mine = [k for k, s in enumerate(obs["subjects"]) if s == sid]
            ax.plot([obs["times_min"][k] for k in mine], [obs["values"][k] for k in mine], "o", color="#222222",
                    ms=3)
            ax.set_title(sid, fontsize=8)
            ax.tick_params(labelsize=7)
        for ax in axes.ravel()[len(subjects):]:
            ax.axis("off")
        unit = tl["units"].get(name, "")
        scale = f" {_obs_legend(obs)}" if _obs_legend(obs) else ""
        fig.suptitle(f"{name}{scale}: each subject's posterior course (band: median, 95% interval, reading error "
                     "not included),\nreadings (points) and their 95% predictive intervals (bars; red ring: outside)",
                     fontsize=9)
        fig.supxlabel("time (min)", fontsize=8)
        fig.supylabel(f"{name} ({unit})" if unit and unit != "1" else name, fontsize=8)
        fig.tight_layout()
        paths += save_figure(fig, out_dir, f"inference_timeline_subjects_{name}")
    return paths


def _obs_legend(obs: dict[str, Any]) -> str:
    """How the readings on a course are shown: over or minus each subject's first reading, or "" as read."""
    return ("over each subject's first reading" if obs.get("relative_to_first") else
            "minus each subject's first reading" if obs.get("change_from_first") else "")


def plot_all(result: Any, out_dir: str) -> list[str]:
    """Every inference figure (PNG and SVG) under ``out_dir``; returns the paths."""
    return (prior_vs_posterior(result, out_dir) + jv_by_subject(result, out_dir) + curves_overlay(result, out_dir)
            + timeline_fans(result, out_dir))
