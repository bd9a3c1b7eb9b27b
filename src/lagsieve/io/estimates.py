"""Tables that describe a response as an estimate: its draws and its vintages.

* draws (response key ``draws``): a long table with the columns ``draw`` (a whole number
  naming a posterior sample or bootstrap replicate), ``year`` and ``value``; every draw holds
  every year of the table.
* vintages (response key ``vintages``): a long table with the columns ``vintage`` (the year
  of the assessment that published the value), ``year`` and ``value``; an assessment cannot
  publish a year after its own.

Column names are matched case-insensitively; other columns are ignored. Every problem is one
line (file, row, what is wrong, how to fix it) through :class:`lagsieve.errors.InputErrors`.
"""
from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

from lagsieve.errors import InputErrors, show
from lagsieve.io.cells import Collector, header_name, is_missing, parse_number
from lagsieve.io.readers import read_grid

_FIX_WHOLE = "write a whole number such as 12"


def _whole(cell, name: str, decimal: str) -> tuple[int | None, str | None]:
    """(whole number, None) or (None, what is wrong) for one cell."""
    if is_missing(cell):
        return None, f"{name} is empty"
    x, prob = parse_number(cell, decimal, name)
    if prob:
        return None, prob[0]
    if not float(x).is_integer():
        return None, f"{name} '{show(cell)}' is not a whole number"
    return int(x), None


def _columns(header: list, key: str, col: Collector, row: int) -> dict[str, int]:
    """Positions of ``key``, year and value; the missing ones reported (fatal)."""
    names = {header_name(h).lower(): j for j, h in enumerate(header)}
    missing = [c for c in (key, "year", "value") if c not in names]
    if missing:
        col.fatal(f"the table has no {', '.join(missing)} column", f"write a header with the columns {key}, "
                  "year and value (one row per " + key + " and year)", row=row)
    return {c: names[c] for c in (key, "year", "value")}


def _row_cells(cells: list, pos: dict[str, int], key: str, decimal: str, r: int, col: Collector,
               series: str) -> dict | None:
    """One row parsed cell by cell (problems added to ``col``); None when it has a problem."""
    got = {}
    for name in (key, "year"):
        got[name], what = _whole(cells[pos[name]] if pos[name] < len(cells) else None, name, decimal)
        if what:
            col.add(what, _FIX_WHOLE, row=r, series=series)
    cell = cells[pos["value"]] if pos["value"] < len(cells) else None
    value, prob = parse_number(cell, decimal, "value")
    if prob or value is None or not math.isfinite(value):
        col.add(prob[0] if prob else "value is empty", prob[1] if prob else "give every row a value",
                row=r, series=series)
        return None
    return None if None in got.values() else {key: got[key], "year": got["year"], "value": value, "row": r}


def _fast_numbers(cells, decimal: str) -> np.ndarray:
    """The cells as floats in one pass, NaN where the quick reading fails (those cells are then
    read one by one, with their problems, by :func:`_row_cells`)."""
    if decimal == ",":
        cells = [c.replace(",", ".") if isinstance(c, str) else c for c in cells]
    try:
        return np.asarray(cells, dtype=float)
    except (TypeError, ValueError):
        return pd.to_numeric(pd.Series(cells, dtype=object), errors="coerce").to_numpy(float)


def _columns_of(grid, pos: dict[str, int]) -> dict[str, list]:
    """The cells of the columns at ``pos``, a row too short for one holding None there."""
    width = max(pos.values()) + 1
    if all(len(cells) >= width for _, cells in grid.rows):
        by_column = list(zip(*(cells[:width] for _, cells in grid.rows))) or [()] * width
        return {c: list(by_column[j]) for c, j in pos.items()}
    return {c: [cells[j] if j < len(cells) else None for _, cells in grid.rows] for c, j in pos.items()}


def read_long(spec: str, base_dir: str | Path, key: str, series: str) -> pd.DataFrame:
    """The rows of a ``key`` x year x value table (``key``: 'draw' or 'vintage') as a frame
    with the columns key, year, value and row (the file's line); problems raised together.
    The columns are read in one pass; a row the pass cannot read is read cell by cell."""
    grid, col, decimal, _ = read_grid(spec, base_dir)
    pos = _columns(grid.header, key, col, grid.header_row)
    got = {c: _fast_numbers(cells, decimal) for c, cells in _columns_of(grid, pos).items()}
    with np.errstate(invalid="ignore"):
        ok = np.isfinite(got["value"]) & (got[key] % 1 == 0) & (got["year"] % 1 == 0)
    frame = pd.DataFrame({key: got[key][ok].astype("int64"), "year": got["year"][ok].astype("int64"),
                          "value": got["value"][ok], "row": np.array([r for r, _ in grid.rows], "int64")[ok]})
    slow = [_row_cells(grid.rows[i][1], pos, key, decimal, grid.rows[i][0], col, series)
            for i in np.flatnonzero(~ok)]
    col.check()
    if slow:
        frame = pd.concat([frame, pd.DataFrame(slow)], ignore_index=True).sort_values("row", kind="mergesort")
    return frame.reset_index(drop=True)[[key, "year", "value", "row"]]


def _duplicates(frame: pd.DataFrame, key: str, col: Collector, series: str) -> None:
    dup = frame[frame.duplicated([key, "year"], keep="first")]
    for _, d in dup.head(3).iterrows():
        col.add(f"{key} {int(d[key])} has year {int(d['year'])} twice", "keep one row per " + key + " and year",
                row=int(d["row"]), series=series)


def read_draws(spec: str, base_dir: str | Path, series: str, years=()) -> pd.DataFrame:
    """The draws of response ``series``: columns draw, year, value (see the module docstring).
    A draw without a year that other draws hold, or without one of ``years`` (the years the
    response has a value), is an error: every draw is a whole series."""
    frame = read_long(spec, base_dir, "draw", series)
    col = Collector(str(spec))
    _duplicates(frame, "draw", col, series)
    years = sorted(set(frame["year"].unique()) | {int(y) for y in years})
    full = pd.MultiIndex.from_product([sorted(frame["draw"].unique()), years])
    missing = full.difference(pd.MultiIndex.from_frame(frame[["draw", "year"]]))
    if len(missing):
        d, y = missing[0]
        lacking = missing.get_level_values(0)
        n_years, n_draws = int((lacking == d).sum()), len(lacking.unique())
        more = f"; {n_draws - 1} more draws lack years too" if n_draws > 1 else ""
        col.add(f"draw {d} has no value for year {y}" + (f" (and {n_years - 1} more years)" if n_years > 1
                                                         else "") + more,
                "give every draw a value for every year of the table and of the response (each draw is a whole "
                "series)", series=series)
    if frame["draw"].nunique() == 1:
        col.add("the table holds a single draw", "give two or more draws (posterior samples or bootstrap "
                "replicates), or remove the draws key", series=series)
    col.check()
    return frame.drop(columns="row").sort_values(["draw", "year"], kind="mergesort").reset_index(drop=True)


def read_vintages(spec: str, base_dir: str | Path, series: str, last_year: int | None = None) -> pd.DataFrame:
    """The vintages of response ``series``: columns vintage, year, value. A value for a year
    after its vintage, or a vintage after ``last_year`` (the response's last year of data), is
    an error."""
    frame = read_long(spec, base_dir, "vintage", series)
    col = Collector(str(spec))
    _duplicates(frame, "vintage", col, series)
    for _, d in frame[frame["year"] > frame["vintage"]].head(3).iterrows():
        col.add(f"vintage {int(d['vintage'])} holds year {int(d['year'])}, later than the assessment itself",
                "check the vintage column: it is the year of the assessment that published the value",
                row=int(d["row"]), series=series)
    if last_year is not None:
        for _, d in frame[frame["vintage"] > last_year + 1].head(1).iterrows():
            col.add(f"vintage {int(d['vintage'])} is newer than the response's data (last year {last_year})",
                    "the newest assessment is the series in inputs; check the vintage column",
                    row=int(d["row"]), series=series)
    col.check()
    return frame.drop(columns="row").sort_values(["vintage", "year"], kind="mergesort").reset_index(drop=True)


def wide(frame: pd.DataFrame, key: str) -> pd.DataFrame:
    """A long draws or vintages frame as a wide one: index year, one column per draw or vintage."""
    return frame.pivot(index="year", columns=key, values="value").sort_index()


def estimate_problems(responses: list[dict], base_dir: str | Path, annual: pd.DataFrame) -> list:
    """Every problem of the draws and vintages tables of ``responses`` (config entries), checked
    against the response's years in ``annual`` (tidy: series, year, value); one line each."""
    problems = []
    for r in responses:
        years = annual.loc[annual["series"] == r["id"], "year"].astype(int)
        last = int(years.max()) if len(years) else None
        try:
            if r.get("draws"):
                read_draws(r["draws"], base_dir, r["id"], years)
            if r.get("vintages"):
                read_vintages(r["vintages"], base_dir, r["id"], last)
        except InputErrors as exc:
            problems += list(exc.problems)
    return problems
