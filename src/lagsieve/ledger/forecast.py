"""The next-year forecast of one hypothesis, with its prediction interval and the baselines'
forecasts made at the same time.

The *candidate* model is the baseline the candidate used most often in the rolling-origin
evaluation (``evidence.csv`` column ``oos_baseline``; the ledger stores it as ``baseline``)
plus the driver at its selected lag (column ``lag``), fitted by least squares on every observed
year; it forecasts the first response year not yet observed, T + 1. The three baselines
(climatology, persistence, trend) are fitted on the same years and forecast the same year, so
that the candidate can later be compared with what one would have forecast without the
driver. A forecast needs the driver in year T + 1 - lag, so it can be made when lag >= 1, or
when the driver has already been observed in T + 1; otherwise the reason is returned. The
candidate takes the form the screen chose (a straight line, or a penalised spline of the
driver when the screen's model is ``gam``), and with ``screen.weights: inverse-variance``
every fit is weighted by 1/se^2 as in the screen. Values are on the model's scale (the
response's transform).

Prediction interval (``LEVEL`` = 80 %, two-sided): the OLS prediction interval from the
candidate's training residuals with the parameter part inflated for autocorrelated residuals,
forecast +- t(0.90; n - p) * s * sqrt(1 + k * w0' (W'W)^-1 w0), with s^2 = RSS / (n - p) and
k = (1 + rho) / (1 - rho), rho the lag-1 autocorrelation of the training residuals (pairs of
consecutive years; clipped to [0, 0.9]; :func:`lagsieve.ledger.scores.ar1_inflation`). Under
AR(1) errors the residual variance s^2 still estimates the variance of a new year's error, but
the least-squares coefficients vary more than (W'W)^-1 s^2 says, by about the factor k that
shrinks the effective sample size to n (1 - rho) / (1 + rho) (Bartlett 1946); with rho <= 0 the
interval is the classical one. It still ignores the uncertainty of the lag choice; its coverage
on the scored years is what the track record reports.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import NamedTuple

import numpy as np
import pandas as pd

from lagsieve.ledger.fingerprint import training_hash, used_values
from lagsieve.ledger.scores import ar1_coefficient, ar1_inflation
from lagsieve.prep.align import forecast_frame, inverse_variance_weights
from lagsieve.stats.backtest import BASELINES, baseline_design
from lagsieve.stats.distributions import t_ppf
from lagsieve.stats.splines import fit_pspline, predict_pspline

LEVEL = 0.80
MIN_RESIDUAL_DF = 3  # fewer residual degrees of freedom than this: no forecast
GAM_MIN_YEARS = 12  # the spline form needs this many training years, else the straight line is fitted


class Prediction(NamedTuple):
    """A point forecast with its two-sided prediction interval and the fit's residual sd."""

    forecast: float
    lower: float
    upper: float
    resid_sd: float


@dataclass
class NextYearForecast:
    """The one-step-ahead forecast of one hypothesis, with the baselines' forecasts."""

    response: str
    driver: str
    lag: int
    baseline: str  # the baseline the candidate used most often: the candidate is this baseline plus the driver
    origin_year: int  # T, the last observed response year
    target_year: int  # T + 1
    driver_year: int  # T + 1 - lag
    driver_value: float  # transformed, as in the model
    forecast: float
    lower: float
    upper: float
    level: float
    n_train: int
    resid_sd: float
    training_sha256: str
    baselines: dict[str, tuple[float, float, float]] = field(default_factory=dict)  # b -> (fc, lo, hi)
    grade: str = ""  # the hypothesis' grade when the forecast was made
    screen_model: str = "linear"  # the form the screen chose; the forecast uses the same form


def ols_forecast(W: np.ndarray, y: np.ndarray, w0: np.ndarray, level: float,
                 weights: np.ndarray | None = None, years: np.ndarray | None = None) -> Prediction:
    """Least-squares fit of y on W; forecast at w0 with its two-sided prediction interval, the
    parameter part inflated by the AR(1) factor of the residuals (module docstring; ``years``
    tell which rows are consecutive, default all).

    With ``weights`` (mean 1) the fit is weighted least squares and the new year gets weight 1,
    the mean precision of the training years (its standard error is not known yet). Columns
    other than the first (intercept) are centred first, which leaves the forecast unchanged and
    keeps the normal equations well conditioned (the year column is about 2000).
    """
    W = np.asarray(W, float).copy()
    w0 = np.asarray(w0, float).copy()
    sw = np.ones(len(y)) if weights is None else np.sqrt(np.asarray(weights, float))
    mu = W[:, 1:].mean(axis=0)
    W[:, 1:] -= mu
    w0[1:] -= mu
    Ws, ys = W * sw[:, None], np.asarray(y, float) * sw
    n, p = Ws.shape
    q, r = np.linalg.qr(Ws)
    beta = np.linalg.solve(r, q.T @ ys)
    resid = ys - Ws @ beta
    df = n - p
    s = float(np.sqrt(resid @ resid / df))
    lev = np.linalg.solve(r.T, w0)
    k = ar1_inflation(ar1_coefficient(resid, np.arange(n) if years is None else years))
    se = s * float(np.sqrt(1.0 + k * (lev @ lev)))
    fc = float(w0 @ beta)
    t = float(t_ppf(0.5 + level / 2.0, df))
    return Prediction(fc, fc - t * se, fc + t * se, s)


def gam_forecast(x: np.ndarray, y: np.ndarray, Z: np.ndarray, x0: float, z0: np.ndarray, level: float,
                 weights: np.ndarray | None = None, years: np.ndarray | None = None) -> Prediction:
    """Baseline + penalised spline of the driver, forecast at (x0, z0) with an approximate
    prediction interval: t on n - edf degrees of freedom with variance s^2 (1 + k edf / n), the
    average leverage standing in for the exact leverage of the new point and k the AR(1) factor
    of the residuals (module docstring)."""
    other = Z[:, 1:]
    trend = other[:, 0] if other.shape[1] else None
    fit = fit_pspline(x, y, trend=trend, weights=weights)
    fc = float(predict_pspline(fit, np.array([x0]), None if trend is None else np.array([z0[1]]))[0])
    n, edf = float(fit.n_used), float(fit.edf)
    df = max(n - edf, 1.0)
    s = float(np.sqrt(fit.rss / df))
    resid = (np.asarray(y, float) - np.ravel(fit.fitted)) * (1.0 if weights is None else np.sqrt(weights))
    ok = np.isfinite(resid)
    k = ar1_inflation(ar1_coefficient(resid[ok], (np.arange(len(resid)) if years is None else years)[ok]))
    half = float(t_ppf(0.5 + level / 2.0, df)) * s * float(np.sqrt(1.0 + k * edf / n))
    return Prediction(fc, fc - half, fc + half, s)


def training_years(table: pd.DataFrame, response: str, driver: str, lag: int, origin_year: int):
    """Rows of the candidate's fit up to ``origin_year``: years where the response, the response
    one year earlier and the driver at ``lag`` are all observed. Returns (years, y, ylag, rows)."""
    ff = forecast_frame(table, response, driver, [lag])
    keep = ff.years <= origin_year
    return ff.years[keep], ff.y[keep], ff.ylag[keep], ff.rows[keep]


@dataclass
class TrainingSet:
    """What every model of one forecast is fitted on, and the values it forecasts from."""

    years: np.ndarray
    y: np.ndarray
    ylag: np.ndarray  # the response one year earlier
    x: np.ndarray  # the driver at the lag
    weights: np.ndarray | None
    y_origin: float  # the response in T
    target_year: int  # T + 1

    def design(self, baseline: str) -> tuple[np.ndarray, np.ndarray]:
        """The baseline's design on the training years and its row for the target year."""
        Z = baseline_design(baseline, self.ylag, self.years)
        z0 = baseline_design(baseline, np.array([self.y_origin]), np.array([self.target_year]))[0]
        return Z, z0

    def baseline_forecasts(self, level: float) -> dict[str, tuple[float, float, float]]:
        """Every baseline's (forecast, lower, upper) for the target year."""
        out = {}
        for b in BASELINES:
            Z, z0 = self.design(b)
            out[b] = tuple(ols_forecast(Z, self.y, z0, level, self.weights, self.years)[:3])
        return out

    def candidate(self, baseline: str, x0: float, level: float, model: str) -> Prediction:
        """The candidate's forecast: ``baseline`` plus the driver (at x0 in the target year), as
        a penalised spline when ``model`` is ``gam`` and there are enough years, else a line."""
        Z, z0 = self.design(baseline)
        if model == "gam" and len(self.y) >= GAM_MIN_YEARS:
            return gam_forecast(self.x, self.y, Z, x0, z0, level, self.weights, self.years)
        return ols_forecast(np.column_stack([Z, self.x]), self.y, np.append(z0, x0), level, self.weights,
                            self.years)


def _origin(table: pd.DataFrame, response: str, driver: str, lag: int) -> tuple[int | None, float, str]:
    """(T, the driver's value in T + 1 - lag, "") or (None, nan, why no forecast can be made)."""
    observed = table[response].dropna()
    if observed.empty:
        return None, np.nan, "no forecast: the response has no observed year"
    T = int(observed.index.max())
    dyear = T + 1 - lag
    xv = table[driver].get(dyear, np.nan) if driver in table.columns else np.nan
    if pd.isna(xv):
        return None, np.nan, f"no forecast: lag {lag} needs {driver} in {dyear}, not yet observed"
    return T, float(xv), ""


def training_set(table: pd.DataFrame, response: str, driver: str, lag: int, origin_year: int,
                 se: pd.DataFrame | None = None) -> TrainingSet:
    """The training set of a forecast made at ``origin_year`` (weighted by 1/(process variance +
    se^2) with ``se``, the process variance from the training years)."""
    years, y, ylag, rows = training_years(table, response, driver, lag, origin_year)
    x = table[driver].shift(lag).to_numpy(dtype=float)[rows]
    wts = None if se is None else inverse_variance_weights(se[response].to_numpy(dtype=float)[rows], y=y)
    return TrainingSet(years, y, ylag, x, wts, float(table[response].loc[origin_year]), origin_year + 1)


def next_year_forecast(table: pd.DataFrame, raw: pd.DataFrame, transforms: dict[str, str],
                       response: str, driver: str, lag: int, baseline: str,
                       level: float = LEVEL, se: pd.DataFrame | None = None,
                       raw_se: pd.DataFrame | None = None, model: str = "linear"
                       ) -> tuple[NextYearForecast | None, str]:
    """Forecast the first response year not yet observed with the candidate model.

    ``table`` is the wide transformed annual table (:func:`lagsieve.prep.align.annual_table`),
    ``raw`` the same before transforms. With ``se`` (standard errors on the transformed scale,
    as :func:`lagsieve.prep.align.se_table`; given when ``screen.weights`` is inverse-variance)
    every fit is weighted by 1/se^2, as in the screen; ``raw_se`` (before transforms) then
    enters the training hash. Returns (forecast, "") or (None, the reason no forecast can be
    made, in words).

    With ``model='gam'`` (the form the screen chose) the candidate is the baseline plus a
    penalised spline of the driver (:func:`lagsieve.stats.splines.fit_pspline`, the baseline's
    non-intercept term entering as an unpenalised linear term, smoothing by GCV), with the
    interval of :func:`gam_forecast`.
    """
    lag = int(lag)
    T, xv, why = _origin(table, response, driver, lag)
    if T is None:
        return None, why
    ts = training_set(table, response, driver, lag, T, se)
    n_params = baseline_design(baseline, np.zeros(1), np.zeros(1)).shape[1] + 1
    if len(ts.y) - n_params < MIN_RESIDUAL_DF:
        return None, f"no forecast: {len(ts.y)} usable years are too few for the candidate model"
    try:
        fcs = ts.baseline_forecasts(level)
        cand = ts.candidate(baseline, xv, level, model)
    except (np.linalg.LinAlgError, ValueError) as exc:
        return None, f"no forecast: the least-squares fit failed ({exc})"
    if not np.all(np.isfinite(list(cand) + [v for t in fcs.values() for v in t])):
        return None, "no forecast: the fit gave a non-finite forecast or interval (a constant driver?)"
    cells = used_values(response, driver, lag, ts.years, T)
    sha = training_hash(raw, transforms, response, driver, lag, baseline, cells, raw_se if se is not None else None)
    return NextYearForecast(response=response, driver=driver, lag=lag, baseline=baseline, origin_year=T,
                            target_year=T + 1, driver_year=T + 1 - lag, driver_value=xv, forecast=cand.forecast,
                            lower=cand.lower, upper=cand.upper, level=level, n_train=int(len(ts.y)),
                            resid_sd=cand.resid_sd, training_sha256=sha, baselines=fcs), ""
