"""Parsing a read table (header plus rows of cells) in the long or the wide layout into the
tidy frame.

Layouts (column names are matched case-insensitively after stripping blanks)
--------------------------------------------------------------------------
* LONG: a ``series`` and a ``value`` column plus ``year`` (or ``date``), and optionally
  ``month``, ``group``, ``se``, ``cv`` and ``unit``. A ``group`` makes the series id
  ``<series>:<group>``; ``cv`` becomes ``se = cv * |value|``.
* WIDE: ``year`` (or ``date``), optionally ``month``, plus one column per series, the column
  name being the series id (case kept as written).

``year`` holds whole years; a ``year`` or ``date`` cell written ``YYYY-MM`` (or
``YYYY-MM-DD``, the day is ignored) makes the row monthly, as does a ``month`` column
(1-12 or English month names). Empty cells and ``NA``, ``NaN``, ``N/A``, ``null``, ``None``,
``#N/A`` are missing values; rows without a value are left out (and listed in a warning for
the long layout).

Series the study does not use
-----------------------------
Given the ids the study uses (``wanted``), every other series of the file is left out whatever
its name or cells (a colleague's ``Notes (see sheet 2)!`` column), and one warning lists them;
only the used series must have valid ids and values. Without ``wanted`` every series is read
and checked.

The tidy frame
--------------
``series`` (str), ``year`` (int64), ``month`` (Int64, NA for annual rows), ``value``
(float64, always finite), ``se`` (float64, NaN if absent), ``unit`` (str or NA), ``file`` (the
path as the user wrote it), ``row`` (int64, 1-based line of the file with the header as row 1;
for ``.xlsx`` the sheet row).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Collection, NamedTuple

import pandas as pd

from lagsieve.errors import InputWarning, show
from lagsieve.io.cells import (
    MAX_ID_LENGTH,
    NUM_COMMA,
    NUM_DOT,
    YEAR_MONTH,
    Collector,
    Problem,
    check_id,
    check_name,
    header_name,
    is_missing,
    parse_month,
    parse_number,
    parse_time,
)

__all__ = ["FRAME_COLUMNS", "Grid", "UnusedSeries", "empty_frame", "parse_grid"]

FRAME_COLUMNS = ["series", "year", "month", "value", "se", "unit", "file", "row"]

_LONG_ONLY = ("value", "group", "se", "cv", "unit")
_LONG_KNOWN = {"series", "value", "year", "date", "month", "group", "se", "cv", "unit"}
_TIME = ("year", "date", "month")


@dataclass
class Grid:
    """A table as read from its file: the header cells and the data rows with their row
    numbers (blank rows left out)."""

    header: list[Any]
    header_row: int
    rows: list[tuple[int, list[Any]]]
    delimiter: str | None = None


@dataclass
class Layout:
    """What the header says: column positions by lower-case name, the time columns, and
    (wide layout) the series columns."""

    raw_names: list[str]
    seen: dict[str, int]
    long: bool
    time_name: str
    month_j: int | None
    series_cols: list[tuple[int, str]] = field(default_factory=list)
    wanted: frozenset[str] | None = None  # the series the study uses (None: every series)
    unused: dict[str, None] = field(default_factory=dict)  # series left out, in order of appearance
    unnamed: dict[str, None] = field(default_factory=dict)  # columns or rows without a name, left out

    def uses(self, series: str) -> bool:
        return self.wanted is None or series in self.wanted

    @property
    def ncol(self) -> int:
        return len(self.raw_names)

    @property
    def time_j(self) -> int:
        return self.seen[self.time_name]


@dataclass(frozen=True)
class UnusedSeries(InputWarning):
    """The note that lists the series of a file the study does not use; ``names`` holds all
    of them (for suggestions when a configured id is not found)."""

    names: tuple[str, ...] = ()


class Record(NamedTuple):
    series: str
    year: int
    month: int | None
    value: float | None
    se: float
    unit: str | None
    row: int


def empty_frame() -> pd.DataFrame:
    """An empty tidy frame with the documented columns and dtypes."""
    return _frame([], [], [], [], [], [], [], [])


def _frame(series, years, months, values, ses, units, files, rows) -> pd.DataFrame:
    return pd.DataFrame({
        "series": pd.Series(series, dtype="str"),
        "year": pd.Series(years, dtype="int64"),
        "month": pd.Series(months, dtype="Int64"),
        "value": pd.Series(values, dtype="float64"),
        "se": pd.Series(ses, dtype="float64"),
        "unit": pd.Series(units, dtype="str"),
        "file": pd.Series(files, dtype="str"),
        "row": pd.Series(rows, dtype="int64"),
    })


def parse_grid(grid: Grid, decimal: str, col: Collector, warnings: list[InputWarning],
               wanted: Collection[str] | None = None) -> pd.DataFrame:
    """The tidy frame of one table; problems go to ``col`` (raised together), warnings are
    appended to ``warnings``. With ``wanted`` (the series ids the study uses) the other
    series are left out unchecked and listed in one warning."""
    layout = _read_header(grid, col, warnings, None if wanted is None else frozenset(wanted))
    recs: list[Record] = []
    for r, cells in grid.rows:
        recs.extend(_parse_row(r, cells, layout, grid, decimal, col))
    units = _check_records(recs, col)
    col.check()
    _warn_missing(recs, layout, col, warnings)
    _warn_unused(layout, col, warnings)
    recs = [rec for rec in recs if rec.value is not None]
    if not recs and (layout.wanted is None or layout.series_cols or _long_uses_any(grid, layout)):
        col.fatal("the file holds no values", "fill in the value cells (empty cells are "
                  "missing values)")
    return _frame(
        [rec.series for rec in recs],
        [rec.year for rec in recs],
        [rec.month for rec in recs],
        [rec.value for rec in recs],
        [rec.se for rec in recs],
        [rec.unit if rec.unit is not None else units.get(rec.series) for rec in recs],
        [col.file] * len(recs),
        [rec.row for rec in recs],
    )


# ----------------------------------------------------------------------------- header

def _read_header(grid: Grid, col: Collector, warnings: list[InputWarning],
                 wanted: frozenset[str] | None = None) -> Layout:
    hrow = grid.header_row
    raw_names = [header_name(c) for c in grid.header]
    keep, seen, unnamed = _named_columns(grid, raw_names, col, wanted)
    col.check()
    if not grid.rows:
        col.fatal("the file has a header but no data rows",
                  "add rows below the header (one per year, or per series and year)", row=hrow)
    _check_columns(set(seen), raw_names, keep, col, hrow)
    time_name = "year" if "year" in seen else "date"
    layout = Layout(raw_names=raw_names, seen=seen, long="series" in seen, time_name=time_name,
                    month_j=seen.get("month"), wanted=wanted)
    layout.unnamed.update(dict.fromkeys(unnamed))
    if layout.long:
        unused = [raw_names[j] for j in keep if raw_names[j].lower() not in _LONG_KNOWN]
        if unused:
            warnings.append(InputWarning(
                what=f"column(s) {', '.join(show(u) for u in unused)} are not used",
                file=col.file))
    else:
        layout.series_cols = _wide_series_columns(raw_names, keep, col, hrow, layout)
    return layout


def _named_columns(grid: Grid, raw_names: list[str], col: Collector,
                   wanted: frozenset[str] | None = None
                   ) -> tuple[list[int], dict[str, int], list[str]]:
    """Positions of the named columns, the first position of every lower-case name, and the
    unnamed columns that hold values when they are left out (``wanted`` given).

    Unnamed columns are ignored when empty and a problem when they hold values (without
    ``wanted``); a name given twice is a problem when the study could use it."""
    names = [n.lower() for n in raw_names]
    keep, unnamed = [], []
    for j, n in enumerate(names):
        if n:
            keep.append(j)
            continue
        first = next((r for r, cells in grid.rows
                      if j < len(cells) and not is_missing(cells[j])), None)
        if first is not None and wanted is not None:
            unnamed.append(f"column {j + 1} (no name)")
        elif first is not None:
            col.add(f"column {j + 1} has no name but holds values (first on row {first})",
                    "give the column a name in the header, or delete it", row=grid.header_row)
    used = None if wanted is None else _LONG_KNOWN | {w.lower() for w in wanted}
    seen: dict[str, int] = {}
    for j in keep:
        n = names[j]
        if n in seen and (used is None or n in used):
            col.add(f"column '{show(raw_names[j])}' appears twice (columns {seen[n] + 1} and "
                    f"{j + 1})", "rename or remove one of the two columns", row=grid.header_row)
        else:
            seen.setdefault(n, j)
    return keep, seen, unnamed


def _check_columns(has: set[str], raw_names: list[str], keep: list[int], col: Collector,
                   hrow: int) -> None:
    """The combinations of columns that leave the table unreadable (each one fatal)."""
    if "series" in has and "value" not in has:
        col.fatal("there is a series column but no value column",
                  "add a 'value' column, or remove 'series' to use the wide layout (year "
                  "plus one column per series)", row=hrow)
    if "year" not in has and "date" not in has:
        looks_like_data = all(NUM_DOT.match(n) or NUM_COMMA.match(n) or YEAR_MONTH.match(n)
                              for n in (n.lower() for n in raw_names) if n)
        found = ", ".join(show(raw_names[j]) for j in keep)
        fix = ("the first line must be a header naming the columns, e.g. year,velk_m"
               if looks_like_data else
               "add a 'year' column (or 'date' written YYYY-MM), or rename the time column")
        col.fatal(f"no year column (columns found: {found})", fix, row=hrow)
    if "year" in has and "date" in has:
        col.fatal("there is both a year and a date column",
                  "keep one of them (date written YYYY-MM for monthly values)", row=hrow)
    if "date" in has and "month" in has:
        col.fatal("there is both a date and a month column",
                  "use either date (YYYY-MM) or year plus month", row=hrow)
    if "series" in has and "se" in has and "cv" in has:
        col.fatal("there is both an se and a cv column",
                  "keep one of them (se = cv * |value| is computed from cv)", row=hrow)


def _wide_series_columns(raw_names: list[str], keep: list[int], col: Collector, hrow: int,
                         layout: Layout) -> list[tuple[int, str]]:
    """(position, series id) of every series column of a wide table that the study uses (the
    others go to ``layout.unused``)."""
    series_cols = []
    any_used = any(layout.uses(raw_names[j]) for j in keep if raw_names[j].lower() not in _TIME)
    for j in keep:
        n = raw_names[j].lower()
        if n in _TIME:
            continue
        if not layout.uses(raw_names[j]) and (any_used or n not in _LONG_ONLY):
            layout.unused[raw_names[j]] = None
            continue
        if n in _LONG_ONLY:
            col.add(f"column '{show(raw_names[j])}' belongs to the long layout but there "
                    "is no series column",
                    "add 'series' and 'value' columns for the long layout (series, year, "
                    "value, ...), or rename the column after its series", row=hrow)
            continue
        prob = check_id(raw_names[j], "column name")
        if prob:
            col.add(prob[0], prob[1], row=hrow)
            continue
        series_cols.append((j, raw_names[j]))
    col.check()
    if not series_cols and not (layout.unused or layout.unnamed):
        col.fatal("there are no series columns next to the year column",
                  "add one column per series (the header is the series id), or use the "
                  "long layout (series, year, value)", row=hrow)
    return series_cols


# ----------------------------------------------------------------------------- rows

def _parse_row(r: int, cells: list[Any], layout: Layout, grid: Grid, decimal: str,
               col: Collector) -> list[Record]:
    """The records of one data row (none when the row has a problem, added to ``col``)."""
    ncol = layout.ncol
    if len(cells) > ncol and any(not is_missing(c) for c in cells[ncol:]):
        fix = "remove the extra delimiter, or quote the cell that contains it"
        if grid.delimiter == "," and decimal == ".":
            fix = ("if numbers use a decimal comma, set decimal: ',' for this input; "
                   "otherwise " + fix)
        col.add(f"the row has {len(cells)} cells but the header has {ncol}", fix, row=r)
        return []
    cells = list(cells[:ncol]) + [None] * (ncol - len(cells))
    if not _row_used(cells, layout):
        return []
    year, month, prob = parse_time(cells[layout.time_j], layout.time_name,
                                   layout.month_j is not None)
    series = None
    if layout.long:
        series, sprob = _row_series(cells, layout.seen)
        if sprob:
            col.add(sprob[0], sprob[1], row=r)
    if prob:
        col.add(prob[0], prob[1], row=r, series=series)
        return []
    if layout.month_j is not None:
        month, mprob = parse_month(cells[layout.month_j])
        if mprob:
            col.add(mprob[0], mprob[1], row=r, series=series)
            return []
    if not layout.long:
        return _wide_records(r, cells, layout, year, month, decimal, col)
    if series is None:
        return []
    rec = _long_record(r, cells, layout.seen, series, year, month, decimal, col)
    return [] if rec is None else [rec]


def _row_used(cells: list[Any], layout: Layout) -> bool:
    """Whether a row holds anything of the series the study uses (always, without ``wanted``).
    A row of an unused series is left out unchecked, and so is a wide row whose used cells
    are all empty (a note or a total under the table)."""
    if layout.wanted is None:
        return True
    if not layout.long:
        return any(not is_missing(cells[j]) for j, _sid in layout.series_cols)
    sid = _series_id(cells, layout.seen)
    if sid in layout.wanted:
        return True
    if sid:
        layout.unused[sid] = None
    else:
        layout.unnamed["(no name)"] = None
    return False


def _wide_records(r: int, cells: list[Any], layout: Layout, year: int, month: int | None,
                  decimal: str, col: Collector) -> list[Record]:
    out = []
    for j, sid in layout.series_cols:
        value, vprob = parse_number(cells[j], decimal, "value")
        if vprob:
            col.add(vprob[0], vprob[1], row=r, series=sid)
        elif value is not None:
            out.append(Record(sid, year, month, value, math.nan, None, r))
    return out


def _long_record(r: int, cells: list[Any], seen: dict[str, int], series: str, year: int,
                 month: int | None, decimal: str, col: Collector) -> Record | None:
    value, vprob = parse_number(cells[seen["value"]], decimal, "value")
    if vprob:
        col.add(vprob[0], vprob[1], row=r, series=series)
        return None
    se = math.nan
    bad = False
    for name in ("se", "cv"):
        if name not in seen:
            continue
        cell = cells[seen[name]]
        x, eprob = parse_number(cell, decimal, name)
        if eprob is None and x is not None and x < 0:
            eprob = (f"{name} {show(cell)} is negative",
                     f"an {name} must be 0 or more; check the sign or leave the cell empty")
        if eprob:
            col.add(eprob[0], eprob[1], row=r, series=series)
            bad = True
        elif x is not None:
            se = x if name == "se" else (x * abs(value) if value is not None else math.nan)
            if not math.isfinite(se):
                col.add(f"se from cv {show(cell)} is too large",
                        "check the cv and the value", row=r, series=series)
                bad = True
    if bad:
        return None
    unit = None
    if "unit" in seen and not is_missing(cells[seen["unit"]]):
        unit = header_name(cells[seen["unit"]])
    return Record(series, year, month, value, se, unit, r)


def _series_id(cells: list[Any], seen: dict[str, int]) -> str:
    """The id a long-layout row names (``series`` or ``series:group``), unchecked."""
    raw = cells[seen["series"]]
    name = "" if is_missing(raw) else header_name(raw)
    if "group" in seen and not is_missing(cells[seen["group"]]):
        return f"{name}:{header_name(cells[seen['group']])}"
    return name


def _long_uses_any(grid: Grid, layout: Layout) -> bool:
    """Whether a long table names any series the study uses (its values may all be empty)."""
    return layout.long and any(_series_id(list(cells) + [None] * layout.ncol, layout.seen)
                               in layout.wanted for _r, cells in grid.rows)


def _row_series(cells: list[Any], seen: dict[str, int]) -> tuple[str | None, Problem | None]:
    """The series id of a long-layout row (``series`` or ``series:group``)."""
    raw = cells[seen["series"]]
    name = "" if is_missing(raw) else header_name(raw)
    prob = check_id(name, "series name")
    if prob:
        return None, prob
    if "group" in seen and not is_missing(cells[seen["group"]]):
        group = header_name(cells[seen["group"]])
        if ":" in name:
            return None, (f"series name '{show(name)}' already has a group part and the row "
                          "also has a group", "use either series:group or a group column")
        prob = check_name(group, "group name")
        if prob:
            return None, prob
        name = f"{name}:{group}"
        if len(name) > MAX_ID_LENGTH:
            return None, (f"series id '{show(name)}' is longer than {MAX_ID_LENGTH} "
                          "characters", "use shorter series or group names")
    return name, None


# ----------------------------------------------------------------------------- series

def _check_records(recs: list[Record], col: Collector) -> dict[str, str]:
    """Problems across the rows of a series: a year (or month) twice, monthly and annual rows
    mixed, two units. Returns the unit of every series that gives one."""
    first_key: dict[tuple, int] = {}
    kinds: dict[str, dict[bool, int]] = {}
    units: dict[str, tuple[str, int]] = {}
    for rec in recs:
        sid, r = rec.series, rec.row
        key = (sid, rec.year, rec.month)
        when = f"{rec.year}" if rec.month is None else f"{rec.year}-{rec.month:02d}"
        if key in first_key:
            col.add(f"{when} appears twice (first on row {first_key[key]})",
                    "keep one row per series and " + ("year" if rec.month is None else "month"),
                    row=r, series=sid)
        else:
            first_key[key] = r
        kinds.setdefault(sid, {}).setdefault(rec.month is not None, r)
        if rec.unit is not None:
            if sid not in units:
                units[sid] = (rec.unit, r)
            elif units[sid][0] != rec.unit:
                col.add(f"unit '{show(rec.unit)}' differs from unit '{show(units[sid][0])}' on "
                        f"row {units[sid][1]}",
                        "use one unit for the whole series (convert the values), or split it "
                        "into two series", row=r, series=sid)
                units[sid] = (rec.unit, r)  # report each change once
    for sid, k in kinds.items():
        if len(k) == 2:
            col.add(f"the series has monthly rows (first on row {k[True]}) and annual rows "
                    f"(first on row {k[False]})",
                    "give every row of the series a month, or put annual and monthly values "
                    "in two series", row=max(k.values()), series=sid)
    return {sid: u for sid, (u, _r) in units.items()}


def _warn_missing(recs: list[Record], layout: Layout, col: Collector,
                  warnings: list[InputWarning]) -> None:
    """Warn about long-layout rows without a value and wide-layout columns without any."""
    if layout.long:
        missing_rows = [rec.row for rec in recs if rec.value is None]
        if missing_rows:
            shown = ", ".join(str(r) for r in missing_rows[:10])
            more = f" and {len(missing_rows) - 10} more" if len(missing_rows) > 10 else ""
            warnings.append(InputWarning(
                what=f"{len(missing_rows)} row(s) have no value and are left out "
                     f"(rows {shown}{more})", file=col.file))
        return
    present = {rec.series for rec in recs}
    for _j, sid in layout.series_cols:
        if sid not in present:
            warnings.append(InputWarning(what="the column has no values", file=col.file,
                                         series=sid))


def _warn_unused(layout: Layout, col: Collector, warnings: list[InputWarning],
                 shown: int = 10) -> None:
    """One note listing the series of the file that the study does not use."""
    unused = list(layout.unnamed) + list(layout.unused)
    if not unused:
        return
    names = ", ".join(f"'{show(u, 60)}'" for u in unused[:shown])
    more = f" and {len(unused) - shown} more" if len(unused) > shown else ""
    warnings.append(UnusedSeries(
        what=f"{len(unused)} series not used by the study are ignored: {names}{more}",
        file=col.file, names=tuple(layout.unused)))
