"""Endpoints of a ``whole_body`` time course at a chosen time: ``"infused_retained_fraction at 60 min"``.

One way of writing, shared by ``[sensitivity] output``, ``[rank] output``, ``[design] endpoint`` and the
``--output`` option of the commands: the name of a reported time course (``physiology.whole_body.TIMELINE_UNITS``:
``plasma_volume_change``, ``infused_retained_fraction``, ``hb_ratio``, ``interstitial_volume_change_muscle``,
``interstitial_volume_change_skin``, ``urine_volume``, ``lymph_flow``, ``plasma_protein_ratio``), the word ``at``
and a time with its unit (``s``, ``min``, ``h``, ``day``; pint spellings such as ``"1.5 hour"`` too). The time
lies after 0 and at or before the study's ``[timeline] end``. ``[sensitivity] output`` also takes
``"NAME over time"``: the indices at every report time of the timeline (:data:`OVER_TIME`).

A name that is no time course, a time without a time unit, a negative or zero time or one beyond the end is
refused (:class:`~uncertainty.core.errors.StudyError`, exit 2) naming the key and
the value.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Any

from uncertainty.core import units
from uncertainty.core.errors import study_error
from uncertainty.physiology.whole_body import TIMELINE_UNITS

#: How an endpoint at a time is written: ``NAME at TIME``.
_AT = re.compile(r"^\s*(?P<name>\S+)\s+at\s+(?P<time>.+?)\s*$")
#: ``NAME over time``: every report time of the timeline (sensitivity only).
_OVER = re.compile(r"^\s*(?P<name>\S+)\s+over\s+time\s*$")
#: The word for "every report time" (``NAME over time``).
OVER_TIME = "over time"


@dataclass(frozen=True)
class TimePoint:
    """A time course of the ``whole_body`` form read at one time (or at every report time).

    Attributes
    ----------
    name : str
        The time course (a key of ``physiology.whole_body.TIMELINE_UNITS``).
    time_min : float or None
        The time, min (None: every report time, ``NAME over time``).
    text : str
        The endpoint as written (the output's label in results).
    """

    name: str
    time_min: float | None
    text: str

    @property
    def unit(self) -> str:
        """The time course's unit (``TIMELINE_UNITS``)."""
        return TIMELINE_UNITS[self.name]

    @property
    def label(self) -> str:
        """Canonical label: ``NAME at T min`` (or ``NAME over time``)."""
        return f"{self.name} {OVER_TIME}" if self.time_min is None else f"{self.name} at {self.time_min:g} min"


def is_time_endpoint(text: Any) -> bool:
    """True when ``text`` is written as a time-course endpoint (``NAME at TIME``, ``NAME over time``). A bare name
    is not (``lymph_flow`` is also an observation kind and a steady output).

    Parameters
    ----------
    text : Any
        An output or endpoint as written.

    Returns
    -------
    bool
    """
    return isinstance(text, str) and (bool(_AT.match(text)) or bool(_OVER.match(text)))


def _time_min(text: str, file: Any, key: str, value: str) -> float:
    """A time with its unit, in min; StudyError naming ``key`` and ``value`` otherwise."""
    try:
        q = units.registry().Quantity(text)
        t = float(q.to("min").magnitude)
    except Exception:  # pint raises several error kinds for a bad string or dimension
        raise study_error(f"the time {text!r} is not a time with its unit (e.g. '60 min', '2 h')", file, key,
                          value) from None
    if not math.isfinite(t):
        raise study_error("the time must be finite", file, key, value)
    return t


def parse_time_endpoint(text: str, timeline: Any, *, file: Any = None, key: str = "output",
                        over_time: bool = False) -> TimePoint | None:
    """The time course and time of an endpoint written ``NAME at TIME`` (or ``NAME over time``), checked.

    Parameters
    ----------
    text : str
        The output or endpoint as written.
    timeline : TimelinePlan or None
        The study's resolved ``[timeline]`` (``end`` in min); None for a study of another form.
    file : path-like, optional
        The study file, for messages.
    key : str
        Dotted key of the setting (``sensitivity.output``), for messages.
    over_time : bool
        Whether ``NAME over time`` is accepted (sensitivity).

    Returns
    -------
    TimePoint or None
        None when ``text`` is not written as a time-course endpoint (a steady output or a quantity).

    Raises
    ------
    StudyError
        (exit 2) A time-course endpoint in a study without a timeline; a name that is no time course; ``over time``
        where it is not offered; a time that is not a time with its unit, at or
        before 0, or after the timeline's end.
    """
    if not is_time_endpoint(text):
        return None
    names = ", ".join(TIMELINE_UNITS)
    if timeline is None:
        raise study_error("an endpoint at a time needs a whole_body study (model = \"whole_body\" with "
                          "[[interventions]] and [timeline])", file, key, text)
    over = _OVER.match(text)
    at = _AT.match(text)
    name = (over or at).group("name")  # type: ignore[union-attr]
    if name not in TIMELINE_UNITS:
        raise study_error(f"no such time course; the whole_body form reports {names}", file, key, text)
    if over is not None:
        if not over_time:
            raise study_error("\"over time\" is offered by sensitivity only; give one time, e.g. "
                              f"\"{name} at 60 min\"", file, key, text)
        return TimePoint(name, None, text)
    t = _time_min(at.group("time"), file, key, text)  # type: ignore[union-attr]
    end = float(timeline.end)
    if not 0.0 < t <= end + 1e-9:
        raise study_error(f"the time must lie after 0 and at or before the timeline's end ({end:g} min)", file,
                          key, text)
    return TimePoint(name, t, text)


def check_time_endpoints(sections: Any, timeline: Any, file: Any = None) -> None:
    """Check every endpoint at a time of a study's sections (``sensitivity.output``, ``rank.output``,
    ``design.endpoint``) against its resolved timeline.

    Parameters
    ----------
    sections : object
        With ``sensitivity``, ``rank`` and ``design`` attributes (section models or None), e.g. ``Sections`` of
        ``uncertainty.study.resolve`` or a ``Study``.
    timeline : TimelinePlan or None
        The resolved ``[timeline]``.
    file : path-like, optional
        The study file, for messages.

    Raises
    ------
    StudyError
        (exit 2) As :func:`parse_time_endpoint`.
    """
    for section, attr, over in (("sensitivity", "output", True), ("rank", "output", False),
                                ("design", "endpoint", False)):
        sec = getattr(sections, section, None)
        text = getattr(sec, attr, None) if sec is not None else None
        if isinstance(text, str):
            parse_time_endpoint(text, timeline, file=file, key=f"{section}.{attr}", over_time=over)


__all__ = ["OVER_TIME", "TimePoint", "check_time_endpoints", "is_time_endpoint",
           "parse_time_endpoint"]
