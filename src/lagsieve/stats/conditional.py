"""Evidence for a driver given its rivals: partial correlation with residual surrogates, and
the nested rolling origin (baseline + competitor against baseline + competitor + driver).

In sample, the statistic is the partial correlation of the response and the driver (at each
candidate lag) given one or more competitor series, each at its own fixed lag, and an
intercept: the correlation of the residuals of both on [1, competitors] (Fisher 1924; the
residual-on-residual form is the Frisch-Waugh-Lovell theorem). Its null distribution holds
the competitors fixed and randomises only what the driver carries beyond them (Freedman &
Lane 1983; Anderson & Legendre 1999): the driver is regressed on the competitors, surrogates
that keep the spectrum of its residual are drawn (:func:`lagsieve.stats.surrogates.make_surrogates`)
and the fitted part is added back. Every surrogate driver therefore shares the real
driver's relation to the competitors and its autocorrelation, but carries nothing else that
could reach the response. The lag is chosen the same way for the real driver and every
surrogate (the largest statistic over the lags), so the choice is paid for inside the null.

Out of sample, :func:`nested_rolling_origin` makes at every forecast origin the choices of
:func:`lagsieve.stats.backtest.rolling_origin` on the training years only: the baseline of
the smaller model (baseline + competitors) by least GCV, and the driver's lag by least
training RSS of the larger model on that same baseline, so the two models are nested at
every origin and the Clark & West (2007) test applies. Everything is batched over the
driver axis (the real driver first, then the residual surrogates) and over lags and origins
with the expanding-window solver of the backtest (the baseline and competitors shared by the
batch, the driver an added column: :func:`lagsieve.stats.linalg.expanding_added`).

References
----------
Freedman, D. & Lane, D. (1983) A nonstochastic interpretation of reported significance
    levels. J. Bus. Econ. Stat. 1:292-298.
Anderson, M.J. & Legendre, P. (1999) An empirical comparison of permutation methods for tests
    of partial regression coefficients in a linear model. J. Stat. Comput. Simul. 62:271-303.
Clark, T.E. & West, K.D. (2007) Approximately normal tests for equal predictive accuracy in
    nested models. J. Econometrics 138:291-311.
(Journal details recalled from memory.)
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lagsieve.stats.backtest import (
    BASELINES,
    baseline_design,
    clark_west,
    scale_from_start,
    skill_score,
)
from lagsieve.stats.linalg import expanding_added, expanding_shared
from lagsieve.stats.splines import GCV_GAMMA
from lagsieve.stats.surrogates import make_surrogates

MIN_RESIDUAL_DF = 4  # residual degrees of freedom a partial correlation needs beyond its regressors


def residualise(A: np.ndarray, Z: np.ndarray) -> np.ndarray:
    """Residuals of every row of ``A`` (..., n) on the columns of ``Z`` (n, p) by least squares
    (an orthonormal basis of Z's column space from a QR decomposition; Z of full column rank)."""
    Q, _ = np.linalg.qr(np.asarray(Z, float))
    A = np.asarray(A, float)
    return A - (A @ Q) @ Q.T


def partial_r(x: np.ndarray, y: np.ndarray, Z: np.ndarray) -> np.ndarray:
    """Partial correlation of ``x`` (..., n) and ``y`` (n,) given the columns of ``Z`` (n, p),
    which must include the intercept: the Pearson r of the two residual vectors. NaN where a
    residual is zero."""
    ex, ey = residualise(x, Z), residualise(y, Z)
    num = ex @ ey
    den = np.sqrt(np.sum(ex * ex, axis=-1) * (ey @ ey))
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / np.where(den > 0, den, 1.0), np.nan)


def _with_intercept(C: np.ndarray) -> np.ndarray:
    C = np.asarray(C, float)
    C = C[:, None] if C.ndim == 1 else C
    return np.column_stack([np.ones(len(C)), C])


def residual_surrogates(x: np.ndarray, C: np.ndarray, n_surrogates: int, rng: np.random.Generator,
                        method: str = "phase", keep_trend: bool = True) -> np.ndarray:
    """(1 + B, n) Freedman-Lane driver batch: row 0 the real driver, rows 1.. its fitted part on
    the competitors plus a surrogate of its residual (same spectrum, :func:`make_surrogates`).

    ``x`` (n,) is the driver and ``C`` (n, q) the competitors aligned with it (row s holds the
    competitor values the driver of year s is paired with), both with NaN where missing. Only
    years where the driver and every competitor are present carry a value, in every row (the
    real driver included), so the real driver and its surrogates enter every statistic on the
    same years. Interior gaps stay gaps (:func:`make_surrogates`).
    """
    x = np.asarray(x, float)
    Z = _with_intercept(C)
    ok = ~(np.isnan(x) | np.isnan(Z).any(axis=1))
    out = np.full((n_surrogates + 1, len(x)), np.nan)
    if ok.sum() < Z.shape[1] + 4:
        return out
    gamma = np.linalg.lstsq(Z[ok], x[ok], rcond=None)[0]
    fitted = np.where(ok, Z @ gamma, np.nan)
    resid = x - fitted
    out[0] = np.where(ok, x, np.nan)
    idx = np.flatnonzero(ok)
    lo, hi = idx[0], idx[-1] + 1
    if n_surrogates > 0:
        out[1:, lo:hi] = fitted[lo:hi] + make_surrogates(resid[lo:hi], n_surrogates, rng, method, keep_trend)
    return out


def shift_rows(values: np.ndarray, lag: int) -> np.ndarray:
    """Shift the last axis of ``values`` by ``lag`` steps (row t gets the value of t - lag; a
    negative lag looks ahead), NaN where nothing comes in."""
    v = np.asarray(values, float)
    out = np.full_like(v, np.nan)
    n = v.shape[-1]
    if lag >= 0:
        out[..., lag:] = v[..., : n - lag]
    else:
        out[..., : n + lag] = v[..., -lag:]
    return out


def partial_r_lags(y: np.ndarray, batch: np.ndarray, C: np.ndarray, lags) -> tuple[np.ndarray, np.ndarray]:
    """Partial correlations (L, S) of the response ``y`` (n,) and every member of the driver
    ``batch`` (S, n) at every lag in ``lags``, given the competitors ``C`` (n, q) as paired with
    the response (row t holds each competitor at its own lag) and an intercept; and the years
    used at each lag (L,). A lag with fewer than p + 1 + MIN_RESIDUAL_DF complete years gives NaN.
    """
    y = np.asarray(y, float)
    Z = _with_intercept(C)
    out = np.full((len(lags), batch.shape[0]), np.nan)
    used = np.zeros(len(lags), int)
    for i, k in enumerate(lags):  # a handful of lags; each is one batched computation
        xk = shift_rows(batch, int(k))
        ok = ~(np.isnan(y) | np.isnan(xk[0]) | np.isnan(Z).any(axis=1))
        used[i] = int(ok.sum())
        if used[i] < Z.shape[1] + 1 + MIN_RESIDUAL_DF:
            continue
        out[i] = partial_r(np.nan_to_num(xk[:, ok]), y[ok], Z[ok])
    return out, used


@dataclass(frozen=True)
class NestedResult:
    """Nested rolling-origin forecasts: baseline + competitors (``restricted``) against the
    same baseline + competitors + the driver (``full``), for every member of the driver batch."""

    years: np.ndarray       # (O,) the forecast years
    observed: np.ndarray    # (O,)
    restricted: np.ndarray  # (O,) forecasts of baseline + competitors
    full: np.ndarray        # (S, O) forecasts of baseline + competitors + driver
    lag: np.ndarray         # (S, O) the driver's lag chosen at every origin
    baseline: np.ndarray    # (O,) the baseline chosen at every origin

    @property
    def added_skill(self) -> np.ndarray:
        """(S,) 1 - MSE(full) / MSE(restricted): what the driver adds given the competitors."""
        mse_r = np.mean((self.observed - self.restricted) ** 2)
        mse_f = np.mean((self.observed[None, :] - self.full) ** 2, axis=-1)
        return skill_score(mse_f, mse_r) if mse_r > 0 else np.full(self.full.shape[0], np.nan)

    def clark_west(self, which: int = 0):
        """Clark-West test of the real driver's (or member ``which``'s) addition."""
        return clark_west(self.observed - self.full[which], self.observed - self.restricted)


def nested_rolling_origin(y: np.ndarray, ylag: np.ndarray, year: np.ndarray, C: np.ndarray, X: np.ndarray,
                          lags, initial: int, weights: np.ndarray | None = None) -> NestedResult:
    """One-step forecasts from expanding windows, for the real driver and its surrogates.

    y, ylag, year (T,): the response, its previous value and the year on complete rows; C (T, q)
    the competitors at their own lags; X (S, L, T) the driver batch at every candidate lag.
    At every origin, on the training rows only: the baseline (:data:`BASELINES`) of the
    smaller model by least GCV = n RSS / (n - 1.4 p)^2, then the driver's lag by least RSS of
    the larger model on that baseline. Scaling uses the first ``initial`` rows only (as
    :func:`lagsieve.stats.backtest.rolling_origin`); ``weights`` make every fit weighted.
    """
    y = np.asarray(y, float)
    T = len(y)
    if initial < 3 or initial >= T:
        raise ValueError("initial window must leave at least one forecast")
    origins = np.arange(initial, T)
    Xs, yl, yr = (scale_from_start(np.asarray(a, float), initial) for a in (X, ylag, year))
    Cs = scale_from_start(np.asarray(C, float).reshape(T, -1).T, initial).T  # (T, q)
    n_tr = origins.astype(float)
    designs = [np.column_stack([baseline_design(b, yl, yr), Cs]) for b in BASELINES]
    shared = [expanding_shared(Z, y, origins, weights) for Z in designs]  # the smaller model of each baseline
    gcv = [n_tr * sh.rss / np.maximum(n_tr - GCV_GAMMA * Z.shape[1], 1e-9) ** 2 for sh, Z in zip(shared, designs)]
    bi = np.argmin(np.stack(gcv), axis=0)  # (O,) baseline of least training GCV
    full, lag = np.empty((Xs.shape[0], len(origins))), np.empty((Xs.shape[0], len(origins)), int)
    for i in np.unique(bi):  # the driver added only where baseline i is the one chosen
        at = np.flatnonzero(bi == i)
        fit = expanding_added(designs[i], Xs[..., None], y, origins[at], weights)  # (S, L, O_i)
        pick = np.argmin(fit.rss, axis=1)  # (S, O_i): the lag of least training RSS
        full[:, at] = np.take_along_axis(fit.forecast, pick[:, None, :], axis=1)[:, 0, :]
        lag[:, at] = np.asarray(lags)[pick]
    return NestedResult(
        years=np.asarray(year)[origins], observed=y[origins],
        restricted=np.stack([sh.forecast for sh in shared])[bi, np.arange(len(origins))],
        full=full, lag=lag, baseline=np.asarray(BASELINES)[bi],
    )
