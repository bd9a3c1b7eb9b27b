"""Tests of the inputs: reading tables (lagsieve.io.readers, lagsieve.io.tables), annual
series (lagsieve.prep.annual) and checks and warnings (lagsieve.prep.checks).

Malformed inputs covered (one parametrised case each in ``MALFORMED``; every case asserts
InputErrors, one line per problem, the file name, the row and series where they apply, and a
'; ' followed by the fix hint):

 1. missing file
 2. a folder given instead of a file; a path with a NUL character
 3. unsupported extension (.json)
 4. old-style .xls workbook
 5. damaged .xlsx (not a workbook)
 6. damaged .parquet
 7. empty file (0 bytes)
 8. file of blank lines only
 9. header only, no data rows
10. no year column
11. first line is data, not a header
12. series column but no value column (long layout)
13. non-numeric value in the long layout (row named)
14. non-integer year
15. year below the plausible range (< 1000: a two-digit year is a likely typo)
16. year above the plausible range (> 2999)
17. empty year cell
18. month outside 1-12 (month column)
19. month outside 1-12 inside a YYYY-MM date
20. bad YYYY-MM string
21. duplicate (series, year) in one file (row of the second occurrence)
22. duplicate (series, year, month) in one file
23. the same series in two files (both files named)
24. the same file listed twice under inputs
25. empty series name
26. series name with path characters ('../../x')
27. group name with shell characters
28. wide column name with characters outside [A-Za-z0-9_.-]
29. series id longer than 80 characters
30. infinite value
31. number too large to be finite (1e400)
32. negative se
33. negative cv
34. both se and cv columns
35. duplicate column names in the wide layout (case-insensitive)
36. unnamed column holding values
37. long-layout column (se) in a wide table
38. wide column with non-numeric text
39. xlsx sheet name missing
40. xlsx sheet position out of range
41. non-numeric text in an xlsx cell (sheet row named)
42. decimal comma read without the option, ';' delimiter (fix: set decimal: ',')
43. decimal comma read without the option, ',' delimiter (too many cells, same fix)
44. decimal point in a file read with decimal: ','
45. mixed monthly and annual rows in one series
46. several units for one series
47. NUL byte (binary file)
48. not UTF-8 (latin-1 bytes)
49. UTF-16 text
50. file holding no values at all
51. unknown input option in the spec
52. a monthly series without aggregate (to_annual)
53. aggregate given for an annual series (to_annual)
54. aggregate months absent from the data (no years)
55. aggregate min_months never reached (no years)
56. aggregate min_months larger than the number of months
57. aggregate months wrapping the year end twice
"""
from __future__ import annotations

import copy
import hashlib
import math
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from lagsieve.errors import InputErrors, InputProblem, InputWarning, suggest
from lagsieve.io.config import (
    SCREEN_DEFAULTS,
    fill_defaults,
    load_study,
    report_defaults,
    screen_defaults,
)
from lagsieve.io.files import sha256_file, sha256_text, write_text
from lagsieve.io.readers import read_inputs, read_table
from lagsieve.io.tables import FRAME_COLUMNS
from lagsieve.prep.annual import to_annual
from lagsieve.prep.checks import check_positive, series_warnings

ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.-]*(:[A-Za-z0-9][A-Za-z0-9_.-]*)?$")


# ----------------------------------------------------------------------------- helpers

def write(directory: Path, name: str, content) -> Path:
    path = directory / name
    if callable(content):
        content(path)
    elif isinstance(content, bytes):
        path.write_bytes(content)
    else:
        path.write_bytes(content.encode("utf-8"))
    return path


def xlsx(rows, sheet="Data", start_row=1, extra_sheets=()):
    """A writer for a workbook whose table starts on ``start_row``."""
    def make(path):
        import openpyxl

        wb = openpyxl.Workbook()
        ws = wb.active
        ws.title = sheet
        for i, row in enumerate(rows):
            for j, value in enumerate(row):
                ws.cell(row=start_row + i, column=j + 1, value=value)
        for name in extra_sheets:
            wb.create_sheet(name)
        wb.save(path)
    return make


def assert_one_line_each(exc: InputErrors) -> list[str]:
    lines = str(exc).splitlines()
    assert len(lines) == len(exc.problems) >= 1
    for line in lines:
        assert "; " in line
    return lines


def assert_problem(exc: InputErrors, *, file, what, fix, row=None, series=None):
    lines = assert_one_line_each(exc)
    hits = [line for line in lines if what in line]
    assert hits, f"no line with {what!r} in:\n{exc}"
    line = hits[0]
    prefix = f"{file}:{row}: " if row is not None else f"{file}: "
    assert line.startswith(prefix), line
    if series is not None:
        assert f"series '{series}': " in line, line
    assert fix in line and line.index(fix) > line.index("; "), line
    problem = exc.problems[lines.index(line)]
    assert problem.file == file
    assert problem.row == row
    if series is not None:
        assert problem.series == series


def assert_valid_frame(df: pd.DataFrame) -> None:
    assert list(df.columns) == FRAME_COLUMNS
    assert pd.api.types.is_string_dtype(df["series"])
    assert df["year"].dtype == np.int64
    assert str(df["month"].dtype) == "Int64"
    assert df["value"].dtype == np.float64 and df["se"].dtype == np.float64
    assert df["row"].dtype == np.int64
    assert pd.api.types.is_string_dtype(df["unit"]) and pd.api.types.is_string_dtype(df["file"])
    assert np.isfinite(df["value"].to_numpy()).all()
    se = df["se"].to_numpy()
    assert (np.isnan(se) | (se >= 0)).all()
    assert df["year"].between(1000, 2999).all()
    months = df["month"].dropna()
    assert months.between(1, 12).all()
    assert (df["row"] >= 2).all()
    assert all(ID.match(s) for s in df["series"])
    assert not df.duplicated(["series", "year", "month"]).any()


def digest(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


# ----------------------------------------------------------------------------- malformed

def _table(spec):
    return lambda d: read_table(spec, d)


def _inputs(specs):
    return lambda d: read_inputs(specs, d)


def _annual(spec, options):
    def run(d):
        frame, _ = read_table(spec, d)
        return to_annual(frame, options)
    return run


MONTHLY = "series,date,value\nsst,2000-01,1\nsst,2000-02,2\nsst,2000-03,3\n" \
          "sst,2001-01,4\nsst,2001-02,5\nsst,2001-03,6\n"

MALFORMED = [
    # id, files, call, file, row, series, what, fix
    ("missing_file", {}, _table("nope.csv"), "nope.csv", None, None,
     "does not exist", "relative paths are read from the config's folder"),
    ("unusable_path", {}, _table("a\x00b.csv"), "a\\x00b.csv", None, None,
     "the file does not exist (looked for ", "check the path under inputs"),
    ("folder", {"sub/x.csv": "year,a\n2000,1\n"}, _table("sub"), "sub", None, None,
     "folder, not a file", "give the path of a table file"),
    ("unsupported_extension", {"data.json": "{}"}, _table("data.json"), "data.json", None, None,
     "'.json' is not supported", ".xlsx, .parquet"),
    ("xls", {"old.xls": b"\xd0\xcf\x11\xe0"}, _table("old.xls"), "old.xls", None, None,
     "old-style .xls", "save the workbook as .xlsx"),
    ("damaged_xlsx", {"bad.xlsx": b"year,a\n2000,1\n"}, _table("bad.xlsx"), "bad.xlsx", None,
     None, "not a readable .xlsx workbook", "save it again as .xlsx"),
    ("damaged_parquet", {"bad.parquet": b"PAR1 this is no parquet"}, _table("bad.parquet"),
     "bad.parquet", None, None, "not a readable parquet file", "to_parquet"),
    ("empty_file", {"e.csv": ""}, _table("e.csv"), "e.csv", None, None,
     "the file is empty", "put a header line and data rows"),
    ("blank_lines_only", {"e.csv": "\n  \n\r\n"}, _table("e.csv"), "e.csv", None, None,
     "the file is empty", "put a header line"),
    ("header_only", {"h.csv": "year,velk_m\n"}, _table("h.csv"), "h.csv", 1, None,
     "header but no data rows", "add rows below the header"),
    ("no_year_column", {"y.csv": "yr,velk_m\n2000,1\n"}, _table("y.csv"), "y.csv", 1, None,
     "no year column (columns found: yr, velk_m)", "add a 'year' column"),
    ("no_header", {"y.csv": "2000,0.5\n2001,0.6\n"}, _table("y.csv"), "y.csv", 1, None,
     "no year column", "the first line must be a header"),
    ("no_value_column", {"v.csv": "series,year,val\nvelk,2000,1\n"}, _table("v.csv"), "v.csv", 1,
     None, "no value column", "add a 'value' column"),
    ("non_numeric_value", {"l.csv": "series,year,value\nvelk,2000,1\nvelk,2001,abc\n"},
     _table("l.csv"), "l.csv", 3, "velk", "value 'abc' is not a number", "write a plain number"),
    ("non_integer_year", {"w.csv": "year,velk_m\n2000,1\n2000.5,2\n"}, _table("w.csv"), "w.csv",
     3, None, "year '2000.5' is not a whole number", "whole number such as 1998"),
    ("year_too_early", {"w.csv": "year,velk_m\n1998,1\n98,1\n"}, _table("w.csv"), "w.csv", 3, None,
     "year 98 is outside 1000-2999", "four-digit year"),
    ("year_too_late", {"w.csv": "series,year,value\nvelk,2000,1\nvelk,20001,1\n"},
     _table("w.csv"), "w.csv", 3, "velk", "year 20001 is outside 1000-2999", "four-digit year"),
    ("empty_year", {"w.csv": "year,velk_m\n2000,1\n,2\n"}, _table("w.csv"), "w.csv", 3, None,
     "year is empty", "give every row a year"),
    ("month_column_13", {"m.csv": "series,year,month,value\nvelk,2000,13,1\n"}, _table("m.csv"),
     "m.csv", 2, "velk", "month 13 is outside 1-12", "number 1-12"),
    ("month_13_in_date", {"m.csv": "date,sst\n2000-01,1\n2000-13,2\n"}, _table("m.csv"),
     "m.csv", 3, None, "month 13 in date '2000-13' is outside 1-12", "YYYY-MM"),
    ("bad_yyyy_mm", {"m.csv": "date,sst\n2000-01,1\n2000/02,2\n"}, _table("m.csv"), "m.csv", 3,
     None, "date '2000/02' is not a year or a YYYY-MM date", "YYYY-MM (for example 2003-07)"),
    ("duplicate_year", {"d.csv": "series,year,value\nvelk,2000,1\nvelk,2001,2\nvelk,2000,3\n"},
     _table("d.csv"), "d.csv", 4, "velk", "2000 appears twice (first on row 2)",
     "keep one row per series and year"),
    ("duplicate_month", {"d.csv": "series,year,month,value\nsst,2000,1,1\nsst,2000,2,2\n"
                                  "sst,2000,1,3\n"},
     _table("d.csv"), "d.csv", 4, "sst", "2000-01 appears twice (first on row 2)",
     "keep one row per series and month"),
    ("same_series_two_files", {"a.csv": "year,velk_m\n2000,1\n",
                               "b.csv": "series,year,value\norr,2000,1\nvelk_m,2001,2\n"},
     _inputs(["a.csv", "b.csv"]), "b.csv", 3, "velk_m", "also in a.csv (first on row 2)",
     "keep each series in one input file"),
    ("file_listed_twice", {"a.csv": "year,velk_m\n2000,1\n"},
     _inputs(["a.csv", {"path": "./a.csv"}]), "./a.csv", None, None,
     "listed twice under inputs (also as 'a.csv')", "list each file once"),
    ("empty_series_name", {"s.csv": "series,year,value\nvelk,2000,1\n,2001,1\n"},
     _table("s.csv"), "s.csv", 3, None, "series name is empty", "give every row a series name"),
    ("path_in_series_name", {"s.csv": "series,year,value\n../../x,2000,1\n"}, _table("s.csv"),
     "s.csv", 2, None, "series name '../../x' has characters", "only letters, digits"),
    ("shell_in_group", {"s.csv": "series,group,year,value\nvelk,$(rm -rf ~),2000,1\n"},
     _table("s.csv"), "s.csv", 2, None, "group name '$(rm -rf ~)' has characters",
     "only letters, digits"),
    ("bad_wide_column", {"s.csv": "year,velk m\n2000,1\n"}, _table("s.csv"), "s.csv", 1, None,
     "column name 'velk m' has characters", "only letters, digits"),
    ("long_series_id", {"s.csv": "series,year,value\n" + "a" * 81 + ",2000,1\n"},
     _table("s.csv"), "s.csv", 2, None, "longer than 80 characters", "shorter name"),
    ("infinite_value", {"i.csv": "year,velk_m\n2000,1\n2001,-inf\n"}, _table("i.csv"), "i.csv",
     3, "velk_m", "value '-inf' is infinite", "replace it with a finite number"),
    ("overflowing_value", {"i.csv": "year,velk_m\n2000,1e400\n"}, _table("i.csv"), "i.csv", 2,
     "velk_m", "too large to be a finite number", "finite numbers"),
    ("negative_se", {"e.csv": "series,year,value,se\nvelk,2000,1,0.1\nvelk,2001,1,-0.2\n"},
     _table("e.csv"), "e.csv", 3, "velk", "se -0.2 is negative", "must be 0 or more"),
    ("negative_cv", {"e.csv": "series,year,value,cv\nvelk,2000,1,-0.3\n"}, _table("e.csv"),
     "e.csv", 2, "velk", "cv -0.3 is negative", "must be 0 or more"),
    ("se_and_cv", {"e.csv": "series,year,value,se,cv\nvelk,2000,1,0.1,0.1\n"}, _table("e.csv"),
     "e.csv", 1, None, "both an se and a cv column", "keep one of them"),
    ("duplicate_wide_columns", {"w.csv": "Year,velk_m,temp,VELK_M \n2000,1,2,3\n"},
     _table("w.csv"), "w.csv", 1, None, "column 'VELK_M' appears twice (columns 2 and 4)",
     "rename or remove one"),
    ("unnamed_column_with_values", {"w.csv": "year,,velk_m\n2000,,1\n2001,5,2\n"},
     _table("w.csv"), "w.csv", 1, None, "column 2 has no name but holds values (first on row 3)",
     "give the column a name"),
    ("se_in_wide", {"w.csv": "year,velk_m,se\n2000,1,0.1\n"}, _table("w.csv"), "w.csv", 1, None,
     "column 'se' belongs to the long layout", "add 'series' and 'value' columns"),
    ("wide_text", {"w.csv": "year,velk_m,temp\n2000,1,2\n2001,low,3\n"}, _table("w.csv"),
     "w.csv", 3, "velk_m", "value 'low' is not a number", "write a plain number"),
    ("xlsx_sheet_missing", {"b.xlsx": xlsx([["year", "a"], [2000, 1]])},
     _table({"path": "b.xlsx", "sheet": "Data2"}), "b.xlsx", None, None,
     "sheet 'Data2' does not exist (sheets: Data)", "set sheet to one of the sheet names"),
    ("xlsx_sheet_position", {"b.xlsx": xlsx([["year", "a"], [2000, 1]])},
     _table({"path": "b.xlsx", "sheet": 3}), "b.xlsx", None, None,
     "sheet 3 does not exist (the workbook has 1 sheet(s): Data)", "counting from 0"),
    ("xlsx_text_cell", {"b.xlsx": xlsx([["year", "velk_m"], [2000, 1], [2001, "#DIV/0!"]],
                                       start_row=3)},
     _table("b.xlsx"), "b.xlsx", 5, "velk_m", "value '#DIV/0!' is not a number",
     "write a plain number"),
    ("decimal_comma_semicolon", {"c.csv": "year;velk_m\n2000;0,25\n"}, _table("c.csv"), "c.csv",
     2, "velk_m", "value '0,25' has a decimal comma", "set decimal: ',' for this input"),
    ("decimal_comma_comma", {"c.csv": "year,velk_m\n2000,0,25\n"}, _table("c.csv"), "c.csv", 2,
     None, "the row has 3 cells but the header has 2", "set decimal: ',' for this input"),
    ("decimal_point_with_comma_option", {"c.csv": "year;velk_m\n2000;0,25\n2001;0.5\n"},
     _table({"path": "c.csv", "decimal": ","}), "c.csv", 3, "velk_m",
     "value '0.5' uses a decimal point", "remove decimal: ','"),
    ("mixed_monthly_annual", {"m.csv": "series,year,month,value\nvelk,2000,1,1\nvelk,2000,2,1\n"
                                       "velk,2001,,2\n"},
     _table("m.csv"), "m.csv", 4, "velk",
     "monthly rows (first on row 2) and annual rows (first on row 4)",
     "give every row of the series a month"),
    ("several_units", {"u.csv": "series,year,value,unit\nvelk,2000,1,kg\nvelk,2001,2,kg\n"
                                "velk,2002,3,t\n"},
     _table("u.csv"), "u.csv", 4, "velk", "unit 't' differs from unit 'kg' on row 2",
     "use one unit for the whole series"),
    ("nul_byte", {"n.csv": b"year,velk_m\n2000,1\x00\n"}, _table("n.csv"), "n.csv", 2, None,
     "binary data (a NUL byte on line 2)", "plain-text table"),
    ("latin1", {"n.csv": "year,temp\n2000,1\n# température\n".encode("latin-1")},
     _table("n.csv"), "n.csv", 3, None, "not UTF-8 text (byte 0xe9 on line 3)",
     "save it as UTF-8"),
    ("utf16", {"n.csv": "year,temp\n2000,1\n".encode("utf-16")}, _table("n.csv"), "n.csv",
     None, None, "UTF-16 text, not UTF-8", "save it as UTF-8"),
    ("no_values", {"n.csv": "year,velk_m\n2000,\n2001,NA\n"}, _table("n.csv"), "n.csv", None,
     None, "the file holds no values", "fill in the value cells"),
    ("unknown_option", {"a.csv": "year,velk_m\n2000,1\n"},
     _table({"path": "a.csv", "sheets": 1}), "a.csv", None, None,
     "unknown input option(s) sheets", "use only path, sheet, decimal and delimiter"),
    ("monthly_without_aggregate", {"m.csv": MONTHLY}, _annual("m.csv", {"sst": {}}), "m.csv",
     None, "sst", "values are monthly",
     "add aggregate: {months: [...]} to its entry in the config"),
    ("aggregate_on_annual", {"a.csv": "year,velk_m\n2000,1\n2001,2\n"},
     _annual("a.csv", {"velk_m": {"aggregate": {"months": [1, 2]}}}), "a.csv", None, "velk_m",
     "values are annual", "remove aggregate from its entry in the config"),
    ("aggregate_months_absent", {"m.csv": MONTHLY},
     _annual("m.csv", {"sst": {"aggregate": {"months": [6, 7]}}}), "m.csv", None, "sst",
     "aggregate months [6, 7] give no year: the data have months [1, 2, 3]",
     "list months that are in the data"),
    ("aggregate_min_months_never", {"m.csv": MONTHLY},
     _annual("m.csv", {"sst": {"aggregate": {"months": [3, 4, 5], "min_months": 2}}}), "m.csv",
     None, "sst", "give no year with at least 2 monthly values", "lower min_months"),
    ("aggregate_min_months_too_big", {"m.csv": MONTHLY},
     _annual("m.csv", {"sst": {"aggregate": {"months": [1, 2], "min_months": 3}}}), "m.csv",
     None, "sst", "min_months 3 is more than the 2 months listed", "at most 2"),
    ("aggregate_wraps_twice", {"m.csv": MONTHLY},
     _annual("m.csv", {"sst": {"aggregate": {"months": [5, 3, 1]}}}), "m.csv", None, "sst",
     "pass the year end more than once", "calendar order"),
]


@pytest.mark.parametrize(
    "files,call,file,row,series,what,fix",
    [case[1:] for case in MALFORMED],
    ids=[case[0] for case in MALFORMED],
)
def test_malformed(tmp_path, files, call, file, row, series, what, fix):
    for name, content in files.items():
        (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
        write(tmp_path, name, content)
    with pytest.raises(InputErrors) as info:
        call(tmp_path)
    assert_problem(info.value, file=file, row=row, series=series, what=what, fix=fix)


def test_malformed_cases_are_distinct_and_many():
    ids = [case[0] for case in MALFORMED]
    assert len(set(ids)) == len(ids) >= 25
    assert len({case[6] for case in MALFORMED}) >= 25  # distinct messages too


def test_all_problems_of_a_file_are_reported(tmp_path):
    write(tmp_path, "x.csv", "series,year,value,se\nvelk,2000,abc,\nvelk,170,1,\n"
                             "../x,2001,1,\nvelk,2002,1,-1\nvelk,2003,1,\nvelk,2003,2,\n")
    with pytest.raises(InputErrors) as info:
        read_table("x.csv", tmp_path)
    lines = assert_one_line_each(info.value)
    assert [p.row for p in info.value.problems] == [2, 3, 4, 5, 7]
    assert lines[0].startswith("x.csv:2: series 'velk': value 'abc'")
    assert lines[4] == ("x.csv:7: series 'velk': 2003 appears twice (first on row 6); keep one "
                        "row per series and year")


def test_problems_are_capped_per_file(tmp_path):
    body = "".join(f"{1900 + i},bad\n" for i in range(100))
    write(tmp_path, "x.csv", "year,velk_m\n" + body)
    with pytest.raises(InputErrors) as info:
        read_table("x.csv", tmp_path)
    lines = assert_one_line_each(info.value)
    assert len(lines) == 41
    assert lines[-1] == "x.csv: 60 more problems of this file are not shown; fix the problems " \
                        "above and check again"


def test_newline_in_a_cell_stays_on_one_line(tmp_path):
    write(tmp_path, "x.csv", 'series,year,value\n"co\nd",2000,1\n')
    with pytest.raises(InputErrors) as info:
        read_table("x.csv", tmp_path)
    lines = assert_one_line_each(info.value)
    assert lines == ["x.csv:2: series name 'co\\nd' has characters other than letters, digits, "
                     "'_', '.' and '-', or does not start with a letter or digit; use only "
                     "letters, digits, '_', '.' and '-', starting with a letter or digit (for "
                     "example 'velk_m')"]


def test_read_inputs_collects_problems_of_all_files(tmp_path):
    write(tmp_path, "a.csv", "year,velk_m\n2000,x\n")
    write(tmp_path, "b.csv", "yr,had\n2000,1\n")
    write(tmp_path, "c.csv", "year,ok\n2000,1\n")
    with pytest.raises(InputErrors) as info:
        read_inputs(["a.csv", "missing.csv", "b.csv", "c.csv"], tmp_path)
    assert [p.file for p in info.value.problems] == ["a.csv", "missing.csv", "b.csv"]


# ----------------------------------------------------------------------------- positive

def test_long_csv(tmp_path):
    write(tmp_path, "long.csv",
          "Series , YEAR,Value,SE,Unit,notes\n"
          "m_velk,1990,0.21,0.02,per year,\n"
          "\n"
          "m_velk,1991,0.25,,per year,x\n"
          "cond,1990,1.05,0.01,,\n"
          "cond,1991,,0.01,,no data\n")
    df, warns = read_table("long.csv", tmp_path)
    assert_valid_frame(df)
    assert df["series"].tolist() == ["m_velk", "m_velk", "cond"]
    assert df["year"].tolist() == [1990, 1991, 1990]
    assert df["month"].isna().all()
    assert df["value"].tolist() == [0.21, 0.25, 1.05]
    assert df["se"].iloc[0] == 0.02 and math.isnan(df["se"].iloc[1]) and df["se"].iloc[2] == 0.01
    assert df["unit"].iloc[0] == "per year" and pd.isna(df["unit"].iloc[2])
    assert df["row"].tolist() == [2, 4, 5]  # the blank line 3 keeps its number
    assert set(df["file"]) == {"long.csv"}
    texts = [w.line() for w in warns]
    assert any("notes" in t and "not used" in t for t in texts)
    assert any("1 row(s) have no value and are left out (rows 6)" in t for t in texts)


def test_wide_csv(tmp_path):
    write(tmp_path, "wide.csv", "year,m_velk,Temp_Bottom\n1990,0.2,4.5\n1991,,4.7\n1992,0.3,\n")
    df, warns = read_table("wide.csv", tmp_path)
    assert_valid_frame(df)
    got = {(s, y): (v, r) for s, y, v, r in df[["series", "year", "value", "row"]].itertuples(
        index=False)}
    assert got == {("m_velk", 1990): (0.2, 2), ("Temp_Bottom", 1990): (4.5, 2),
                   ("Temp_Bottom", 1991): (4.7, 3), ("m_velk", 1992): (0.3, 4)}
    assert warns == []


def test_wide_with_month_and_empty_column(tmp_path):
    write(tmp_path, "w.csv", "year,month,sst,empty\n2000,1,3.5,\n2000,Feb,3.25,\n")
    df, warns = read_table("w.csv", tmp_path)
    assert df["month"].tolist() == [1, 2]
    assert df["value"].tolist() == [3.5, 3.25]
    assert [w.line() for w in warns] == ["warning: w.csv: series 'empty': the column has no "
                                         "values"]


def test_tsv_and_txt_sniffing(tmp_path):
    write(tmp_path, "t.tsv", "year\tm_velk\n2000\t0.5\n2001\t0.75\n")
    df, _ = read_table("t.tsv", tmp_path)
    assert df["value"].tolist() == [0.5, 0.75]
    write(tmp_path, "t.txt", "year|m_velk\n2000|0.5\n")
    df, _ = read_table("t.txt", tmp_path)
    assert df["value"].tolist() == [0.5]
    write(tmp_path, "s.csv", "year;m_velk\n2000;1.5\n")
    df, _ = read_table("s.csv", tmp_path)
    assert df["value"].tolist() == [1.5]
    write(tmp_path, "g.csv", "year:m_velk\n2000:1.5\n")
    df, _ = read_table({"path": "g.csv", "delimiter": ":"}, tmp_path)
    assert df["value"].tolist() == [1.5]


def test_bom_and_crlf(tmp_path):
    write(tmp_path, "b.csv", b"\xef\xbb\xbfyear,m_velk\r\n2000,0.5\r\n2001,0.6\r\n")
    df, _ = read_table("b.csv", tmp_path)
    assert df["year"].tolist() == [2000, 2001]
    assert df["row"].tolist() == [2, 3]


def test_decimal_comma(tmp_path):
    write(tmp_path, "c.csv", "year;m_velk;temp\n2000;0,25;-1,5\n2001;1;2,0e1\n")
    df, _ = read_table({"path": "c.csv", "decimal": ","}, tmp_path)
    got = dict(zip(zip(df["series"], df["year"]), df["value"]))
    assert got == {("m_velk", 2000): 0.25, ("temp", 2000): -1.5, ("m_velk", 2001): 1.0,
                   ("temp", 2001): 20.0}
    write(tmp_path, "t.tsv", "series\tyear\tvalue\tcv\nvelk\t2000\t2,5\t0,1\n")
    df, _ = read_table({"path": "t.tsv", "decimal": ","}, tmp_path)
    assert df["value"].tolist() == [2.5] and df["se"].tolist() == pytest.approx([0.25])


def test_xlsx(tmp_path):
    rows = [["Year", "m_velk", "temp"], [1990, 0.2, 4.5], [1991.0, None, "4.75"], [1992, 0.3, 5]]
    write(tmp_path, "w.xlsx", xlsx(rows, start_row=3, extra_sheets=["Other"]))
    df, warns = read_table("w.xlsx", tmp_path)
    assert_valid_frame(df)
    got = {(s, y): (v, r) for s, y, v, r in df[["series", "year", "value", "row"]].itertuples(
        index=False)}
    assert got == {("m_velk", 1990): (0.2, 4), ("temp", 1990): (4.5, 4), ("temp", 1991): (4.75, 5),
                   ("m_velk", 1992): (0.3, 6), ("temp", 1992): (5.0, 6)}
    assert any("reading the first sheet 'Data' of 2" in w.line() for w in warns)
    by_name, warns = read_table({"path": "w.xlsx", "sheet": "Data"}, tmp_path)
    by_position, _ = read_table({"path": "w.xlsx", "sheet": 0}, tmp_path)
    pd.testing.assert_frame_equal(by_name, df)
    pd.testing.assert_frame_equal(by_position, df)
    assert warns == []


def test_xlsx_long_with_dates(tmp_path):
    import datetime as dt
    rows = [["series", "date", "value"], ["sst", dt.datetime(2000, 1, 1), 3.5],
            ["sst", dt.datetime(2000, 2, 1), 4.0]]
    write(tmp_path, "d.xlsx", xlsx(rows))
    df, _ = read_table("d.xlsx", tmp_path)
    assert df["year"].tolist() == [2000, 2000] and df["month"].tolist() == [1, 2]
    assert df["row"].tolist() == [2, 3]


def test_parquet(tmp_path):
    source = pd.DataFrame({"series": ["velk", "velk", "had"], "year": [2000, 2001, 2000],
                           "value": [0.5, np.nan, 0.7], "se": [0.1, 0.2, np.nan]})
    source.to_parquet(tmp_path / "l.parquet")
    df, warns = read_table("l.parquet", tmp_path)
    assert_valid_frame(df)
    assert df["series"].tolist() == ["velk", "had"]
    assert df["value"].tolist() == [0.5, 0.7]
    assert df["row"].tolist() == [2, 4]
    assert df["se"].iloc[0] == 0.1 and math.isnan(df["se"].iloc[1])
    wide = pd.DataFrame({"m_velk": [0.1, 0.2]}, index=pd.Index([1999, 2000], name="year"))
    wide.to_parquet(tmp_path / "w.parquet")
    df, _ = read_table("w.parquet", tmp_path)
    assert df["year"].tolist() == [1999, 2000] and df["value"].tolist() == [0.1, 0.2]


def test_monthly_forms_agree(tmp_path):
    write(tmp_path, "a.csv", "series,date,value\nsst,2000-01,1.5\nsst,2000-12-15,2.5\n")
    write(tmp_path, "b.csv", "series,year,month,value\nsst,2000,1,1.5\nsst,2000,12,2.5\n")
    write(tmp_path, "c.csv", "year,sst\n2000-01,1.5\n2000-12,2.5\n")
    frames = [read_table(name, tmp_path)[0] for name in ("a.csv", "b.csv", "c.csv")]
    for df in frames:
        assert_valid_frame(df)
        assert df["year"].tolist() == [2000, 2000]
        assert df["month"].tolist() == [1, 12]
        assert df["value"].tolist() == [1.5, 2.5]


def test_groups_make_ids(tmp_path):
    write(tmp_path, "g.csv", "series,group,year,value\nm,north,2000,0.1\nm,south,2000,0.2\n"
                             "m,,2000,0.3\nw:x,,2000,1\n")
    df, _ = read_table("g.csv", tmp_path)
    assert df["series"].tolist() == ["m:north", "m:south", "m", "w:x"]
    assert df["value"].tolist() == [0.1, 0.2, 0.3, 1.0]


def test_cv_becomes_se(tmp_path):
    write(tmp_path, "c.csv", "series,year,value,cv\nvelk,2000,-2.0,0.1\nvelk,2001,4,\n")
    df, _ = read_table("c.csv", tmp_path)
    assert df["se"].iloc[0] == pytest.approx(0.2)
    assert math.isnan(df["se"].iloc[1])


def test_quoted_multiline_cell_keeps_line_numbers(tmp_path):
    write(tmp_path, "q.csv", 'series,year,value,note\nvelk,2000,1,"two\nlines"\nvelk,2001,x,\n')
    with pytest.raises(InputErrors) as info:
        read_table("q.csv", tmp_path)
    assert [p.row for p in info.value.problems] == [4]


def test_read_inputs_concatenates(tmp_path):
    write(tmp_path, "a.csv", "year,m_velk\n2000,0.1\n")
    (tmp_path / "sub").mkdir()
    write(tmp_path / "sub", "b.csv", "series,year,value\ntemp,2000,4\n")
    df, warns = read_inputs(["a.csv", {"path": "sub/b.csv"}], tmp_path)
    assert_valid_frame(df)
    assert df["series"].tolist() == ["m_velk", "temp"]
    assert df["file"].tolist() == ["a.csv", "sub/b.csv"]
    assert warns == []


def test_sheet_on_a_csv_is_a_warning(tmp_path):
    write(tmp_path, "a.csv", "year,m_velk\n2000,0.1\n")
    _, warns = read_table({"path": "a.csv", "sheet": "x"}, tmp_path)
    assert [w.line() for w in warns] == ["warning: a.csv: sheet is only used for .xlsx files "
                                         "and is ignored"]


def test_absolute_path(tmp_path):
    path = write(tmp_path, "a.csv", "year,m_velk\n2000,0.1\n")
    df, _ = read_table(str(path), tmp_path / "elsewhere")
    assert df["file"].tolist() == [str(path)]


@pytest.mark.parametrize("name,maker", [
    ("a.csv", lambda p: p.write_text("series,year,value\nvelk,2000,x\n")),
    ("b.csv", lambda p: p.write_text("year,m\n2000,1\n2001,2\n")),
    ("c.xlsx", xlsx([["year", "m"], [2000, 1]])),
    ("d.parquet", lambda p: pd.DataFrame({"year": [2000], "m": [1.0]}).to_parquet(p)),
])
def test_reading_never_modifies_the_file(tmp_path, name, maker):
    path = tmp_path / name
    maker(path)
    before, mtime = digest(path), path.stat().st_mtime_ns
    for _ in range(2):
        try:
            read_inputs([name], tmp_path)
        except InputErrors:
            pass
    assert digest(path) == before
    assert path.stat().st_mtime_ns == mtime
    assert sorted(p.name for p in tmp_path.iterdir()) == [name]


# ----------------------------------------------------------------------------- annual

def monthly_frame(tmp_path, rows: dict[tuple[int, int], float], name="m.csv", se=None):
    lines = ["series,year,month,value,se"]
    for (y, m), v in sorted(rows.items()):
        s = "" if se is None else se[(y, m)]
        lines.append(f"sst,{y},{m},{v},{s}")
    write(tmp_path, name, "\n".join(lines) + "\n")
    return read_table(name, tmp_path)[0]


def test_cross_year_end_window_goes_to_the_year_of_its_last_month(tmp_path):
    # value = 100 * (year - 1999) + month, every month from Jan 1999 to Dec 2001
    rows = {(y, m): 100 * (y - 1999) + m for y in (1999, 2000, 2001) for m in range(1, 13)}
    long = monthly_frame(tmp_path, rows)
    annual, notes = to_annual(long, {"sst": {"aggregate": {"months": [12, 1, 2]}}})
    assert annual["year"].tolist() == [2000, 2001]
    # 2000 = mean(Dec 1999 = 12, Jan 2000 = 101, Feb 2000 = 102)
    assert annual["value"].tolist() == pytest.approx([(12 + 101 + 102) / 3,
                                                      (112 + 201 + 202) / 3])
    assert not annual["filled"].any()
    assert annual["row"].isna().all() and set(annual["file"]) == {"m.csv"}
    assert notes == [
        {"series": "sst", "year": 1999, "action": "dropped",
         "reason": "only 2 of the 3 months [12, 1, 2] have values (months 1, 2); min_months is 3"},
        {"series": "sst", "year": 2002, "action": "dropped",
         "reason": "only 1 of the 3 months [12, 1, 2] have values (months 12); min_months is 3"},
    ]
    # the same months in another order do not cross the year end
    annual, _ = to_annual(long, {"sst": {"aggregate": {"months": [1, 2, 12]}}})
    assert annual["year"].tolist() == [1999, 2000, 2001]
    assert annual["value"].tolist() == pytest.approx([5, 105, 205])


def test_aggregate_how_and_se(tmp_path):
    rows = {(2000, 6): 1.0, (2000, 7): 4.0, (2000, 8): 2.0}
    se = {(2000, 6): 0.3, (2000, 7): 0.4, (2000, 8): 0.0}
    long = monthly_frame(tmp_path, rows, se=se)
    expect = {"mean": (7 / 3, 0.5 / 3, None), "sum": (7.0, 0.5, None), "min": (1.0, 0.3, 2),
              "max": (4.0, 0.4, 3)}
    for how, (value, err, row) in expect.items():
        annual, _ = to_annual(long, {"sst": {"aggregate": {"months": [6, 7, 8], "how": how}}})
        assert annual["value"].tolist() == pytest.approx([value]), how
        assert annual["se"].tolist() == pytest.approx([err]), how
        if row is None:
            assert pd.isna(annual["row"].iloc[0]), how
        else:
            assert annual["row"].iloc[0] == row, how


def test_min_months_drops_years(tmp_path):
    rows = {(2000, 6): 1.0, (2000, 7): 3.0, (2000, 8): 5.0,
            (2001, 6): 2.0, (2001, 8): 4.0,
            (2002, 7): 9.0}
    long = monthly_frame(tmp_path, rows)
    annual, notes = to_annual(long, {"sst": {"aggregate": {"months": [6, 7, 8],
                                                           "min_months": 2}}})
    assert annual["year"].tolist() == [2000, 2001]
    assert annual["value"].tolist() == [3.0, 3.0]
    assert notes == [{"series": "sst", "year": 2002, "action": "dropped",
                      "reason": "only 1 of the 3 months [6, 7, 8] have values (months 7); "
                                "min_months is 2"}]
    annual, notes = to_annual(long, {"sst": {"aggregate": {"months": [6, 7, 8]}}})
    assert annual["year"].tolist() == [2000]
    assert [n["year"] for n in notes] == [2001, 2002]


def test_single_month_keeps_its_source_row(tmp_path):
    long = monthly_frame(tmp_path, {(2000, 3): 1.0, (2001, 3): 2.0, (2001, 4): 7.0})
    annual, _ = to_annual(long, {"sst": {"aggregate": {"months": [3]}}})
    assert annual["row"].tolist() == [2, 3]


def test_linear_fill_with_max_gap(tmp_path):
    write(tmp_path, "a.csv", "year,m\n2000,1.0\n2002,2.0\n2003,4.0\n2007,8.0\n2008,9\n")
    long, _ = read_table("a.csv", tmp_path)
    annual, notes = to_annual(long, {"m": {"fill": "linear", "max_gap": 2}})
    assert annual["year"].tolist() == [2000, 2001, 2002, 2003, 2007, 2008]
    assert annual["value"].tolist() == pytest.approx([1.0, 1.5, 2.0, 4.0, 8.0, 9.0])
    assert annual["filled"].tolist() == [False, True, False, False, False, False]
    assert math.isnan(annual["se"].iloc[1]) and pd.isna(annual["row"].iloc[1])
    assert annual["row"].iloc[0] == 2
    assert notes[0] == {"series": "m", "year": 2001, "action": "filled",
                        "reason": "linear interpolation between 2000 (1) and 2002 (2) giving 1.5"}
    assert [(n["year"], n["action"]) for n in notes[1:]] == [
        (2004, "unfilled"), (2005, "unfilled"), (2006, "unfilled")]
    assert notes[1]["reason"] == ("gap of 3 years (2004-2006) is longer than max_gap 2; "
                                  "left missing")
    # a larger max_gap fills the longer gap too, along the straight line 4 -> 8
    annual, notes = to_annual(long, {"m": {"fill": "linear", "max_gap": 3}})
    assert annual.set_index("year").loc[[2004, 2005, 2006], "value"].tolist() == \
        pytest.approx([5.0, 6.0, 7.0])
    assert sum(n["action"] == "filled" for n in notes) == 4
    # the default max_gap is 1
    annual, notes = to_annual(long, {"m": {"fill": "linear"}})
    assert annual["filled"].sum() == 1
    # options left as None take their defaults
    annual, _ = to_annual(long, {"m": {"fill": "linear", "max_gap": None, "aggregate": None}})
    assert annual["filled"].sum() == 1
    # fill none: nothing filled, the gaps are still noted
    annual, notes = to_annual(long, {"m": {}})
    assert not annual["filled"].any() and len(annual) == 5
    assert [n["year"] for n in notes] == [2001, 2004, 2005, 2006]
    assert all(n["action"] == "unfilled" for n in notes)


def test_to_annual_keeps_only_configured_series_and_columns(tmp_path):
    write(tmp_path, "a.csv", "series,year,value,se,unit\nvelk,2000,1,0.1,kg\norr,2000,2,,kg\n")
    long, _ = read_table("a.csv", tmp_path)
    annual, notes = to_annual(long, {"velk": {}, "not_in_data": {}})
    assert list(annual.columns) == ["series", "year", "value", "se", "filled", "unit", "file",
                                    "row"]
    assert annual["series"].tolist() == ["velk"]
    assert annual["se"].tolist() == [0.1] and annual["unit"].tolist() == ["kg"]
    assert annual["row"].tolist() == [2] and annual["filled"].dtype == bool
    assert notes == []


def test_to_annual_reports_every_series(tmp_path):
    write(tmp_path, "m.csv", "series,date,value\na,2000-01,1\nb,2000-01,2\nc,2000,3\n")
    long, _ = read_table("m.csv", tmp_path)
    with pytest.raises(InputErrors) as info:
        to_annual(long, {"a": {}, "b": {}, "c": {"aggregate": {"months": [1]}}})
    assert [p.series for p in info.value.problems] == ["a", "b", "c"]
    assert_one_line_each(info.value)


# ----------------------------------------------------------------------------- checks

def test_check_positive_names_file_and_row(tmp_path):
    write(tmp_path, "a.csv", "year,m,t\n2000,0.5,1\n2001,0,2\n2002,-0.5,3\n")
    long, _ = read_table("a.csv", tmp_path)
    annual, _ = to_annual(long, {"m": {}, "t": {}})
    assert check_positive(annual, "t", "log", long) == []
    assert check_positive(annual, "m", "none", long) == []
    (problem,) = check_positive(annual, "m", "log", long)
    assert isinstance(problem, InputProblem)
    assert problem.line() == ("a.csv:3: series 'm': value 0 in 2001 cannot take the log transform "
                              "(log needs values above 0, 2 years affected); use transform: "
                              "log1p or none for this series, or correct the value")
    assert check_positive(annual, "m", "log1p", long) == []
    write(tmp_path, "b.csv", "year,m\n2000,-1\n")
    long, _ = read_table("b.csv", tmp_path)
    annual, _ = to_annual(long, {"m": {}})
    (problem,) = check_positive(annual, "m", "log1p", long)
    assert (problem.file, problem.row) == ("b.csv", 2)


def test_check_positive_on_an_aggregate_names_the_source_row(tmp_path):
    long = monthly_frame(tmp_path, {(2000, 1): 2.0, (2000, 2): 3.0, (2001, 1): -1.0,
                                    (2001, 2): 0.5})
    annual, _ = to_annual(long, {"sst": {"aggregate": {"months": [1, 2]}}})
    (problem,) = check_positive(annual, "sst", "log", long)
    assert (problem.file, problem.row) == ("m.csv", 4)
    assert "value -0.25 in 2001" in problem.what


def annual_of(values, series="x", unit=None, start=1990):
    n = len(values)
    return pd.DataFrame({
        "series": pd.Series([series] * n, dtype="str"),
        "year": np.arange(start, start + n, dtype="int64"),
        "value": np.asarray(values, dtype=float), "se": np.full(n, np.nan),
        "filled": np.zeros(n, dtype=bool), "unit": pd.Series([unit] * n, dtype="str"),
        "file": pd.Series(["f.csv"] * n, dtype="str"),
        "row": pd.array(range(2, n + 2), dtype="Int64")})


def test_series_warnings():
    rng = np.random.default_rng(1)
    clean = annual_of(np.sin(np.arange(30.0)), "clean", unit="degC")
    assert series_warnings(clean, 10, {"clean": "degC"}) == []
    short = annual_of([1.0, 2.0, 3.0], "short")
    (w,) = series_warnings(short, 10, {})
    assert isinstance(w, InputWarning)
    assert w.line() == ("warning: f.csv: series 'short': only 3 observed year(s) (1990-1992), "
                        "fewer than min_overlap 10; it cannot be screened on its own years")
    const = annual_of([2.5] * 12, "const")
    (w,) = series_warnings(const, 10, {})
    assert "all 12 values are 2.5" in w.what
    values = rng.normal(10, 1, 20)
    values[7] = 30.0
    spiky = annual_of(values, "spiky")
    (w,) = series_warnings(spiky, 10, {})
    assert w.what.startswith("value 30 in 1997 is ") and "from the median" in w.what
    (w,) = series_warnings(clean, 10, {"clean": "K"})
    assert w.what == "the data give unit 'degC' but the config says 'K'"


def test_series_warnings_ignore_filled_years():
    df = annual_of([1.0, 2.0, 3.0, 4.0], "x")
    df.loc[1, "filled"] = True
    (w,) = series_warnings(df, 4, {})
    assert "only 3 observed year(s)" in w.what


# ----------------------------------------------------------------------------- fuzzing

NAMES = ["series", "year", "month", "value", "se", "cv", "unit", "group", "date", "velk_m",
         "Temp", "x y", "", "YEAR", "value"]
CELL = st.one_of(
    st.just(""),
    st.integers(1790, 2210).map(str),
    st.integers(-3, 14).map(str),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.floats(-1e3, 1e3).map(lambda x: f"{x:.3f}".replace(".", ",")),
    st.sampled_from(["NA", "nan", "inf", "velk", "../x", "2000-01", "2000-13", "Jan", "kg",
                     '"', '""', "a;b", "1,5", " 7 ", "#N/A", "$(x)", "1e400", "-0"]),
    st.text(max_size=6),
)


def number(x: float, decimal: str) -> str:
    text = repr(x)
    return text.replace(".", ",") if decimal == "," else text


@st.composite
def csv_text(draw):
    """CSV text: either random cells under a random header, or a well-formed wide or long
    table in which some cells are replaced by random ones."""
    decimal = draw(st.sampled_from([".", ","]))
    delimiter = draw(st.sampled_from([";", "\t"] if decimal == "," else [",", ";", "\t"]))
    layout = draw(st.sampled_from(["random", "wide", "long"]))
    mutate = draw(st.sampled_from([0.0, 0.05, 0.3]))

    def cell(good: str) -> str:
        if mutate and draw(st.floats(0, 1)) < mutate:
            return draw(CELL)
        return good

    finite = st.floats(-1e6, 1e6, allow_nan=False)
    if layout == "random":
        header = draw(st.lists(st.sampled_from(NAMES), min_size=1, max_size=6))
        rows = draw(st.lists(st.lists(CELL, min_size=0, max_size=len(header) + 1),
                             max_size=8))
    elif layout == "wide":
        header = ["year"] + draw(st.lists(st.sampled_from(["velk_m", "Temp", "x.1", "sst-2"]),
                                          min_size=1, max_size=3, unique=True))
        years = draw(st.lists(st.integers(1990, 2030), min_size=1, max_size=8, unique=True))
        rows = [[cell(str(y))] + [cell(number(draw(finite), decimal))
                                  for _ in header[1:]] for y in years]
    else:
        extras = draw(st.lists(st.sampled_from(["month", "se", "cv", "unit", "group"]),
                               max_size=3, unique=True))
        header = ["series", "year", "value"] + extras
        rows = []
        for _ in range(draw(st.integers(1, 8))):
            good = {"series": draw(st.sampled_from(["velk", "had", "x.1"])),
                    "year": str(draw(st.integers(1990, 2000))),
                    "value": number(draw(finite), decimal),
                    "month": str(draw(st.integers(1, 12))),
                    "se": number(draw(st.floats(0, 10)), decimal),
                    "cv": number(draw(st.floats(0, 1)), decimal),
                    "unit": "kg", "group": draw(st.sampled_from(["n", "s", ""]))}
            rows.append([cell(good[name]) for name in header])
    newline = draw(st.sampled_from(["\n", "\r\n"]))
    lines = [delimiter.join(header)] + [delimiter.join(r) for r in rows]
    return newline.join(lines) + draw(st.sampled_from(["", newline])), delimiter, decimal


def read_or_errors(spec, directory):
    try:
        df, warns = read_table(spec, directory)
    except InputErrors as exc:
        assert_one_line_each(exc)
        event("refused with InputErrors")
        return None
    event("read into a frame")
    assert_valid_frame(df)
    assert all(isinstance(w, InputWarning) and "\n" not in w.line() for w in warns)
    return df


FUZZ = settings(max_examples=200, deadline=None,
                suppress_health_check=[HealthCheck.function_scoped_fixture,
                                       HealthCheck.too_slow])


@FUZZ
@given(data=csv_text(), sniff=st.booleans())
def test_fuzz_structured_csv(tmp_path_factory, data, sniff):
    text, delimiter, decimal = data
    directory = tmp_path_factory.getbasetemp() / "fuzz_structured"
    directory.mkdir(exist_ok=True)
    (directory / "f.csv").write_bytes(text.encode("utf-8", "surrogatepass"))
    spec = {"path": "f.csv", "decimal": decimal}
    if not sniff and delimiter != decimal:
        spec["delimiter"] = delimiter
    read_or_errors(spec, directory)


@FUZZ
@given(content=st.one_of(st.text(max_size=200).map(
    lambda t: t.encode("utf-8", "surrogatepass")), st.binary(max_size=200)),
    ext=st.sampled_from([".csv", ".tsv", ".xlsx", ".parquet"]))
def test_fuzz_arbitrary_bytes(tmp_path_factory, content, ext):
    directory = tmp_path_factory.getbasetemp() / "fuzz_bytes"
    directory.mkdir(exist_ok=True)
    (directory / f"f{ext}").write_bytes(content)
    read_or_errors(f"f{ext}", directory)


@FUZZ
@given(values=st.lists(st.one_of(st.none(), st.floats(allow_nan=True, allow_infinity=True)),
                       min_size=1, max_size=12),
       start=st.integers(990, 2999))
def test_fuzz_values_round_trip(tmp_path_factory, values, start):
    directory = tmp_path_factory.getbasetemp() / "fuzz_values"
    directory.mkdir(exist_ok=True)
    cells = ["" if v is None else repr(v) for v in values]
    text = "year,x\n" + "".join(f"{start + i},{c}\n" for i, c in enumerate(cells))
    (directory / "v.csv").write_text(text)
    df = read_or_errors("v.csv", directory)
    present = [v for v in values if v is not None and not math.isnan(v)]
    if any(math.isinf(v) for v in present):
        assert df is None
    elif start < 1000 or start + len(values) - 1 > 2999:
        assert df is None  # every row's year is checked, with or without a value
    elif not present:
        assert df is None  # a file without values is refused
    else:
        assert df is not None
        assert df["value"].tolist() == present  # exact: repr round-trips
        assert df["year"].tolist() == [start + i for i, v in enumerate(values)
                                       if v is not None and not math.isnan(v)]


# ----------------------------------------------------------------------------- real-world tables
# Historical drivers and colleagues' spreadsheets: any four-digit year from 1000 to 2999; series
# the study does not use are left out whatever their names and cells, and one note lists them.

SUNSPOTS = "year,sunspots\n" + "".join(f"{y},{(y * 37) % 150 + 0.5}\n" for y in range(1700, 2021))


def test_a_driver_from_1700_is_read(tmp_path):
    write(tmp_path, "sun.csv", SUNSPOTS)
    df, warns = read_table("sun.csv", tmp_path)
    assert (df["year"].min(), df["year"].max(), len(df)) == (1700, 2020, 321)
    assert df.loc[df["year"] == 1700, "value"].item() == (1700 * 37) % 150 + 0.5
    assert warns == []


@pytest.mark.parametrize("year, ok", [(1000, True), (2999, True), (999, False), (3000, False),
                                      (98, False)])
def test_year_range_bounds(tmp_path, year, ok):
    write(tmp_path, "y.csv", f"year,x\n{year},1\n2000,2\n")
    if ok:
        assert read_table("y.csv", tmp_path)[0]["year"].tolist() == [year, 2000]
    else:
        with pytest.raises(InputErrors) as info:
            read_table("y.csv", tmp_path)
        assert_problem(info.value, file="y.csv", row=2, what=f"year {year} is outside 1000-2999",
                       fix="write the full four-digit year (for example 1998)")


def test_monthly_dates_before_1800_are_read(tmp_path):
    write(tmp_path, "m.csv", "date,sst\n1750-01,1\n1750-02,2\n1751-01,3\n")
    df, _ = read_table("m.csv", tmp_path)
    assert df[["year", "month"]].astype(int).values.tolist() == [[1750, 1], [1750, 2], [1751, 1]]


NOTES_WIDE = ("year,velk_m,Notes (see sheet 2)!,temp\n2000,0.2,ask Ana about 2001,1.5\n"
              "2001,0.3,,n/a\n2002,0.25,\"revised, see mail\",oops\n")


def test_an_unused_column_with_an_odd_name_is_ignored_with_a_note(tmp_path):
    write(tmp_path, "w.csv", NOTES_WIDE)
    df, warns = read_table("w.csv", tmp_path, wanted={"velk_m"})
    assert df["series"].unique().tolist() == ["velk_m"]
    assert df["value"].tolist() == [0.2, 0.3, 0.25]
    assert [w.line() for w in warns] == [
        "warning: w.csv: 2 series not used by the study are ignored: 'Notes (see sheet 2)!', 'temp'"]


def test_without_the_study_s_series_every_column_is_checked(tmp_path):
    write(tmp_path, "w.csv", NOTES_WIDE)
    with pytest.raises(InputErrors) as info:
        read_table("w.csv", tmp_path)
    assert "column name 'Notes (see sheet 2)!' has characters" in str(info.value)


def test_a_used_series_is_still_checked(tmp_path):
    write(tmp_path, "w.csv", NOTES_WIDE)
    with pytest.raises(InputErrors) as info:
        read_table("w.csv", tmp_path, wanted={"velk_m", "temp"})
    assert_problem(info.value, file="w.csv", row=4, series="temp", what="value 'oops' is not a number",
                   fix="write a plain number")


def test_unused_long_series_are_ignored_whatever_their_names_and_cells(tmp_path):
    write(tmp_path, "l.csv", "series,group,year,value,se\nm,age2,2000,0.2,0.01\nm,age2,2001,0.3,\n"
                             "../x,,2000,abc,\nm,a b,17,1,-1\nm,age2x,2000,1,\n")
    df, warns = read_table("l.csv", tmp_path, wanted={"m:age2"})
    assert df["series"].tolist() == ["m:age2", "m:age2"] and df["se"].iloc[0] == 0.01
    assert [w.what for w in warns] == ["3 series not used by the study are ignored: '../x', 'm:a b', 'm:age2x'"]


def test_unused_duplicates_and_unnamed_columns_are_ignored(tmp_path):
    write(tmp_path, "w.csv", "year,x,total,Total,,x2\n2000,1,5,5,7,\n2001,2,6,6,8,\n")
    df, warns = read_table("w.csv", tmp_path, wanted={"x"})
    assert df["value"].tolist() == [1.0, 2.0]
    assert warns[0].what == ("4 series not used by the study are ignored: 'column 5 (no name)', "
                             "'total', 'Total', 'x2'")
    with pytest.raises(InputErrors) as info:  # a column the study uses, twice: still refused
        read_table("w.csv", tmp_path, wanted={"total"})
    assert "column 'Total' appears twice (columns 3 and 4)" in str(info.value)


def test_an_unused_series_in_two_files_is_not_a_clash(tmp_path):
    write(tmp_path, "a.csv", "year,x,salinity\n2000,1,35\n")
    write(tmp_path, "b.csv", "year,y,salinity\n2000,2,34\n")
    df, _ = read_inputs(["a.csv", "b.csv"], tmp_path, wanted={"x", "y"})
    assert df["series"].tolist() == ["x", "y"]
    with pytest.raises(InputErrors) as info:
        read_inputs(["a.csv", "b.csv"], tmp_path, wanted={"x", "salinity"})
    assert "the series is also in a.csv" in str(info.value)


def test_a_note_under_the_table_is_skipped_when_the_used_cells_are_empty(tmp_path):
    write(tmp_path, "w.csv", "year,x,comment\n2000,1,\n2001,2,\nSource: a colleague,,see sheet 2\n")
    df, _ = read_table("w.csv", tmp_path, wanted={"x"})
    assert df["year"].tolist() == [2000, 2001]


def test_a_file_without_any_used_series_gives_no_rows(tmp_path):
    write(tmp_path, "w.csv", "year,Notes!\n2000,see mail\n")
    df, warns = read_table("w.csv", tmp_path, wanted={"x"})
    assert df.empty and list(df.columns) == FRAME_COLUMNS
    assert warns[0].what == "1 series not used by the study are ignored: 'Notes!'"


def test_check_passes_a_study_with_a_1700_driver_and_a_notes_column(tmp_path):
    from lagsieve.pipeline import check_study

    write(tmp_path, "sun.csv", SUNSPOTS)
    rows = "".join(f"{y},{0.2 + (y % 7) / 100},{'see sheet 2' if y % 5 == 0 else ''}\n" for y in range(1985, 2021))
    write(tmp_path, "m.csv", "year,velk_m,Notes (see sheet 2)!\n" + rows)
    cfg = tmp_path / "config.yaml"
    cfg.write_text("study: hist\ninputs: [sun.csv, m.csv]\nresponses: [{id: velk_m}]\n"
                   "drivers: [{id: sunspots}]\n", encoding="utf-8")
    study, annual, notes, warnings = check_study(cfg)
    assert annual.groupby("series")["year"].min().to_dict() == {"sunspots": 1700, "velk_m": 1985}
    assert any(w.line() == "warning: m.csv: 1 series not used by the study are ignored: "
                           "'Notes (see sheet 2)!'" for w in warnings)


def test_a_misspelt_id_is_matched_against_the_unused_series(tmp_path):
    from lagsieve.pipeline import check_study

    write(tmp_path, "sun.csv", SUNSPOTS)
    cfg = tmp_path / "config.yaml"
    cfg.write_text("study: hist\ninputs: [sun.csv]\nresponses: [{id: sunspot}]\ndrivers: [{id: x}]\n",
                   encoding="utf-8")
    with pytest.raises(InputErrors) as info:
        check_study(cfg)
    first = assert_one_line_each(info.value)[0]
    assert "responses[1] (id 'sunspot').id: no input file holds this series" in first and "sunspots" in first


# ----------------------------------------------------------------------------- config defaults

def test_screen_defaults_come_from_the_schema():
    # the values config/README.md documents for a config without a screen or report block
    assert SCREEN_DEFAULTS == {
        "lags": [0, 1, 2, 3], "models": ["linear"], "min_overlap": 15, "seed": 1,
        "surrogates": 999, "surrogate_method": "phase", "surrogate_keep_trend": True,
        "fdr": 0.10, "alpha": 0.05, "weights": "none", "gam_trend": True, "state_space": False, "validation": {},
        "draws": 100, "real_time": False, "season_lags": [0, 1, 2, 3],
    }
    assert screen_defaults() == SCREEN_DEFAULTS and screen_defaults() is not SCREEN_DEFAULTS
    assert report_defaults() == {"top": 3, "pdf": True, "docx": True, "svg": False}


def test_fill_defaults_keeps_given_values_and_the_original():
    raw = {"study": "s", "inputs": ["a.csv"], "screen": {"seed": 7, "lags": [2]},
           "responses": [{"id": "m", "unit": "1/yr"}],
           "drivers": [{"id": "x", "aggregate": {"months": [1, 2]}, "lags": [1]}]}
    before = copy.deepcopy(raw)
    full = fill_defaults(raw)
    assert raw == before  # not modified
    assert full["screen"] == dict(SCREEN_DEFAULTS, seed=7, lags=[2])
    assert list(full["screen"]) == list(SCREEN_DEFAULTS)  # schema order, as the report shows it
    assert full["report"] == {"top": 3, "pdf": True, "docx": True, "svg": False}
    assert full["responses"] == [{"kind": "other", "transform": "none", "id": "m", "unit": "1/yr"}]
    assert full["drivers"][0] == {"category": "other", "expected_sign": "any", "transform": "none",
                                  "id": "x", "aggregate": {"how": "mean", "months": [1, 2]},
                                  "lags": [1]}  # through the $ref of aggregate
    assert "ledger" not in full and "validation" in full["screen"]


def test_study_id_is_the_config_key(tmp_path):
    (tmp_path / "d.csv").write_text("year,m,x\n2000,1,2\n")
    cfg = tmp_path / "c.yaml"
    cfg.write_text("study: s1\ninputs: [d.csv]\nresponses: [{id: m}]\ndrivers: [{id: x}]\n")
    study = load_study(cfg)
    assert study.id == "s1"
    assert not hasattr(study, "study")  # the old name of the id is gone


@pytest.mark.parametrize("word, choices, expected", [
    ("forage_biomas", ["forage_biomass", "sst", "zoo"], "did you mean 'forage_biomass'?"),
    ("min_overlapp", ["min_overlap", "seed"], "did you mean 'min_overlap'?"),
    # nothing close: the most similar ids are still named (ties alphabetically)
    ("qq", ["bottom_temp", "abc", "sst", "zoo"], "ids found: abc, bottom_temp, sst..."),
    ("qq", [], "no ids found"),
])
def test_suggest(word, choices, expected):
    assert suggest(word, choices) == expected


def test_unknown_config_key_suggests_the_nearest(tmp_path):
    (tmp_path / "d.csv").write_text("year,m,x\n2000,1,2\n")
    cfg = tmp_path / "c.yaml"
    cfg.write_text("study: s1\ninputs: [d.csv]\nresponses: [{id: m}]\n"
                   "drivers: [{id: x, responses: [n]}]\nscreen: {sead: 3, surrogate_method: phse}\n")
    with pytest.raises(InputErrors) as info:
        load_study(cfg)
    lines = str(info.value).splitlines()
    assert len(lines) == 2
    assert "key 'screen'" in lines[0] and "did you mean 'seed' for 'sead'?" in lines[0]
    assert "key 'screen.surrogate_method'" in lines[1] and "did you mean 'phase'?" in lines[1]
    cfg.write_text("study: s1\ninputs: [d.csv]\nresponses: [{id: m}]\n"
                   "drivers: [{id: x, responses: [mm]}]\n")
    with pytest.raises(InputErrors) as info:
        load_study(cfg)
    assert "drivers[1] (id 'x').responses: names response 'mm'" in str(info.value)
    assert "did you mean 'm'?" in str(info.value)


def test_a_smoothing_criterion_or_test_that_does_not_exist_is_one_line(tmp_path):
    """The smoothing criterion (GCV with gamma 1.4) and the forecast tests (Clark-West where
    nested, Diebold-Mariano otherwise) are fixed by the method: asking for others is refused
    in one line that names every key allowed there."""
    (tmp_path / "d.csv").write_text("year,m,x\n2000,1,2\n")
    cfg = tmp_path / "c.yaml"
    cfg.write_text("study: s1\ninputs: [d.csv]\nresponses: [{id: m}]\ndrivers: [{id: x}]\n"
                   "screen: {smoothing: reml, forecast_test: dm}\n")
    with pytest.raises(InputErrors) as info:
        load_study(cfg)
    lines = str(info.value).splitlines()
    assert len(lines) == 1
    assert "unknown key(s) 'forecast_test', 'smoothing'; remove 'forecast_test'; remove 'smoothing'" in lines[0]
    assert "allowed here: alpha, draws, fdr, gam_trend, lags," in lines[0]


# ----------------------------------------------------------------------------- files

def test_sha256_of_text_and_file(tmp_path):
    # the "abc" example of FIPS 180-2 (Secure Hash Standard), Appendix B.1
    abc = "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    assert sha256_text("abc") == abc
    path = tmp_path / "abc.txt"
    write_text("abc", path)
    assert sha256_file(path) == abc and sha256_file(path, chunk=1) == abc
    assert [p.name for p in tmp_path.iterdir()] == ["abc.txt"]  # no temporary file left


def test_expected_sign_by_response_sets_the_sign_for_named_responses(tmp_path):
    """Prey lowers M but raises condition: a driver's sign may differ by response. An id that is
    not a response is one line naming the key (common practice: cross-references checked)."""
    (tmp_path / "d.csv").write_text("year,m,k,x\n2000,1,2,3\n")
    cfg = tmp_path / "c.yaml"
    cfg.write_text("study: s1\ninputs: [d.csv]\nresponses: [{id: m}, {id: k}]\n"
                   "drivers: [{id: x, expected_sign: negative, expected_sign_by_response: {k: positive}}]\n")
    study = load_study(cfg)
    assert [d["expected_sign"] for d in study.drivers_for("m")] == ["negative"]
    assert [d["expected_sign"] for d in study.drivers_for("k")] == ["positive"]
    cfg.write_text("study: s1\ninputs: [d.csv]\nresponses: [{id: m}, {id: k}]\n"
                   "drivers: [{id: x, expected_sign_by_response: {kk: positive, m: upward}}]\n")
    with pytest.raises(InputErrors) as info:
        load_study(cfg)
    lines = str(info.value).splitlines()
    assert len(lines) == 1 and "drivers[1] (id 'x').expected_sign_by_response.m:" in lines[0] and "positive" in lines[0]
    cfg.write_text("study: s1\ninputs: [d.csv]\nresponses: [{id: m}, {id: k}]\n"
                   "drivers: [{id: x, expected_sign_by_response: {kk: positive}}]\n")
    with pytest.raises(InputErrors) as info:
        load_study(cfg)
    assert "drivers[1] (id 'x').expected_sign_by_response: names response 'kk'" in str(info.value) and "did you mean 'k'?" in str(info.value)
