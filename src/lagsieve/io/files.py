"""Files the stages write and read: atomic writes (temporary name, then rename) and hashes.

Every output of lagsieve goes through :func:`atomic_path`, so a killed job never leaves a
half-written file under a final name; every SHA-256 digest of a file or a text is made here.
"""
from __future__ import annotations

import hashlib
import json
import os
import tempfile
from contextlib import contextmanager
from pathlib import Path
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # write_csv calls the frame's own to_csv: the planning of a run imports no pandas
    import pandas as pd


def _umask() -> int:
    """The process's umask (reading it means setting it, so it is set straight back)."""
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


TMP_SUFFIX = ".tmp"  # atomic_path's temporary files: .<name>.<random><TMP_SUFFIX> beside the file


def unfinished_copies(path: str | Path) -> list[Path]:
    """The temporary files :func:`atomic_path` left beside ``path`` (a process killed while it
    wrote, which removes nothing)."""
    path = Path(path)
    return sorted(path.parent.glob(f".{path.name}.*{TMP_SUFFIX}"))


@contextmanager
def atomic_path(path: str | Path):
    """Yield a temporary path beside ``path``; on success rename it into place."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=TMP_SUFFIX, dir=path.parent)
    try:  # from the file's first instant: a signal turned exception (SIGTERM) removes it
        os.close(fd)
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; a result is as readable as any new file
        yield Path(tmp)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def write_csv(df: pd.DataFrame, path: str | Path) -> None:
    with atomic_path(path) as tmp:
        df.to_csv(tmp, index=False, float_format="%.10g", lineterminator="\n")


def write_text(text: str, path: str | Path) -> None:
    with atomic_path(path) as tmp:
        Path(tmp).write_text(text, encoding="utf-8")


def write_json(obj, path: str | Path) -> None:
    write_text(json.dumps(obj, indent=2, sort_keys=True, default=str) + "\n", path)


def sha256_file(path: str | Path, chunk: int = 1 << 20) -> str:
    """SHA-256 hex digest of a file, read in chunks (the file is opened read-only)."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(chunk), b""):
            h.update(block)
    return h.hexdigest()


def sha256_text(text: str) -> str:
    """SHA-256 hex digest of a text (UTF-8)."""
    return hashlib.sha256(text.encode("utf-8")).hexdigest()
