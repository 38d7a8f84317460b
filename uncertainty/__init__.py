"""fluidshift: uncertainty around net capillary filtration (Jv) from the Starling forces.

The Python API for notebooks (each analysis returns a result object with ``to_dict()``,
``to_dataframe()`` and ``plot(out_dir)``)::

    import uncertainty as fs
    study = fs.load_study("studies/demo.toml")
    fs.propagate(study).to_dataframe()

``load_study, propagate, sensitivity, infer, rank, design, schedule, run`` are resolved lazily on first
use, so ``import uncertainty`` stays light (no numpy, pymc or matplotlib until an analysis is called).
"""

from __future__ import annotations

import importlib
import os
import sys
from typing import Any


def _exact_numba_kernels() -> None:
    """Compile PyTensor's numba kernels without fast-math (PyTensor's default allows it), so that a seed gives the
    same draws on every run. With fast-math, a kernel compiled afresh and the same kernel loaded from PyTensor's
    disk cache rounded differently, and NUTS trajectories amplify the last bit: the demo's Jv 95 % interval started
    at 0.005376 on a fresh cache and at 0.005214 on the next run (same study and seed); without fast-math both
    runs gave 0.005234. Set before PyTensor reads its flags (``PYTENSOR_FLAGS``), or on its config when it is
    already imported; a user's own ``numba__fastmath`` flag is kept."""
    flags = os.environ.get("PYTENSOR_FLAGS", "")
    if "numba__fastmath" in flags:
        return
    if "pytensor" in sys.modules:
        sys.modules["pytensor"].config.numba__fastmath = False
    else:
        os.environ["PYTENSOR_FLAGS"] = ",".join(f for f in (flags, "numba__fastmath=False") if f)


_exact_numba_kernels()

#: API name -> module that defines the function of that name
API: dict[str, str] = {
    "load_study": "uncertainty.study",
    "propagate": "uncertainty.analyses.propagate",
    "sensitivity": "uncertainty.analyses.sensitivity",
    "infer": "uncertainty.analyses.inference",
    "rank": "uncertainty.analyses.rank",
    "design": "uncertainty.analyses.design",
    "schedule": "uncertainty.analyses.schedule",
    "run": "uncertainty.app.run",
}

__all__ = list(API)


def __getattr__(name: str) -> Any:
    """Resolve an API function on first use (PEP 562)."""
    if name in API:
        return getattr(importlib.import_module(API[name]), name)
    raise AttributeError(f"module 'uncertainty' has no attribute {name!r}")


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(API))
