"""Propagate's part of report.html and of the one-screen summary, from its stored document.

Every function takes the section's ``result`` as stored in results.json (NaN already null) and reads
it defensively, so a partial document still renders.
"""

from __future__ import annotations

from typing import Any

from uncertainty.analyses.propagate.thresholds import threshold_html
from uncertainty.analyses.propagate.timeline import printed_times
from uncertainty.analyses.result import Caption
from uncertainty.core.formatting import fmt, interval
from uncertainty.core.html import escape, kv_table, table

CAPTIONS: tuple[Caption, ...] = (
    ("timeline", "", "Fan charts of the whole-body time courses for the typical subject: median (line) and "
                     "95% interval (band) at each reported time; shaded spans mark the infusions (blue) and "
                     "bleeds (red); timed observations of the study are drawn as markers joined per subject "
                     "in the time course's unit, one colour per kind (haemoglobin, haematocrit and plasma protein "
                     "as each subject's reading over its first, as the inference fits them; weights minus each "
                     "subject's first; urine flows as the volumes they add up to; charted fluid balances less the "
                     "insensible loss a chart omits, at 1 kg per L, on the body-weight chart)."),
    ("", "", "Histograms of {output} for this study's individual (typical-subject uncertainty "
             "plus between-subject spread) and for the typical subject (uncertainty only), with "
             "the median and 95% interval as solid lines; for Jv the mass left of the dashed zero "
             "line is the probability of absorption rather than filtration."),
)


def _summary_rows(d: dict[str, Any], units: dict[str, str], layer: str) -> list[list[Any]]:
    rows = []
    for name, s in d.items():
        if not isinstance(s, dict):
            continue
        se = s.get("mc_se") or {}
        se_ci = se.get("ci95") if isinstance(se, dict) else None
        rows.append([name, layer, fmt(s.get("mean")), fmt(s.get("sd")), fmt(s.get("median")),
                     interval(s.get("ci95"), 4), fmt(se_ci, 2), units.get(name, s.get("unit", ""))])
    return rows


def section_html(res: dict[str, Any]) -> str:
    """The report section: the sampling settings, P(absorption) and one row per output and layer.

    Parameters
    ----------
    res : dict
        The stored ``PropagateResult.to_dict()`` (canonical units, shown in the unit column).

    Returns
    -------
    str
        HTML paragraphs and a table.
    """
    units = res.get("units") or {}
    rows = _summary_rows(res.get("outputs") or {}, units, "individual")
    rows += _summary_rows(res.get("typical") or {}, units, "typical")
    parts = ["<p>Monte Carlo propagation of the priors "
             f"({escape(res.get('method', ''))}, {fmt(res.get('samples'))} samples in {fmt(res.get('replicates'))} "
             "independent replicates). The individual carries both the uncertainty about the typical value and "
             "the between-subject spread; the typical subject carries only the first. MC s.e. is the Monte "
             "Carlo standard error of the interval ends, from the replicates.</p>"]
    if res.get("p_absorption") is not None:
        parts.append(f"<p><strong>P(absorption, Jv &lt; 0)</strong> for the individual: "
                     f"{fmt(res['p_absorption'], 3)} (MC s.e. {fmt(res.get('p_absorption_mc_se'), 2)}); "
                     f"typical subject: {fmt(res.get('typical_p_absorption'), 3)}.</p>")
    parts.append(table(["output", "layer", "mean", "sd", "median", "95% interval", "MC s.e. of ends", "unit"],
                       rows, num_cols={2, 3, 4, 6}))
    tl = res.get("timeline")
    if isinstance(tl, dict):
        parts.append(timeline_html(tl))
    parts.append(threshold_html(res.get("thresholds") or []))
    return "".join(parts)


def timeline_html(tl: dict[str, Any], every: int = 6) -> str:
    """The whole-body time courses as a table: typical subject, median and 95% interval at every ``every``-th
    reported time (all of them in results.json).

    Parameters
    ----------
    tl : dict
        The stored ``timeline`` entry (``times_min``, ``units``, ``typical``).
    every : int
        Show one reported time in ``every``.

    Returns
    -------
    str
        A paragraph and a table.
    """
    times = tl.get("times_min") or []
    typ = tl.get("typical") or {}
    units = tl.get("units") or {}
    idx = list(range(0, len(times), max(1, every)))
    if times and idx[-1] != len(times) - 1:
        idx.append(len(times) - 1)
    rows = []
    for name, d in typ.items():
        for i in idx:
            rows.append([name, fmt(times[i]), fmt((d.get("median") or [None] * len(times))[i], 3),
                         interval((d.get("ci95") or [[None, None]] * len(times))[i], 3), units.get(name, "")])
    intro = (f"<p>Whole-body time courses after the interventions ({fmt(tl.get('draws'))} draws per layer, "
             f"body mass {fmt(tl.get('body_mass_kg'))} kg), typical subject.</p>")
    return intro + table(["quantity", "time (min)", "median", "95% interval", "unit"], rows, num_cols={1, 2})


def timeline_summary(tl: dict[str, Any], posterior: bool = False) -> list[str]:
    """Summary lines of a whole-body timeline (the typical subject, else the study's individual): the share of the
    intervention's volume in the plasma at the printed times (``timeline.printed_times``), median [95% interval];
    and, at the first printed time after the interventions end (else the last), where the volume is: the plasma,
    each bed's interstitium and the urine since 0 (medians).

    Parameters
    ----------
    tl : dict
        A stored ``timeline`` entry (``times_min``, ``typical`` or ``individual``, ``interventions``): propagate's, or
        an inference result's posterior time courses.
    posterior : bool
        Say "posterior median" (an inference result's courses).

    Returns
    -------
    list of str
        Two lines, or none without the courses.
    """
    layer = "typical" if tl.get("typical") else "individual"
    who = "typical subject" if layer == "typical" else "the study's individual"
    median = "posterior median" if posterior else "median"
    typ, times = tl.get(layer) or {}, list(tl.get("times_min") or [])
    share = typ.get("infused_retained_fraction")
    if not share or not times:
        return []
    at = printed_times(times)
    infused = any(d.get("kind") == "infusion" for d in tl.get("interventions") or [])
    what = "the infused volume in the plasma" if infused else "the plasma lost still missing"
    cells = ", ".join(f"{fmt(times[i])} min {fmt(share['median'][i], 3)} [{fmt(share['ci95'][i][0], 3)}, "
                      f"{fmt(share['ci95'][i][1], 3)}]" for i in at)
    lines = [f"Share of {what} ({who}, {median} [95% interval]): {cells}"]
    end = max((d.get("start_min", 0.0) + d.get("duration_min", 0.0) for d in tl.get("interventions") or []),
              default=0.0)
    i = next((k for k in at if times[k] >= end), at[-1])

    def ml(name: str) -> str:  # whole mL, signed (volumes of hundreds of mL)
        return f"{typ[name]['median'][i]:+.0f} mL"

    parts = [f"plasma {ml('plasma_volume_change')}"]
    parts += [f"{name.removeprefix('interstitial_volume_change_')} interstitium {ml(name)}"
              for name in typ if name.startswith("interstitial_volume_change_")]
    parts.append(f"urine since 0 {typ['urine_volume']['median'][i]:.0f} mL")
    lines.append(f"Volume changes at {fmt(times[i])} min ({who}, {median}s): " + ", ".join(parts))
    return lines


def summary(prop: dict[str, Any]) -> list[str]:
    """One-screen summary lines: Jv for the individual and the typical subject, P(absorption), and for a whole-body
    study where the volume is over time (:func:`timeline_summary`).

    Parameters
    ----------
    prop : dict
        The stored ``PropagateResult.to_dict()``; Jv in its canonical unit (printed beside it).

    Returns
    -------
    list of str
        Nothing when Jv is not among the outputs.
    """
    lines: list[str] = []
    if isinstance(prop.get("outputs"), dict) and "Jv" in prop["outputs"]:
        unit = (prop.get("units") or {}).get("Jv", "")
        ind, typ = prop["outputs"]["Jv"], (prop.get("typical") or {}).get("Jv", {})
        lines.append(f"Jv, individual: median {fmt(ind.get('median'), 3)}, 95% interval "
                     f"{interval(ind.get('ci95'))} {unit}")
        if typ:
            lines.append(f"Jv, typical subject: median {fmt(typ.get('median'), 3)}, 95% interval "
                         f"{interval(typ.get('ci95'))} {unit}")
        if prop.get("p_absorption") is not None:
            lines.append(f"P(absorption, Jv < 0) for the individual: {fmt(prop['p_absorption'], 3)}")
    if isinstance(prop.get("timeline"), dict):
        lines += timeline_summary(prop["timeline"])
    return lines


def diagnostics(prop: dict[str, Any]) -> str:
    """The Monte Carlo part of the report's Diagnostics: stopping, sample size, non-finite draws.

    Parameters
    ----------
    prop : dict
        The stored ``PropagateResult.to_dict()`` (``tol`` in the first output's unit).

    Returns
    -------
    str
        A heading and a key/value table.
    """
    if prop.get("tol") is None:  # a fixed sample size: nothing to converge to
        bits: dict[str, Any] = {"stopping": "fixed sample size (no tolerance asked)"}
    else:
        bits = {"converged": prop.get("converged"), "tolerance": prop.get("tol")}
    bits.update({"samples": prop.get("samples"), "independent replicates": prop.get("replicates")})
    nan = prop.get("nan_draws") or {}
    bad = {f"{layer}.{k}": v for layer, d in nan.items() if isinstance(d, dict) for k, v in d.items() if v}
    bits.update({f"non-finite draws {k}": v for k, v in bad.items()})
    return "<h3>Monte Carlo</h3>" + kv_table(bits)
