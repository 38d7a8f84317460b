"""Time courses of a ``whole_body`` study: draws of the priors through ``physiology.whole_body.simulate``.

For each layer (the typical subject: uncertainty only; the individual: uncertainty plus between-subject spread)
``TimelinePlan.draws`` points are drawn (scrambled Sobol', the study's seed), every input is evaluated
(derived Pc and pi_c included), the skin-and-subcutis bed takes the draws scaled by the ratio of the
``skin_subcutis`` prior set's medians to the study tissue's (``forms.whole_body``), and the time courses are
summarised per report time by their median and 95% interval.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

from uncertainty.analyses.sampling import draw
from uncertainty.core import units
from uncertainty.forms.evaluate import input_values
from uncertainty.forms.whole_body import timeline_parameters
from uncertainty.physiology.whole_body import (
    INSENSIBLE_LOSS_ML_MIN,
    KG_PER_L,
    TIMELINE_UNITS,
    simulate_blocks,
)
from uncertainty.priors import prior_medians
from uncertainty.study.endpoints import TimePoint
from uncertainty.study.schema import obs_symbol

#: The prior set of the second bed.
SKIN_SET = "skin_subcutis"
#: Quantities scaled (ratio of medians) and shifted (difference of medians) from the study's bed to the skin bed.
SCALED = ("Kf", "sigma", "PS", "L", "C_tis", "C_tis_high", "JL_max")
SHIFTED = ("Pc", "Pi_L0", "Pi_break")


def bed_ratios(tissue: str) -> dict[str, float]:
    """Skin-bed value relative to the study bed's: median ratios (SCALED) and differences (``<symbol>_shift``,
    SHIFTED, mmHg) of ``priors/skin_subcutis.toml`` against ``priors/<tissue>.toml``.

    Parameters
    ----------
    tissue : str
        The study's tissue (prior set).

    Returns
    -------
    dict
        symbol -> ratio (1), ``<symbol>_shift`` -> difference (mmHg).
    """
    own, skin = prior_medians(tissue), prior_medians(SKIN_SET)
    out = {s: skin[s] / own[s] for s in SCALED if s in own and s in skin and own[s] != 0}
    out.update({f"{s}_shift": skin[s] - own[s] for s in SHIFTED if s in own and s in skin})
    return out


#: Observation kinds drawn on a fan chart: kind -> (time course, how its readings are shown). ``first``: each
#: subject's readings over its earliest one (as the kind's likelihood takes them, ``haemoglobin``); ``change``: each
#: subject's readings minus its earliest one, in the time course's unit (``body_weight``, kg); ``as_read``: the
#: readings themselves in the time course's unit; ``balance``: a charted balance since 0 (L) less the insensible loss
#: the chart omits, at 1 kg per L, i.e. the weight change it implies (kg; the inverse of
#: ``observations.weight_course.charted_balance``, through which the ``fluid_balance`` kind of a whole_body study is
#: fitted to ``body_weight_change``). Urine read as rates (``how = "rate"``) is shown as the cumulative volumes the
#: rates imply, sum_j rate_j (t_j - t_{j-1}) per subject (mL since 0; the rate term's readings telescope to them).
OBSERVED_COURSES: dict[str, tuple[str, str]] = {"haemoglobin": ("hb_ratio", "first"),
                                                "haematocrit": ("hb_ratio", "first"),
                                                "urine": ("urine_volume", "as_read"),
                                                "plasma_protein": ("plasma_protein_ratio", "first"),
                                                "body_weight": ("body_weight_change", "change"),
                                                "fluid_balance": ("body_weight_change", "balance")}

#: Legend of each series of points (a kind, or ``urine_rate`` for urine read as rates), saying how it is shown.
OBSERVED_LEGENDS: dict[str, str] = {
    "haemoglobin": "Hb / subject's first",
    "haematocrit": "Hct / subject's first",
    "plasma_protein": "protein / subject's first",
    "urine": "urine since 0",
    "urine_rate": "urine flows summed over intervals",
    "body_weight": "weight - subject's first",
    "fluid_balance": "charted balance - insensible loss",
}


def balance_as_weight_change(balance_L: np.ndarray, t_min: np.ndarray) -> np.ndarray:
    """The body weight change (kg) a charted fluid balance since time 0 implies: the balance less the insensible loss
    the chart does not record, at 1 kg per L (``physiology.whole_body``'s ``INSENSIBLE_LOSS_ML_MIN`` and
    ``KG_PER_L``); the inverse of ``observations.weight_course.charted_balance``.

    Parameters
    ----------
    balance_L : numpy.ndarray
        Charted balance since time 0 (infused - bled - urine), L.
    t_min : numpy.ndarray
        Time since 0, min.

    Returns
    -------
    numpy.ndarray
        Weight change since 0, kg.
    """
    return (np.asarray(balance_L, dtype=float) - INSENSIBLE_LOSS_ML_MIN * np.asarray(t_min, dtype=float) / 1000.0) \
        * KG_PER_L


def observed_points(study: Any) -> dict[str, dict[str, Any]]:
    """The study's timed observations as points on the fan charts of their time courses.

    Parameters
    ----------
    study : Study
        A ``whole_body`` study; its ``[[observations]]`` of the kinds in :data:`OBSERVED_COURSES` with a data file
        (subject, time, value; canonical units) are read.

    Returns
    -------
    dict
        time course -> ``times_min`` (list, min), ``values`` (list, in the time course's unit: for ``haemoglobin``,
        ``haematocrit`` and ``plasma_protein`` each subject's reading over its earliest one, 1; for ``body_weight``
        each subject's reading minus its earliest one, kg; for ``fluid_balance`` the charted balance less the
        insensible loss since 0, kg (:func:`balance_as_weight_change`); for ``urine`` the volumes since 0, mL, summed
        from the rates when read as rates), ``subjects`` (list of labels, "" for none), ``kinds`` (list),
        ``series`` (list: the kind, ``urine_rate`` for urine read as rates), ``legends`` (series -> legend,
        :data:`OBSERVED_LEGENDS`), ``relative_to_first`` / ``change_from_first`` (bool: every reading on the chart
        is over / minus its subject's first). Readings without a time are left out; empty without such
        observations.
    """
    out: dict[str, dict[str, Any]] = {}
    shown: dict[str, set[str]] = {}
    for ob in getattr(study, "observations", None) or []:
        kind = getattr(ob, "kind", None)
        data = getattr(ob, "data", None)
        if kind not in OBSERVED_COURSES or data is None or "value" not in data:
            continue
        name, how = OBSERVED_COURSES[kind]
        rates = kind == "urine" and getattr(ob, "how", None) == "rate"
        series = "urine_rate" if rates else kind
        declared = getattr(ob, "declared_unit", None)
        symbol = obs_symbol(kind, getattr(ob, "how", None))
        factor = 1.0 if how == "first" or not declared else units.to_canonical(symbol, 1.0, declared)
        value = np.asarray(data["value"], dtype=float) * factor
        n = value.size
        time = np.asarray(data.get("time_min") or [np.nan] * n, dtype=float)
        subject = [str(x) if x is not None else "" for x in (data.get("subject") or [None] * n)]
        keep = np.isfinite(time) & np.isfinite(value)
        entry = out.setdefault(name, {"times_min": [], "values": [], "subjects": [], "kinds": [], "series": [],
                                      "legends": {}})
        for label in dict.fromkeys(subject):
            idx = [k for k in range(n) if subject[k] == label and keep[k]]
            idx.sort(key=lambda k: time[k])
            if not idx:
                continue
            ref = value[idx[0]] if how == "first" else 1.0
            shift = value[idx[0]] if how == "change" else 0.0
            entry["times_min"] += [float(time[k]) for k in idx]
            if rates:  # mL/min over each interval since the previous reading (0 for the first) -> mL since 0
                dt = np.diff(np.concatenate([[0.0], time[idx]]))
                entry["values"] += [float(v) for v in np.cumsum(value[idx] * dt)]
            elif how == "balance":
                entry["values"] += [float(v) for v in balance_as_weight_change(value[idx], time[idx])]
            else:
                entry["values"] += [float((value[k] - shift) / ref) for k in idx]
            entry["subjects"] += [label] * len(idx)
            entry["kinds"] += [kind] * len(idx)
            entry["series"] += [series] * len(idx)
            entry["legends"][series] = OBSERVED_LEGENDS[series]
            shown.setdefault(name, set()).add(how)
    for name, entry in out.items():
        entry["relative_to_first"] = shown.get(name) == {"first"}
        entry["change_from_first"] = shown.get(name) == {"change"}
    return {k: v for k, v in out.items() if v["times_min"]}


#: Times (min) a time course is printed at, where the study reports them (its end always): the times fluid-therapy
#: questions are asked at (30, 60 and 120 min after an infusion starts; common practice), and 240 min for longer
#: timelines.
PRINT_TIMES_MIN = (30.0, 60.0, 120.0, 240.0)


def printed_times(times_min: list[float]) -> list[int]:
    """Indices of the report times ``times_min`` (min) that are printed: :data:`PRINT_TIMES_MIN` where reported, and
    the end."""
    times = list(times_min)
    return sorted({times.index(t) for t in (*PRINT_TIMES_MIN, times[-1]) if t in times}) if times else []


def band_over_time(series: list[np.ndarray]) -> dict[str, list[Any]]:
    """Median and equal-tailed 95 % interval over the draws at each report time (``series``: one array of draws per
    time, the course's unit): ``median`` list and ``ci95`` list of [low, high] (None where no draw is finite)."""
    med, ci = [], []
    for y in series:
        y = np.asarray(y, dtype=float)
        y = y[np.isfinite(y)]
        if y.size == 0:
            med.append(None)
            ci.append([None, None])
            continue
        q = np.quantile(y, [0.5, 0.025, 0.975])
        med.append(float(q[0]))
        ci.append([float(q[1]), float(q[2])])
    return {"median": med, "ci95": ci}


def run_layer(study: Any, layer: str, n: int, seed: Any) -> dict[str, Any]:
    """Simulate ``n`` draws of one layer of a ``whole_body`` study.

    Parameters
    ----------
    study : Study
        With ``timeline`` (a ``TimelinePlan``).
    layer : str
        ``typical`` or ``individual``.
    n : int
        Draws.
    seed : Any
        Seed of the draws.

    Returns
    -------
    dict
        The output of ``physiology.whole_body.simulate`` (lists of arrays over the draws per report time).
    """
    plan = study.timeline
    values = draw(study, n, method="qmc", seed=seed, layer=layer)
    v = input_values(study, values)
    body, beds, Cp0 = timeline_parameters(v, plan.body_mass_kg, bed_ratios(study.tissue))
    return simulate_blocks(body, beds, Cp0, plan.doses, plan.end, plan.report_every)


class _Layer:
    """Task function of the time courses: one layer's draws simulated (picklable; the executor's seed is
    not used, the draws come from the study seed)."""

    def __init__(self, study: Any, n: int, seed: Any) -> None:
        self.study, self.n, self.seed = study, n, seed

    def __call__(self, layer: str, ss: Any = None) -> dict[str, Any]:
        sim = run_layer(self.study, layer, self.n, self.seed)
        return {"times_min": list(sim["times_min"]),
                "summary": {name: band_over_time(sim[name]) for name in TIMELINE_UNITS}}


def courses_at(study: Any, values: dict[str, Any], end: float, every: float) -> dict[str, Any]:
    """``simulate`` of a study's draws ``values`` (name -> array, canonical units) from 0 to ``end`` (min)."""
    plan = study.timeline
    v = input_values(study, values)
    body, beds, Cp0 = timeline_parameters(v, plan.body_mass_kg, bed_ratios(study.tissue))
    return simulate_blocks(body, beds, Cp0, plan.doses, end, every)


def _draw_count(values: dict[str, Any]) -> int:
    return max([int(np.size(x)) for x in values.values()] or [1])


def values_at(study: Any, point: TimePoint, values: dict[str, Any]) -> np.ndarray:
    """One time course of a ``whole_body`` study at ``point.time_min`` for the draws ``values``.

    The time courses are stepped as propagate's timeline steps them: when the time is a report time (a multiple of
    ``[timeline] report_every``) the step grid is the timeline's, so the value equals the timeline's draws at that
    time; otherwise the grid ends at the time itself (step at most 0.5 min, ``physiology.whole_body.time_grid``).

    Parameters
    ----------
    study : Study
        A ``whole_body`` study (``timeline`` set).
    point : TimePoint
        The time course and time (min); ``time_min`` not None.
    values : dict
        name -> array over the draws (canonical units), as ``analyses.sampling.draw`` gives.

    Returns
    -------
    numpy.ndarray
        Shape (n,), in the time course's unit (``point.unit``).
    """
    t = float(point.time_min)  # type: ignore[arg-type]
    every = float(study.timeline.report_every)
    k = t / every
    step = every if abs(k - round(k)) < 1e-9 and round(k) >= 1 else t
    sim = courses_at(study, values, t, step)
    return np.asarray(sim[point.name][-1], dtype=float) * np.ones(_draw_count(values))


def values_over_time(study: Any, name: str, values: dict[str, Any]) -> tuple[list[float], np.ndarray]:
    """One time course of a ``whole_body`` study at every report time after 0, for the draws ``values``.

    Parameters
    ----------
    study : Study
        A ``whole_body`` study.
    name : str
        The time course (``physiology.whole_body.TIMELINE_UNITS``).
    values : dict
        name -> array over the draws (canonical units).

    Returns
    -------
    times : list of float
        Report times, min (0 left out).
    y : numpy.ndarray
        Shape (n, len(times)), in the time course's unit.
    """
    plan = study.timeline
    sim = courses_at(study, values, plan.end, plan.report_every)
    n = _draw_count(values)
    y = np.stack([np.asarray(a, dtype=float) * np.ones(n) for a in sim[name][1:]], axis=1)
    return list(sim["times_min"][1:]), y


def timepoint_evaluator(point: TimePoint) -> Callable[[Any, dict[str, Any]], dict[str, np.ndarray]]:
    """An ``evaluate(study, values) -> {point.text: array}`` for the analyses that take a forward map.

    Parameters
    ----------
    point : TimePoint
        The time course and time.

    Returns
    -------
    callable
        ``(study, values) -> {point.text: numpy.ndarray}`` (the time course's unit).
    """
    def evaluate(study: Any, values: dict[str, Any]) -> dict[str, np.ndarray]:
        return {point.text: values_at(study, point, values)}

    return evaluate


def interventions_of(plan: Any) -> list[dict[str, Any]]:
    """The study's interventions as resolved (a ``TimelinePlan``'s doses): ``kind``, ``volume_mL``, ``start_min``,
    ``duration_min`` and ``protein_g_per_dL`` each."""
    return [{"kind": d.kind, "volume_mL": d.volume, "start_min": d.start, "duration_min": d.duration,
             "protein_g_per_dL": d.protein} for d in plan.doses]


def timeline(study: Any, seed: Any = None, draws: int | None = None, executor: Any = None) -> dict[str, Any]:
    """The ``timeline`` entry of propagate's result for a ``whole_body`` study.

    Parameters
    ----------
    study : Study
        With ``timeline``.
    seed : Any, optional
        Defaults to the study's seed.
    draws : int, optional
        Draws per layer (default: ``[timeline] draws``).
    executor : InProcess or DaskExecutor, optional
        Where the two layers are simulated, one task each (:mod:`uncertainty.core.parallel`; here,
        one after the other, when None); the numbers do not depend on it.

    Returns
    -------
    dict
        ``times_min`` (list), ``units`` (name -> unit), ``typical`` and ``individual`` (name -> ``median``
        list and ``ci95`` list of [low, high]), ``draws`` (per layer), ``interventions`` (as resolved) and, with
        timed observations, ``observed`` (:func:`observed_points`).
    """
    plan = study.timeline
    seed = getattr(study, "seed", None) if seed is None else seed
    n = plan.draws if draws is None else draws
    out: dict[str, Any] = {"units": dict(TIMELINE_UNITS), "draws": n, "interventions": interventions_of(plan),
                           "body_mass_kg": plan.body_mass_kg}
    observed = observed_points(study)
    if observed:
        out["observed"] = observed
    layers = ("typical", "individual")
    task = _Layer(study, n, seed)
    done = [task(layer) for layer in layers] if executor is None else \
        executor.map(task, list(layers), seed=0, label="time courses")
    for layer, got in zip(layers, done, strict=True):
        out["times_min"] = got["times_min"]
        out[layer] = got["summary"]
    return out
