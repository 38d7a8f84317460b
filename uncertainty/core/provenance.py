"""Where numbers came from: the package version, a hash of its sources, dependency versions.

Used by the results bundle (its provenance block and section keys) and by any analysis that keys a
cache on the code that computed it (design's checkpoints), so none of them import the app layer.
"""

from __future__ import annotations

import functools
import hashlib
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path

#: dependencies whose versions go into the provenance (looked up by distribution metadata only).
DEPENDENCIES = ("numpy", "scipy", "SALib", "pymc", "pytensor", "arviz", "nutpie", "pint", "pydantic",
                "click", "rich", "matplotlib", "pandas", "xarray", "netCDF4", "h5netcdf", "dask")


def versions() -> dict[str, str | None]:
    """Installed versions of the dependencies, without importing them.

    Returns
    -------
    dict of str to str or None
        Distribution name -> its installed version, None when it is not installed.
    """
    out: dict[str, str | None] = {}
    for name in DEPENDENCIES:
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = None
    return out


@functools.lru_cache(maxsize=1)
def code_hash() -> str:
    """SHA-256 over the package's Python sources (sorted paths and bytes).

    A code change within one version number must not reuse results computed by the old code.

    Returns
    -------
    str
        64 hexadecimal digits.
    """
    root = Path(__file__).resolve().parents[1]  # the uncertainty package
    h = hashlib.sha256()
    for f in sorted(root.rglob("*.py")):
        h.update(str(f.relative_to(root)).encode("utf-8"))
        h.update(f.read_bytes())
    return h.hexdigest()


def package_version() -> str:
    """Version of the installed fluidshift distribution.

    Returns
    -------
    str
        The version, or "0+unknown" when running from a bare source tree.
    """
    try:
        return version("fluidshift")
    except PackageNotFoundError:
        return "0+unknown"
