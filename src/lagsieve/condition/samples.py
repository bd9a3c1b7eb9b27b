"""Per-fish sample tables: read with the project's readers, checked cell by cell.

Columns (names matched without case after stripping blanks, like every input table):

* required: ``year``, ``month`` (1-12 or an English month name), ``length`` (cm),
  ``weight`` (g), and ``age`` (whole years) or ``age_group`` (a configured group name);
* ``set``: the haul id, unique within a year. Without it (or where a cell is empty) each
  fish is its own haul, with a warning: the standard errors then ignore the haul effect;
* optional: ``weight_type`` (``whole`` or ``gutted``; one per study), ``stratum`` with
  ``stratum_area`` (design weights; one area per stratum), ``sex`` (kept, not used).

A length or weight column may name its unit in the header, ``length (mm)``, ``length [mm]``
or ``length_mm``; values are converted to cm and g (mm, cm, m; mg, g, kg).

Every problem is one line naming the file, the row (the header is row 1) and the column;
all problems of all files are collected and raised together. Cells are parsed in bulk
(pandas ``to_numeric``) and only the cells that fail go through the project's cell parsers
(:mod:`lagsieve.io.cells`) for their message, so 100,000 fish read in well under a second.
"""
from __future__ import annotations

import re
from pathlib import Path
from typing import Any, Iterable, Mapping

import numpy as np
import pandas as pd

from lagsieve.errors import InputErrors, InputProblem, InputWarning, show
from lagsieve.io.cells import Collector, header_name, is_missing, parse_month, parse_number, parse_time
from lagsieve.io.readers import read_grid
from lagsieve.io.tables import Grid

from lagsieve.condition.settings import ConditionSettings

__all__ = ["OPTIONAL", "REQUIRED", "SAMPLE_COLUMNS", "assign_groups", "read_samples"]

REQUIRED = ("year", "month", "length", "weight")
OPTIONAL = ("set", "age", "age_group", "weight_type", "stratum", "stratum_area", "sex")
UNITS = {"length": {"mm": 0.1, "cm": 1.0, "m": 100.0},
         "weight": {"mg": 1e-3, "g": 1.0, "kg": 1000.0}}
WEIGHT_TYPES = ("whole", "gutted")
SAMPLE_COLUMNS = ["file", "row", "year", "month", "haul", "length", "weight", "age",
                  "age_group", "weight_type", "stratum", "stratum_area", "sex"]
_HEADER = re.compile(r"(?P<name>[a-z_]+?)\s*(?:[(\[]\s*(?P<unit>[a-z]+)\s*[)\]]"
                     r"|_(?P<tail>mm|cm|m|mg|g|kg))?\Z")
SHOWN_ROWS = 5


def _rows_text(rows: np.ndarray) -> str:
    shown = ", ".join(str(int(r)) for r in rows[:SHOWN_ROWS])
    more = f" and {len(rows) - SHOWN_ROWS} more" if len(rows) > SHOWN_ROWS else ""
    return f"rows {shown}{more}"


def _header(grid: Grid, col: Collector, warnings: list[InputWarning]
            ) -> dict[str, tuple[int, float]]:
    """Column positions and unit factors by column name; problems go to ``col``."""
    found: dict[str, tuple[int, float]] = {}
    unused = []
    for j, cell in enumerate(grid.header):
        raw = header_name(cell)
        m = _HEADER.match(raw.lower())
        name = m.group("name") if m else raw.lower()
        unit = (m.group("unit") or m.group("tail")) if m else None
        if name not in REQUIRED + OPTIONAL:
            if raw:
                unused.append(raw)
            continue
        if unit is not None and unit not in UNITS.get(name, {}):
            units = ", ".join(UNITS.get(name, {})) or "none"
            col.add(f"column '{show(raw)}': unit '{show(unit)}' is not known for {name}",
                    f"write the unit as one of: {units}", row=grid.header_row)
            continue
        if name in found:
            col.add(f"column '{show(raw)}' appears twice (columns {found[name][0] + 1} and "
                    f"{j + 1})", "rename or remove one of the two", row=grid.header_row)
            continue
        found[name] = (j, UNITS[name][unit] if unit else 1.0)
    missing = [n for n in REQUIRED if n not in found]
    if "age" not in found and "age_group" not in found:
        missing.append("age (or age_group)")
    if missing:
        col.add(f"column(s) {', '.join(missing)} missing (columns found: "
                f"{', '.join(show(header_name(c)) for c in grid.header)})",
                "name the columns year, month, set, length, weight and age",
                row=grid.header_row)
    if "stratum" in found and "stratum_area" not in found:
        col.add("there is a stratum column but no stratum_area column",
                "add stratum_area (the area of each stratum), or remove stratum",
                row=grid.header_row)
    col.check()
    if unused:
        warnings.append(InputWarning(what=f"column(s) {', '.join(show(u) for u in unused)} "
                                          "are not used", file=col.file))
    return found


def _column(grid: Grid, j: int) -> np.ndarray:
    return np.array([cells[j] if j < len(cells) else None for _r, cells in grid.rows],
                    dtype=object)


def _missing(values: np.ndarray) -> np.ndarray:
    return np.fromiter((is_missing(v) for v in values), bool, len(values))


def _numbers(values: np.ndarray, rows: np.ndarray, decimal: str, name: str,
             col: Collector) -> np.ndarray:
    """Floats of a column (NaN where missing); a cell that is not a finite number is a
    problem, with the message of :func:`lagsieve.io.cells.parse_number`."""
    s = pd.Series(values, dtype=object)
    if decimal == ",":
        s = s.map(lambda v: v.replace(",", ".") if isinstance(v, str) else v)
    x = pd.to_numeric(s, errors="coerce").to_numpy(float, na_value=np.nan, copy=True)
    for i in np.flatnonzero(~np.isfinite(x)):
        value, prob = parse_number(values[i], decimal, name)
        if prob:
            col.add(prob[0], prob[1], row=int(rows[i]))
        x[i] = np.nan if value is None else value
    return x


def _whole_numbers(values: np.ndarray, rows: np.ndarray, name: str, lo: int, hi: int,
                   col: Collector, fix: str) -> np.ndarray:
    """Whole numbers in [lo, hi] (NaN where missing or wrong; each wrong cell a problem)."""
    x = _numbers(values, rows, ".", name, col)
    bad = np.isfinite(x) & ((x != np.round(x)) | (x < lo) | (x > hi))
    for i in np.flatnonzero(bad):
        col.add(f"{name} '{show(values[i])}' is not a whole number {lo}-{hi}", fix,
                row=int(rows[i]))
    x[bad] = np.nan
    return x


def _years(values: np.ndarray, rows: np.ndarray, col: Collector) -> np.ndarray:
    x = pd.to_numeric(pd.Series(values, dtype=object), errors="coerce").to_numpy(float, copy=True)
    ok = np.isfinite(x) & (x == np.round(x)) & (x >= 1000) & (x <= 2999)
    for i in np.flatnonzero(~ok):
        _y, _m, prob = parse_time(values[i], "year", True)
        if prob is None:  # a year written as text that to_numeric refused
            x[i] = _y
            continue
        col.add(prob[0], prob[1], row=int(rows[i]))
    return x


def _months(values: np.ndarray, rows: np.ndarray, col: Collector) -> np.ndarray:
    x = pd.to_numeric(pd.Series(values, dtype=object), errors="coerce").to_numpy(float, copy=True)
    ok = np.isfinite(x) & (x == np.round(x)) & (x >= 1) & (x <= 12)
    for i in np.flatnonzero(~ok):
        month, prob = parse_month(values[i])
        if prob is None and month is None:
            prob = ("month is empty", "give every fish the month it was caught")
        if prob:
            col.add(prob[0], "write the month the fish was caught as 1-12 or a month name",
                    row=int(rows[i]))
        x[i] = np.nan if month is None else month
    return x


def _positive(values, rows, decimal, name, factor, col, warnings) -> np.ndarray:
    """A length or weight column in cm or g; non-positive cells are problems, empty cells
    leave their fish out (one warning)."""
    x = _numbers(values, rows, decimal, name, col) * factor
    for i in np.flatnonzero(x <= 0):
        col.add(f"{name} '{show(values[i])}' is not positive",
                f"give the fish's {name} as a number above 0, or delete the row",
                row=int(rows[i]))
    empty = np.flatnonzero(_missing(values))
    if len(empty):
        warnings.append(InputWarning(
            what=f"{len(empty)} fish without a {name} are left out ({_rows_text(rows[empty])})",
            file=col.file))
    return x


def _texts(values: np.ndarray) -> np.ndarray:
    """Cells as text ('' where missing): ids and names."""
    return np.array(["" if is_missing(v) else header_name(v) for v in values], dtype=object)


def _hauls(grid: Grid, cols, rows, years, col: Collector, warnings) -> np.ndarray:
    """The haul key ``<year>/<set>``; a fish without a set id is its own haul (warned)."""
    sets = _texts(_column(grid, cols["set"][0])) if "set" in cols else np.full(len(rows), "")
    alone = sets == ""
    if alone.any():
        what = ("there is no set (haul id) column" if "set" not in cols
                else f"{int(alone.sum())} fish have no set (haul id): {_rows_text(rows[alone])}")
        warnings.append(InputWarning(
            what=f"{what}; each such fish counts as its own haul, so the standard errors "
                 "ignore the haul effect for them", file=col.file))
    year_text = np.where(np.isfinite(years), years, 0).astype(np.int64).astype(str)
    keys = pd.Series(year_text, dtype=object) + "/" + pd.Series(sets, dtype=object)
    own = "fish:" + str(col.file) + ":" + pd.Series(rows.astype(str), dtype=object)
    return np.where(alone, own.to_numpy(object), keys.to_numpy(object))


def _weight_types(values: np.ndarray, rows: np.ndarray, col: Collector) -> np.ndarray:
    kinds = np.char.lower(_texts(values).astype(str))
    for i in np.flatnonzero((kinds != "") & ~np.isin(kinds, WEIGHT_TYPES)):
        col.add(f"weight_type '{show(values[i])}' is neither whole nor gutted",
                "write whole or gutted (one kind for the whole study)", row=int(rows[i]))
    return kinds.astype(object)


def _strata(grid: Grid, cols, rows, decimal, col: Collector) -> tuple[np.ndarray, np.ndarray]:
    """Stratum names and areas: every fish with a stratum needs a positive area, and a
    stratum has one area."""
    n = len(rows)
    if "stratum" not in cols:
        return np.full(n, "", dtype=object), np.full(n, np.nan)
    names = _texts(_column(grid, cols["stratum"][0]))
    values = _column(grid, cols["stratum_area"][0])
    area = _numbers(values, rows, decimal, "stratum_area", col)
    for i in np.flatnonzero((names != "") & ~(area > 0)):
        shown = "(empty)" if is_missing(values[i]) else f"'{show(values[i])}'"
        col.add(f"stratum_area {shown} of stratum '{show(names[i])}' is not a "
                "positive number", "give the stratum's area (any unit, the same for all)",
                row=int(rows[i]))
    for i in np.flatnonzero(names == ""):
        col.add("stratum is empty", "give every fish its stratum, or remove the stratum "
                "column", row=int(rows[i]))
    frame = pd.DataFrame({"s": names, "a": area, "r": rows})
    first = frame[frame.a > 0].groupby("s", sort=False).agg(a=("a", "first"), r=("r", "first"))
    joined = frame.merge(first, left_on="s", right_index=True, how="left", suffixes=("", "0"))
    for s, a, r, a0, r0 in joined[(joined.a > 0) & (joined.a != joined.a0)].itertuples(index=False):
        col.add(f"stratum '{show(s)}' has area {a:g} here but {a0:g} on row {int(r0)}",
                "give each stratum one area", row=int(r))
    return names, area


def _ragged(grid: Grid, col: Collector) -> None:
    ncol = len(grid.header)
    for r, cells in grid.rows:
        if len(cells) > ncol and any(not is_missing(c) for c in cells[ncol:]):
            col.add(f"the row has {len(cells)} cells but the header has {ncol}",
                    "remove the extra delimiter, or quote the cell that holds it", row=r)


def _one_month_per_haul(out: dict, col: Collector) -> None:
    """A haul (year and set) is one catch: fish of one haul in two months is a problem."""
    frame = pd.DataFrame({"haul": out["haul"], "month": out["month"], "row": out["row"]})
    frame = frame[np.isfinite(frame.month)]
    first = frame.groupby("haul", sort=False).agg(m0=("month", "first"), r0=("row", "first"))
    joined = frame.merge(first, left_on="haul", right_index=True)
    for haul, month, row, m0, r0 in joined[joined.month != joined.m0].itertuples(index=False):
        col.add(f"set '{show(str(haul).split('/', 1)[-1])}' of {str(haul).split('/')[0]} is "
                f"in month {month:.0f} here but in month {m0:.0f} on row {int(r0)}",
                "give each haul one month, or different set ids to different hauls",
                row=int(row))


def _read_one(spec: Any, base_dir: str | Path) -> tuple[pd.DataFrame, list[InputWarning]]:
    """One sample file as the frame of :data:`SAMPLE_COLUMNS` (problems raised together)."""
    grid, col, decimal, warnings = read_grid(spec, base_dir)
    if not grid.rows:
        col.fatal("the file has a header but no fish", "add one row per fish",
                  row=grid.header_row)
    cols = _header(grid, col, warnings)
    _ragged(grid, col)
    rows = np.array([r for r, _cells in grid.rows], dtype=np.int64)
    get = lambda name: _column(grid, cols[name][0])  # noqa: E731
    years = _years(get("year"), rows, col)
    out = {"file": np.full(len(rows), col.file, dtype=object), "row": rows, "year": years,
           "month": _months(get("month"), rows, col)}
    for name in ("length", "weight"):
        out[name] = _positive(get(name), rows, decimal, name, cols[name][1], col, warnings)
    out["age"] = (_whole_numbers(get("age"), rows, "age", 0, 999, col,
                                 "write the age in whole years, or leave it empty")
                  if "age" in cols else np.full(len(rows), np.nan))
    empty = np.full(len(rows), "", dtype=object)
    out["age_group"] = _texts(get("age_group")) if "age_group" in cols else empty
    out["weight_type"] = (_weight_types(get("weight_type"), rows, col)
                          if "weight_type" in cols else empty)
    out["stratum"], out["stratum_area"] = _strata(grid, cols, rows, decimal, col)
    out["sex"] = _texts(get("sex")) if "sex" in cols else empty
    out["haul"] = _hauls(grid, cols, rows, years, col, warnings)
    _one_month_per_haul(out, col)
    col.check()
    frame = pd.DataFrame(out)[SAMPLE_COLUMNS]
    keep = np.isfinite(frame["length"].to_numpy()) & np.isfinite(frame["weight"].to_numpy())
    return frame[keep].reset_index(drop=True), warnings


def _one_weight_type(frame: pd.DataFrame) -> list[InputProblem]:
    """Whole and gutted weights mixed in one study: a problem naming the first of each."""
    kinds = frame[frame.weight_type != ""]
    if kinds.weight_type.nunique() < 2:
        return []
    firsts = kinds.groupby("weight_type", sort=False).first()
    (k0, f0, r0), (k1, f1, r1) = [(k, v.file, v.row) for k, v in firsts.iloc[:2].iterrows()]
    return [InputProblem(what=f"column 'weight_type': {k1} weights are mixed with {k0} weights "
                              f"(first {k0} on {f0}:{r0})",
                         fix="use one weight type for the study (convert, or leave the other "
                             "kind out)", file=f1, row=int(r1))]


def read_samples(specs: Iterable[str | Mapping[str, Any]], base_dir: str | Path
                 ) -> tuple[pd.DataFrame, list[InputWarning]]:
    """Read every sample file into one frame of :data:`SAMPLE_COLUMNS` (length in cm,
    weight in g, ``haul`` the key ``<year>/<set>``). Problems of all files are raised
    together as :class:`InputErrors`; the files are only read."""
    problems: list[InputProblem] = []
    warnings: list[InputWarning] = []
    frames = []
    for spec in specs:
        try:
            frame, warns = _read_one(spec, base_dir)
        except InputErrors as exc:
            problems.extend(exc.problems)
            continue
        frames.append(frame)
        warnings.extend(warns)
    if frames:
        problems.extend(_one_weight_type(pd.concat(frames, ignore_index=True)))
    if problems:
        raise InputErrors(problems)
    return pd.concat(frames, ignore_index=True), warnings


def _age_groups(frame: pd.DataFrame, settings: ConditionSettings) -> np.ndarray:
    """The age group of every fish ('' when its age is in no group): from ``age`` by the
    inclusive ranges, or the ``age_group`` column where the age is empty."""
    names = list(settings.age_groups)
    lo = np.array([settings.age_groups[g][0] for g in names], dtype=float)
    hi = np.array([settings.age_groups[g][1] for g in names], dtype=float)
    age = frame["age"].to_numpy(float)[:, None]
    inside = (age >= lo) & (age <= hi)
    by_age = np.where(inside.any(axis=1), np.array(names, dtype=object)[inside.argmax(axis=1)], "")
    given = frame["age_group"].to_numpy(object)
    given = np.where(np.isin(given, names), given, "")
    return np.where(np.isnan(age[:, 0]), given, by_age)


def _left_out(frame: pd.DataFrame, mask: np.ndarray, what: str, fix: str) -> list[InputWarning]:
    """One warning per file counting the fish ``mask`` leaves out, with their first rows."""
    warnings = []
    for file, part in frame[mask].groupby("file", sort=False):
        warnings.append(InputWarning(
            what=f"{len(part)} fish {what} and are left out ({_rows_text(part.row.to_numpy())}); "
                 f"{fix}", file=str(file)))
    return warnings


def assign_groups(frame: pd.DataFrame, settings: ConditionSettings
                  ) -> tuple[pd.DataFrame, list[InputWarning]]:
    """Add ``group`` (age group) and ``season`` to every fish and leave out, counted and
    reported in warnings (not fatal), the fish whose age is in no age group or whose month is
    in no season."""
    groups = _age_groups(frame, settings)
    lookup = np.array([""] + [settings.month_season().get(m, "") for m in range(1, 13)],
                      dtype=object)
    seasons = lookup[frame["month"].to_numpy(float).astype(np.int64)]
    warnings = _left_out(frame, groups == "", "have an age outside every age group (or no age)",
                         "widen age_groups under condition to include them")
    warnings += _left_out(frame, (groups != "") & (seasons == ""), "were caught in a month of "
                          "no season", "add the month to a season under condition")
    out = frame.assign(group=groups, season=seasons)
    keep = (groups != "") & (seasons != "")
    return out[keep].reset_index(drop=True), warnings
