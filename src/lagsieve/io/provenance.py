"""Provenance: what was run, on what, with which versions, and when."""
from __future__ import annotations

import importlib.metadata as md
import platform

PACKAGES = ("lagsieve", "numpy", "scipy", "pandas", "statsmodels", "scikit-learn", "matplotlib",
            "seaborn", "snakemake", "jsonschema", "pyyaml")


def package_versions() -> dict[str, str]:
    out = {"python": platform.python_version()}
    for name in PACKAGES:
        try:
            out[name] = md.version(name)
        except md.PackageNotFoundError:
            out[name] = "not installed"
    return out


def tool_version() -> str:
    try:
        return md.version("lagsieve")
    except md.PackageNotFoundError:  # running from a source tree without install
        return "unknown"
