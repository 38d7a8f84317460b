"""Error types shared by every layer; the command line maps them to exit statuses.

Exit statuses (DESIGN.md section 5): 0 success, 2 bad input, 3 quality gate failed, 1 anything else.
"""

from __future__ import annotations

from typing import Any

#: Longest value an error message shows (characters of its repr); longer ones are cut with "...".
MAX_VALUE_CHARS = 200

#: Longest error line printed (characters): a message stays one readable line whatever the input.
MAX_LINE_CHARS = 600


def shorten(text: str, limit: int) -> str:
    """``text`` on one line (line breaks and other control characters as spaces), cut to ``limit`` characters.

    Parameters
    ----------
    text : str
        Any text.
    limit : int
        Largest number of characters kept (at least 4).

    Returns
    -------
    str
        The text, ending in ``...`` where it was cut.
    """
    flat = "".join(c if c.isprintable() else " " for c in str(text))
    return flat if len(flat) <= limit else flat[: max(limit - 3, 1)] + "..."


def short_value(value: Any) -> str:
    """The repr of ``value`` as a message shows it: at most :data:`MAX_VALUE_CHARS` characters.

    Parameters
    ----------
    value : Any
        The offending value.

    Returns
    -------
    str
        Its (shortened) repr.
    """
    try:
        text = repr(value) if not isinstance(value, str) or len(value) <= 4 * MAX_VALUE_CHARS \
            else repr(value[: 4 * MAX_VALUE_CHARS])
    except (ValueError, RecursionError):  # an int past Python's digit limit, a deeply nested list
        text = f"<{type(value).__name__}>"
    return shorten(text, MAX_VALUE_CHARS)


def one_line(message: str) -> str:
    """A message as the command line prints it: one line of at most :data:`MAX_LINE_CHARS` characters.

    Parameters
    ----------
    message : str
        The full message.

    Returns
    -------
    str
        The message on one line, shortened.
    """
    return shorten(message, MAX_LINE_CHARS)


class FluidshiftError(Exception):
    """Base class for errors the command line reports in one line, without a traceback."""

    exit_code: int = 1


class InputError(FluidshiftError):
    """Bad input: a study file, a key, a value or a command-line option.

    The message names the file (when there is one), the key path and the offending value.
    """

    exit_code = 2

    def __init__(self, message: str, *, file: str | None = None, key: str | None = None,
                 value: Any = None) -> None:
        self.file = file
        self.key = key
        self.value = value
        self.reason = message
        parts = []
        if file:
            parts.append(str(file))
        if key:
            parts.append(key)
        head = ": ".join(parts)
        shown = "" if value is None else f" (value: {short_value(value)})"
        super().__init__(f"{head}: {message}{shown}" if head else f"{message}{shown}")


class StudyError(InputError):
    """A study file (or a prior set it refers to) is malformed."""


class UnitError(InputError):
    """A value with a unit of the wrong dimension or basis for its quantity."""


class QualityGateError(FluidshiftError):
    """The analysis ran but a quality gate failed (unconverged chains, Monte Carlo error too large).

    ``result`` carries whatever was computed, so callers may still print or save it, flagged.
    """

    exit_code = 3

    def __init__(self, message: str, result: Any = None) -> None:
        self.result = result
        super().__init__(message)


def study_error(message: str, file: object, key: str | None, value: Any = None) -> StudyError:
    """A :class:`StudyError` naming ``file`` (any path-like, or None), the dotted ``key`` and ``value``."""
    return StudyError(message, file=str(file) if file else None, key=key, value=value)
