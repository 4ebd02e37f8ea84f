"""Versions of sitrep and the libraries whose behaviour shapes the results (for the manifest)."""

from __future__ import annotations

import platform
from importlib.metadata import PackageNotFoundError, version

__all__ = ["RECORDED", "library_versions"]

RECORDED = (
    "sitrep",
    "numpy",
    "pandas",
    "scipy",
    "statsmodels",
    "shapely",
    "geopandas",
    "libpysal",
    "esda",
    "numba",
    "matplotlib",
    "jinja2",
    "weasyprint",
    "python-docx",
)


def library_versions() -> dict[str, str]:
    """Installed version of each recorded package ('not installed' when absent)."""
    out = {"python": platform.python_version()}
    for name in RECORDED:
        try:
            out[name] = version(name)
        except PackageNotFoundError:
            out[name] = "not installed"
    return out
