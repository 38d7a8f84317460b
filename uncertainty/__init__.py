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
from typing import Any

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
