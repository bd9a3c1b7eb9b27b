"""The screen's per-response cache: a response's tables are kept with the content key they
were made from, and a later screen job whose key for that response is the same copies them
instead of screening again.

The screen is one Snakemake job per study (``rules/screen.smk``), which reruns whenever one of
its responses' inputs or settings changes; the cache keeps the reruns per response. The key
(:func:`response_key`) is made of what the response's screen reads and of the code that reads
it: the digest of its settings (:func:`lagsieve.stages.digest.settings_digest`), the bytes of
exactly the input files it reads and of its rows of condition.csv, and the code
(:func:`code_digest`: every ``.py`` source of the installed lagsieve package, the config schema
whose defaults fill the settings, and the versions of Python, numpy, scipy and pandas), so that results are never reused across a code change.

A folder per response, ``work/cache/screen/<response>/``, outside Snakemake's declared outputs
(Snakemake deletes a job's outputs before it runs): the five tables and ``key.json``. An entry
is written only when the response's screen succeeded, in a temporary folder beside it that is
renamed into place (:func:`store`), and only the latest entry of a response is kept.
"""
from __future__ import annotations

import functools
import hashlib
import json
import os
import platform
import shutil
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import scipy

from lagsieve.io.config import SCHEMA_FILE, Study
from lagsieve.io.files import TMP_SUFFIX, atomic_path, sha256_file, sha256_text
from lagsieve.stages.common import condition_table
from lagsieve.stages.digest import settings_digest

#: The tables of one response's screen (work/responses/<response>/), the rule's outputs.
TABLES = ("screen.csv", "hypotheses.csv", "forecasts.csv", "nulls.csv", "paired.csv")
KEY_FILE = "key.json"
KEY_FORMAT = 1  # raise when what the key holds changes


def sources_digest(root: Path) -> str:
    """SHA-256 of every ``.py`` file under ``root``: its path (relative) and its bytes."""
    h = hashlib.sha256()
    for path in sorted(root.rglob("*.py")):
        if "__pycache__" not in path.parts:
            h.update(path.relative_to(root).as_posix().encode() + b"\0" + path.read_bytes() + b"\0")
    return h.hexdigest()


@functools.lru_cache(maxsize=1)
def code_digest() -> str:
    """A digest of the code that screens: the installed lagsieve package's ``.py`` sources
    (:func:`sources_digest`), the config schema whose defaults fill what a config leaves out
    (:data:`lagsieve.io.config.SCHEMA_FILE`: the settings digest is of the config as written) and
    the versions of Python, numpy, scipy and pandas. Once per process."""
    package = Path(__file__).resolve().parents[1]
    versions = [platform.python_version(), np.__version__, scipy.__version__, pd.__version__]
    return sha256_text(json.dumps([sources_digest(package), sha256_file(SCHEMA_FILE), versions]))


def input_digests(study: Study, files: list[str]) -> list[list[str]]:
    """[path as the config writes it, SHA-256 of its bytes] of each input in ``files`` (the
    inputs a response's screen reads: :func:`lagsieve.stages.screen.response_long`), in the
    config's order."""
    keep = {str(Path(f).resolve()) for f in files}
    return [[spec["path"], sha256_file(p)] for spec, p in zip(study.inputs, study.input_paths())
            if str(p.resolve()) in keep]


def condition_digest(condition, wanted: set[str]) -> str | None:
    """SHA-256 of the rows of condition.csv (``condition``: its path, or a list of none or one)
    whose series are in ``wanted``, as the screen reads them; None without the file."""
    table = condition_table(condition)
    if table is None:
        return None
    mine = table[table["series"].isin(sorted(wanted))]
    return sha256_text(mine.to_csv(index=False, lineterminator="\n"))


def response_key(study: Study, response: str, files: list[str], condition, wanted: set[str]) -> dict:
    """The content key of one response's screen (``response``: its id or slug; ``files`` and
    ``condition``: the inputs its screen reads; ``wanted``: its series)."""
    return {"format": KEY_FORMAT, "settings": settings_digest(study, "screen", response),
            "inputs": input_digests(study, files), "condition": condition_digest(condition, wanted),
            "code": code_digest()}


def stored(entry: Path, key: dict) -> bool:
    """Whether the cache folder ``entry`` holds every table under the key ``key``."""
    try:
        held = json.loads((entry / KEY_FILE).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return False
    return held == key and all((entry / name).is_file() for name in TABLES)


def staging(cache: Path, name: str) -> Path:
    """A new temporary folder in ``cache`` for the entry ``name`` (see :func:`store`)."""
    cache.mkdir(parents=True, exist_ok=True)
    return Path(tempfile.mkdtemp(prefix=f".{name}.", suffix=TMP_SUFFIX, dir=cache))


def store(folder: Path, key: dict, entry: Path) -> None:
    """Make the finished temporary ``folder`` (from :func:`staging`) the cache ``entry`` with
    its ``key``: the key written last, the folder renamed into place, an earlier entry removed."""
    with atomic_path(folder / KEY_FILE) as tmp:
        Path(tmp).write_text(json.dumps(key, sort_keys=True) + "\n", encoding="utf-8")
    old = None
    if entry.exists():
        old = Path(tempfile.mkdtemp(prefix=f".{entry.name}.old.", suffix=TMP_SUFFIX, dir=entry.parent))
        os.replace(entry, old / entry.name)
    os.replace(folder, entry)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def restore(entry: Path, out: Path) -> None:
    """Copy the tables of the cache ``entry`` to the response's output folder ``out``."""
    for name in TABLES:
        with atomic_path(out / name) as tmp:
            shutil.copyfile(entry / name, tmp)


def tidy(cache: Path, responses) -> None:
    """Remove from ``cache`` the temporary folders a killed screen left and the entries of
    responses no longer in the study (``responses``: the slugs of those that are)."""
    if not cache.is_dir():
        return
    keep = set(responses)
    for folder in cache.iterdir():
        if folder.is_dir() and (folder.name.endswith(TMP_SUFFIX) or folder.name not in keep):
            shutil.rmtree(folder, ignore_errors=True)
