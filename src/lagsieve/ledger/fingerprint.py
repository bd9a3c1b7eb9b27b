"""What the ledger hashes: values, never files (files are hashed by
:func:`lagsieve.io.files.sha256_file`, in :mod:`lagsieve.ledger.update`).

* :func:`fingerprints`: per series and year, the annual value and a short hash of it; stored
  per run (table ``series_years``) to list the years added, filled in, restated or removed.
* :func:`digest_frame`: one hash of a whole table's values (the run key, the data hash).
* :func:`training_hash`: one hash of everything a forecast is made from (the model and the
  raw annual values of the cells it uses, :func:`used_values`); a forecast whose training
  hash changes is superseded.

Every hash is :func:`lagsieve.io.files.sha256_text` of a canonical text, and every value
enters as :func:`value_text` (the shortest repr that round-trips), so the hashes are stable
across platforms.
"""
from __future__ import annotations

import json

import numpy as np
import pandas as pd

from lagsieve.io.files import sha256_text

VALUE_SHA_CHARS = 16  # a per-cell hash needs to tell two values of one cell apart, no more


def value_text(v: float) -> str:
    """Canonical text of a value: the shortest repr that round-trips (stable across platforms)."""
    return repr(float(v))


def fingerprints(annual: pd.DataFrame) -> pd.DataFrame:
    """Per series and year: the annual value (before transforms), its standard error (nan when
    the input has none) and a hash of the value (the se does not enter it).

    ``annual`` is the tidy output of the `align` stage (columns series, year, value[, se]).
    """
    fp = annual.reindex(columns=["series", "year", "value", "se"]).dropna(subset=["value"]).copy()
    fp["year"] = fp["year"].astype(int)
    fp["value"] = fp["value"].astype(float)
    fp["se"] = fp["se"].astype(float)
    fp["value_sha"] = [sha256_text(f"{s}|{y}|{value_text(v)}")[:VALUE_SHA_CHARS]
                       for s, y, v in zip(fp["series"], fp["year"], fp["value"])]
    return fp.sort_values(["series", "year"]).reset_index(drop=True)


def digest_frame(df: pd.DataFrame) -> str:
    """SHA-256 of a table's header and values (CSV text, 10 significant digits)."""
    return sha256_text(df.to_csv(index=False, lineterminator="\n", float_format="%.10g"))


def used_values(response: str, driver: str, lag: int, fit_years: np.ndarray,
                origin_year: int) -> list[tuple[str, int]]:
    """The (series, year) cells a forecast is made from: the response in every fitted year and
    the year before it (persistence) and in T; the driver at every fitted year minus lag, and
    in T + 1 - lag."""
    ry = set(int(y) for y in fit_years) | set(int(y) - 1 for y in fit_years) | {int(origin_year)}
    dy = set(int(y) - lag for y in fit_years) | {int(origin_year) + 1 - lag}
    return sorted([(response, y) for y in ry] + [(driver, y) for y in dy])


def _cell_text(frame: pd.DataFrame, series: str, year: int) -> str | None:
    """One cell of a wide table as canonical text; None when the cell is missing."""
    v = frame[series].get(year, np.nan) if series in frame.columns else np.nan
    return None if pd.isna(v) else value_text(v)


def training_hash(raw: pd.DataFrame, transforms: dict[str, str], response: str, driver: str,
                  lag: int, baseline: str, cells: list[tuple[str, int]], raw_se: pd.DataFrame | None = None) -> str:
    """SHA-256 of everything a forecast is made from: the model (lag, baseline, transforms) and
    the raw annual values of its cells (a missing cell is written as null). ``raw`` is wide:
    years as index, one column per series, values before transforms. With ``raw_se`` (weighted
    fits) the response's standard errors in its cells are part of it too."""
    payload = {"response": response, "driver": driver, "lag": int(lag), "baseline": baseline,
               "transform": [transforms.get(response, "none"), transforms.get(driver, "none")],
               "cells": [[s, int(y), _cell_text(raw, s, y)] for s, y in cells]}
    if raw_se is not None:
        payload["se"] = [[s, int(y), _cell_text(raw_se, s, y)] for s, y in cells if s == response]
    return sha256_text(json.dumps(payload, sort_keys=True, separators=(",", ":")))
