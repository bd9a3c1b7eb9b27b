"""Provenance: what was run, on what, with which versions, and when."""
from __future__ import annotations

import hashlib
import importlib.metadata as md
import platform
from pathlib import Path

PACKAGES = ("lagsieve", "numpy", "scipy", "pandas", "statsmodels", "scikit-learn", "matplotlib",
            "seaborn", "snakemake", "jsonschema", "pyyaml")


def sha256_file(path: str | Path, chunk: int = 1 << 20) -> str:
    """SHA-256 hex digest of a file, read in chunks (the file is opened read-only)."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(chunk), b""):
            h.update(block)
    return h.hexdigest()


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
