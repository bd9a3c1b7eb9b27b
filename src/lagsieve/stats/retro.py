"""A response as it was published: vintages (the series of each past assessment).

* :func:`mohn_rho`: the retrospective pattern of the response (Mohn 1999).
* :func:`realtime_forecasts`: one-step forecasts made in real time: at every origin the
  model is trained on the series as the assessment of that time published it, and each
  forecast is scored against the first value published for its target year.

A vintage table is wide: index = year, one column per vintage (the year of the assessment
that published the values), NaN where a vintage has no value.

References
----------
Mohn, R. (1999) The retrospective problem in sequential population analysis.
    ICES J. Mar. Sci. 56:473-488.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from lagsieve.stats.backtest import baseline_design, skill_score

PEELS = 5  # Mohn's rho over the last five peels (common practice in assessment reviews)


@dataclass(frozen=True)
class MohnResult:
    """Mohn's rho and its peels: per peel the vintage, its terminal year and the relative
    difference of its terminal value from the same year's value in the latest series."""

    rho: float
    peels: pd.DataFrame  # vintage, terminal_year, value, latest, relative

    @property
    def n_peels(self) -> int:
        return len(self.peels)


def terminal_years(wide: pd.DataFrame) -> pd.Series:
    """The last year with a value of every vintage (index: vintage)."""
    return pd.Series({v: int(wide[v].last_valid_index()) for v in wide.columns if wide[v].notna().any()},
                     dtype="int64")


def mohn_rho(wide: pd.DataFrame, latest: pd.Series, peels: int = PEELS) -> MohnResult:
    """Mohn's rho (Mohn 1999): the mean over peels of (X_peel(T_peel) - X_latest(T_peel)) /
    X_latest(T_peel), where T_peel is the terminal year of a peel.

    The peels are the vintages whose terminal year is earlier than the latest series' (the
    ``peels`` most recent of them); ``latest`` (index year) is the series as the screen uses
    it. A peel whose terminal year the latest series lacks (or holds as 0) is left out."""
    latest = latest.dropna()
    end = int(latest.index.max())
    term = terminal_years(wide)
    term = term[term < end].sort_values(kind="mergesort")
    rows = []
    for v, ty in list(term.items())[-peels:]:
        ref = latest.get(ty, np.nan)
        if np.isnan(ref) or ref == 0:
            continue
        val = float(wide.at[ty, v])
        rows.append({"vintage": int(v), "terminal_year": int(ty), "value": val, "latest": float(ref),
                     "relative": (val - ref) / ref})
    tab = pd.DataFrame(rows, columns=["vintage", "terminal_year", "value", "latest", "relative"])
    return MohnResult(float(tab["relative"].mean()) if len(tab) else np.nan, tab)


def first_release(wide: pd.DataFrame, latest: pd.Series) -> pd.Series:
    """The first value published for every year: the value of the oldest vintage that holds
    the year, or the latest series' value for a year no vintage holds."""
    ordered = wide[sorted(wide.columns)]
    first = ordered.bfill(axis=1).iloc[:, 0] if ordered.shape[1] else pd.Series(dtype=float)
    out = latest.astype(float).copy()
    common = first.dropna().index
    out.loc[out.index.intersection(common)] = first.loc[out.index.intersection(common)]
    extra = common.difference(out.index)
    return pd.concat([out, first.loc[extra]]).sort_index()


@dataclass(frozen=True)
class RealTimeResult:
    """Forecasts made in real time, one row per target year: the vintage trained on, the first
    published value, the candidate's and the baseline's forecasts."""

    table: pd.DataFrame  # year, vintage, first_value, forecast, baseline_forecast

    @property
    def n(self) -> int:
        return len(self.table)

    @property
    def skill(self) -> float:
        """1 - MSE(candidate) / MSE(baseline), both scored against the first published values."""
        t = self.table
        if len(t) < 1:
            return np.nan
        mse_c = np.mean((t["first_value"] - t["forecast"]) ** 2)
        mse_b = np.mean((t["first_value"] - t["baseline_forecast"]) ** 2)
        return float(skill_score(mse_c, mse_b)) if mse_b > 0 else np.nan


def _fit_forecast(design: np.ndarray, y: np.ndarray, train: np.ndarray, target: int) -> float:
    """Least-squares fit on the ``train`` rows of ``design``; the forecast of row ``target``."""
    beta, *_ = np.linalg.lstsq(design[train], y[train], rcond=None)
    return float(design[target] @ beta)


def _origin(series: pd.Series, x: pd.Series, lag: int, target: int, candidate: str, baseline: str):
    """Forecasts of year ``target`` by the candidate (``candidate`` baseline + the driver at
    ``lag``) and by ``baseline``, both trained on ``series`` (one vintage; years before
    ``target``); None when the vintage leaves too few training years."""
    years = np.arange(int(series.index.min()), target + 1)
    y = series.reindex(years).to_numpy(float)
    ylag = series.reindex(years - 1).to_numpy(float)
    xk = x.reindex(years - lag).to_numpy(float)
    train = ~(np.isnan(y) | np.isnan(ylag) | np.isnan(xk))
    train[-1] = False
    if np.isnan(ylag[-1]) or np.isnan(xk[-1]) or train.sum() < 6:
        return None
    yr = years.astype(float) - years[0]
    yl = np.where(np.isnan(ylag), 0.0, ylag)
    cand = np.column_stack([baseline_design(candidate, yl, yr), np.where(np.isnan(xk), 0.0, xk)])
    base = baseline_design(baseline, yl, yr)
    return _fit_forecast(cand, y, train, -1), _fit_forecast(base, y, train, -1)


def realtime_forecasts(wide: pd.DataFrame, latest: pd.Series, x: pd.Series, lag: int,
                       candidate: str = "trend", baseline: str = "trend") -> RealTimeResult:
    """One-step forecasts in real time. For every target year t the model is trained on the
    vintage whose terminal year is t - 1 (the newest such vintage: the series as published
    when t was the next year), on the years where the vintage's value, its previous year and
    the driver at ``lag`` are present; the candidate is the ``candidate`` baseline plus a line
    in the driver, compared with the ``baseline`` alone trained on the same vintage. Both are
    scored against the first value published for t (:func:`first_release`). Years without
    such a vintage, or with fewer than 6 training years, are not forecast."""
    term = terminal_years(wide)
    first = first_release(wide, latest)
    rows = []
    for t in sorted(int(y) for y in latest.dropna().index):
        at = term[term == t - 1]
        if not len(at) or np.isnan(first.get(t, np.nan)):
            continue
        v = int(max(at.index))
        fc = _origin(wide[v].dropna(), x, lag, t, candidate, baseline)
        if fc is not None:
            rows.append({"year": t, "vintage": v, "first_value": float(first[t]), "forecast": fc[0],
                         "baseline_forecast": fc[1]})
    return RealTimeResult(pd.DataFrame(rows, columns=["year", "vintage", "first_value", "forecast",
                                                      "baseline_forecast"]))
