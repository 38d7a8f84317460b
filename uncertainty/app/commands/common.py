"""Pieces every command shares: the standard options, JSON output and error reporting.

Errors derived from ``FluidshiftError`` are printed as one line on stderr and exit with their
status (2 bad input, 3 quality gate, 1 other); nothing else is printed on stdout under --json.
"""

from __future__ import annotations

import contextlib
import functools
import json
import math
import sys
from collections.abc import Callable
from typing import Any

import click

from uncertainty.core.errors import FluidshiftError, QualityGateError


def study_options(func: Callable) -> Callable:
    """Add the options every analysis command takes: STUDY, --seed, --json, --out, --quiet."""
    func = click.option("--quiet", is_flag=True, help="Print nothing but errors (and JSON with --json).")(func)
    func = click.option("--out", "out", type=click.Path(file_okay=False), default=None,
                        help="Folder for tables and figures.")(func)
    func = click.option("--json", "as_json", is_flag=True,
                        help="Print one JSON document on stdout and nothing else.")(func)
    func = click.option("--seed", type=int, default=None, help="Override the study's seed.")(func)
    func = click.argument("study", type=click.Path(dir_okay=False))(func)
    return func


def _clean(obj: Any) -> Any:
    """Make numpy scalars/arrays and non-finite floats JSON-safe (NaN -> null)."""
    try:
        import numpy as np
    except ImportError:  # pragma: no cover
        np = None
    if isinstance(obj, dict):
        return {str(k): _clean(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_clean(v) for v in obj]
    if np is not None:
        if isinstance(obj, np.ndarray):
            return _clean(obj.tolist())
        if isinstance(obj, np.generic):
            return _clean(obj.item())
    if isinstance(obj, float) and not math.isfinite(obj):
        return None
    return obj


def to_json(doc: dict[str, Any]) -> str:
    """Serialise a result document: snake_case keys, canonical units, NaN as null."""
    return json.dumps(_clean(doc), indent=2, sort_keys=False, allow_nan=False)


def emit_json(doc: dict[str, Any]) -> None:
    """Print one JSON document on stdout."""
    click.echo(to_json(doc))


@contextlib.contextmanager
def _libraries_silenced() -> Any:
    """For --quiet: hide the libraries' own chatter on stderr (PyMC's "Sampling: [...]" log lines,
    PyTensor's BLAS UserWarning and other warnings); our own error line is printed after this ends."""
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
    """Turn FluidshiftError into a one-line message and its exit status; no traceback."""

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            if kwargs.get("quiet"):
                with _libraries_silenced():
                    return func(*args, **kwargs)
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
