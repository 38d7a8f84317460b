"""Where the shipped data folders are: priors/ and studies/.

In a wheel (and an editable install) they are the packages ``uncertainty.priors_data`` and
``uncertainty.studies_data`` (see ``[tool.setuptools.package-dir]`` in pyproject.toml). When the
package is imported straight from a source checkout, the top-level folders are used.
"""

from __future__ import annotations

import importlib.resources
from pathlib import Path


def _folder(package: str, fallback: str) -> Path:
    try:
        found = Path(str(importlib.resources.files(package)))
        if found.is_dir():
            return found
    except ModuleNotFoundError:
        pass
    return Path(__file__).resolve().parent.parent / fallback


def priors_dir() -> Path:
    """Folder of the prior sets (``<tissue>.toml``, ``conditions.toml``, ``instruments.toml``)."""
    return _folder("uncertainty.priors_data", "priors")


def studies_dir() -> Path:
    """Folder of the bundled example studies (invented scenarios) and their data."""
    return _folder("uncertainty.studies_data", "studies")
