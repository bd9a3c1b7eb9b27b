"""Annual series: one value per year from monthly windows, and gaps filled (or listed).

Nothing is changed silently: every dropped, filled or unfilled year is returned as a note.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np
import pandas as pd

from lagsieve.errors import InputErrors, InputProblem, show
from lagsieve.formats import short_number
from lagsieve.io.cells import Problem

__all__ = ["ANNUAL_COLUMNS", "to_annual"]

ANNUAL_COLUMNS = ["series", "year", "value", "se", "filled", "unit", "file", "row"]

Note = dict[str, Any]  # {series, year, action, reason}


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

    A season response of ``by_season`` (option ``season_of``) that the data do not hold is made
    from the monthly rows of the response it comes from, over its ``season_months``.

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
    notes: list[Note] = []
    parts: list[pd.DataFrame] = []
    df = long_df[np.isfinite(long_df["value"].to_numpy(dtype=float))]
    groups = {sid: g for sid, g in df.groupby("series", sort=True)}
    for sid in sorted(series_options):
        opts = dict(series_options.get(sid) or {})
        if sid not in groups and opts.get("season_of") in groups:  # a season of a monthly response
            groups[sid] = groups[opts["season_of"]].assign(series=sid)
            opts["aggregate"] = opts.get("season_months")
        if sid not in groups:
            continue
        g = groups[sid].sort_values(["year", "month"], na_position="first")
        file = str(g["file"].iat[0])
        annual, series_notes, prob = _series_annual(g, sid, opts)
        if prob:
            problems.append(InputProblem(what=prob[0], fix=prob[1], file=file, series=sid))
            continue
        notes.extend(series_notes)
        unit = g["unit"].dropna()
        annual.insert(0, "series", sid)
        annual["unit"] = str(unit.iat[0]) if len(unit) else None
        annual["file"] = file
        parts.append(annual)
    if problems:
        raise InputErrors(problems)
    return _annual_frame(parts), notes


def _annual_frame(parts: list[pd.DataFrame]) -> pd.DataFrame:
    """The series' annual frames as one frame with the documented dtypes, by series and year."""
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
    return out.sort_values(["series", "year"], ignore_index=True)


def _series_annual(g: pd.DataFrame, sid: str, opts: Mapping[str, Any]
                   ) -> tuple[pd.DataFrame | None, list[Note], Problem | None]:
    """One series' annual values (aggregated if monthly, then gap-filled) and its notes."""
    monthly = g["month"].notna()
    aggregate = opts.get("aggregate")
    if monthly.any() and not monthly.all():
        return None, [], ("the series has both monthly and annual rows",
                          "give every row of the series a month, or split it into two series")
    notes: list[Note] = []
    if monthly.all():
        if not aggregate:
            return None, [], ("the values are monthly and need combining into one value per "
                              "year", "add aggregate: {months: [...]} to its entry in the config")
        annual, notes, prob = _aggregate(g, sid, aggregate)
        if prob:
            return None, [], prob
    else:
        if aggregate:
            return None, [], ("the values are annual (no month) but the config gives aggregate",
                              "remove aggregate from its entry in the config")
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
        return None, [], (f"fill '{show(fill)}' is unknown", "use fill: none or fill: linear")
    if isinstance(max_gap, bool) or not isinstance(max_gap, (int, np.integer)) or max_gap < 1:
        return None, [], (f"max_gap '{show(max_gap)}' is not a whole number of at least 1",
                          "set max_gap: 1 (or more)")
    annual, fill_notes = _fill(annual, sid, fill, int(max_gap))
    return annual, notes + fill_notes, None


# ----------------------------------------------------------------------------- monthly windows

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


@dataclass(frozen=True)
class Window:
    """A checked ``aggregate`` option: the months in order, how they combine, the fewest
    months a year needs, and the years each month adds to reach the window's year."""

    months: list[int]
    how: str
    min_months: int
    offsets: dict[int, int]


def _window(aggregate: Mapping[str, Any]) -> tuple[Window | None, Problem | None]:
    months = aggregate.get("months") if isinstance(aggregate, Mapping) else None
    if (not isinstance(months, (list, tuple)) or not months
            or any(isinstance(m, bool) or not isinstance(m, (int, np.integer)) or not 1 <= m <= 12
                   for m in months) or len(set(months)) != len(months)):
        return None, (f"aggregate months '{show(months)}' are not distinct month numbers "
                      "1-12", "write aggregate: {months: [6, 7, 8]} (months 1-12, each once)")
    months = [int(m) for m in months]
    how = aggregate.get("how", "mean") or "mean"
    if how not in ("mean", "sum", "min", "max"):
        return None, (f"aggregate how '{show(how)}' is unknown", "use how: mean, sum, min or max")
    min_months = aggregate.get("min_months")
    min_months = len(months) if min_months is None else min_months
    if (isinstance(min_months, bool) or not isinstance(min_months, (int, np.integer))
            or min_months < 1):
        return None, (f"aggregate min_months '{show(min_months)}' is not a whole number of "
                      "at least 1", "set min_months between 1 and the number of months")
    if min_months > len(months):
        return None, (f"aggregate min_months {min_months} is more than the {len(months)} "
                      "months listed", f"set min_months to at most {len(months)}")
    offsets = _window_offsets(months)
    if offsets is None:
        return None, (f"aggregate months {months} pass the year end more than once",
                      "list the months in calendar order from the first month of the "
                      "window, e.g. [10, 11, 12, 1, 2, 3]")
    return Window(months, how, int(min_months), offsets), None


def _combine(how: str, v: np.ndarray, e: np.ndarray, rows: np.ndarray
             ) -> tuple[float, float, int | None]:
    """(value, se, source row or None) of one window's monthly values."""
    n = len(v)
    row = int(rows[0]) if n == 1 else None
    if how == "mean":
        return float(np.mean(v)), float(np.sqrt(np.sum(e ** 2)) / n), row
    if how == "sum":
        return float(np.sum(v)), float(np.sqrt(np.sum(e ** 2))), row
    k = int(np.argmin(v) if how == "min" else np.argmax(v))
    return float(v[k]), float(e[k]), int(rows[k])


def _aggregate(g: pd.DataFrame, sid: str, aggregate: Mapping[str, Any]
               ) -> tuple[pd.DataFrame | None, list[Note], Problem | None]:
    win, prob = _window(aggregate)
    if prob:
        return None, [], prob
    months, min_months = win.months, win.min_months
    sel = g[g["month"].isin(months)]
    present_months = sorted(int(m) for m in g["month"].unique())
    if sel.empty:
        return None, [], (f"aggregate months {months} give no year: the data have months "
                          f"{present_months}",
                          "list months that are in the data under aggregate: months")
    month_arr = sel["month"].to_numpy(dtype="int64")
    target = sel["year"].to_numpy(dtype="int64") + np.array([win.offsets[m] for m in month_arr])
    values = sel["value"].to_numpy(dtype=float)
    ses = sel["se"].to_numpy(dtype=float)
    rows = sel["row"].to_numpy(dtype="int64")
    years, out_v, out_se, out_row = [], [], [], []
    notes = []
    for y in np.unique(target):
        idx = np.flatnonzero(target == y)
        if len(idx) < min_months:
            have = ", ".join(str(int(m)) for m in month_arr[idx])
            notes.append({"series": sid, "year": int(y), "action": "dropped",
                          "reason": f"only {len(idx)} of the {len(months)} months {months} have "
                                    f"values (months {have}); min_months is {min_months}"})
            continue
        val, se, row = _combine(win.how, values[idx], ses[idx], rows[idx])
        if not math.isfinite(val):
            return None, [], (f"the {win.how} of the months of {int(y)} is too large to be "
                              "finite", "check the monthly values, or use how: mean")
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


# ----------------------------------------------------------------------------- gaps

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
                              "reason": f"linear interpolation between {a} ({short_number(va)}) and "
                                        f"{b} ({short_number(vb)}) giving {short_number(v)}"})
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

