"""Error types shared by every layer; the command line maps them to exit statuses.

Exit statuses (DESIGN.md section 5): 0 success, 2 bad input, 3 quality gate failed, 1 anything else.
"""

from __future__ import annotations

from typing import Any


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
        shown = "" if value is None else f" (value: {value!r})"
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
