"""Reading an input file safely: a regular file of bounded size, never a FIFO, device, folder or loop.

A study path that is a FIFO would block forever, a symlink to ``/dev/zero`` would read until memory
runs out, and a folder or a symlink loop is not "not found". :func:`read_limited` looks at what the
path is before opening it, opens it without blocking and reads at most ``limit + 1`` bytes, so no
input can hang the program or exhaust its memory. Errors are :class:`InputError` (exit 2) naming the
file; nothing of the file's content is shown.
"""

from __future__ import annotations

import errno
import os
import stat
from pathlib import Path

from uncertainty.core.errors import InputError

#: Largest study or prior-set file read, bytes. A study is a few kilobytes of hand-written TOML (the
#: bundled ones are under 10 kB); 1 MB is a hundred times that (common practice: an absurdity bound).
MAX_STUDY_BYTES = 1_000_000

#: Largest data file (CSV) read, bytes: 200 MB holds millions of readings, more than any study of
#: subjects collects (common practice: an absurdity bound that still fits in memory).
MAX_DATA_BYTES = 200_000_000


def _size_text(n: int) -> str:
    return f"{n / 1e6:g} MB" if n >= 1_000_000 else f"{n / 1e3:g} kB"


def read_limited(path: str | os.PathLike[str], limit: int, *, what: str = "file",
                 label: str | None = None, key: str | None = None, value: object = None) -> bytes:
    """Read a regular file of at most ``limit`` bytes.

    Parameters
    ----------
    path : str or PathLike
        The file (symlinks are followed).
    limit : int
        Largest size accepted, bytes.
    what : str
        What the file is, for messages ("study file", "data file").
    label : str, optional
        The file the error names (default ``path``); a data file's errors name the study file.
    key, value : optional
        Key path and value the error names (a data file's ``observations[i].file``).

    Returns
    -------
    bytes
        The file's content.

    Raises
    ------
    InputError
        (exit 2) The path does not exist, is a folder, a FIFO, a device or a socket, is a symlink loop,
        cannot be read, or is larger than ``limit``.
    """
    p = Path(path)
    where = label if label is not None else str(p)

    def fail(reason: str) -> InputError:
        return InputError(reason, file=where, key=key, value=value)

    try:
        st = os.stat(p)
    except FileNotFoundError:
        raise fail(f"no such {what}") from None
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            raise fail(f"the {what} path is a symbolic-link loop") from None
        if exc.errno == errno.ENOTDIR:
            raise fail(f"no such {what} (a part of the path is not a folder)") from None
        raise fail(f"cannot read the {what} ({exc.strerror or type(exc).__name__})") from None
    if stat.S_ISDIR(st.st_mode):
        raise fail(f"the {what} path is a folder, not a file") from None
    if not stat.S_ISREG(st.st_mode):
        raise fail(f"the {what} is not a regular file (a FIFO, device or socket is refused)") from None
    if st.st_size > limit:
        raise fail(f"the {what} is {_size_text(st.st_size)}, larger than the {_size_text(limit)} "
                   "accepted") from None
    try:
        fd = os.open(p, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    except OSError as exc:
        raise fail(f"cannot read the {what} ({exc.strerror or type(exc).__name__})") from None
    try:
        if not stat.S_ISREG(os.fstat(fd).st_mode):  # replaced between stat and open
            raise fail(f"the {what} is not a regular file") from None
        chunks: list[bytes] = []
        size = 0
        while size <= limit:
            try:
                chunk = os.read(fd, min(1 << 20, limit + 1 - size))
            except OSError as exc:
                raise fail(f"cannot read the {what} ({exc.strerror or type(exc).__name__})") from None
            if not chunk:
                break
            chunks.append(chunk)
            size += len(chunk)
    finally:
        os.close(fd)
    if size > limit:
        raise fail(f"the {what} is larger than the {_size_text(limit)} accepted") from None
    return b"".join(chunks)
