"""A plain check of a realisation of the invented demo: naive and detrended correlations.

Not the screen: TRUTH.md prints this table so that a reader sees, for the realisation at
hand, which decoys share the trend of M (large naive r, small detrended r).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from lagsieve.demo.world import DRIVER_IDS, DRIVERS, RESPONSE_IDS, DemoData

__all__ = ["annual_as_written", "association_check"]

#: Fewest shared years for a correlation of the check.
MIN_YEARS = 8


def annual_as_written(data: DemoData) -> pd.DataFrame:
    """Annual driver table from the frames as written (gaps applied), configured transforms."""
    wide = data.surveys_annual.set_index("year")
    longw = data.indices_long.pivot(index="year", columns="series", values="value")
    monthly = data.bottom_temperature_monthly
    spring = monthly[monthly["month"].between(3, 5)].groupby("year")["value"].agg(["mean", "count"])
    table = wide.join(longw, how="outer")
    table["bottom_temp"] = spring["mean"].where(spring["count"] >= 2)
    for d_id, _cat, _sign, transform, *_ in DRIVERS:
        if transform == "log":
            table[d_id] = np.log(table[d_id].astype(float))
    return table[list(DRIVER_IDS)].astype(float)


def _naive_and_detrended(years: np.ndarray, y: np.ndarray, x: np.ndarray) -> tuple[float, float] | None:
    """Pearson r of ``y`` and ``x`` as they are and after removing a straight line in the
    year from each (pairwise complete years); ``None`` below MIN_YEARS shared years."""
    ok = np.isfinite(x) & np.isfinite(y)
    if ok.sum() < MIN_YEARS:
        return None
    t = years[ok].astype(float)
    a = np.column_stack([np.ones_like(t), t])
    ry = y[ok] - a @ np.linalg.lstsq(a, y[ok], rcond=None)[0]
    rx = x[ok] - a @ np.linalg.lstsq(a, x[ok], rcond=None)[0]
    return np.corrcoef(y[ok], x[ok])[0, 1], np.corrcoef(ry, rx)[0, 1]


def _best_lags(years: np.ndarray, y: np.ndarray, driver: pd.Series, lags) -> dict:
    """The naive and the detrended r of largest absolute value over ``lags``, with its lag
    (the first lag wins a tie; 0.0 at lag 0 when no lag has enough years)."""
    best = {"naive": (0.0, 0), "detrended": (0.0, 0)}
    for lag in lags:
        pair = _naive_and_detrended(years, y, driver.reindex(years - lag).to_numpy())
        if pair is None:
            continue
        for key, r in zip(("naive", "detrended"), pair):
            if abs(r) > abs(best[key][0]):
                best[key] = (float(r), lag)
    return {"naive_r": best["naive"][0], "naive_lag": best["naive"][1],
            "detrended_r": best["detrended"][0], "detrended_lag": best["detrended"][1]}


def association_check(data: DemoData, lags: tuple[int, ...] = (0, 1, 2, 3)) -> pd.DataFrame:
    """Naive and linearly detrended Pearson r of every response x driver, best lag of each.

    A plain check of the realisation, not the screen: ``naive_r`` and ``detrended_r`` are
    the correlations of largest absolute value over ``lags`` (pairwise complete years).
    """
    table = annual_as_written(data)
    mort = data.mortality.assign(rid="m:" + data.mortality["group"])
    resp = mort.pivot(index="year", columns="rid", values="value")
    years = resp.index.to_numpy()
    rows = []
    for rid in RESPONSE_IDS:
        y = resp[rid].to_numpy(dtype=float)
        for d_id in DRIVER_IDS:
            rows.append({"response": rid, "driver": d_id,
                         **_best_lags(years, y, table[d_id], lags)})
    return pd.DataFrame(rows)
