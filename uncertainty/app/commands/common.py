"""Pieces every command shares: the standard options, JSON output and error reporting.

Errors derived from ``FluidshiftError`` are printed as one line on stderr and exit with their
status (2 bad input, 3 quality gate, 1 other); nothing else is printed on stdout under --json.
"""

from __future__ import annotations

import contextlib
import functools
import math
import sys
from collections.abc import Callable
from typing import Any

import click

from uncertainty.analyses.result import Result
from uncertainty.core.errors import FluidshiftError, InputError, QualityGateError, one_line
from uncertainty.core.limits import memory_problem
from uncertainty.core.parallel import make_executor
from uncertainty.core.serialise import to_json


def study_options(func: Callable) -> Callable:
    """Add the options every analysis command takes: STUDY, --seed, --json, --out, --quiet, --verbose."""
    # any path: the study reader says in one line what is wrong with a folder, a FIFO or a missing file
    return click.argument("study", type=click.Path())(_shared_options(func))


def studies_options(func: Callable) -> Callable:
    """As :func:`study_options`, with one or more study files (STUDY..., a tuple ``studies``)."""
    return click.argument("studies", nargs=-1, required=True, type=click.Path())(_shared_options(func))


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


#: Estimated memory per unit of work, bytes (estimates, common practice: the arrays each keeps).
#: propagate: the cube row and every output in both layers, with evaluation temporaries (~1 KiB a draw);
#: sensitivity: a Sobol' base sample evaluates 2k + 2 rows of inputs and outputs (~16 KiB);
#: rank: a prior draw, its simulated readings for each candidate and the regressions (~2 KiB);
#: design: one simulated trial's subjects and its fitted estimates (~4 KiB).
PROPAGATE_BYTES = 1024
SENSITIVITY_BYTES = 16 * 1024
RANK_BYTES = 2 * 1024
TRIAL_BYTES = 4 * 1024


class Count(click.ParamType):
    """A positive whole number of draws, trials or samples, bounded by the memory it would take.

    Accepts ``4096``, ``1e6`` or ``1_000_000``; refuses (exit 2, one line naming the option) a number that
    is not whole, not positive, or whose estimated memory exceeds the budget of
    :func:`uncertainty.core.limits.memory_budget`, with the estimate in the message.
    """

    name = "count"

    def __init__(self, bytes_each: int, what: str = "draws") -> None:
        self.bytes_each = bytes_each
        self.what = what

    def convert(self, value: Any, param: click.Parameter | None, ctx: click.Context | None) -> int:
        """The count as an int; InputError (exit 2) for a bad or too large one."""
        if isinstance(value, int) and not isinstance(value, bool):
            n = value
        else:
            text = str(value).strip().replace("_", "")
            try:
                n = int(text)
            except ValueError:
                try:
                    x = float(text)
                except ValueError:
                    x = math.nan
                if not math.isfinite(x) or x != int(x):
                    raise InputError("expected a whole number", key=self._key(param), value=value) from None
                n = int(x)
        if n <= 0:
            raise InputError("must be positive", key=self._key(param), value=value)
        problem = memory_problem(n, self.bytes_each, self.what)
        if problem is not None:
            raise InputError(problem, key=self._key(param), value=value)
        return n

    @staticmethod
    def _key(param: click.Parameter | None) -> str:
        return f"--{param.name.replace('_', '-')}" if param is not None and param.name else "count"


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


def run_and_show(analysis: Callable[..., Result], study: Any, opts: dict[str, Any], *, workers: int | None,
                 scheduler: str | None, as_json: bool, out: str | None, quiet: bool, progress: bool = False) -> Result:
    """``analysis(study, **opts)`` here, or with ``executor=`` a dask cluster when ``workers`` or ``scheduler``
    is given; its result shown by :func:`show_result`, also one a quality gate stopped (whose error is then
    raised again: exit 3).

    Parameters
    ----------
    analysis : callable
        The analysis function (takes the study, ``opts`` and, on a cluster, ``executor``).
    study : Study
        The loaded study.
    opts : dict
        Keyword arguments of the analysis.
    workers, scheduler : int or str, optional
        A local cluster of this many workers, or a running scheduler's address (``make_executor``).
    as_json, out, quiet : as :func:`show_result`.
    progress : bool
        Show the executor's progress bar (on a terminal).

    Returns
    -------
    Result
        The analysis result.

    Raises
    ------
    QualityGateError
        The analysis stopped at its gate or cap (exit 3), after its result was shown.
    """
    try:
        if workers is None and scheduler is None:
            result = analysis(study, **opts)
        else:
            with make_executor(workers, scheduler, progress=progress) as ex:
                result = analysis(study, **opts, executor=ex)
    except QualityGateError as exc:  # a gate or cap stopped it: show what was computed, then exit 3
        if exc.result is not None:
            show_result(exc.result, as_json=as_json, out=out, quiet=quiet)
        raise
    show_result(result, as_json=as_json, out=out, quiet=quiet)
    return result


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
            click.echo(one_line(f"fluidshift: quality gate failed: {exc}"), err=True)
            sys.exit(exc.exit_code)
        except FluidshiftError as exc:
            click.echo(one_line(f"fluidshift: error: {exc}"), err=True)
            sys.exit(exc.exit_code)
        except KeyboardInterrupt:
            click.echo("fluidshift: interrupted", err=True)
            sys.exit(130)

    return wrapper
