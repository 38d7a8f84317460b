"""How much work a request may ask for: counts bounded by the memory they would take.

``--samples 1e12`` or ``--trials 1e12`` would ask for tens of terabytes; they are refused with an
estimate of the memory before anything is allocated (exit 2), not left to fail inside numpy.
"""

from __future__ import annotations

import os

#: Memory budget when the machine's memory cannot be read, bytes (common practice: a laptop's 8 GB).
FALLBACK_MEMORY = 8 * 1024**3


def memory_budget() -> int:
    """Half of this machine's physical memory, bytes (the rest for the system and other programs).

    Returns
    -------
    int
        Bytes a single request may use.
    """
    try:
        total = os.sysconf("SC_PHYS_PAGES") * os.sysconf("SC_PAGE_SIZE")
    except (ValueError, OSError, AttributeError):
        total = FALLBACK_MEMORY
    return int(total) // 2 if total > 0 else FALLBACK_MEMORY // 2


def human_bytes(n: float) -> str:
    """A byte count as text: ``"20.5 TiB"``.

    Parameters
    ----------
    n : float
        A number of bytes.

    Returns
    -------
    str
        The count in B, KiB, MiB, GiB, TiB or PiB (three significant figures).
    """
    for unit in ("B", "KiB", "MiB", "GiB", "TiB"):
        if abs(n) < 1024:
            return f"{n:.3g} {unit}"
        n /= 1024
    return f"{n:.3g} PiB"


def memory_problem(count: int, bytes_each: int, what: str) -> str | None:
    """Why ``count`` items of ``bytes_each`` bytes would not fit in memory, or None when they fit.

    Parameters
    ----------
    count : int
        Number of draws, trials or base samples asked for.
    bytes_each : int
        Estimated memory per item, bytes (arrays of inputs, outputs and intermediate results).
    what : str
        The items ("draws", "trials"), for the message.

    Returns
    -------
    str or None
        A message with the estimate, the budget and the largest count that fits; None when it fits.
    """
    budget = memory_budget()
    need = count * bytes_each
    if need <= budget:
        return None
    return (f"{count:,} {what} would need about {human_bytes(need)} of memory (about {bytes_each:,} bytes each); "
            f"at most {max(budget // bytes_each, 1):,} fit in the {human_bytes(budget)} allowed (half of this "
            "machine's memory)")
