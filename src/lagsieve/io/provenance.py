"""Provenance: what was run, on what, with which versions, and when.

The versions are read once per process (``functools.lru_cache``): a batch job writes the
provenance of many studies, and reading the installed packages' metadata cost each small
study's report about 10 ms of CPU (13 packages; the figures' content keys asked for the tool's
version once per figure too). The packages installed do not change while a job runs.
"""
from __future__ import annotations

import functools
import importlib.metadata as md
import platform

PACKAGES = ("lagsieve", "numpy", "scipy", "pandas", "statsmodels", "scikit-learn", "matplotlib",
            "seaborn", "snakemake", "jsonschema", "pyyaml")


@functools.lru_cache(maxsize=None)
def _version(name: str) -> str:
    try:
        return md.version(name)
    except md.PackageNotFoundError:
        return "not installed"


def package_versions(*extra: str) -> dict[str, str]:
    """Python's version and those of ``PACKAGES`` and then of ``extra`` (a stage's own libraries),
    'not installed' for a package that is not; a new dict every call."""
    out = {"python": platform.python_version()}
    for name in (*PACKAGES, *extra):
        out.setdefault(name, _version(name))
    return out


@functools.lru_cache(maxsize=None)
def tool_version() -> str:
    try:
        return md.version("lagsieve")
    except md.PackageNotFoundError:  # running from a source tree without install
        return "unknown"
