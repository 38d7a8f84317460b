"""Convergence diagnostics (ArviZ) and the quality gate.

R-hat (rank-normalised split R-hat), bulk and tail ESS (Vehtari et al. 2021, Bayesian Analysis
16:667-718), divergent transitions and the energy BFMI (Betancourt 2016) for every free quantity.
The gate's defaults: R-hat <= 1.01, bulk and tail ESS >= 400 (Vehtari et al. 2021 recommendations,
from memory; the tail ESS is gated because the 95 % intervals are the headline), no divergences
(common practice). With one chain R-hat compares the chain's two halves (it cannot see chains that
settle in different places). Each failed check is named with what to raise (:func:`gate_message`,
:func:`describe`), and the Monte Carlo error of the posterior summaries (mean and the 95 % interval
ends, ArviZ ``mcse``) goes beside them (:func:`summary_mcse`).
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np


@dataclasses.dataclass(frozen=True)
class Gate:
    """Thresholds of the quality gate (configurable)."""

    r_hat_max: float = 1.01          # Vehtari et al. 2021 (from memory)
    ess_bulk_min: float = 400.0      # Vehtari et al. 2021 (from memory)
    ess_tail_min: float = 400.0      # Vehtari et al. 2021 (from memory)
    divergences_max: int = 0         # common practice
    bfmi_min: float = 0.0            # reported; 0.3 is the usual warning level (common practice)

    @classmethod
    def coerce(cls, gate: Any) -> Gate:
        """A Gate from None (defaults), a Gate, a dict of fields, or False (gate off)."""
        if gate is None or gate is True:
            return cls()
        if gate is False:
            return cls(r_hat_max=np.inf, ess_bulk_min=0.0, ess_tail_min=0.0, divergences_max=2**31)
        if isinstance(gate, Gate):
            return gate
        return cls(**dict(gate))


def diagnose(idata: Any, var_names: list[str], gate: Gate) -> dict[str, Any]:
    """Diagnostics per quantity and the gate's verdict.

    Parameters
    ----------
    idata : arviz.InferenceData
        Posterior draws (and sample stats).
    var_names : list of str
        Quantities to check (those not in the posterior are skipped).
    gate : Gate
        Thresholds.

    Returns
    -------
    dict
        ``{r_hat_max, ess_bulk_min, ess_tail_min, divergences, divergent_tails, bfmi_min, passed, failing,
        failed_checks, failed_quantities, chains, gate, per_quantity: {name: {r_hat, ess_bulk,
        ess_tail}}}`` (``failed_checks`` among r_hat, ess_bulk, ess_tail, divergences, bfmi).
    """
    import arviz as az

    post = idata.posterior
    names = [v for v in var_names if v in post]
    one_chain = int(post.sizes.get("chain", 1)) < 2
    rhat = az.rhat(_halves(post[names]) if one_chain else idata, var_names=names)
    ess_b = az.ess(idata, var_names=names, method="bulk")
    ess_t = az.ess(idata, var_names=names, method="tail")
    per: dict[str, dict[str, float]] = {}
    failing: list[str] = []
    failed: dict[str, list[str]] = {}
    for v in names:
        r = np.atleast_1d(np.asarray(rhat[v].values, dtype=float)).ravel()
        eb = np.atleast_1d(np.asarray(ess_b[v].values, dtype=float)).ravel()
        et = np.atleast_1d(np.asarray(ess_t[v].values, dtype=float)).ravel()
        per[v] = {"r_hat": float(np.nanmax(r)), "ess_bulk": float(np.nanmin(eb)),
                  "ess_tail": float(np.nanmin(et))}
        reasons = []
        if not per[v]["r_hat"] <= gate.r_hat_max:
            reasons.append(f"R-hat {per[v]['r_hat']:.3f} > {gate.r_hat_max}")
            failed.setdefault("r_hat", []).append(v)
        if not per[v]["ess_bulk"] >= gate.ess_bulk_min:
            reasons.append(f"bulk ESS {per[v]['ess_bulk']:.0f} < {gate.ess_bulk_min:.0f}")
            failed.setdefault("ess_bulk", []).append(v)
        if gate.ess_tail_min and not per[v]["ess_tail"] >= gate.ess_tail_min:
            reasons.append(f"tail ESS {per[v]['ess_tail']:.0f} < {gate.ess_tail_min:.0f}")
            failed.setdefault("ess_tail", []).append(v)
        if reasons:
            failing.append(f"{v} ({', '.join(reasons)})")
    stats = idata.sample_stats
    div_name = "diverging" if "diverging" in stats else None
    divergences = int(np.asarray(stats[div_name].values).sum()) if div_name else 0
    try:
        bfmi = np.asarray(az.bfmi(idata), dtype=float)
        bfmi_min = float(np.min(bfmi))
    except Exception:  # noqa: BLE001 - energy not recorded by every sampler
        bfmi_min = float("nan")
    tails = divergent_tails(idata, names) if divergences else []
    if divergences > gate.divergences_max:
        failing.append(f"{divergences} divergent transitions (allowed {gate.divergences_max})")
        failed["divergences"] = []
    if gate.bfmi_min and not bfmi_min >= gate.bfmi_min:
        failing.append(f"BFMI {bfmi_min:.2f} < {gate.bfmi_min}")
        failed["bfmi"] = []
    r_all = [p["r_hat"] for p in per.values()]
    eb_all = [p["ess_bulk"] for p in per.values()]
    et_all = [p["ess_tail"] for p in per.values()]
    return {
        "r_hat_max": float(np.nanmax(r_all)) if r_all else float("nan"),
        "ess_bulk_min": float(np.nanmin(eb_all)) if eb_all else float("nan"),
        "ess_tail_min": float(np.nanmin(et_all)) if et_all else float("nan"),
        "divergences": divergences,
        "divergent_tails": tails,
        "bfmi_min": bfmi_min,
        "passed": not failing,
        "failing": failing,
        "failed_checks": sorted(failed),
        "failed_quantities": failed,
        "chains": int(post.sizes.get("chain", 1)),
        "gate": {"r_hat_max": float(gate.r_hat_max), "ess_bulk_min": float(gate.ess_bulk_min),
                 "ess_tail_min": float(gate.ess_tail_min), "divergences_max": int(gate.divergences_max)},
        "per_quantity": per,
    }


#: at most this many divergent draws are ranked (the tails are clear long before)
TAIL_DRAWS = 200
#: a quantity is named when its divergent draws all lie on one side of its median and their quantiles
#: among all draws are on average at least this far from 0.5 (0.35: beyond the 15th or 85th percentile)
TAIL_DISTANCE = 0.35


def divergent_tails(idata: Any, var_names: list[str], top: int = 4) -> list[dict[str, Any]]:
    """Where the divergent transitions' draws sat: the quantities (each element of an array, e.g. one
    subject's score) whose draws at divergent transitions lie in one tail of their posterior.

    Divergences cluster where the log density curves sharply (Betancourt 2017, arXiv:1701.02434, section
    6.2; from memory), so the tails they share point at the part of the model to look at, or to
    reparametrise. The quantile of each divergent draw among all draws is computed per element; an element
    is kept when all of them lie on one side of 0.5 and their mean distance from 0.5 is at least
    :data:`TAIL_DISTANCE`. With one or two divergences a tail is often chance.

    Parameters
    ----------
    idata : arviz.InferenceData
        Posterior draws with ``sample_stats.diverging``.
    var_names : list of str
        Quantities to look at (those not in the posterior are skipped).
    top : int
        At most this many elements, the farthest in the tails first.

    Returns
    -------
    list of dict
        ``{"quantity": "NAME" or "NAME[coord]", "side": "low" | "high", "quantiles": [...]}``.
    """
    post = idata.posterior
    div = np.asarray(idata.sample_stats["diverging"].values, dtype=bool).ravel()
    if not div.any():
        return []
    rows = []
    for v in [n for n in var_names if n in post]:
        arr = post[v]
        extra = [d for d in arr.dims if d not in ("chain", "draw")]
        x = np.asarray(arr.transpose("chain", "draw", *extra).values, dtype=float)
        flat = x.reshape(div.size, -1)
        at = flat[div][:TAIL_DRAWS]
        q = (flat[None, :, :] < at[:, None, :]).mean(axis=1)          # (divergent draw, element)
        coords = [arr[d].values for d in extra]
        for j, idx in enumerate(np.ndindex(*x.shape[2:])):
            qj = q[:, j]
            if not (np.all(qj > 0.5) or np.all(qj < 0.5)) or abs(qj.mean() - 0.5) < TAIL_DISTANCE:
                continue
            label = v + (f"[{','.join(str(c[i]) for c, i in zip(coords, idx, strict=True))}]" if extra else "")
            rows.append({"quantity": label, "side": "high" if qj.mean() > 0.5 else "low",
                         "quantiles": [round(float(a), 3) for a in qj]})
    rows.sort(key=lambda r: -abs(np.mean(r["quantiles"]) - 0.5))
    return rows[:top]


def _halves(post: Any) -> Any:
    """One chain's draws as two chains (its first and second half), for R-hat with a single chain."""
    import xarray as xr

    h = int(post.sizes["draw"]) // 2
    first = post.isel(draw=slice(0, h))
    second = post.isel(draw=slice(h, 2 * h)).assign_coords(draw=first["draw"].values)
    return xr.concat([first, second], dim="chain").assign_coords(chain=[0, 1])


#: what each failed check means and what to raise (our own wording)
REMEDIES = {
    "r_hat": ("the chains disagree with each other (R-hat above {r_hat_max:g})",
              "run more warm-up and draws (--tune, --draws); if it persists, the posterior may have several "
              "modes or a poorly identified direction"),
    "ess_bulk": ("too few effectively independent draws for the centre of the posterior (bulk ESS below "
                 "{ess_bulk_min:.0f})", "raise --draws (or --chains)"),
    "ess_tail": ("too few effectively independent draws in the tails, where the 95 % interval ends lie "
                 "(tail ESS below {ess_tail_min:.0f})", "raise --draws (or --chains)"),
    "divergences": ("the sampler diverged ({divergences} transitions; {divergences_max} allowed), so it "
                    "may have missed part of the posterior", "raise --target-accept (e.g. 0.99)"),
    "bfmi": ("the sampler explored the energy levels poorly (BFMI low)", "more warm-up (--tune)"),
}


def gate_message(diag: dict[str, Any]) -> str:
    """One line saying which checks of the quality gate failed, for which quantities, and what to raise.

    Parameters
    ----------
    diag : dict
        The output of :func:`diagnose`.

    Returns
    -------
    str
        E.g. ``"tail ESS: too few ... (Kf, Pc); raise --draws (or --chains)"``; empty when it passed.
    """
    gate = {**Gate().__dict__, **(diag.get("gate") or {}), "divergences": diag.get("divergences", 0)}
    parts = []
    for check in diag.get("failed_checks") or []:
        what, fix = REMEDIES.get(check, (check, ""))
        who = list((diag.get("failed_quantities") or {}).get(check) or [])
        if check == "divergences" and diag.get("divergent_tails"):
            who = [f"{t['quantity']} {t['side']}" for t in diag["divergent_tails"]]
            what += "; its divergent draws sat in the tails of"
        parts.append(what.format(**gate) + (f" ({', '.join(who[:6])}{', ...' if len(who) > 6 else ''})"
                                            if who else "") + (f": {fix}" if fix else ""))
    return "; ".join(parts)


def describe(diag: dict[str, Any]) -> list[str]:
    """One sentence per sampler check (our own wording), each ending in whether it was met.

    Parameters
    ----------
    diag : dict
        The output of :func:`diagnose`.

    Returns
    -------
    list of str
        Sentences on chain agreement (R-hat), effective draws in the bulk and the tails (ESS),
        divergent transitions and the energy (BFMI).
    """
    gate = {**Gate().__dict__, **(diag.get("gate") or {})}
    failed = set(diag.get("failed_checks") or [])

    def verdict(key: str) -> str:
        return "not met" if key in failed else "met"

    def num(x: Any, f: str) -> str:
        x = float(x) if x is not None else float("nan")
        return "not available" if x != x else format(x, f)

    halves = " (one chain: its two halves compared)" if diag.get("chains") == 1 else ""
    lines = [f"Chains agree{halves}: largest R-hat {num(diag.get('r_hat_max'), '.3f')}, needs at most "
             f"{gate['r_hat_max']:g}: {verdict('r_hat')}.",
             f"Effective draws for the centre: smallest bulk ESS {num(diag.get('ess_bulk_min'), '.0f')}, needs "
             f"{gate['ess_bulk_min']:.0f}: {verdict('ess_bulk')}.",
             f"Effective draws for the interval ends: smallest tail ESS {num(diag.get('ess_tail_min'), '.0f')}, "
             f"needs {gate['ess_tail_min']:.0f}: " + (verdict("ess_tail") if gate["ess_tail_min"] else "not gated")
             + ".",
             f"Divergent transitions: {diag.get('divergences', 0)}, at most {int(gate['divergences_max'])} "
             f"allowed: {verdict('divergences')}."]
    bfmi = diag.get("bfmi_min")
    if bfmi is not None and bfmi == bfmi:
        lines.append(f"Energy exploration: smallest BFMI {bfmi:.2f} (below 0.3 is poor): "
                     + (verdict("bfmi") if gate.get("bfmi_min") else "reported, not gated") + ".")
    return lines


def summary_mcse(draws: Any) -> dict[str, Any]:
    """Monte Carlo standard errors of a posterior mean and of its 95 % interval ends (ArviZ ``mcse``,
    which allows for the draws' autocorrelation; Vehtari et al. 2021).

    Parameters
    ----------
    draws : array
        (chains, draws) of one scalar quantity (any unit).

    Returns
    -------
    dict
        ``{"mean": se, "ci95": [se of the 2.5 % quantile, se of the 97.5 % quantile], "ess_bulk": ESS}``
        in the draws' unit (nan where it cannot be computed).
    """
    import warnings

    import arviz as az

    x = np.asarray(draws, dtype=float)
    x = x.reshape(1, -1) if x.ndim == 1 else x.reshape(x.shape[0], -1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            mean = float(np.ravel(az.mcse(x, method="mean"))[0])
            ends = [float(np.ravel(az.mcse(x, method="quantile", prob=q))[0]) for q in (0.025, 0.975)]
            ess = float(np.ravel(az.ess(x, method="bulk"))[0])
        except Exception:  # noqa: BLE001 - too few draws
            return {"mean": float("nan"), "ci95": [float("nan"), float("nan")], "ess_bulk": float("nan")}
    return {"mean": mean, "ci95": ends, "ess_bulk": ess}


def contraction_note(name: str, contraction: float, ess: float) -> str | None:
    """A sentence explaining a negative contraction (posterior wider than the prior), or None.

    The Monte Carlo standard error of a contraction c = 1 - s_post^2 / s_prior^2 is taken as
    (1 - c) sqrt(2 / ESS) (normal-theory error of a variance from ESS effective draws; from memory).

    Parameters
    ----------
    name : str
        The quantity.
    contraction : float
        1 - posterior variance / prior variance (dimensionless).
    ess : float
        Bulk effective sample size of the quantity's draws.

    Returns
    -------
    str or None
        The note; None for a contraction of zero or more (or not finite).
    """
    if not contraction < 0 or not np.isfinite(contraction):
        return None
    se = (1.0 - contraction) * np.sqrt(2.0 / ess) if ess and ess > 0 else float("inf")
    head = f"{name}: the posterior is wider than the prior (contraction {contraction:.2f})"
    if contraction > -2.0 * se:
        return (f"{head}, within Monte Carlo error of no change (2 se {2 * se:.2f}): the readings barely inform "
                "it")
    return (f"{head}: the readings move it into a part of its prior that is wider than the prior as a whole "
            "(a skewed prior's long tail, or readings at odds with the prior; see the prior-data conflict check)")
