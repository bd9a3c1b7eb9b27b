"""Reading the study's input files into the tidy frame (see :mod:`lagsieve.io.tables`).

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

The layouts (long and wide) and the tidy frame are described in :mod:`lagsieve.io.tables`.
"""
from __future__ import annotations

import csv
import io
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Collection, Iterable, Mapping

import pandas as pd

from lagsieve.errors import InputErrors, InputProblem, InputWarning, closest, show
from lagsieve.io.cells import Collector
from lagsieve.io.tables import Grid, empty_frame, parse_grid

__all__ = ["SUPPORTED", "read_grid", "read_inputs", "read_table"]

TEXT_EXTENSIONS = {".csv", ".tsv", ".txt"}
SUPPORTED = ".csv, .tsv, .txt, .xlsx, .parquet"


def _label(spec_path: str) -> str:
    return show(spec_path, limit=300)


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
                 f"'{show(spec)}'",
            fix="write the input as a path, e.g. data/mortality.csv", key="inputs")])
    col = Collector(None)
    unknown = sorted(str(k) for k in spec if k not in ("path", "sheet", "decimal", "delimiter"))
    path = spec.get("path")
    if not isinstance(path, (str, Path)) or str(path).strip() == "":
        col.items.append(InputProblem(what="an input has no path",
                                      fix="add path: <file> to the input", key="inputs"))
        col.check()
    label = _label(str(path))
    if unknown:
        col.add(f"unknown input option(s) {', '.join(show(u) for u in unknown)}",
                "use only path, sheet, decimal and delimiter", file=label)
    decimal = spec.get("decimal", ".")
    if decimal is None:
        decimal = "."
    if decimal not in (".", ","):
        col.add(f"decimal '{show(decimal)}' is neither '.' nor ','",
                "set decimal: '.' or decimal: ','", file=label)
    delimiter = spec.get("delimiter")
    if delimiter is not None and (not isinstance(delimiter, str) or len(delimiter) != 1
                                  or delimiter in '"\r\n'):
        col.add(f"delimiter '{show(delimiter)}' is not a single character",
                "set delimiter to one character such as ',' ';' or a tab", file=label)
    elif delimiter is not None and delimiter == decimal:
        col.add(f"delimiter and decimal are both '{delimiter}'",
                "use delimiter: ';' with decimal: ','", file=label)
    sheet = spec.get("sheet")
    if sheet is not None and (isinstance(sheet, bool) or not isinstance(sheet, (str, int))):
        col.add(f"sheet '{show(sheet)}' is neither a sheet name nor a position",
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


def _read_text(path: Path, spec: _Spec, col: Collector) -> Grid:
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
        col.fatal(f"the table cannot be read near line {previous + 1} ({show(str(exc), 80)})",
                  "check the quotes on that line: a cell with a delimiter or quote must be "
                  "enclosed in double quotes, with inner quotes doubled", row=previous + 1)
    if header is None:  # only blank records
        col.fatal("the file is empty", "put a header line and data rows in it")
    return Grid(header=header, header_row=header_row, rows=rows, delimiter=delimiter)


def _read_xlsx(path: Path, spec: _Spec, col: Collector, warnings: list[InputWarning]) -> Grid:
    import openpyxl  # here, not at the top: its import takes ~0.3 s and few inputs are .xlsx

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
                    what=f"no sheet given; reading the first sheet '{show(names[0])}' of "
                         f"{len(names)}", file=col.file))
        elif isinstance(sheet, int):
            if not 0 <= sheet < len(names):
                col.fatal(f"sheet {sheet} does not exist (the workbook has {len(names)} "
                          f"sheet(s): {', '.join(show(n) for n in names)})",
                          "set sheet to a position counting from 0, or to a sheet name")
            ws = wb.worksheets[sheet]
        else:
            if sheet not in names:
                near = closest(sheet, names)
                col.fatal(f"sheet '{show(sheet)}' does not exist (sheets: "
                          f"{', '.join(show(n) for n in names)})",
                          (f"did you mean '{show(near)}'? " if near else "")
                          + "set sheet to one of the sheet names above (spelling and case "
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
    return Grid(header=header, header_row=header_row, rows=rows)


def _read_parquet(path: Path, col: Collector) -> Grid:
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
    return Grid(header=header, header_row=1, rows=rows)



def read_table(spec: str | Mapping[str, Any], base_dir: str | Path,
               wanted: Collection[str] | None = None) -> tuple[pd.DataFrame, list[InputWarning]]:
    """Read one input file into the tidy long frame (see the module docstring).

    ``spec`` is a path or ``{path, sheet, decimal, delimiter}``; a relative path is read from
    ``base_dir``. With ``wanted`` (the series ids the study uses) the file's other series are
    left out unchecked and listed in a warning. Returns ``(frame, warnings)``; raises
    :class:`InputErrors` with every problem found in the file. The file is only read, never
    written.
    """
    grid, col, decimal, warnings = read_grid(spec, base_dir)
    frame = parse_grid(grid, decimal, col, warnings, wanted)
    return frame, warnings


def read_grid(spec: str | Mapping[str, Any], base_dir: str | Path
              ) -> tuple[Grid, Collector, str, list[InputWarning]]:
    """Read one file as it is written: its header and rows (:class:`Grid`), the problem
    collector labelled with the file, the decimal mark and the warnings so far. Other tables
    than series (per-fish samples) parse the grid themselves."""
    s = _normalise_spec(spec)
    label = _label(s.path)
    col = Collector(label)
    warnings: list[InputWarning] = []
    path = Path(s.path).expanduser()
    if not path.is_absolute():
        path = Path(base_dir) / path
    ext = path.suffix.lower()
    try:  # stat only: opening a named pipe would wait for a writer for ever
        exists, is_dir, is_file = path.exists(), path.is_dir(), path.is_file()
    except (OSError, ValueError) as exc:
        col.fatal(f"the path cannot be used ({show(str(exc), 80)})",
                  "check the path under inputs for stray characters")
    if not exists:
        col.fatal(f"the file does not exist (looked for {show(str(path), 300)})",
                  "check the path under inputs; relative paths are read from the config's "
                  "folder")
    if is_dir:
        col.fatal("this is a folder, not a file", "give the path of a table file "
                  f"({SUPPORTED})")
    if not is_file:
        col.fatal("this is not a regular file (a named pipe, device or socket)",
                  f"give the path of a table file saved on disk ({SUPPORTED})")
    if ext == ".xls":
        col.fatal("old-style .xls workbooks are not read",
                  "save the workbook as .xlsx, or export the sheet as CSV")
    if ext not in TEXT_EXTENSIONS | {".xlsx", ".parquet"}:
        col.fatal(f"the file type '{show(ext or '(no extension)')}' is not supported",
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
        col.fatal(f"the file cannot be read ({show(exc.strerror or type(exc).__name__, 80)})",
                  "check that the file is readable by you and not locked by another program")
    return grid, col, s.decimal, warnings



def read_inputs(specs: Iterable[str | Mapping[str, Any]], base_dir: str | Path,
                wanted: Collection[str] | None = None) -> tuple[pd.DataFrame, list[InputWarning]]:
    """Read every input and check problems across files (only the ``wanted`` series, when
    given: see :func:`read_table`).

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
            frame, warns = read_table(spec, base_dir, wanted)
        except InputErrors as exc:
            problems.extend(exc.problems)
            continue
        frames.append(frame)
        warnings.extend(warns)
    problems.extend(_series_in_two_files(frames))
    if problems:
        raise InputErrors(problems)
    if not frames:
        return empty_frame(), warnings
    return pd.concat(frames, ignore_index=True), warnings


def _series_in_two_files(frames: list[pd.DataFrame]) -> list[InputProblem]:
    """A problem for every series id found in more than one file (both files named)."""
    problems = []
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
    return problems
