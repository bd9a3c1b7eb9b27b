"""Write the invented demo study to a folder: the four data files and TRUTH.md.

Every file goes through :func:`lagsieve.io.files.atomic_path` (a temporary name in the
folder, then a rename), so a reader never sees a half-written file.
"""
from __future__ import annotations

import os
from pathlib import Path

import pandas as pd

from lagsieve.demo.texts import truth_markdown
from lagsieve.demo.world import DEFAULT_SEED, DemoData, simulate_demo
from lagsieve.io.files import write_csv, write_text

__all__ = ["DEMO_FILES", "demo_files", "write_demo"]

#: File names written by :func:`write_demo` (data files first, in config input order).
DEMO_FILES = (
    "mortality_by_age.csv",
    "surveys_annual.csv",
    "indices_long.csv",
    "bottom_temperature_monthly.csv",
    "TRUTH.md",
)


def demo_files(data: DemoData) -> dict[str, pd.DataFrame | str]:
    """What each of DEMO_FILES holds: a frame (written as CSV) or the text of TRUTH.md."""
    return {
        "mortality_by_age.csv": data.mortality,
        "surveys_annual.csv": data.surveys_annual,
        "indices_long.csv": data.indices_long,
        "bottom_temperature_monthly.csv": data.bottom_temperature_monthly,
        "TRUTH.md": truth_markdown(data),
    }


def write_demo(outdir: str | os.PathLike, seed: int = DEFAULT_SEED) -> list[Path]:
    """Write the demo data files and ``TRUTH.md`` into ``outdir``; return their paths.

    The CSV files use the package's one CSV format (:func:`lagsieve.io.files.write_csv`:
    ``%.10g`` writes the rounded values as they are, 424 rather than 424.0; gaps are empty).
    """
    contents = demo_files(simulate_demo(seed))
    outdir = Path(outdir)
    paths = []
    for name in DEMO_FILES:
        path = outdir / name
        content = contents[name]
        if isinstance(content, str):
            write_text(content, path)
        else:
            write_csv(content, path)
        paths.append(path)
    return paths
