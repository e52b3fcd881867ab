"""Versions of Python and of the packages tiltopt's results depend on: the one list every file people keep
records (run.json and the Parquet metadata, the explorer page, the build sheet)."""
from __future__ import annotations

import platform
from importlib import metadata

#: distributions whose versions a result records (None where one is not installed: dask is an extra)
PACKAGES = ("tiltopt", "numpy", "scipy", "numba", "pandas", "pyarrow", "pymoo", "plotly", "ezdxf", "dask",
            "distributed")


def package_versions() -> dict:
    """``{"python": ..., package: version or None}`` for :data:`PACKAGES`."""
    out = {"python": platform.python_version()}
    for name in PACKAGES:
        try:
            out[name] = metadata.version(name)
        except metadata.PackageNotFoundError:
            out[name] = None
    return out
