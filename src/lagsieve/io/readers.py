"""Reading the study's input tables into one tidy frame, and turning it into annual series.

Every problem found in a file is reported as one line of the form
``file:row: series 'x': what is wrong; how to fix it`` (see :mod:`lagsieve.errors`), and as
many problems as practical are collected before anything is raised, so one run shows the user
everything there is to fix in a file.

Files
-----
Each input is a path (or ``{path, sheet, decimal, delimiter}``); relative paths are read from
``base_dir`` (the config's folder). The format is chosen by extension:

* ``.csv``, ``.txt``: text, the delimiter is sniffed from the header line (``,`` ``;`` tab
  ``|``) unless given; ``.tsv``: tab unless given. UTF-8 with or without a byte-order mark.
  With ``decimal: ","`` numbers are written ``0,25`` and the delimiter defaults to ``;``.
* ``.xlsx``: read with openpyxl (cached values of formulas). ``sheet`` is a sheet name or a
  0-based position; without it the first sheet is read.
* ``.parquet``: read with pandas/pyarrow. Row numbers count the header as row 1.

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

The tidy frame
--------------
``series`` (str), ``year`` (int64), ``month`` (Int64, NA for annual rows), ``value``
(float64, always finite), ``se`` (float64, NaN if absent), ``unit`` (str or NA), ``file`` (the
path as the user wrote it), ``row`` (int64, 1-based line of the file with the header as row 1;
for ``.xlsx`` the sheet row).
"""
from __future__ import annotations

import csv
import datetime as _dt
import decimal as _decimal
import io
import math
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterable, Mapping

import numpy as np
import pandas as pd

from lagsieve.errors import InputErrors, InputProblem, InputWarning

__all__ = [
    "YEAR_MIN",
    "YEAR_MAX",
    "FRAME_COLUMNS",
    "ANNUAL_COLUMNS",
    "read_table",
    "read_inputs",
    "to_annual",
    "check_positive",
    "series_warnings",
    "empty_frame",
]

YEAR_MIN = 1800
YEAR_MAX = 2200
MAX_PROBLEMS_PER_FILE = 40
MAX_ID_LENGTH = 80

FRAME_COLUMNS = ["series", "year", "month", "value", "se", "unit", "file", "row"]
ANNUAL_COLUMNS = ["series", "year", "value", "se", "filled", "unit", "file", "row"]

TEXT_EXTENSIONS = {".csv", ".tsv", ".txt"}
SUPPORTED = ".csv, .tsv, .txt, .xlsx, .parquet"

_PART = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.-]*\Z")
_ID = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.-]*(:[A-Za-z0-9][A-Za-z0-9_.-]*)?\Z")
_NUM_DOT = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?\Z")
_NUM_COMMA = re.compile(r"[+-]?(\d+,?\d*|,\d+)([eE][+-]?\d+)?\Z")
_INT_TEXT = re.compile(r"[+-]?\d{1,9}(\.0*)?\Z")
_LONG_INT = re.compile(r"[+-]?\d+(\.0*)?\Z")
_FLOAT_TEXT = re.compile(r"[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?\Z")
_YEAR_MONTH = re.compile(r"(\d{4})-(\d{1,2})(-(\d{1,2}))?\Z")
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
_LONG_ONLY = ("value", "group", "se", "cv", "unit")
_TIME = ("year", "date", "month")

_FIX_NUMBER = "write a plain number such as 0.25, or leave the cell empty for a missing value"
_FIX_DECIMAL = "set decimal: ',' for this input"
_FIX_NAME = (
    "use only letters, digits, '_', '.' and '-', starting with a letter or digit "
    "(for example 'velk_m')"
)


# ----------------------------------------------------------------------------- helpers

def _show(value: Any, limit: int = 40) -> str:
    """A user's cell as a short, single-line, printable text for messages."""
    text = value if isinstance(value, str) else str(value)
    if len(text) > limit:
        text = text[: limit - 3] + "..."
    if text.isprintable():
        return text
    return "".join(c if c.isprintable() else repr(c)[1:-1] for c in text)


def _label(spec_path: str) -> str:
    return _show(spec_path, limit=300)


class _Collector:
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


def _is_missing(cell: Any) -> bool:
    if cell is None or cell is pd.NA or cell is pd.NaT:
        return True
    if isinstance(cell, (float, np.floating)) and math.isnan(cell):
        return True
    if isinstance(cell, str) and cell.strip().lower() in _MISSING:
        return True
    return False


def _is_number(cell: Any) -> bool:
    return isinstance(cell, (int, float, np.integer, np.floating)) and not isinstance(
        cell, (bool, np.bool_))


def _parse_number(cell: Any, decimal: str, name: str) -> tuple[float | None, tuple[str, str] | None]:
    """(number, None), (None, None) for a missing cell, or (None, (what, fix))."""
    if _is_missing(cell):
        return None, None
    if isinstance(cell, _decimal.Decimal):
        cell = float(cell) if cell.is_finite() else math.inf
    if _is_number(cell):
        try:
            x = float(cell)
        except OverflowError:
            x = math.inf
        if not math.isfinite(x):
            return None, (f"{name} is infinite",
                          "replace it with a finite number, or leave the cell empty")
        return x, None
    if not isinstance(cell, str):
        return None, (f"{name} '{_show(cell)}' is not a number", _FIX_NUMBER)
    s = cell.strip()
    low = s.lower()
    if low in _INFINITE:
        return None, (f"{name} '{_show(s)}' is infinite",
                      "replace it with a finite number, or leave the cell empty")
    if decimal == ",":
        if _NUM_COMMA.match(s):
            x = float(s.replace(",", "."))
        elif "." in s and _NUM_DOT.match(s):
            return None, (f"{name} '{_show(s)}' uses a decimal point but this input is read "
                          "with decimal: ','",
                          "write it with a decimal comma, or remove decimal: ',' for this input")
        else:
            return None, (f"{name} '{_show(s)}' is not a number",
                          "write a plain number such as 0,25 or leave the cell empty")
    else:
        if _NUM_DOT.match(s):
            x = float(s)
        elif "," in s and _NUM_COMMA.match(s):
            return None, (f"{name} '{_show(s)}' has a decimal comma", _FIX_DECIMAL)
        else:
            return None, (f"{name} '{_show(s)}' is not a number", _FIX_NUMBER)
    if not math.isfinite(x):
        return None, (f"{name} '{_show(s)}' is too large to be a finite number",
                      "check the value; lagsieve needs finite numbers")
    return x, None


def _year_range_problem(year: int, shown: str) -> tuple[str, str] | None:
    if YEAR_MIN <= year <= YEAR_MAX:
        return None
    return (f"year {shown} is outside {YEAR_MIN}-{YEAR_MAX}",
            "write the full four-digit year (for example 1998)")


def _parse_time(cell: Any, column: str, month_column: bool
                ) -> tuple[int | None, int | None, tuple[str, str] | None]:
    """Parse a ``year`` or ``date`` cell into (year, month or None, problem)."""
    if _is_missing(cell):
        return None, None, (f"{column} is empty",
                            f"give every row a {column}, or delete the row")
    if isinstance(cell, (bool, np.bool_)):
        return None, None, (f"{column} '{_show(cell)}' is not a year",
                            "write the year as a whole number such as 1998")
    if isinstance(cell, (_dt.date, pd.Timestamp, np.datetime64)):
        ts = pd.Timestamp(cell)
        if pd.isna(ts):
            return None, None, (f"{column} is empty",
                                f"give every row a {column}, or delete the row")
        if month_column:
            return None, None, (f"{column} '{_show(cell)}' is a date but the file also has a "
                                "month column",
                                "write the year as a whole number, or drop the month column")
        prob = _year_range_problem(ts.year, str(ts.year))
        return (None, None, prob) if prob else (ts.year, ts.month, None)
    if _is_number(cell):
        x = float(cell)
        if not math.isfinite(x) or not x.is_integer():
            return None, None, (f"{column} '{_show(cell)}' is not a whole number",
                                "write the year as a whole number such as 1998")
        year = int(x)
        prob = _year_range_problem(year, str(year))
        return (None, None, prob) if prob else (year, None, None)
    if not isinstance(cell, str):
        return None, None, (f"{column} '{_show(cell)}' is not a year",
                            "write the year as a whole number such as 1998")
    s = cell.strip()
    if _LONG_INT.match(s):
        if not _INT_TEXT.match(s):
            return None, None, (f"year {_show(s)} is outside {YEAR_MIN}-{YEAR_MAX}",
                                "write the full four-digit year (for example 1998)")
        year = int(float(s))
        prob = _year_range_problem(year, _show(s))
        return (None, None, prob) if prob else (year, None, None)
    m = _YEAR_MONTH.match(s)
    if m:
        if month_column:
            return None, None, (f"{column} '{_show(s)}' holds a month but the file also has a "
                                "month column",
                                "write the year alone (for example 1998), or drop the month "
                                "column")
        year, month = int(m.group(1)), int(m.group(2))
        prob = _year_range_problem(year, m.group(1))
        if prob:
            return None, None, prob
        if not 1 <= month <= 12:
            return None, None, (f"month {month} in {column} '{_show(s)}' is outside 1-12",
                                "write monthly dates as YYYY-MM with a month 01-12")
        if m.group(4) is not None and not 1 <= int(m.group(4)) <= 31:
            return None, None, (f"day {int(m.group(4))} in {column} '{_show(s)}' is not a "
                                "day of the month",
                                "write monthly dates as YYYY-MM (for example 2003-07)")
        return year, month, None
    if _FLOAT_TEXT.match(s):
        return None, None, (f"{column} '{_show(s)}' is not a whole number",
                            "write the year as a whole number such as 1998")
    if any(ch in s for ch in "-/.") or any(ch.isdigit() for ch in s):
        return None, None, (f"{column} '{_show(s)}' is not a year or a YYYY-MM date",
                            "write years as 1998 and monthly dates as YYYY-MM (for example "
                            "2003-07)")
    return None, None, (f"{column} '{_show(s)}' is not a year",
                        "write the year as a whole number such as 1998")


def _parse_month(cell: Any) -> tuple[int | None, tuple[str, str] | None]:
    if _is_missing(cell):
        return None, None
    fix = "write the month as a number 1-12 (or leave it empty for an annual value)"
    if isinstance(cell, (bool, np.bool_)):
        return None, (f"month '{_show(cell)}' is not a month number", fix)
    if _is_number(cell):
        x = float(cell)
        if not math.isfinite(x) or not x.is_integer():
            return None, (f"month '{_show(cell)}' is not a whole number", fix)
        month = int(x)
    elif isinstance(cell, str):
        s = cell.strip()
        if s.lower() in _MONTH_NAMES:
            return _MONTH_NAMES[s.lower()], None
        if not _LONG_INT.match(s):
            return None, (f"month '{_show(s)}' is not a month number", fix)
        if not _INT_TEXT.match(s):
            return None, (f"month {_show(s)} is outside 1-12", fix)
        month = int(float(s))
    else:
        return None, (f"month '{_show(cell)}' is not a month number", fix)
    if not 1 <= month <= 12:
        return None, (f"month {month} is outside 1-12", fix)
    return month, None


def _check_name(name: str, what: str) -> tuple[str, str] | None:
    if name == "":
        return (f"{what} is empty", f"give every row a {what}")
    if len(name) > MAX_ID_LENGTH:
        return (f"{what} '{_show(name)}' is longer than {MAX_ID_LENGTH} characters",
                "use a shorter name")
    if not _PART.match(name):
        return (f"{what} '{_show(name)}' has characters other than letters, digits, '_', '.' "
                "and '-', or does not start with a letter or digit", _FIX_NAME)
    return None


def _check_id(name: str, what: str) -> tuple[str, str] | None:
    """Check a full series id (one optional ':' between series and group)."""
    if ":" in name and name.count(":") == 1:
        head, tail = name.split(":")
        prob = _check_name(head, what) or _check_name(tail, "group part of " + what)
        if prob is None and len(name) > MAX_ID_LENGTH:
            prob = (f"{what} '{_show(name)}' is longer than {MAX_ID_LENGTH} characters",
                    "use a shorter name")
        return prob
    return _check_name(name, what)


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


# ----------------------------------------------------------------------------- reading

@dataclass
class _Grid:
    header: list[Any]
    header_row: int
    rows: list[tuple[int, list[Any]]]
    delimiter: str | None = None


@dataclass
class _Spec:
    path: str
    sheet: str | int | None = None
    decimal: str = "."
    delimiter: str | None = None


def _normalise_spec(spec: Any) -> _Spec:
    if isinstance(spec, (str, Path)):
        return _Spec(path=str(spec))
    if not isinstance(spec, Mapping):
        raise InputErrors([InputProblem(
            what=f"an input must be a path or {{path, sheet, decimal, delimiter}}, not "
                 f"'{_show(spec)}'",
            fix="write the input as a path, e.g. data/mortality.csv", key="inputs")])
    col = _Collector(None)
    unknown = sorted(str(k) for k in spec if k not in ("path", "sheet", "decimal", "delimiter"))
    path = spec.get("path")
    if not isinstance(path, (str, Path)) or str(path).strip() == "":
        col.items.append(InputProblem(what="an input has no path",
                                      fix="add path: <file> to the input", key="inputs"))
        col.check()
    label = _label(str(path))
    if unknown:
        col.add(f"unknown input option(s) {', '.join(_show(u) for u in unknown)}",
                "use only path, sheet, decimal and delimiter", file=label)
    decimal = spec.get("decimal", ".")
    if decimal is None:
        decimal = "."
    if decimal not in (".", ","):
        col.add(f"decimal '{_show(decimal)}' is neither '.' nor ','",
                "set decimal: '.' or decimal: ','", file=label)
    delimiter = spec.get("delimiter")
    if delimiter is not None and (not isinstance(delimiter, str) or len(delimiter) != 1
                                  or delimiter in '"\r\n'):
        col.add(f"delimiter '{_show(delimiter)}' is not a single character",
                "set delimiter to one character such as ',' ';' or a tab", file=label)
    elif delimiter is not None and delimiter == decimal:
        col.add(f"delimiter and decimal are both '{delimiter}'",
                "use delimiter: ';' with decimal: ','", file=label)
    sheet = spec.get("sheet")
    if sheet is not None and (isinstance(sheet, bool) or not isinstance(sheet, (str, int))):
        col.add(f"sheet '{_show(sheet)}' is neither a sheet name nor a position",
                "give the sheet's name, or its position counting from 0", file=label)
    col.check()
    return _Spec(path=str(path), sheet=sheet, decimal=decimal, delimiter=delimiter)


def _line_of(data: bytes, pos: int) -> int:
    prefix = data[:pos]
    lines = prefix.splitlines()
    if not prefix or prefix.endswith((b"\n", b"\r")):
        return len(lines) + 1
    return len(lines)


def _sniff(line: str) -> str:
    counts = {d: 0 for d in (",", ";", "\t", "|")}
    quoted = False
    for ch in line:
        if ch == '"':
            quoted = not quoted
        elif not quoted and ch in counts:
            counts[ch] += 1
    best = max(counts, key=lambda d: counts[d])  # ties: the order above
    return best if counts[best] > 0 else ","


def _read_text(path: Path, spec: _Spec, col: _Collector) -> _Grid:
    data = path.read_bytes()
    if data.startswith((b"\xff\xfe", b"\xfe\xff")):
        col.fatal("the file is UTF-16 text, not UTF-8",
                  "save it as UTF-8 (in Excel: 'CSV UTF-8 (comma delimited)')")
    body = data[3:] if data.startswith(b"\xef\xbb\xbf") else data
    if not body.strip():
        col.fatal("the file is empty", "put a header line and data rows in it")
    nul = data.find(b"\x00")
    if nul >= 0:
        line = _line_of(data, nul)
        col.fatal(f"the file holds binary data (a NUL byte on line {line}), not text",
                  f"give a plain-text table, or a workbook/parquet file with its own extension "
                  f"({SUPPORTED})", row=line)
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = _line_of(data, exc.start)
        col.fatal(f"the file is not UTF-8 text (byte 0x{data[exc.start]:02x} on line {line})",
                  "save it as UTF-8 (in Excel: 'CSV UTF-8'; in R: write.csv(..., "
                  "fileEncoding = 'UTF-8'))", row=line)
    ext = path.suffix.lower()
    if spec.delimiter is not None:
        delimiter = spec.delimiter
    elif ext == ".tsv":
        delimiter = "\t"
    elif spec.decimal == ",":
        delimiter = ";"
    else:
        first = next((ln for ln in re.split(r"\r\n|\r|\n", text) if ln.strip()), "")
        delimiter = _sniff(first)
    reader = csv.reader(io.StringIO(text, newline=""), delimiter=delimiter, quotechar='"')
    header: list[Any] | None = None
    header_row = 0
    rows: list[tuple[int, list[Any]]] = []
    previous = 0
    try:
        for record in reader:
            start = previous + 1
            previous = reader.line_num
            cells = [c.strip() for c in record]
            if not any(cells):
                continue
            if header is None:
                header, header_row = cells, start
            else:
                rows.append((start, cells))
    except csv.Error as exc:
        col.fatal(f"the table cannot be read near line {previous + 1} ({_show(str(exc), 80)})",
                  "check the quotes on that line: a cell with a delimiter or quote must be "
                  "enclosed in double quotes, with inner quotes doubled", row=previous + 1)
    if header is None:  # only blank records
        col.fatal("the file is empty", "put a header line and data rows in it")
    return _Grid(header=header, header_row=header_row, rows=rows, delimiter=delimiter)


def _read_xlsx(path: Path, spec: _Spec, col: _Collector, warnings: list[InputWarning]) -> _Grid:
    import openpyxl

    try:
        wb = openpyxl.load_workbook(path, read_only=True, data_only=True)
    except Exception as exc:  # openpyxl raises many kinds for damaged files
        col.fatal(f"the file is not a readable .xlsx workbook ({type(exc).__name__})",
                  "open it in a spreadsheet program and save it again as .xlsx, or export "
                  "the sheet as CSV")
    try:
        names = list(wb.sheetnames)
        sheet = spec.sheet
        if sheet is None:
            if not names:
                col.fatal("the workbook has no sheets", "add a sheet with the table")
            ws = wb.worksheets[0]
            if len(names) > 1:
                warnings.append(InputWarning(
                    what=f"no sheet given; reading the first sheet '{_show(names[0])}' of "
                         f"{len(names)}", file=col.file))
        elif isinstance(sheet, int):
            if not 0 <= sheet < len(names):
                col.fatal(f"sheet {sheet} does not exist (the workbook has {len(names)} "
                          f"sheet(s): {', '.join(_show(n) for n in names)})",
                          "set sheet to a position counting from 0, or to a sheet name")
            ws = wb.worksheets[sheet]
        else:
            if sheet not in names:
                col.fatal(f"sheet '{_show(sheet)}' does not exist (sheets: "
                          f"{', '.join(_show(n) for n in names)})",
                          "set sheet to one of the sheet names above (spelling and case "
                          "matter)")
            ws = wb[sheet]
        header = None
        header_row = 0
        rows: list[tuple[int, list[Any]]] = []
        for number, values in enumerate(ws.iter_rows(values_only=True), start=1):
            cells = [v.strip() if isinstance(v, str) else v for v in values]
            cells = [None if (isinstance(v, str) and v == "") else v for v in cells]
            if all(v is None for v in cells):
                continue
            if header is None:
                header, header_row = cells, number
            else:
                rows.append((number, cells))
    except InputErrors:
        raise
    except Exception as exc:
        col.fatal(f"the workbook cannot be read ({type(exc).__name__})",
                  "open it in a spreadsheet program and save it again as .xlsx, or export "
                  "the sheet as CSV")
    finally:
        wb.close()
    if header is None:
        col.fatal("the sheet is empty", "put a header row and data rows in it")
    return _Grid(header=header, header_row=header_row, rows=rows)


def _read_parquet(path: Path, col: _Collector) -> _Grid:
    try:
        df = pd.read_parquet(path)
    except Exception as exc:  # pyarrow raises many kinds for damaged files
        col.fatal(f"the file is not a readable parquet file ({type(exc).__name__})",
                  "write it again with pandas.DataFrame.to_parquet, or give a CSV file")
    if any(n is not None for n in df.index.names):
        df = df.reset_index()
    header = [str(c) for c in df.columns]
    if not header:
        col.fatal("the file has no columns", "write a table with a year column")
    rows = [(i + 2, list(values)) for i, values in enumerate(df.itertuples(index=False,
                                                                           name=None))]
    return _Grid(header=header, header_row=1, rows=rows)


def _header_name(cell: Any) -> str:
    if cell is None:
        return ""
    if isinstance(cell, float) and cell.is_integer():
        cell = int(cell)
    return str(cell).strip()


def read_table(spec: str | Mapping[str, Any], base_dir: str | Path
               ) -> tuple[pd.DataFrame, list[InputWarning]]:
    """Read one input file into the tidy long frame (see the module docstring).

    ``spec`` is a path or ``{path, sheet, decimal, delimiter}``; a relative path is read from
    ``base_dir``. Returns ``(frame, warnings)``; raises :class:`InputErrors` with every problem
    found in the file. The file is only read, never written.
    """
    s = _normalise_spec(spec)
    label = _label(s.path)
    col = _Collector(label)
    warnings: list[InputWarning] = []
    path = Path(s.path).expanduser()
    if not path.is_absolute():
        path = Path(base_dir) / path
    ext = path.suffix.lower()
    try:
        exists, is_dir = path.exists(), path.is_dir()
    except (OSError, ValueError) as exc:
        col.fatal(f"the path cannot be used ({_show(str(exc), 80)})",
                  "check the path under inputs for stray characters")
    if not exists:
        col.fatal(f"the file does not exist (looked for {_show(str(path), 300)})",
                  "check the path under inputs; relative paths are read from the config's "
                  "folder")
    if is_dir:
        col.fatal("this is a folder, not a file", "give the path of a table file "
                  f"({SUPPORTED})")
    if ext == ".xls":
        col.fatal("old-style .xls workbooks are not read",
                  "save the workbook as .xlsx, or export the sheet as CSV")
    if ext not in TEXT_EXTENSIONS | {".xlsx", ".parquet"}:
        col.fatal(f"the file type '{_show(ext or '(no extension)')}' is not supported",
                  f"give a table as {SUPPORTED}")
    if s.sheet is not None and ext != ".xlsx":
        warnings.append(InputWarning(what="sheet is only used for .xlsx files and is ignored",
                                     file=label))
    try:
        if ext in TEXT_EXTENSIONS:
            grid = _read_text(path, s, col)
        elif ext == ".xlsx":
            grid = _read_xlsx(path, s, col, warnings)
        else:
            grid = _read_parquet(path, col)
    except OSError as exc:
        col.fatal(f"the file cannot be read ({_show(exc.strerror or type(exc).__name__, 80)})",
                  "check that the file is readable by you and not locked by another program")
    frame = _parse_grid(grid, s, col, warnings)
    return frame, warnings


def _parse_grid(grid: _Grid, spec: _Spec, col: _Collector,
                warnings: list[InputWarning]) -> pd.DataFrame:
    hrow = grid.header_row
    raw_names = [_header_name(c) for c in grid.header]
    names = [n.lower() for n in raw_names]
    ncol = len(names)
    data_rows = grid.rows

    # --- header checks ------------------------------------------------------------------
    # unnamed columns: ignored when empty, an error when they hold values
    keep = []
    for j, n in enumerate(names):
        if n:
            keep.append(j)
            continue
        first = next((r for r, cells in data_rows
                      if j < len(cells) and not _is_missing(cells[j])), None)
        if first is not None:
            col.add(f"column {j + 1} has no name but holds values (first on row {first})",
                    "give the column a name in the header, or delete it", row=hrow)
    seen: dict[str, int] = {}
    for j in keep:
        n = names[j]
        if n in seen:
            col.add(f"column '{_show(raw_names[j])}' appears twice (columns {seen[n] + 1} and "
                    f"{j + 1})", "rename or remove one of the two columns", row=hrow)
        else:
            seen[n] = j
    col.check()
    if not data_rows:
        col.fatal("the file has a header but no data rows",
                  "add rows below the header (one per year, or per series and year)", row=hrow)

    has = set(seen)
    long_layout = "series" in has
    if long_layout and "value" not in has:
        col.fatal("there is a series column but no value column",
                  "add a 'value' column, or remove 'series' to use the wide layout (year "
                  "plus one column per series)", row=hrow)
    if "year" not in has and "date" not in has:
        looks_like_data = all(_NUM_DOT.match(n) or _NUM_COMMA.match(n) or _YEAR_MONTH.match(n)
                              for n in names if n)
        found = ", ".join(_show(raw_names[j]) for j in keep)
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
    if long_layout and "se" in has and "cv" in has:
        col.fatal("there is both an se and a cv column",
                  "keep one of them (se = cv * |value| is computed from cv)", row=hrow)
    time_name = "year" if "year" in has else "date"
    time_j = seen[time_name]
    month_j = seen.get("month")

    if long_layout:
        known = {"series", "value", "year", "date", "month", "group", "se", "cv", "unit"}
        unused = [raw_names[j] for j in keep if names[j] not in known]
        if unused:
            warnings.append(InputWarning(
                what=f"column(s) {', '.join(_show(u) for u in unused)} are not used",
                file=col.file))
        series_cols: list[tuple[int, str]] = []
    else:
        series_cols = []
        for j in keep:
            n = names[j]
            if n in _TIME:
                continue
            if n in _LONG_ONLY:
                col.add(f"column '{_show(raw_names[j])}' belongs to the long layout but there "
                        "is no series column",
                        "add 'series' and 'value' columns for the long layout (series, year, "
                        "value, ...), or rename the column after its series", row=hrow)
                continue
            prob = _check_id(raw_names[j], "column name")
            if prob:
                col.add(prob[0], prob[1], row=hrow)
                continue
            series_cols.append((j, raw_names[j]))
        col.check()
        if not series_cols:
            col.fatal("there are no series columns next to the year column",
                      "add one column per series (the header is the series id), or use the "
                      "long layout (series, year, value)", row=hrow)

    # --- rows ---------------------------------------------------------------------------
    decimal = spec.decimal
    recs: list[tuple[str, int, int | None, float | None, float, str | None, int]] = []
    missing_rows: list[int] = []
    for r, cells in data_rows:
        if len(cells) > ncol:
            extra = [c for c in cells[ncol:] if not _is_missing(c)]
            if extra:
                fix = "remove the extra delimiter, or quote the cell that contains it"
                if grid.delimiter == "," and decimal == ".":
                    fix = ("if numbers use a decimal comma, set decimal: ',' for this input; "
                           "otherwise " + fix)
                col.add(f"the row has {len(cells)} cells but the header has {ncol}", fix,
                        row=r)
                continue
        cells = list(cells[:ncol]) + [None] * (ncol - len(cells))
        year, month, prob = _parse_time(cells[time_j], time_name, month_j is not None)
        series_hint = None
        if long_layout:
            series_hint, sprob = _row_series(cells, seen)
            if sprob:
                col.add(sprob[0], sprob[1], row=r)
                series_hint = None
        if prob:
            col.add(prob[0], prob[1], row=r, series=series_hint)
            continue
        if month_j is not None:
            month, mprob = _parse_month(cells[month_j])
            if mprob:
                col.add(mprob[0], mprob[1], row=r, series=series_hint)
                continue
        if long_layout:
            if series_hint is None:
                continue
            value, vprob = _parse_number(cells[seen["value"]], decimal, "value")
            if vprob:
                col.add(vprob[0], vprob[1], row=r, series=series_hint)
                continue
            se = math.nan
            bad = False
            for name in ("se", "cv"):
                if name not in seen:
                    continue
                x, eprob = _parse_number(cells[seen[name]], decimal, name)
                if eprob is None and x is not None and x < 0:
                    eprob = (f"{name} {_show(cells[seen[name]])} is negative",
                             f"an {name} must be 0 or more; check the sign or leave the cell "
                             "empty")
                if eprob:
                    col.add(eprob[0], eprob[1], row=r, series=series_hint)
                    bad = True
                elif x is not None:
                    se = x if name == "se" else (x * abs(value) if value is not None
                                                 else math.nan)
                    if not math.isfinite(se):
                        col.add(f"se from cv {_show(cells[seen[name]])} is too large",
                                "check the cv and the value", row=r, series=series_hint)
                        bad = True
            if bad:
                continue
            unit = None
            if "unit" in seen and not _is_missing(cells[seen["unit"]]):
                unit = _header_name(cells[seen["unit"]])
            recs.append((series_hint, year, month, value, se, unit, r))
            if value is None:
                missing_rows.append(r)
        else:
            for j, sid in series_cols:
                value, vprob = _parse_number(cells[j], decimal, "value")
                if vprob:
                    col.add(vprob[0], vprob[1], row=r, series=sid)
                    continue
                if value is not None:
                    recs.append((sid, year, month, value, math.nan, None, r))

    # --- per-series checks --------------------------------------------------------------
    first_key: dict[tuple, int] = {}
    kinds: dict[str, dict[bool, int]] = {}
    units: dict[str, tuple[str, int]] = {}
    for sid, year, month, _value, _se, unit, r in recs:
        key = (sid, year, month)
        when = f"{year}" if month is None else f"{year}-{month:02d}"
        if key in first_key:
            col.add(f"{when} appears twice (first on row {first_key[key]})",
                    "keep one row per series and " + ("year" if month is None else "month"),
                    row=r, series=sid)
        else:
            first_key[key] = r
        k = kinds.setdefault(sid, {})
        k.setdefault(month is not None, r)
        if unit is not None:
            if sid not in units:
                units[sid] = (unit, r)
            elif units[sid][0] != unit:
                col.add(f"unit '{_show(unit)}' differs from unit '{_show(units[sid][0])}' on row "
                        f"{units[sid][1]}",
                        "use one unit for the whole series (convert the values), or split it "
                        "into two series", row=r, series=sid)
                units[sid] = (unit, r)  # report each change once
    for sid, k in kinds.items():
        if len(k) == 2:
            later = max(k.values())
            col.add(f"the series has monthly rows (first on row {k[True]}) and annual rows "
                    f"(first on row {k[False]})",
                    "give every row of the series a month, or put annual and monthly values "
                    "in two series", row=later, series=sid)
    col.check()

    if long_layout and missing_rows:
        shown = ", ".join(str(r) for r in missing_rows[:10])
        more = f" and {len(missing_rows) - 10} more" if len(missing_rows) > 10 else ""
        warnings.append(InputWarning(
            what=f"{len(missing_rows)} row(s) have no value and are left out (rows {shown}{more})",
            file=col.file))
    if not long_layout:
        present = {rec[0] for rec in recs}
        for _j, sid in series_cols:
            if sid not in present:
                warnings.append(InputWarning(what="the column has no values", file=col.file,
                                             series=sid))
    recs = [rec for rec in recs if rec[3] is not None]
    if not recs:
        col.fatal("the file holds no values", "fill in the value cells (empty cells are "
                  "missing values)")
    unit_of = {sid: u for sid, (u, _r) in units.items()}
    return _frame(
        [rec[0] for rec in recs],
        [rec[1] for rec in recs],
        [rec[2] for rec in recs],
        [rec[3] for rec in recs],
        [rec[4] for rec in recs],
        [rec[5] if rec[5] is not None else unit_of.get(rec[0]) for rec in recs],
        [col.file] * len(recs),
        [rec[6] for rec in recs],
    )


def _row_series(cells: list[Any], seen: dict[str, int]) -> tuple[str | None, tuple | None]:
    raw = cells[seen["series"]]
    name = "" if _is_missing(raw) else _header_name(raw)
    prob = _check_id(name, "series name")
    if prob:
        return None, prob
    if "group" in seen and not _is_missing(cells[seen["group"]]):
        group = _header_name(cells[seen["group"]])
        if ":" in name:
            return None, (f"series name '{_show(name)}' already has a group part and the row "
                          "also has a group", "use either series:group or a group column")
        prob = _check_name(group, "group name")
        if prob:
            return None, prob
        name = f"{name}:{group}"
        if len(name) > MAX_ID_LENGTH:
            return None, (f"series id '{_show(name)}' is longer than {MAX_ID_LENGTH} "
                          "characters", "use shorter series or group names")
    return name, None


def read_inputs(specs: Iterable[str | Mapping[str, Any]], base_dir: str | Path
                ) -> tuple[pd.DataFrame, list[InputWarning]]:
    """Read every input and check problems across files.

    Problems of all files are collected and raised together. Across files: the same file
    listed twice, and the same series id in two files (named with both files), are errors.
    The frames are concatenated in the order of ``specs`` (columns as in :func:`read_table`).
    """
    specs = list(specs)
    problems: list[InputProblem] = []
    warnings: list[InputWarning] = []
    frames: list[pd.DataFrame] = []
    if not specs:
        raise InputErrors([InputProblem(what="no input files are listed",
                                        fix="list your data files under inputs", key="inputs")])
    resolved: dict[Path, str] = {}
    for spec in specs:
        try:
            s = _normalise_spec(spec)
        except InputErrors as exc:
            problems.extend(exc.problems)
            continue
        p = Path(s.path).expanduser()
        p = p if p.is_absolute() else Path(base_dir) / p
        try:
            p = p.resolve()
        except (OSError, ValueError):
            pass  # read_table reports the unusable path
        if p in resolved:
            problems.append(InputProblem(
                what=f"the file is listed twice under inputs (also as '{resolved[p]}')",
                fix="list each file once", file=_label(s.path)))
            continue
        resolved[p] = _label(s.path)
        try:
            frame, warns = read_table(spec, base_dir)
        except InputErrors as exc:
            problems.extend(exc.problems)
            continue
        frames.append(frame)
        warnings.extend(warns)
    owner: dict[str, tuple[str, int]] = {}
    for frame in frames:
        if frame.empty:
            continue
        firsts = frame.groupby("series", sort=False)["row"].min()
        file = frame["file"].iat[0]
        for sid, row in firsts.items():
            if sid in owner:
                f0, r0 = owner[sid]
                problems.append(InputProblem(
                    what=f"the series is also in {f0} (first on row {r0})",
                    fix="keep each series in one input file, or rename one of them (a group "
                        "column makes distinct ids)", file=file, row=int(row), series=sid))
            else:
                owner[sid] = (file, int(row))
    if problems:
        raise InputErrors(problems)
    if not frames:
        return empty_frame(), warnings
    return pd.concat(frames, ignore_index=True), warnings


# ----------------------------------------------------------------------------- annual

def _window_offsets(months: list[int]) -> dict[int, int] | None:
    """Years to add to a month's calendar year to get the window's year.

    Months are taken in the order listed; each time a month is not later than the one before,
    the window passes into the next calendar year. The window belongs to the year of its last
    month. Returns None if the window wraps past the year end more than once.
    """
    crossings = [0]
    for prev, cur in zip(months, months[1:]):
        crossings.append(crossings[-1] + (1 if cur <= prev else 0))
    total = crossings[-1]
    if total > 1:
        return None
    return {m: total - c for m, c in zip(months, crossings)}


def _fmt(x: float) -> str:
    return f"{x:.6g}"


def to_annual(long_df: pd.DataFrame, series_options: Mapping[str, Mapping[str, Any]]
              ) -> tuple[pd.DataFrame, list[dict[str, Any]]]:
    """One value per year for every series named in ``series_options``.

    Series of ``long_df`` that are not in ``series_options`` are left out (the study does not
    use them); ids of ``series_options`` without data are ignored here (the config check
    reports them).

    Monthly series need ``aggregate: {months, how, min_months}``. The months are taken in the
    order listed, and each time a month is not later than the previous one the window passes
    into the next calendar year; the window's value belongs to the year of its LAST month.
    So ``months: [12, 1, 2]`` combines December 1999 with January and February 2000 into the
    value of 2000, while ``[1, 2, 12]`` combines January, February and December of the same
    year. ``how`` is mean (default), sum, min or max; a year with fewer than ``min_months``
    (default: all listed months) monthly values is dropped and noted. The se of a mean is
    ``sqrt(sum se^2) / n`` and of a sum ``sqrt(sum se^2)`` (months taken as independent; NaN
    if any month lacks an se); for min and max it is the se of the chosen month.

    Then gaps: with ``fill: linear`` interior runs of at most ``max_gap`` (default 1) missing
    years are filled by linear interpolation between the neighbouring years (``filled`` is
    True, ``se`` NaN); longer runs, and every interior gap when ``fill`` is ``none``, are left
    missing. Nothing is filled silently: ``notes`` lists every dropped, filled and unfilled
    year as ``{series, year, action, reason}`` with action ``'dropped'`` (too few months),
    ``'filled'`` (interpolated) or ``'unfilled'`` (an interior missing year left missing).

    Returns ``(annual_df, notes)``; ``annual_df`` has columns ``series`` (str), ``year``
    (int64), ``value``, ``se`` (float64), ``filled`` (bool), ``unit`` (str or NA) and the source
    ``file`` (str) and ``row`` (Int64, NA unless the value comes from exactly one row).
    Raises :class:`InputErrors` listing every series with a problem.
    """
    problems: list[InputProblem] = []
    notes: list[dict[str, Any]] = []
    parts: list[pd.DataFrame] = []
    df = long_df[np.isfinite(long_df["value"].to_numpy(dtype=float))]
    groups = {sid: g for sid, g in df.groupby("series", sort=True)}
    for sid in sorted(series_options):
        if sid not in groups:
            continue
        opts = series_options.get(sid) or {}
        g = groups[sid].sort_values(["year", "month"], na_position="first")
        file = str(g["file"].iat[0])
        unit = g["unit"].dropna()
        unit = str(unit.iat[0]) if len(unit) else None

        def problem(what: str, fix: str) -> None:
            problems.append(InputProblem(what=what, fix=fix, file=file, series=sid))

        monthly = g["month"].notna()
        aggregate = opts.get("aggregate")
        if monthly.any() and not monthly.all():
            problem("the series has both monthly and annual rows",
                    "give every row of the series a month, or split it into two series")
            continue
        if monthly.all():
            if not aggregate:
                problem("the values are monthly and need combining into one value per year",
                        "add aggregate: {months: [...]} to its entry in the config")
                continue
            annual, agg_notes, prob = _aggregate(g, sid, aggregate)
            if prob:
                problem(*prob)
                continue
            notes.extend(agg_notes)
        else:
            if aggregate:
                problem("the values are annual (no month) but the config gives aggregate",
                        "remove aggregate from its entry in the config")
                continue
            annual = pd.DataFrame({
                "year": g["year"].to_numpy(dtype="int64"),
                "value": g["value"].to_numpy(dtype=float),
                "se": g["se"].to_numpy(dtype=float),
                "row": pd.array(g["row"].to_numpy(), dtype="Int64"),
            })
        fill = opts.get("fill") or "none"
        max_gap = opts.get("max_gap")
        max_gap = 1 if max_gap is None else max_gap
        if fill not in ("none", "linear"):
            problem(f"fill '{_show(fill)}' is unknown", "use fill: none or fill: linear")
            continue
        if isinstance(max_gap, bool) or not isinstance(max_gap, (int, np.integer)) or max_gap < 1:
            problem(f"max_gap '{_show(max_gap)}' is not a whole number of at least 1",
                    "set max_gap: 1 (or more)")
            continue
        annual, fill_notes = _fill(annual, sid, fill, int(max_gap))
        notes.extend(fill_notes)
        annual.insert(0, "series", sid)
        annual["unit"] = unit
        annual["file"] = file
        parts.append(annual)
    if problems:
        raise InputErrors(problems)
    if not parts:
        out = pd.DataFrame({c: [] for c in ANNUAL_COLUMNS})
    else:
        out = pd.concat(parts, ignore_index=True)
    out = pd.DataFrame({
        "series": pd.Series(out["series"].tolist(), dtype="str"),
        "year": pd.Series(out["year"].tolist(), dtype="int64"),
        "value": pd.Series(out["value"].tolist(), dtype="float64"),
        "se": pd.Series(out["se"].tolist(), dtype="float64"),
        "filled": pd.Series(out["filled"].tolist(), dtype="bool"),
        "unit": pd.Series(out["unit"].tolist(), dtype="str"),
        "file": pd.Series(out["file"].tolist(), dtype="str"),
        "row": pd.Series(out["row"].tolist(), dtype="Int64"),
    })
    return out.sort_values(["series", "year"], ignore_index=True), notes


def _aggregate(g: pd.DataFrame, sid: str, aggregate: Mapping[str, Any]
               ) -> tuple[pd.DataFrame | None, list[dict], tuple[str, str] | None]:
    months = aggregate.get("months") if isinstance(aggregate, Mapping) else None
    if (not isinstance(months, (list, tuple)) or not months
            or any(isinstance(m, bool) or not isinstance(m, (int, np.integer)) or not 1 <= m <= 12
                   for m in months) or len(set(months)) != len(months)):
        return None, [], (f"aggregate months '{_show(months)}' are not distinct month numbers "
                          "1-12", "write aggregate: {months: [6, 7, 8]} (months 1-12, each once)")
    months = [int(m) for m in months]
    how = aggregate.get("how", "mean") or "mean"
    if how not in ("mean", "sum", "min", "max"):
        return None, [], (f"aggregate how '{_show(how)}' is unknown",
                          "use how: mean, sum, min or max")
    min_months = aggregate.get("min_months")
    min_months = len(months) if min_months is None else min_months
    if (isinstance(min_months, bool) or not isinstance(min_months, (int, np.integer))
            or min_months < 1):
        return None, [], (f"aggregate min_months '{_show(min_months)}' is not a whole number of "
                          "at least 1", "set min_months between 1 and the number of months")
    if min_months > len(months):
        return None, [], (f"aggregate min_months {min_months} is more than the {len(months)} "
                          "months listed", f"set min_months to at most {len(months)}")
    offsets = _window_offsets(months)
    if offsets is None:
        return None, [], (f"aggregate months {months} pass the year end more than once",
                          "list the months in calendar order from the first month of the "
                          "window, e.g. [10, 11, 12, 1, 2, 3]")
    sel = g[g["month"].isin(months)]
    present_months = sorted(int(m) for m in g["month"].unique())
    if sel.empty:
        return None, [], (f"aggregate months {months} give no year: the data have months "
                          f"{present_months}",
                          "list months that are in the data under aggregate: months")
    month_arr = sel["month"].to_numpy(dtype="int64")
    target = sel["year"].to_numpy(dtype="int64") + np.array([offsets[m] for m in month_arr])
    values = sel["value"].to_numpy(dtype=float)
    ses = sel["se"].to_numpy(dtype=float)
    rows = sel["row"].to_numpy(dtype="int64")
    years, out_v, out_se, out_row = [], [], [], []
    notes = []
    for y in np.unique(target):
        idx = np.flatnonzero(target == y)
        n = len(idx)
        if n < min_months:
            have = ", ".join(str(int(m)) for m in month_arr[idx])
            notes.append({"series": sid, "year": int(y), "action": "dropped",
                          "reason": f"only {n} of the {len(months)} months {months} have values "
                                    f"(months {have}); min_months is {min_months}"})
            continue
        v = values[idx]
        e = ses[idx]
        row = int(rows[idx[0]]) if n == 1 else None
        if how == "mean":
            val = float(np.mean(v))
            se = float(np.sqrt(np.sum(e ** 2)) / n)
        elif how == "sum":
            val = float(np.sum(v))
            se = float(np.sqrt(np.sum(e ** 2)))
        else:
            k = int(np.argmin(v) if how == "min" else np.argmax(v))
            val, se, row = float(v[k]), float(e[k]), int(rows[idx[k]])
        if not math.isfinite(val):
            return None, [], (f"the {how} of the months of {int(y)} is too large to be finite",
                              "check the monthly values, or use how: mean")
        years.append(int(y))
        out_v.append(val)
        out_se.append(se if math.isfinite(se) else math.nan)
        out_row.append(row)
    if not years:
        return None, [], (f"aggregate months {months} give no year with at least {min_months} "
                          f"monthly values (the data have months {present_months})",
                          "check the months against the data, or lower min_months")
    annual = pd.DataFrame({"year": np.array(years, dtype="int64"), "value": out_v, "se": out_se,
                           "row": pd.array(out_row, dtype="Int64")})
    return annual, notes, None


def _fill(annual: pd.DataFrame, sid: str, fill: str, max_gap: int
          ) -> tuple[pd.DataFrame, list[dict]]:
    annual = annual.sort_values("year", ignore_index=True)
    annual["filled"] = False
    years = annual["year"].to_numpy(dtype="int64")
    values = annual["value"].to_numpy(dtype=float)
    notes: list[dict] = []
    new_rows = []
    for i in range(len(years) - 1):
        a, b = int(years[i]), int(years[i + 1])
        gap = b - a - 1
        if gap <= 0:
            continue
        span = f"{a + 1}" if gap == 1 else f"{a + 1}-{b - 1}"
        if fill == "linear" and gap <= max_gap:
            va, vb = float(values[i]), float(values[i + 1])
            for y in range(a + 1, b):
                t = (y - a) / (b - a)
                v = va * (1 - t) + vb * t
                new_rows.append({"year": y, "value": v, "se": math.nan, "row": pd.NA,
                                 "filled": True})
                notes.append({"series": sid, "year": y, "action": "filled",
                              "reason": f"linear interpolation between {a} ({_fmt(va)}) and "
                                        f"{b} ({_fmt(vb)}) giving {_fmt(v)}"})
        else:
            if fill == "linear":
                reason = (f"gap of {gap} years ({span}) is longer than max_gap {max_gap}; "
                          "left missing")
            else:
                reason = f"missing year inside the series ({span}); fill is none, left missing"
            for y in range(a + 1, b):
                notes.append({"series": sid, "year": y, "action": "unfilled", "reason": reason})
    if new_rows:
        added = pd.DataFrame(new_rows)
        added["row"] = pd.array(added["row"].tolist(), dtype="Int64")
        annual = pd.concat([annual, added], ignore_index=True).sort_values(
            "year", ignore_index=True)
    return annual, notes


# ----------------------------------------------------------------------------- checks

def check_positive(annual_df: pd.DataFrame, series: str, transform: str | None,
                   sources: pd.DataFrame | None = None) -> list[InputProblem]:
    """Problems for values a transform cannot take (``log``: > 0, ``log1p``: > -1).

    Returns at most one problem: the first offending year, named with the file and row it
    came from. When that annual value was computed from several rows (an aggregate), the
    first offending row of the series in ``sources`` (the long frame) is named instead, if
    any.
    """
    if transform in (None, "none"):
        return []
    if transform == "log":
        limit, need = 0.0, "log needs values above 0"
    elif transform == "log1p":
        limit, need = -1.0, "log1p needs values above -1"
    else:
        return [InputProblem(what=f"transform '{_show(transform)}' is unknown",
                             fix="use transform: none, log or log1p", series=series)]
    g = annual_df[annual_df["series"] == series].sort_values("year")
    bad = g[g["value"] <= limit]
    if bad.empty:
        return []
    first = bad.iloc[0]
    file = None if pd.isna(first.get("file", None)) else str(first["file"])
    row = None if pd.isna(first.get("row", pd.NA)) else int(first["row"])
    value = float(first["value"])
    if row is None and sources is not None and not sources.empty:
        src = sources[(sources["series"] == series) & (sources["value"] <= limit)]
        if not src.empty:
            s0 = src.sort_values("row").iloc[0]
            file, row = str(s0["file"]), int(s0["row"])
    more = f", {len(bad)} years affected" if len(bad) > 1 else ""
    return [InputProblem(
        what=f"value {_fmt(value)} in {int(first['year'])} cannot take the {transform} "
             f"transform ({need}{more})",
        fix="use transform: log1p or none for this series, or correct the value",
        file=file, row=row, series=series)]


def series_warnings(annual_df: pd.DataFrame, min_overlap: int,
                    units_expected: Mapping[str, str | None] | None = None
                    ) -> list[InputWarning]:
    """Warnings about annual series: too short, constant, outlying values, unexpected unit.

    * fewer observed (not filled) years than ``min_overlap``;
    * constant: every value equal;
    * outliers: values more than 4 scaled MADs (1.4826 * median absolute deviation, about 4
      standard deviations for normal data) from the median, with year and value;
    * a unit in the data that differs from ``units_expected[series]`` (the config's unit).
    """
    units_expected = units_expected or {}
    out: list[InputWarning] = []
    for sid, g in annual_df.groupby("series", sort=True):
        file = str(g["file"].iat[0]) if "file" in g and g["file"].notna().any() else None
        obs = g[~g["filled"].astype(bool)] if "filled" in g else g
        v = obs["value"].to_numpy(dtype=float)
        years = obs["year"].to_numpy(dtype="int64")
        n = len(v)
        if n < min_overlap:
            span = f" ({years.min()}-{years.max()})" if n else ""
            out.append(InputWarning(
                what=f"only {n} observed year(s){span}, fewer than min_overlap {min_overlap}; "
                     "it cannot be screened on its own years",
                file=file, series=sid))
        if n >= 2 and np.all(v == v[0]):
            out.append(InputWarning(
                what=f"all {n} values are {_fmt(v[0])}; a constant series carries no signal",
                file=file, series=sid))
        elif n >= 5:
            med = float(np.median(v))
            mad = 1.4826 * float(np.median(np.abs(v - med)))
            if mad > 0:
                z = np.abs(v - med) / mad
                for k in np.flatnonzero(z > 4):
                    out.append(InputWarning(
                        what=f"value {_fmt(v[k])} in {int(years[k])} is {z[k]:.1f} scaled MADs "
                             f"from the median {_fmt(med)}; check it is not a typing error",
                        file=file, series=sid))
        expected = units_expected.get(sid)
        if expected and "unit" in g:
            found = sorted({str(u).strip() for u in g["unit"].dropna()} - {""})
            for u in found:
                if u != str(expected).strip():
                    out.append(InputWarning(
                        what=f"the data give unit '{_show(u)}' but the config says "
                             f"'{_show(expected)}'", file=file, series=sid))
    return out
