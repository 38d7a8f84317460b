"""Threshold questions on the propagate draws: P(output above / below a value) per layer, its Monte Carlo
standard error and which inputs drive it.

The probability is the pooled share of finite draws beyond the threshold; its standard error is the spread of
the R replicate shares divided by sqrt(R), as for every propagate statistic. The drivers are given-data
first-order indices of the indicator 1{Y beyond t}: Var(E[1 | X_i]) / Var(1), the binning estimator of
``uncertainty.analyses.given_data`` on the same draws (each input's value for that layer), with the standard
error from the replicate spread. With correlated inputs an index also carries the share of its correlated
partners (a full first-order index).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from uncertainty.analyses.given_data import binned_first_order, default_bins
from uncertainty.core.errors import InputError, UnitError
from uncertainty.core.formatting import fmt
from uncertainty.core.html import table
from uncertainty.forms.catalogue import output_unit
from uncertainty.study.thresholds import threshold_in_unit, threshold_label

LAYERS = ("individual", "typical")


def threshold_specs(study: Any, have: Sequence[str] | None = None) -> list[dict[str, Any]]:
    """The study's ``[propagate] thresholds``, each converted to its output's canonical unit.

    Parameters
    ----------
    study : Study
        The study (``propagate.thresholds``, ``tissue_mass_kg``, ``path``).
    have : sequence of str, optional
        The outputs the study's model gives; a threshold on another output is an error.

    Returns
    -------
    list of dict
        ``output``, ``direction`` (above | below), ``threshold`` (canonical unit), ``given`` (as written),
        ``unit`` and ``label``; [] when none are set.

    Raises
    ------
    InputError
        An output the model does not give, or a value that cannot be converted (file, key, value).
    """
    sec = getattr(study, "propagate", None)
    items = getattr(sec, "thresholds", None) if sec is not None else None
    if items is None and isinstance(sec, Mapping):
        items = sec.get("thresholds")
    path = getattr(study, "path", None)
    file = str(path) if path else None
    out = []
    for i, item in enumerate(items or []):
        d = item.model_dump() if hasattr(item, "model_dump") else dict(item)
        direction = "above" if d.get("above") is not None else "below"
        key = f"propagate.thresholds[{i}]"
        if have is not None and d["output"] not in have:
            raise InputError(f"no such output; the {getattr(study, 'model', 'study')} model gives "
                             f"{', '.join(have)}", file=file, key=f"{key}.output", value=d["output"])
        try:
            value = threshold_in_unit(d["output"], d[direction], key=f"{key}.{direction}",
                                      tissue_mass_kg=getattr(study, "tissue_mass_kg", None))
        except UnitError as exc:
            raise InputError(exc.reason, file=file, key=f"{key}.{direction}", value=d[direction]) from None
        unit = output_unit(d["output"])
        out.append({"output": d["output"], "direction": direction, "threshold": value, "given": d[direction],
                    "unit": unit, "label": threshold_label(d["output"], direction, value, unit)})
    return out


def _indicator(y: np.ndarray, direction: str, t: float) -> np.ndarray:
    """1.0 beyond the threshold, 0.0 otherwise, NaN where y is not finite."""
    with np.errstate(invalid="ignore"):
        hit = (y > t) if direction == "above" else (y < t)
    return np.where(np.isfinite(y), hit.astype(float), np.nan)


def _share(x: np.ndarray, ind: np.ndarray) -> float:
    keep = np.isfinite(x) & np.isfinite(ind)
    x, ind = x[keep], ind[keep]
    n = x.size
    if n < 20 or np.all(ind == ind[0]):
        return float("nan")
    return binned_first_order(np.argsort(x, kind="stable"), ind, default_bins(n))


def threshold_probability(y: np.ndarray, direction: str, t: float, replicates: int,
                          inputs: Mapping[str, np.ndarray] | None = None) -> dict[str, Any]:
    """P(y above / below t) from pooled draws in ``replicates`` equal consecutive blocks, with its Monte Carlo
    standard error and the indicator's first-order index for each input.

    Parameters
    ----------
    y : ndarray
        Pooled draws of the output (replicate after replicate; non-finite draws are left out).
    direction : str
        ``above`` (P(y > t)) or ``below`` (P(y < t)).
    t : float
        The threshold, in y's unit.
    replicates : int
        R >= 2 independent replicates the draws consist of.
    inputs : mapping, optional
        Input name -> its draws, in the same order as y.

    Returns
    -------
    dict
        ``p``, ``mc_se`` (sd of the replicate shares / sqrt(R)), ``n`` (finite draws), ``nan_draws`` and
        ``sensitivity`` {input: {"S1", "mc_se"}} (dimensionless; NaN when the indicator is constant) with
        ``ranking`` (inputs by S1, largest first).

    Raises
    ------
    InputError
        An unknown direction, fewer than 2 replicates or draws that do not split into them.
    """
    if direction not in ("above", "below"):
        raise InputError("a threshold is `above` or `below`", key="direction", value=direction)
    y = np.asarray(y, dtype=float).ravel()
    if replicates < 2 or y.size % replicates:
        raise InputError("the draws must split into at least 2 equal replicates", key="replicates",
                         value=(y.size, replicates))
    ind = _indicator(y, direction, t)
    blocks = np.split(ind, replicates)
    finite = np.isfinite(ind)
    p = float(np.nanmean(ind)) if finite.any() else float("nan")
    with warnings.catch_warnings():  # a replicate with no finite draw gives NaN, said by n / nan_draws
        warnings.simplefilter("ignore", RuntimeWarning)
        per = np.array([np.nanmean(b) for b in blocks])
        se = float(np.nanstd(per, ddof=1) / math.sqrt(replicates))
    sens: dict[str, dict[str, float]] = {}
    for name, x in (inputs or {}).items():
        x = np.asarray(x, dtype=float).ravel()
        s1 = _share(x, ind)
        reps = np.array([_share(xb, b) for xb, b in zip(np.split(x, replicates), blocks, strict=True)])
        ok = reps[np.isfinite(reps)]
        s_se = float(np.std(ok, ddof=1) / math.sqrt(ok.size)) if ok.size > 1 else float("nan")
        sens[name] = {"S1": float(s1), "mc_se": s_se}
    ranking = sorted((k for k in sens if math.isfinite(sens[k]["S1"])), key=lambda k: -sens[k]["S1"])
    return {"p": p, "mc_se": se, "n": int(finite.sum()), "nan_draws": int((~finite).sum()),
            "sensitivity": sens, "ranking": ranking}


def threshold_results(specs: Sequence[Mapping[str, Any]], draws: Mapping[str, Mapping[str, np.ndarray]],
                      inputs: Mapping[str, Mapping[str, np.ndarray]], replicates: int) -> list[dict[str, Any]]:
    """Every threshold question answered in both layers.

    Parameters
    ----------
    specs : sequence of dict
        From :func:`threshold_specs` (threshold in the output's canonical unit).
    draws : mapping
        ``{layer: {output: pooled draws}}`` (replicate after replicate).
    inputs : mapping
        ``{layer: {input: pooled draws}}`` in the same order.
    replicates : int
        Number of independent replicates.

    Returns
    -------
    list of dict
        Each spec with ``individual`` and ``typical`` entries from :func:`threshold_probability`.
    """
    out = []
    for spec in specs:
        entry = dict(spec)
        for layer in LAYERS:
            y = draws.get(layer, {}).get(spec["output"])
            if y is None:
                continue
            entry[layer] = threshold_probability(y, spec["direction"], spec["threshold"], replicates,
                                                 inputs.get(layer))
        out.append(entry)
    return out


def pooled_order(batches: Sequence[np.ndarray], replicates: int) -> np.ndarray:
    """Arrays kept batch by batch (each R replicate parts one after another) in propagate's pooled order
    (replicate after replicate, each replicate's batches in turn).

    Parameters
    ----------
    batches : sequence of ndarray
        One array per evaluated batch, its length a multiple of ``replicates``.
    replicates : int
        Number of replicates.

    Returns
    -------
    ndarray
    """
    parts = [np.split(np.asarray(b), replicates) for b in batches]
    return np.concatenate([parts[j][r] for r in range(replicates) for j in range(len(parts))])


def _drivers(block: Mapping[str, Any], most: int = 3) -> str:
    sens = block.get("sensitivity") or {}
    names = (block.get("ranking") or [])[:most]
    return ", ".join(f"{k} {fmt(sens[k].get('S1'), 2)} (se {fmt(sens[k].get('mc_se'), 1)})" for k in names)


def threshold_lines(items: Sequence[Mapping[str, Any]]) -> list[str]:
    """The terminal lines for the threshold questions (nothing when there are none).

    Parameters
    ----------
    items : sequence of dict
        The ``thresholds`` entries of a propagate document.

    Returns
    -------
    list of str
    """
    if not items:
        return []
    lines = ["", "Threshold questions (MC se from the replicates; drivers: first-order share of the "
                 "indicator's variance, S1):"]
    for it in items:
        ind, typ = it.get("individual") or {}, it.get("typical") or {}
        lines.append(f"{it.get('label')}: individual {fmt(ind.get('p'), 3)} (MC se {fmt(ind.get('mc_se'), 2)}), "
                     f"typical subject {fmt(typ.get('p'), 3)} (MC se {fmt(typ.get('mc_se'), 2)})")
        for layer, block in (("individual", ind), ("typical", typ)):
            d = _drivers(block)
            lines.append(f"  drivers, {layer}: {d}" if d else
                         f"  drivers, {layer}: none (the event holds in all draws or in none)")
    return lines


def threshold_html(items: Sequence[Mapping[str, Any]]) -> str:
    """The report's threshold paragraph and table (empty when there are none).

    Parameters
    ----------
    items : sequence of dict
        The stored ``thresholds`` entries (NaN already null).

    Returns
    -------
    str
        HTML.
    """
    if not items:
        return ""
    rows = []
    for it in items:
        for layer in LAYERS:
            block = it.get(layer) or {}
            rows.append([it.get("label", ""), layer, fmt(block.get("p"), 3), fmt(block.get("mc_se"), 2),
                         _drivers(block) or "none (constant event)"])
    return ("<h3>Threshold questions</h3><p>The probability of each event for the individual and for the typical "
            "subject, with its Monte Carlo standard error from the replicates. Drivers: each input's "
            "first-order share S1 of the variance of the event's indicator (given-data estimate on the same "
            "draws); with correlated inputs it includes what correlated partners carry.</p>"
            + table(["event", "layer", "probability", "MC s.e.", "drivers (S1, s.e.)"], rows, num_cols={2, 3}))

