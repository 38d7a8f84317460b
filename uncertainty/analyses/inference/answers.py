"""The answers a cohort study asks for, from posterior draws: every subject-level quantity per subject,
the cohort summaries (typical subject, a new subject, the cohort total) and group effects.

Everything here works on numpy draws (chain and draw stacked) and writes plain summaries into the
inference document (canonical units: per-tissue quantities per 100 g, the study's basis; whole-tissue
flows in mL/h and L/day where the study sets ``tissue_mass``), so that the terminal table, the tidy CSV
tables and the report read one source.

Group effects are given two ways. Where the model has a group effect on a quantity (``effects``), the
effect on the typical value: a ratio for positive quantities (exp of the sampled log ratio), else a
difference. For every quantity with a subject layer (curve quantities and Jv included), the contrast
of the cohort's own subjects: the ratio of the groups' geometric means (positive quantities) or the
difference of their means, per posterior draw. P(direction) is the posterior probability that the
effect lies on the side of no effect its median lies on.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from typing import Any

import numpy as np

from uncertainty.analyses.inference.model_builder import is_positive
from uncertainty.analyses.inference.summaries import flat, summarise
from uncertainty.analyses.propagate import WHOLE_BODY_LYMPH_L_PER_DAY, WHOLE_BODY_LYMPH_ORIGIN
from uncertainty.core import units

#: whole-tissue flows the forward map returns with a tissue mass, and their units
WHOLE_TISSUE = {"Jv_mL_per_h": "mL/h", "Jv_L_per_day": "L/day"}
#: per-subject values that repeat another quantity in a second basis (left out: one basis per column)
SECOND_BASIS = ("Kf_100mL",)


def unit_of(name: str, basis: str = "100g") -> str:
    """Unit label of a reported quantity: its canonical unit on ``basis``, mL/h or L/day for the
    whole-tissue flows, "" when the quantity has no registered unit."""
    if name in WHOLE_TISSUE:
        return WHOLE_TISSUE[name]
    try:
        return units.canonical_unit(name, basis)
    except Exception:  # noqa: BLE001 - a quantity without a registered unit
        return ""


def _outputs(evaluate: Callable[..., Mapping[str, Any]], values: dict[str, Any], shape: tuple[int, ...]
             ) -> dict[str, np.ndarray]:
    """Numeric outputs of the forward map (numpy) at ``values``, each broadcast to ``shape``; the
    signed force breakdown is left out. Empty when the map fails on these values."""
    try:
        with np.errstate(all="ignore"):
            outs = evaluate(values, np)
    except Exception:  # noqa: BLE001 - outputs are informative; the sampled Jv stays
        return {}
    found = {}
    for name, v in outs.items():
        if isinstance(v, str) or name.startswith("force_"):
            continue
        try:
            found[name] = np.broadcast_to(np.asarray(v, dtype=float), shape)
        except (TypeError, ValueError):
            continue
    return found


def _reportable(name: str) -> bool:
    return name in WHOLE_TISSUE or (name in units.CANONICAL and name not in SECOND_BASIS)


def subject_draws(built: Any, idata: Any) -> dict[str, np.ndarray]:
    """Posterior draws (draws x subjects, canonical units) of every subject-level quantity: the
    uncertain quantities, the per-subject quantities of observation kinds (e.g. a curve's Pvi), and
    the forward map's outputs at each subject's values (Jv, Pc, net pressure, ...; whole-tissue Jv in
    mL/h and L/day with a tissue mass). Jv is the model's own ``Jv__subject``."""
    problem = built.problem
    post = idata.posterior
    out: dict[str, np.ndarray] = {}
    for q in problem.priors:
        if f"{q}__subject" in post:
            out[q] = flat(idata, f"{q}__subject")
    context = getattr(built, "context", None)
    for var, label in (getattr(context, "subject_params", None) or {}).items():
        if var in post and label not in SECOND_BASIS:
            out.setdefault(label, flat(idata, var))
    jv = flat(idata, "Jv__subject")
    values = {**problem.fixed, **{q: out[q] for q in problem.priors if q in out}}
    for name, arr in _outputs(problem.evaluate, values, jv.shape).items():
        if _reportable(name):
            out.setdefault(name, np.array(arr))
    out["Jv"] = jv
    return out


def _varies(x: np.ndarray) -> bool:
    """True when a quantity differs between subjects in some draw (it has a subject layer)."""
    if x.ndim < 2 or x.shape[1] < 2:
        return True
    spread = np.nanmax(x, axis=1) - np.nanmin(x, axis=1)
    scale = np.nanmax(np.abs(x)) if np.isfinite(x).any() else 0.0
    return bool(np.any(spread > 1e-9 * max(scale, 1e-300)))


def _summary(x: np.ndarray) -> dict[str, Any]:
    return summarise(x, hdi=False)


def _typical_draws(built: Any, idata: Any, names: list[str]) -> dict[str, np.ndarray]:
    """Draws of the typical subject's value of each name (priors' typical values, kinds' typical
    side quantities, outputs of the forward map at the typical values)."""
    problem = built.problem
    post = idata.posterior
    typ = {q: flat(idata, q) for q in problem.priors if q in post}
    out: dict[str, np.ndarray] = dict(typ)
    context = getattr(built, "context", None)
    for var, label in (getattr(context, "subject_params", None) or {}).items():
        base = var[: -len("__subject")] if var.endswith("__subject") else None
        if base and base in post and label not in out and flat(idata, base).ndim == 1:
            out[label] = flat(idata, base)
    if "Jv__typical" in post:
        n = flat(idata, "Jv__typical").shape[0]
        for name, arr in _outputs(problem.evaluate, {**problem.fixed, **typ}, (n,)).items():
            if _reportable(name):
                out.setdefault(name, np.array(arr))
        out["Jv"] = flat(idata, "Jv__typical")
    return {k: v for k, v in out.items() if k in names and np.ndim(v) == 1}


def _new_subject_draws(built: Any, values: Mapping[str, Any] | None, names: list[str]) -> dict[str, np.ndarray]:
    """Draws for a new subject from its quantities' draws (``api.new_subject_values``) and the forward map."""
    if not values:
        return {}
    problem = built.problem
    n = next((np.size(v) for v in values.values() if np.ndim(v) == 1), 1)
    out = {q: np.asarray(values[q], dtype=float) for q in problem.priors if q in values}
    for name, arr in _outputs(problem.evaluate, dict(values), (n,)).items():
        if _reportable(name):
            out.setdefault(name, np.array(arr))
    found = {}
    for k, v in out.items():
        if k in names:
            try:
                found[k] = np.broadcast_to(v, (n,))
            except ValueError:   # a value that is not one per draw: left out
                continue
    return found


def _direction(x: np.ndarray, ratio: bool) -> tuple[str, float]:
    """('higher' or 'lower', posterior probability of that side of no effect) from effect draws."""
    null = 1.0 if ratio else 0.0
    x = x[np.isfinite(x)]
    if x.size == 0:
        return "-", float("nan")
    higher = bool(np.median(x) >= null)
    p = float(np.mean(x > null)) if higher else float(np.mean(x < null))
    return ("higher" if higher else "lower"), p


def _effect_row(quantity: str, group: str, ref: str, of: str, x: np.ndarray, ratio: bool, unit: str
                ) -> dict[str, Any]:
    direction, p = _direction(x, ratio)
    x = x[np.isfinite(x)]
    lo, hi = (np.quantile(x, [0.025, 0.975]) if x.size else (np.nan, np.nan))
    return {"quantity": quantity, "group": group, "reference": ref, "measure": "ratio" if ratio else "difference",
            "of": of, "estimate": float(np.median(x)) if x.size else float("nan"),
            "ci95": [float(lo), float(hi)], "direction": direction, "p_direction": p,
            "unit": "1" if ratio else unit}


def group_effects(built: Any, idata: Any, per_subject: dict[str, np.ndarray], names: list[str],
                  basis: str) -> list[dict[str, Any]]:
    """Group effects against the reference group (``control`` when present, else the first label):
    the model's effect on the typical value where the study gives one, and the contrast of the cohort's
    subjects for every quantity with a subject layer (ratio of geometric means for positive quantities,
    difference of means otherwise), each with its median, 95% interval and P(direction)."""
    groups = list(getattr(built, "groups", []) or [])
    if len(groups) < 2:
        return []
    ref = "control" if "control" in groups else groups[0]
    others = [g for g in groups if g != ref]
    post = idata.posterior
    problem = built.problem
    rows: list[dict[str, Any]] = []
    for q, prior in problem.priors.items():
        if f"{q}__effect" not in post:
            continue
        eff = flat(idata, f"{q}__effect").reshape(-1, len(others))
        positive = is_positive(prior)
        for j, g in enumerate(others):
            x = np.exp(eff[:, j]) if positive else float(prior.sd()) * eff[:, j]
            rows.append(_effect_row(q, g, ref, "typical value (model effect)", x, positive, unit_of(q, basis)))
    member = {g: np.array([built.subject_group.get(s) == g for s in built.subjects]) for g in groups}
    for name in names:
        x = per_subject[name]
        positive = bool(np.all(x[np.isfinite(x)] > 0))
        if positive and name in WHOLE_TISSUE:   # the same ratio as Jv's
            continue
        for g in others:
            a, b = x[:, member[g]], x[:, member[ref]]
            if not a.shape[1] or not b.shape[1]:
                continue
            if positive:
                d = np.exp(np.log(a).mean(axis=1) - np.log(b).mean(axis=1))
                of = "subjects' geometric mean"
            else:
                d = a.mean(axis=1) - b.mean(axis=1)
                of = "subjects' mean"
            rows.append(_effect_row(name, g, ref, of, d, positive, unit_of(name, basis)))
    return rows


def add_answers(doc: dict[str, Any], built: Any, idata: Any, new_values: Mapping[str, Any] | None) -> None:
    """Extend an inference document in place with the answers (see the module docstring).

    Parameters
    ----------
    doc : dict
        The inference document; ``subjects``, ``typical``, ``new_subject`` and ``units`` are extended
        (existing entries kept) and ``subject_quantities``, ``cohort_total`` and ``group_effects`` added
        (with subjects), or ``individual`` (the study's one individual).
    built : BuiltModel
        The model the draws come from (problem, subjects, groups).
    idata : arviz.InferenceData
        Posterior draws.
    new_values : mapping or None
        A new subject's quantity draws (``api.new_subject_values``), canonical units.
    """
    basis = getattr(built.problem, "basis", "100g") or "100g"
    per = subject_draws(built, idata)
    if not built.hierarchical:   # the study's one individual: its values, no subject table
        doc["individual"] = {name: _summary(x[:, 0]) for name, x in per.items()}
        for name in doc["individual"]:
            doc["units"].setdefault(name, unit_of(name, basis))
        per = {}
    names = [n for n, x in per.items() if n == "Jv" or n in WHOLE_TISSUE or _varies(x)]
    names = sorted(names, key=lambda n: (n in ("Jv", *WHOLE_TISSUE), list(WHOLE_TISSUE).index(n) + 1
                                         if n in WHOLE_TISSUE else 0))
    doc["subject_quantities"] = names
    for k, sid in enumerate(built.subjects if built.hierarchical else []):
        block = doc["subjects"].setdefault(sid, {})
        for name in names:
            block.setdefault(name, _summary(per[name][:, k]))
    wanted = names or ["Jv", *WHOLE_TISSUE]
    typical = _typical_draws(built, idata, wanted)
    for key, draws in (("typical", typical), ("new_subject", _new_subject_draws(built, new_values, wanted))):
        block = doc.setdefault(key, {})
        for name in wanted:
            if name in draws:
                block.setdefault(name, _summary(draws[name]))
    flag_implausible_flux(doc, {"subjects": per.get("Jv_L_per_day"), "typical": typical.get("Jv_L_per_day")},
                          list(built.subjects) if built.hierarchical else [])
    total = {}
    for name in WHOLE_TISSUE:
        if name in per:
            total[name] = _summary(per[name].sum(axis=1))
    doc["cohort_total"] = total
    doc["group_effects"] = group_effects(built, idata, per, names, basis) if built.hierarchical else []
    model_effects = sorted({e["quantity"] for e in doc["group_effects"] if e["of"].startswith("typical")})
    if model_effects:
        ref = doc["group_effects"][0]["reference"]
        note = (f"typical subject and new subject are those of the reference group {ref!r} (the group "
                f"effects on {', '.join(model_effects)} shift the other groups)")
        if note not in doc.setdefault("notes", []):
            doc["notes"].append(note)
    for name in set(names) | set(doc["typical"]) | set(total):
        doc["units"].setdefault(name, unit_of(name, basis))


def flag_implausible_flux(doc: dict[str, Any], per_day: Mapping[str, np.ndarray | None], subjects: list[str]) -> None:
    """Flag posterior organ-level filtration beyond what the body can return (the plausibility guard of
    ``propagate``, :data:`uncertainty.analyses.propagate.WHOLE_BODY_LYMPH_L_PER_DAY`), in place.

    A subject or the typical subject whose posterior median of Jv in L/day exceeds the limit adds a flag
    (``kind``, ``who``, ``median``, ``limit``, ``unit``, ``source``) to ``doc["flags"]`` and one note naming
    them to ``doc["notes"]`` (shown by the terminal, the JSON and the report).

    Parameters
    ----------
    doc : dict
        The inference document.
    per_day : mapping
        ``subjects``: draws x subjects of Jv (L/day), ``typical``: draws (L/day); either None without a
        tissue mass.
    subjects : list of str
        Subject labels, in the columns' order.
    """
    over: list[tuple[str, float]] = []
    x = per_day.get("subjects")
    if x is not None and subjects:
        over += [(sid, float(m)) for sid, m in zip(subjects, np.nanmedian(x, axis=0), strict=True)
                 if m > WHOLE_BODY_LYMPH_L_PER_DAY]
    t = per_day.get("typical")
    if t is not None and np.nanmedian(t) > WHOLE_BODY_LYMPH_L_PER_DAY:
        over.append(("typical subject", float(np.nanmedian(t))))
    if not over:
        return
    flags = doc.setdefault("flags", [])
    for who, median in over:
        flags.append({"kind": "implausible_flux", "output": "Jv_L_per_day", "who": who, "median": median,
                      "limit": WHOLE_BODY_LYMPH_L_PER_DAY, "unit": "L/day", "source": WHOLE_BODY_LYMPH_ORIGIN})
    shown = ", ".join(f"{who} {median:.3g}" for who, median in over[:8]) + (" ..." if len(over) > 8 else "")
    doc.setdefault("notes", []).append(
        f"implausible organ-level filtration after updating: posterior median Jv above the "
        f"{WHOLE_BODY_LYMPH_L_PER_DAY:g} L/day the whole body's lymph can return ({shown} L/day), so it cannot "
        f"be a steady state; check the form, the tissue mass and the readings (source: {WHOLE_BODY_LYMPH_ORIGIN})")
