"""Alignment: one annual axis for all series, transforms, and lagged pairs.

A driver "leads by k years" when the response in year t is paired with the driver in
year t - k. Nothing is filled here: a year missing in either series drops that pair.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd


def apply_transform(values: np.ndarray, transform: str) -> np.ndarray:
    """Apply a configured transform: 'none', 'log' (natural log) or 'log1p'."""
    v = np.asarray(values, float)
    if transform in (None, "none"):
        return v
    with np.errstate(divide="ignore", invalid="ignore"):
        if transform == "log":
            return np.log(v)
        if transform == "log1p":
            return np.log1p(v)
    raise ValueError(f"unknown transform {transform!r}")


def annual_table(annual: pd.DataFrame, transforms: dict[str, str]) -> pd.DataFrame:
    """Wide table indexed by every year from the first to the last observed, one column per
    series, transformed. ``annual`` is tidy: columns series, year, value."""
    wide = annual.pivot(index="year", columns="series", values="value")
    years = np.arange(int(wide.index.min()), int(wide.index.max()) + 1)
    wide = wide.reindex(years)
    wide.index.name = "year"
    for col in wide.columns:
        wide[col] = apply_transform(wide[col].to_numpy(), transforms.get(col, "none"))
    return wide


def se_table(annual: pd.DataFrame, transforms: dict[str, str]) -> pd.DataFrame:
    """Standard errors on the same axis as :func:`annual_table`, carried to the transformed
    scale by the delta method (se / value for log, se / (1 + value) for log1p)."""
    if "se" not in annual:
        annual = annual.assign(se=np.nan)
    wide_v = annual.pivot(index="year", columns="series", values="value")
    wide = annual.pivot(index="year", columns="series", values="se")
    years = np.arange(int(wide.index.min()), int(wide.index.max()) + 1)
    wide, wide_v = wide.reindex(years), wide_v.reindex(years)
    wide.index.name = "year"
    for col in wide.columns:
        t = transforms.get(col, "none")
        if t == "log":
            wide[col] = wide[col] / wide_v[col]
        elif t == "log1p":
            wide[col] = wide[col] / (1.0 + wide_v[col])
    return wide


def process_variance(y: np.ndarray, se: np.ndarray, n_ref: int | None = None) -> float:
    """Year-to-year (process) variance of a response beyond its observation error, by the
    method of moments on the first ``n_ref`` values (default: all): the variance of y around a
    least-squares line in the year (n - 2 degrees of freedom) minus the mean of se^2, floored at
    0. The same moment idea as the between-study variance of random-effects meta-analysis
    (DerSimonian & Laird 1986, Control. Clin. Trials 7:177-188), here unweighted and around a
    trend; the first training window alone, so that no later year enters an earlier forecast."""
    n = len(y) if n_ref is None else int(n_ref)
    yr, sr = np.asarray(y, float)[:n], np.asarray(se, float)[:n]
    ok = np.isfinite(yr) & np.isfinite(sr)
    if ok.sum() < 4:
        return 0.0
    t = np.flatnonzero(ok).astype(float)
    resid = yr[ok] - np.polyval(np.polyfit(t, yr[ok], 1), t)
    return float(max(0.0, resid @ resid / (ok.sum() - 2) - np.mean(sr[ok] ** 2)))


def inverse_variance_weights(se: np.ndarray, n_ref: int | None = None, y: np.ndarray | None = None) -> np.ndarray:
    """Weights 1 / (process variance + se^2) scaled to mean 1 over the first ``n_ref`` values
    (default: all). With ``y`` the process variance is estimated (:func:`process_variance`);
    without it the weights are 1 / se^2 alone, which gives precise years far too much weight
    whenever the year-to-year variation is larger than the observation error.

    The scale does not change a weighted least-squares fit, but it does change a penalised
    one at a given smoothing parameter; scaling on the first training window keeps later
    years' standard errors out of earlier forecasts."""
    se = np.asarray(se, float)
    tau2 = 0.0 if y is None else process_variance(y, se, n_ref)
    w = 1.0 / (tau2 + se**2)
    return w / np.mean(w[: n_ref or len(w)])


def lagged(table: pd.DataFrame, series: str, lag: int) -> np.ndarray:
    """Values of ``series`` shifted so that row t holds the value of year t - lag."""
    return table[series].shift(lag).to_numpy(dtype=float)


@dataclass(frozen=True)
class LaggedPair:
    """The complete (response, driver-at-lag) pairs of one screen row."""

    years: np.ndarray
    y: np.ndarray
    x: np.ndarray
    lag: int

    @property
    def n(self) -> int:
        return len(self.years)


def lagged_pair(table: pd.DataFrame, response: str, driver: str, lag: int) -> LaggedPair:
    """Pairs (y_t, x_{t-lag}) over the years where both are present."""
    y = table[response].to_numpy(dtype=float)
    x = lagged(table, driver, lag)
    ok = ~(np.isnan(y) | np.isnan(x))
    return LaggedPair(years=table.index.to_numpy()[ok], y=y[ok], x=x[ok], lag=lag)


@dataclass(frozen=True)
class ForecastFrame:
    """Rows usable for out-of-sample evaluation of one hypothesis: the response, its value
    one year earlier and the driver at every candidate lag are all present."""

    years: np.ndarray
    y: np.ndarray
    ylag: np.ndarray
    rows: np.ndarray  # positions of these years on the table's axis
    lags: np.ndarray


def forecast_frame(table: pd.DataFrame, response: str, driver: str | None, lags: list[int],
                   driver_lags: np.ndarray | None = None) -> ForecastFrame:
    """The usable rows; ``driver_lags`` (L, n_years) gives the driver at every lag when it is not
    the table's column shifted in years (a monthly driver lagged in seasons)."""
    y = table[response].to_numpy(dtype=float)
    ylag = table[response].shift(1).to_numpy(dtype=float)
    ok = ~(np.isnan(y) | np.isnan(ylag))
    for i, k in enumerate(lags):
        ok &= ~np.isnan(lagged(table, driver, k) if driver_lags is None else driver_lags[i])
    rows = np.flatnonzero(ok)
    return ForecastFrame(years=table.index.to_numpy()[rows], y=y[rows], ylag=ylag[rows],
                         rows=rows, lags=np.asarray(lags))


def shift_batch(values: np.ndarray, lag: int) -> np.ndarray:
    """Shift a batch (S, n_years) of driver series by ``lag`` years along the axis."""
    out = np.full_like(values, np.nan)
    if lag == 0:
        return values.copy()
    out[:, lag:] = values[:, :-lag]
    return out
