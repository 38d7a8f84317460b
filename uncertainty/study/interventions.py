"""``[[interventions]]`` and ``[timeline]`` of a ``whole_body`` study, resolved into canonical units (mL, min, kg).

A pure step of the resolution (``uncertainty.study.study._study_from``): the validated sections in, a
:class:`TimelinePlan` out. Every refusal is a :class:`~uncertainty.core.errors.StudyError` naming the file,
the dotted key (``interventions[1].volume``) and the value: a volume that is not positive, a start at or after
the end of the timeline, a bleed (alone or with the bleeds before it) beyond the blood volume, interventions in
a study of another form.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from uncertainty.core import units
from uncertainty.core.errors import StudyError, study_error
from uncertainty.physiology.whole_body import Dose, blood_volume, infusion
from uncertainty.study.schema import Intervention, InterventionList, StudySection, TimelineSection

#: Body mass when ``[study] body_mass`` is not given, kg (common practice: ICRP Publication 23, 1975,
#: reference man, 70 kg).
DEFAULT_BODY_MASS_KG = 70.0
#: The forms that take interventions.
TIMELINE_FORMS = ("whole_body",)


@dataclass(frozen=True)
class TimelinePlan:
    """What a ``whole_body`` study simulates.

    Attributes
    ----------
    doses : tuple of Dose
        The interventions (mL, min, g/dL).
    end, report_every : float
        Timeline end and reporting interval, min.
    draws : int
        Draws per layer of the time courses in propagate.
    body_mass_kg : float
        Body mass, kg.
    notes : tuple of str
        What was assumed (e.g. the default body mass).
    """

    doses: tuple[Dose, ...]
    end: float
    report_every: float
    draws: int
    body_mass_kg: float
    notes: tuple[str, ...] = ()


def validate_interventions(data: Any, file: str) -> InterventionList:
    """Validate ``[[interventions]]`` as written (a list of tables).

    Parameters
    ----------
    data : Any
        The parsed TOML value.
    file : str
        The study file, for messages.

    Returns
    -------
    InterventionList

    Raises
    ------
    StudyError
        Not a list of tables, or an entry its model refuses (key ``interventions[i].<key>``).
    """
    from pydantic import ValidationError

    if not isinstance(data, list) or not all(isinstance(d, dict) for d in data):
        raise study_error("interventions are [[interventions]] tables", file, "interventions", None)
    out = []
    for i, d in enumerate(data):
        try:
            out.append(Intervention.model_validate(dict(d)))
        except ValidationError as exc:
            e = exc.errors(include_url=False)[0]
            loc = ".".join(str(p) for p in e.get("loc", ()) if not str(p).startswith("function-"))
            msg = "unknown key" if e.get("type") == "extra_forbidden" else e.get("msg", "invalid")
            key = f"interventions[{i}]" + (f".{loc}" if loc else "")
            raise study_error(msg.replace("Value error, ", ""), file, key, e.get("input")) from None
    return InterventionList(out)


def _quantity(value: float | str, unit: str, file: str, key: str) -> float:
    """A number (already in ``unit``) or a string with its unit, converted to ``unit``."""
    if not isinstance(value, str):
        out = float(value)
    else:
        try:
            out = float(units.registry().Quantity(value).to(unit).magnitude)
        except Exception:  # pint raises several error kinds for a bad string or dimension
            raise study_error(f"not a quantity in {unit} (e.g. '30 {unit}')", file, key, value) from None
    if not math.isfinite(out):
        raise study_error("must be finite", file, key, value)
    return out


def resolve_timeline(head: StudySection, interventions: InterventionList | None,
                     timeline: TimelineSection | None, file: str) -> TimelinePlan | None:
    """The study's interventions and timeline in canonical units, checked.

    Parameters
    ----------
    head : StudySection
        ``[study]`` (model form, ``body_mass``).
    interventions : InterventionList or None
        ``[[interventions]]`` as written.
    timeline : TimelineSection or None
        ``[timeline]`` as written.
    file : str
        The study file, for messages.

    Returns
    -------
    TimelinePlan or None
        None for a study of another form without interventions or timeline.

    Raises
    ------
    StudyError
        Interventions in another form, a bad quantity, a non-positive volume, a start at or after the end,
        a negative duration, bleeds beyond the blood volume.
    """
    if head.model not in TIMELINE_FORMS:
        if interventions is not None or timeline is not None:
            key = "interventions" if interventions is not None else "timeline"
            raise study_error(f"interventions and a timeline belong to the {', '.join(TIMELINE_FORMS)} form",
                              file, key, head.model)
        return None
    notes: list[str] = []
    if head.body_mass is None:
        mass = DEFAULT_BODY_MASS_KG
        notes.append(f"[study] body_mass not given: {DEFAULT_BODY_MASS_KG:g} kg assumed (reference man)")
    else:
        mass = _quantity(head.body_mass, "kg", file, "study.body_mass")
        if not 1.0 <= mass <= 400.0:
            raise study_error("body_mass must lie between 1 and 400 kg", file, "study.body_mass", head.body_mass)
    tl = timeline or TimelineSection()
    end = _quantity(tl.end, "min", file, "timeline.end")
    every = _quantity(tl.report_every, "min", file, "timeline.report_every")
    if not 0 < end <= 7 * 1440:
        raise study_error("the timeline end must lie between 0 and 7 days", file, "timeline.end", tl.end)
    if not 0 < every <= end:
        raise study_error("report_every must be positive and at most the end", file, "timeline.report_every",
                          tl.report_every)
    doses = _doses(list(interventions.root) if interventions is not None else [], end, mass, file)
    return TimelinePlan(doses=tuple(doses), end=end, report_every=every, draws=tl.draws, body_mass_kg=mass,
                        notes=tuple(notes))


def _doses(items: Sequence[Intervention], end: float, mass: float, file: str) -> list[Dose]:
    doses: list[Dose] = []
    bled = 0.0
    bv = blood_volume(mass)
    for i, it in enumerate(items):
        key = f"interventions[{i}]"
        vol = _quantity(it.volume, "mL", file, f"{key}.volume")
        start = _quantity(it.start, "min", file, f"{key}.start")
        dur = _quantity(it.duration, "min", file, f"{key}.duration")
        if vol <= 0:
            raise study_error("the volume must be positive", file, f"{key}.volume", it.volume)
        if start < 0:
            raise study_error("the start must not be negative", file, f"{key}.start", it.start)
        if start >= end:
            raise study_error(f"starts at or after the end of the timeline ({end:g} min)", file, f"{key}.start",
                              it.start)
        if dur < 0:
            raise study_error("the duration must not be negative", file, f"{key}.duration", it.duration)
        if it.kind == "bleed":
            bled += vol
            if bled >= bv:
                raise study_error(f"the bleeds up to here ({bled:g} mL) reach the blood volume ({bv:g} mL at "
                                  f"{mass:g} kg)", file, f"{key}.volume", it.volume)
            doses.append(Dose("bleed", vol, start, dur))
        else:
            doses.append(infusion(str(it.fluid), vol, start, dur))  # protein and clearance of the fluid
    return doses


__all__ = ["DEFAULT_BODY_MASS_KG", "TIMELINE_FORMS", "StudyError", "TimelinePlan", "resolve_timeline",
           "validate_interventions"]
