"""A long step without progress of its own (a model's compile, the checks after sampling) shown on the terminal.

On a terminal the step's line has a spinner and the time elapsed while it runs, and is replaced by one line that
says it ended and how long it took; redirected to a file or a pipe (or not asked for), nothing is written.
"""

from __future__ import annotations

import contextlib
import sys
import time
from collections.abc import Iterator


@contextlib.contextmanager
def stage(show: bool, doing: str, done: str) -> Iterator[None]:
    """Show ``doing`` with a spinner and the elapsed time on stderr while the ``with`` block runs, then ``done``
    and the seconds it took (a terminal only; nothing when ``show`` is false or stderr is not a terminal).

    Parameters
    ----------
    show : bool
        Whether the caller wants progress shown (e.g. not with ``--quiet`` or ``--json``).
    doing : str
        What runs, e.g. ``"compiling the model"``.
    done : str
        What ran, printed with its duration in s when the block ends without an error.
    """
    if not (show and sys.stderr.isatty()):
        yield
        return
    from rich.console import Console
    from rich.progress import Progress, SpinnerColumn, TextColumn, TimeElapsedColumn

    console = Console(stderr=True)
    t0 = time.perf_counter()
    with Progress(SpinnerColumn(), TextColumn("{task.description}"), TimeElapsedColumn(), transient=True,
                  console=console) as bar:
        bar.add_task(doing, total=None)
        yield
    console.print(f"{done} in {time.perf_counter() - t0:.0f} s", highlight=False)


__all__ = ["stage"]
