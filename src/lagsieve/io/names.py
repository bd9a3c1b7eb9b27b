"""File names built from series ids: readable, and never the same for two different ids.

A series id (``SAFE_ID``: letters, digits, ``_ . -`` and one ``:`` between a series and its
group) becomes a file or folder name by :func:`slug`:

* a *plain* id (lower case letters and digits, single ``_ . -`` between them, one optional
  ``:group``) keeps its form, its ``:`` written ``--`` (``m:age2`` -> ``m--age2``); a plain id
  never holds ``--`` itself, so the form reads back to exactly one id;
* any other id (upper case, a doubled or trailing ``_ . -``, a name that a file system
  reserves, or a tail that repeats 20 times or more, which the workflow engine takes for
  a runaway pattern) keeps a readable form and gets ``~`` plus a short hash of the exact id:
  ``Temp`` -> ``Temp~8c1b...``, ``m--age2`` -> ``m--age2~...``.

``~`` never occurs in a plain form, so the two kinds cannot meet; and two different ids
differ in their hash. Names are compared without case (:func:`name_key`), as a
case-insensitive file system would: ``Temp`` and ``temp`` get different names.
A response and a driver are joined by ``__`` (:func:`pair_slug`); no slug holds ``__``, so
the joined name splits back into exactly one pair.
"""
from __future__ import annotations

import hashlib
import re

__all__ = ["PAIR_SEPARATOR", "SAFE_ID", "name_key", "pair_slug", "periodic", "slug"]

SAFE_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*(:[A-Za-z0-9][A-Za-z0-9_.-]*)?$")
PAIR_SEPARATOR = "__"
HASH_MARK = "~"
HASH_LENGTH = 10  # hex digits of sha256: a clash between two ids of one study is refused at check

_PART = r"[a-z0-9]+(?:[._-][a-z0-9]+)*"
_PLAIN = re.compile(rf"{_PART}(?::{_PART})?\Z")
# names Windows reserves whatever the extension (a folder 'nul' cannot be made there)
_RESERVED = {"con", "prn", "aux", "nul"} | {f"{p}{i}" for p in ("com", "lpt") for i in range(1, 10)}
# the workflow engine refuses a wildcard value whose tail repeats 20 times or more
# (snakemake.io.PeriodicityDetector: min_repeat=20)
_MIN_REPEAT = 20
_PERIODIC_TAIL = re.compile(r"(.+?)\1{%d,}\Z" % (_MIN_REPEAT - 1))


def periodic(text: str) -> bool:
    """True when the end of ``text`` is one piece repeated at least 20 times."""
    return len(text) >= _MIN_REPEAT and _PERIODIC_TAIL.search(text) is not None


def _digest(series_id: str) -> str:
    return hashlib.sha256(series_id.encode("utf-8")).hexdigest()[:HASH_LENGTH]


def _is_plain(series_id: str, readable: str) -> bool:
    return (_PLAIN.match(series_id) is not None and readable.split("--")[0] not in _RESERVED
            and not periodic(readable))


def slug(series_id: str) -> str:
    """The file-name form of a series id: readable, unique, safe as a workflow wildcard."""
    readable = series_id.replace(":", "--")
    if _is_plain(series_id, readable):
        return readable
    readable = re.sub(r"_{2,}", "_", readable).rstrip(".")
    return f"{readable}{HASH_MARK}{_digest(series_id)}"


def pair_slug(response_id: str, driver_id: str) -> str:
    """The file-name stem of one response x driver pair (its figures)."""
    return f"{slug(response_id)}{PAIR_SEPARATOR}{slug(driver_id)}"


def name_key(series_id: str) -> str:
    """What two names must not share: the slug without case (case-insensitive file systems)."""
    return slug(series_id).casefold()
