"""Where the shipped data folders are: priors/ and studies/.

In a wheel (and an editable install) they are the packages ``uncertainty.priors_data`` and
``uncertainty.studies_data`` (see ``[tool.setuptools.package-dir]`` in pyproject.toml). When the
package is imported straight from a source checkout, the top-level folders are used.
"""

from __future__ import annotations

import importlib
from pathlib import Path


def _folder(package: str, fallback: str) -> Path:
    # The data packages have no __init__.py (they are plain folders of TOML and CSV), so they
    # import as namespace packages: take the first directory on their __path__.
    try:
        module = importlib.import_module(package)
    except ModuleNotFoundError:
        module = None
    for entry in getattr(module, "__path__", []):
        if Path(entry).is_dir():
            return Path(entry)
    return Path(__file__).resolve().parents[2] / fallback


def priors_dir() -> Path:
    """Folder of the prior sets (``<tissue>.toml``, ``conditions.toml``, ``instruments.toml``)."""
    return _folder("uncertainty.priors_data", "priors")


def studies_dir() -> Path:
    """Folder of the bundled example studies (invented scenarios) and their data."""
    return _folder("uncertainty.studies_data", "studies")
