"""Pieces every command shares: the standard options, JSON output and error reporting.

Errors derived from ``FluidshiftError`` are printed as one line on stderr and exit with their
status (2 bad input, 3 quality gate, 1 other); nothing else is printed on stdout under --json.
"""

from __future__ import annotations

import contextlib
import functools
import sys
from collections.abc import Callable
from typing import Any

import click

from uncertainty.analyses.result import Result
from uncertainty.core.errors import FluidshiftError, QualityGateError
from uncertainty.core.serialise import to_json


def study_options(func: Callable) -> Callable:
    """Add the options every analysis command takes: STUDY, --seed, --json, --out, --quiet, --verbose."""
    return click.argument("study", type=click.Path(dir_okay=False))(_shared_options(func))


def studies_options(func: Callable) -> Callable:
    """As :func:`study_options`, with one or more study files (STUDY..., a tuple ``studies``)."""
    return click.argument("studies", nargs=-1, required=True, type=click.Path(dir_okay=False))(_shared_options(func))


def _shared_options(func: Callable) -> Callable:
    func = click.option("--verbose", is_flag=True,
                        help="Show the libraries' own messages (PyMC, PyTensor warnings), hidden by default.")(func)
    func = click.option("--quiet", is_flag=True, help="Print nothing but errors (and JSON with --json).")(func)
    func = click.option("--out", "out", type=click.Path(file_okay=False), default=None,
                        help="Folder for tables and figures.")(func)
    func = click.option("--json", "as_json", is_flag=True,
                        help="Print one JSON document on stdout and nothing else.")(func)
    func = click.option("--seed", type=int, default=None, help="Override the study's seed.")(func)
    return func


def emit_json(doc: dict[str, Any]) -> None:
    """Print one JSON document on stdout (the one serialiser: snake_case keys, NaN as null).

    Parameters
    ----------
    doc : dict
        A result document (canonical units).
    """
    click.echo(to_json(doc))


def show_result(result: Result, *, as_json: bool, out: str | None, quiet: bool) -> None:
    """The output block every analysis command shares.

    With ``out`` the result's tables (``save``) and figures (``plot``) go into that folder; then
    either its JSON document on stdout (``as_json``) or, unless ``quiet``, its plain-text table and
    the result's note of where the files went.

    Parameters
    ----------
    result : Result
        The analysis result (also a quality-gate-flagged one, before the error is raised).
    as_json : bool
        Print the JSON document and nothing else.
    out : str or None
        Folder for tables and figures.
    quiet : bool
        Print nothing (JSON still printed with ``as_json``).
    """
    if out:
        result.save(out)
        result.plot(out)
    if as_json:
        emit_json(result.to_dict())
    elif not quiet:
        click.echo(result.table())
        if out and result.saved_note:
            click.echo(result.saved_note.format(out=out))


@contextlib.contextmanager
def _libraries_silenced() -> Any:
    """Hide the libraries' own chatter on stderr (PyMC's "Sampling: [...]" log lines, PyTensor's BLAS
    UserWarning and other warnings) unless --verbose; our own messages are printed with click, and the
    error line after this ends."""
    import logging
    import warnings

    previous = logging.root.manager.disable
    logging.disable(logging.WARNING)  # a level, not a logger setting: pymc resets its logger on import
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            yield
    finally:
        logging.disable(previous)


def handle_errors(func: Callable) -> Callable:
    """Turn FluidshiftError into a one-line message and its exit status; no traceback. Library chatter is
    hidden unless the command was given ``--verbose`` (that option is consumed here)."""

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            if kwargs.pop("verbose", False):
                return func(*args, **kwargs)
            with _libraries_silenced():
                return func(*args, **kwargs)
        except QualityGateError as exc:
            click.echo(f"fluidshift: quality gate failed: {exc}", err=True)
            sys.exit(exc.exit_code)
        except FluidshiftError as exc:
            click.echo(f"fluidshift: error: {exc}", err=True)
            sys.exit(exc.exit_code)
        except KeyboardInterrupt:
            click.echo("fluidshift: interrupted", err=True)
            sys.exit(130)

    return wrapper
