"""Checks of the annual series before screening: values a transform cannot take (an error)
and series that are short, constant, outlying or in an unexpected unit (warnings)."""
from __future__ import annotations

from typing import Mapping

import numpy as np
import pandas as pd

from lagsieve.errors import InputProblem, InputWarning, item_key, show
from lagsieve.formats import short_number
from lagsieve.io.config import Study
from lagsieve.prep.align import annual_table, forecast_frame, shift_batch

__all__ = ["MIN_FORECASTS", "backtest_warnings", "check_positive", "series_warnings", "state_space_warnings",
           "unscreenable_responses"]

MIN_FORECASTS = 5  # fewest out-of-sample forecasts a backtest is judged on (the screen's rule)

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
        return [InputProblem(what=f"transform '{show(transform)}' is unknown",
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
        what=f"value {short_number(value)} in {int(first['year'])} cannot take the {transform} "
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
                what=f"all {n} values are {short_number(v[0])}; a constant series carries no signal",
                file=file, series=sid))
        elif n >= 5:
            med = float(np.median(v))
            mad = 1.4826 * float(np.median(np.abs(v - med)))
            if mad > 0:
                z = np.abs(v - med) / mad
                for k in np.flatnonzero(z > 4):
                    out.append(InputWarning(
                        what=f"value {short_number(v[k])} in {int(years[k])} is {z[k]:.1f} scaled MADs "
                             f"from the median {short_number(med)}; check it is not a typing error",
                        file=file, series=sid))
        expected = units_expected.get(sid)
        if expected and "unit" in g:
            found = sorted({str(u).strip() for u in g["unit"].dropna()} - {""})
            for u in found:
                if u != str(expected).strip():
                    out.append(InputWarning(
                        what=f"the data give unit '{show(u)}' but the config says "
                             f"'{show(expected)}'", file=file, series=sid))
    return out


def _best_overlap(table: pd.DataFrame, rid: str, drivers: list[tuple[str, list[int]]]) -> tuple[int, str, int]:
    """(years, driver, lag) of the largest overlap of a response with one of its drivers at one
    of that driver's lags, counted as the screen counts it (filled years included)."""
    y = table[rid].to_numpy(float) if rid in table else np.full(len(table), np.nan)
    best = (0, "", 0)
    for did, lags in drivers:
        if did not in table:
            continue
        x = table[did].to_numpy(float)[None, :]
        for k in lags:
            n = int((~(np.isnan(y) | np.isnan(shift_batch(x, k)[0]))).sum())
            if n > best[0]:
                best = (n, did, k)
    return best


def _unscreenable(table: pd.DataFrame, rid: str, drivers: list[tuple[str, list[int]]], need: int
                  ) -> tuple[str, str] | None:
    """(what is wrong, how to fix it) when nothing can be screened for one response; else None."""
    if not drivers:
        return ("no driver is screened against this response (every driver's responses list leaves it out)",
                "add the response to a driver's responses, or remove the response")
    n, did, lag = _best_overlap(table, rid, drivers)
    if n >= need:
        return None
    best = f" (most: {n} with '{show(did)}' at lag {lag})" if n else ""
    return (f"shares fewer than screen.min_overlap = {need} years with every one of its drivers at every "
            f"lag{best}, so nothing can be screened for it",
            "extend the series, lower screen.min_overlap, or remove the response")


def unscreenable_responses(study: Study, annual: pd.DataFrame) -> list[InputProblem]:
    """A problem for every response of which nothing could be screened: no driver is paired
    with it, or none of its drivers shares ``screen.min_overlap`` years with it at any lag, so
    every one of its hypotheses could only be graded insufficient-data. (A short, constant or
    missing driver is not refused: it is one candidate among several, and the report says why
    it could not be judged.)"""
    table = annual_table(annual, {})
    need = int(study.screen["min_overlap"])
    problems = []
    for i, r in enumerate(study.responses):
        drivers = [(d["id"], study.lags_for(d)) for d in study.drivers_for(r["id"])]
        found = _unscreenable(table, r["id"], drivers, need)
        if found:
            problems.append(InputProblem(what=found[0], fix=found[1], file=str(study.path),
                                         key=item_key("responses", i, r["id"]), series=r["id"]))
    return problems


def backtest_warnings(study: Study, annual: pd.DataFrame) -> list[InputWarning]:
    """A warning when the configured first training window (``screen.validation.initial_years``)
    leaves fewer than MIN_FORECASTS years to forecast for every hypothesis: the study still runs
    (in-sample statistics are reported), but no hypothesis can be graded above insufficient-data."""
    initial = (study.screen.get("validation") or {}).get("initial_years")
    if not initial:
        return []
    table = annual_table(annual, {})
    most = max((len(forecast_frame(table, r, d["id"], study.lags_for(d)).years) - int(initial)
                for r in study.response_ids for d in study.drivers_for(r)
                if r in table and d["id"] in table), default=0)
    if most >= MIN_FORECASTS:
        return []
    return [InputWarning(what=f"screen.validation.initial_years = {initial} leaves fewer than {MIN_FORECASTS} "
                              f"years to forecast for every hypothesis (at most {max(most, 0)}), so none can be "
                              "graded above insufficient-data; a smaller first training window gives forecasts",
                         file=str(study.path))]


def state_space_warnings(study: Study, annual: pd.DataFrame, unknown: set[str] = frozenset()) -> list[InputWarning]:
    """With ``screen.state_space`` on, a warning for every response without a positive se in
    any year: its hypotheses are not refitted with known observation error (``unknown``:
    series whose values are not computed yet, left out)."""
    if not study.screen.get("state_space"):
        return []
    out = []
    for rid in study.response_ids:
        rows = annual[annual["series"] == rid]
        if rid in unknown or not len(rows) or ("se" in rows and (rows["se"] > 0).any()):
            continue
        file = str(rows["file"].iat[0]) if "file" in rows and rows["file"].notna().any() else None
        out.append(InputWarning(what="screen.state_space is true but this response has no se or cv, so its "
                                     "drivers are not refitted with known observation error; add an se or cv "
                                     "column to refit them", file=file, series=rid))
    return out
