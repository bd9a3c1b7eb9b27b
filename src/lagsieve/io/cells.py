"""Cells of the input tables: missing values, numbers, years, months and series names.

Each parser returns its value and, for a cell the user must fix, a ``(what, fix)`` pair that
the table parsers turn into one :class:`~lagsieve.errors.InputProblem` naming the file, row
and series. :class:`Collector` gathers the problems of one file (capped, so a broken column
does not flood the screen).
"""
from __future__ import annotations

import datetime as _dt
import decimal as _decimal
import math
import re
from typing import Any

import numpy as np
import pandas as pd

from lagsieve.errors import InputErrors, InputProblem, show

# Any four-digit year from 1000 on: reconstructed and historical drivers start centuries ago;
# a two- or three-digit year is refused as a likely typo ('98' for 1998).
YEAR_MIN = 1000
YEAR_MAX = 2999
MAX_PROBLEMS_PER_FILE = 40
MAX_ID_LENGTH = 80

NUM_DOT = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?\Z")
NUM_COMMA = re.compile(r"[+-]?(\d+,?\d*|,\d+)([eE][+-]?\d+)?\Z")
YEAR_MONTH = re.compile(r"(\d{4})-(\d{1,2})(-(\d{1,2}))?\Z")
_PART = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.-]*\Z")
_INT_TEXT = re.compile(r"[+-]?\d{1,9}(\.0*)?\Z")
_LONG_INT = re.compile(r"[+-]?\d+(\.0*)?\Z")
_MISSING = {"", "na", "nan", "n/a", "null", "none", "#n/a"}
_INFINITE = {"inf", "+inf", "-inf", "infinity", "+infinity", "-infinity"}
_MONTH_NAMES = {
    name: i
    for i, names in enumerate(
        [
            ("jan", "january"), ("feb", "february"), ("mar", "march"), ("apr", "april"),
            ("may",), ("jun", "june"), ("jul", "july"), ("aug", "august"),
            ("sep", "sept", "september"), ("oct", "october"), ("nov", "november"),
            ("dec", "december"),
        ],
        start=1,
    )
    for name in names
}

_FIX_NUMBER = "write a plain number such as 0.25, or leave the cell empty for a missing value"
_FIX_DECIMAL = "set decimal: ',' for this input"
_FIX_INFINITE = "replace it with a finite number, or leave the cell empty"
_FIX_YEAR = "write the year as a whole number such as 1998"
_FIX_NAME = (
    "use only letters, digits, '_', '.' and '-', starting with a letter or digit "
    "(for example 'velk_m')"
)

Problem = tuple[str, str]  # (what is wrong, how to fix it)


class Collector:
    """Problems of one file, capped so a broken column does not flood the screen."""

    def __init__(self, file: str | None):
        self.file = file
        self.items: list[InputProblem] = []
        self.more = 0

    def add(self, what: str, fix: str, row: int | None = None, series: str | None = None,
            file: str | None = None) -> None:
        if len(self.items) >= MAX_PROBLEMS_PER_FILE:
            self.more += 1
            return
        self.items.append(
            InputProblem(what=what, fix=fix, file=file if file is not None else self.file,
                         row=row, series=series)
        )

    def fatal(self, what: str, fix: str, row: int | None = None, series: str | None = None):
        self.add(what, fix, row=row, series=series)
        self.check()
        raise AssertionError("unreachable")  # pragma: no cover

    def check(self) -> None:
        if self.items or self.more:
            items = list(self.items)
            if self.more:
                items.append(InputProblem(
                    what=f"{self.more} more problems of this file are not shown",
                    fix="fix the problems above and check again", file=self.file))
            raise InputErrors(items)


def is_missing(cell: Any) -> bool:
    if cell is None or cell is pd.NA or cell is pd.NaT:
        return True
    if isinstance(cell, (float, np.floating)) and math.isnan(cell):
        return True
    if isinstance(cell, str) and cell.strip().lower() in _MISSING:
        return True
    return False


def is_number(cell: Any) -> bool:
    return isinstance(cell, (int, float, np.integer, np.floating)) and not isinstance(
        cell, (bool, np.bool_))


def header_name(cell: Any) -> str:
    """A header (or name) cell as text: ``None`` is empty, ``3.0`` is ``3``."""
    if cell is None:
        return ""
    if isinstance(cell, float) and cell.is_integer():
        cell = int(cell)
    return str(cell).strip()


# ----------------------------------------------------------------------------- numbers

def parse_number(cell: Any, decimal: str, name: str) -> tuple[float | None, Problem | None]:
    """(number, None), (None, None) for a missing cell, or (None, (what, fix))."""
    if is_missing(cell):
        return None, None
    if isinstance(cell, _decimal.Decimal):
        cell = float(cell) if cell.is_finite() else math.inf
    if is_number(cell):
        try:
            x = float(cell)
        except OverflowError:
            x = math.inf
        if not math.isfinite(x):
            return None, (f"{name} is infinite", _FIX_INFINITE)
        return x, None
    if not isinstance(cell, str):
        return None, (f"{name} '{show(cell)}' is not a number", _FIX_NUMBER)
    s = cell.strip()
    if s.lower() in _INFINITE:
        return None, (f"{name} '{show(s)}' is infinite", _FIX_INFINITE)
    x, prob = _number_text(s, decimal, name)
    if prob is None and not math.isfinite(x):
        prob = (f"{name} '{show(s)}' is too large to be a finite number",
                "check the value; lagsieve needs finite numbers")
    return (None, prob) if prob else (x, None)


def _number_text(s: str, decimal: str, name: str) -> tuple[float | None, Problem | None]:
    """A number written as text with the input's decimal mark."""
    if decimal == ",":
        if NUM_COMMA.match(s):
            return float(s.replace(",", ".")), None
        if "." in s and NUM_DOT.match(s):
            return None, (f"{name} '{show(s)}' uses a decimal point but this input is read "
                          "with decimal: ','",
                          "write it with a decimal comma, or remove decimal: ',' for this input")
        return None, (f"{name} '{show(s)}' is not a number",
                      "write a plain number such as 0,25 or leave the cell empty")
    if NUM_DOT.match(s):
        return float(s), None
    if "," in s and NUM_COMMA.match(s):
        return None, (f"{name} '{show(s)}' has a decimal comma", _FIX_DECIMAL)
    return None, (f"{name} '{show(s)}' is not a number", _FIX_NUMBER)


# ----------------------------------------------------------------------------- time

Time = tuple[int | None, int | None, Problem | None]  # (year, month or None, problem)


def _year_range_problem(year: int, shown: str) -> Problem | None:
    if YEAR_MIN <= year <= YEAR_MAX:
        return None
    return (f"year {shown} is outside {YEAR_MIN}-{YEAR_MAX}",
            "write the full four-digit year (for example 1998)")


def _year(year: int, shown: str, month: int | None = None) -> Time:
    prob = _year_range_problem(year, shown)
    return (None, None, prob) if prob else (year, month, None)


def parse_time(cell: Any, column: str, month_column: bool) -> Time:
    """Parse a ``year`` or ``date`` cell into (year, month or None, problem)."""
    empty = (f"{column} is empty", f"give every row a {column}, or delete the row")
    if is_missing(cell):
        return None, None, empty
    if isinstance(cell, (bool, np.bool_)):
        return None, None, (f"{column} '{show(cell)}' is not a year", _FIX_YEAR)
    if isinstance(cell, (_dt.date, pd.Timestamp, np.datetime64)):
        ts = pd.Timestamp(cell)
        if pd.isna(ts):
            return None, None, empty
        if month_column:
            return None, None, (f"{column} '{show(cell)}' is a date but the file also has a "
                                "month column",
                                "write the year as a whole number, or drop the month column")
        return _year(ts.year, str(ts.year), ts.month)
    if is_number(cell):
        x = float(cell)
        if not math.isfinite(x) or not x.is_integer():
            return None, None, (f"{column} '{show(cell)}' is not a whole number", _FIX_YEAR)
        return _year(int(x), str(int(x)))
    if not isinstance(cell, str):
        return None, None, (f"{column} '{show(cell)}' is not a year", _FIX_YEAR)
    return _time_text(cell.strip(), column, month_column)


def _time_text(s: str, column: str, month_column: bool) -> Time:
    """A year (``1998``) or month (``1998-07``, ``1998-07-15``) written as text."""
    if _LONG_INT.match(s):
        if not _INT_TEXT.match(s):
            return None, None, (f"year {show(s)} is outside {YEAR_MIN}-{YEAR_MAX}",
                                "write the full four-digit year (for example 1998)")
        return _year(int(float(s)), show(s))
    m = YEAR_MONTH.match(s)
    if m:
        if month_column:
            return None, None, (f"{column} '{show(s)}' holds a month but the file also has a "
                                "month column",
                                "write the year alone (for example 1998), or drop the month "
                                "column")
        year, month = int(m.group(1)), int(m.group(2))
        prob = _year_range_problem(year, m.group(1))
        if prob:
            return None, None, prob
        if not 1 <= month <= 12:
            return None, None, (f"month {month} in {column} '{show(s)}' is outside 1-12",
                                "write monthly dates as YYYY-MM with a month 01-12")
        if m.group(4) is not None and not 1 <= int(m.group(4)) <= 31:
            return None, None, (f"day {int(m.group(4))} in {column} '{show(s)}' is not a "
                                "day of the month",
                                "write monthly dates as YYYY-MM (for example 2003-07)")
        return year, month, None
    if NUM_DOT.match(s):
        return None, None, (f"{column} '{show(s)}' is not a whole number", _FIX_YEAR)
    if any(ch in s for ch in "-/.") or any(ch.isdigit() for ch in s):
        return None, None, (f"{column} '{show(s)}' is not a year or a YYYY-MM date",
                            "write years as 1998 and monthly dates as YYYY-MM (for example "
                            "2003-07)")
    return None, None, (f"{column} '{show(s)}' is not a year", _FIX_YEAR)


def parse_month(cell: Any) -> tuple[int | None, Problem | None]:
    if is_missing(cell):
        return None, None
    fix = "write the month as a number 1-12 (or leave it empty for an annual value)"
    if isinstance(cell, (bool, np.bool_)):
        return None, (f"month '{show(cell)}' is not a month number", fix)
    if is_number(cell):
        x = float(cell)
        if not math.isfinite(x) or not x.is_integer():
            return None, (f"month '{show(cell)}' is not a whole number", fix)
        month = int(x)
    elif isinstance(cell, str):
        s = cell.strip()
        if s.lower() in _MONTH_NAMES:
            return _MONTH_NAMES[s.lower()], None
        if not _LONG_INT.match(s):
            return None, (f"month '{show(s)}' is not a month number", fix)
        if not _INT_TEXT.match(s):
            return None, (f"month {show(s)} is outside 1-12", fix)
        month = int(float(s))
    else:
        return None, (f"month '{show(cell)}' is not a month number", fix)
    if not 1 <= month <= 12:
        return None, (f"month {month} is outside 1-12", fix)
    return month, None


# ----------------------------------------------------------------------------- names

def check_name(name: str, what: str) -> Problem | None:
    if name == "":
        return (f"{what} is empty", f"give every row a {what}")
    if len(name) > MAX_ID_LENGTH:
        return (f"{what} '{show(name)}' is longer than {MAX_ID_LENGTH} characters",
                "use a shorter name")
    if not _PART.match(name):
        return (f"{what} '{show(name)}' has characters other than letters, digits, '_', '.' "
                "and '-', or does not start with a letter or digit", _FIX_NAME)
    return None


def check_id(name: str, what: str) -> Problem | None:
    """Check a full series id (one optional ':' between series and group)."""
    if ":" in name and name.count(":") == 1:
        head, tail = name.split(":")
        prob = check_name(head, what) or check_name(tail, "group part of " + what)
        if prob is None and len(name) > MAX_ID_LENGTH:
            prob = (f"{what} '{show(name)}' is longer than {MAX_ID_LENGTH} characters",
                    "use a shorter name")
        return prob
    return check_name(name, what)
