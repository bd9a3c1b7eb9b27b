"""Write the invented demo study to a folder: the data files and TRUTH.md
(:func:`write_demo`), and with its config a new study folder (:func:`write_study`, what
`lagsieve init` writes).

Every file goes through :func:`lagsieve.io.files.atomic_path` (a temporary name in the
folder, then a rename), so a reader never sees a half-written file. :func:`write_study` never
replaces a file: it refuses, with one line listing them, when any of its files exists, and
puts each file in place with a link that fails rather than overwrite one made meanwhile.
"""
from __future__ import annotations

import errno
import os
import tempfile
from pathlib import Path

import pandas as pd

from lagsieve.demo.estimates import draws_table, vintages_table
from lagsieve.demo.texts import demo_config_text, truth_markdown
from lagsieve.demo.world import DEFAULT_SEED, DemoData, simulate_demo
from lagsieve.errors import InputErrors, fail, show
from lagsieve.io.files import write_csv, write_text
from lagsieve.io.lock import make_folder, os_problem

__all__ = ["CONFIG_NAME", "DATA_FOLDER", "DEMO_FILES", "demo_files", "study_files", "write_demo",
           "write_study"]

CONFIG_NAME = "config.yaml"
DATA_FOLDER = "data"
# os.link's errors on a file system without hard links (then a checked rename is used)
NO_HARD_LINKS = (errno.EPERM, errno.ENOTSUP, errno.EOPNOTSUPP, errno.EXDEV, errno.EMLINK)

#: File names written by :func:`write_demo` (data files first, in config input order).
DEMO_FILES = (
    "mortality_by_age.csv",
    "surveys_annual.csv",
    "indices_long.csv",
    "bottom_temperature_monthly.csv",
    "fish_samples.csv",
    "m_age5plus_draws.csv",
    "m_age5plus_vintages.csv",
    "TRUTH.md",
)


def demo_files(data: DemoData) -> dict[str, pd.DataFrame | str]:
    """What each of DEMO_FILES holds: a frame (written as CSV) or the text of TRUTH.md."""
    return {
        "mortality_by_age.csv": data.mortality,
        "surveys_annual.csv": data.surveys_annual,
        "indices_long.csv": data.indices_long,
        "bottom_temperature_monthly.csv": data.bottom_temperature_monthly,
        "fish_samples.csv": data.fish,
        "m_age5plus_draws.csv": draws_table(data.mortality, data.seed),
        "m_age5plus_vintages.csv": vintages_table(data.mortality, data.seed),
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


def study_files(folder: str | os.PathLike) -> list[Path]:
    """The files :func:`write_study` writes into ``folder``: the config, then the data files."""
    folder = Path(folder)
    return [folder / CONFIG_NAME] + [folder / DATA_FOLDER / name for name in DEMO_FILES]


def _place(src: Path, dest: Path) -> None:
    """Move ``src`` to ``dest``; FileExistsError, and nothing moved, if ``dest`` exists."""
    try:
        os.link(src, dest)  # fails if dest exists, even one made a moment ago
    except OSError as exc:  # a file system without hard links: check, then rename
        if exc.errno not in NO_HARD_LINKS:
            raise
        if os.path.lexists(dest):
            raise FileExistsError(errno.EEXIST, "exists", str(dest)) from None
        os.rename(src, dest)
        return
    src.unlink()


def _refuse_existing(folder: Path) -> None:
    if folder.exists() and not folder.is_dir():
        fail("this is a file, not a folder", "give the name of a new folder for the study: lagsieve init DIR",
             file=show(str(folder), 300))
    existing = [p for p in study_files(folder) if os.path.lexists(p)]
    if existing:
        names = ", ".join(show(str(p.relative_to(folder)), 80) for p in existing)
        fail(f"{len(existing)} of the files init writes exist already ({names})",
             "init never overwrites a file: give a new or empty folder (lagsieve init NEWDIR)",
             file=show(str(folder), 300))


def write_study(folder: str | os.PathLike, seed: int = DEFAULT_SEED) -> Path:
    """Write a new study into ``folder``: ``config.yaml`` and the demo data in ``data/``; return
    the config's path. Never overwrites: :class:`InputErrors` (one line) when the folder is a
    file, when any of its files exists (listed), or when the folder cannot be written."""
    folder = Path(folder)
    _refuse_existing(folder)
    fix = "give another folder: lagsieve init DIR"
    make_folder(folder, "the study folder cannot be made", fix)
    try:
        with tempfile.TemporaryDirectory(prefix=".lagsieve-init-", dir=folder) as tmp:
            staged = Path(tmp)
            write_demo(staged / DATA_FOLDER, seed)
            write_text(demo_config_text(DATA_FOLDER), staged / CONFIG_NAME)
            (folder / DATA_FOLDER).mkdir(exist_ok=True)
            for src, dest in zip(study_files(staged), study_files(folder)):
                _place(src, dest)
    except OSError as exc:
        if isinstance(exc, FileExistsError):
            _refuse_existing(folder)  # made by someone else while init wrote: name them
        where = exc.filename or folder  # e.g. data/ that is a file
        raise InputErrors([os_problem(exc, where, "the study folder cannot be written", fix)]) from None
    return folder / CONFIG_NAME
