"""Batched correlation statistics for short, autocorrelated series.

Every function works along the last axis and broadcasts over any leading (batch) axes, so
one call serves the real driver and all of its surrogates at once. Inputs are complete
(no NaN): callers select the overlapping years first.

References
----------
Pyper, B.J. & Peterman, R.M. (1998) Comparison of methods to account for autocorrelation
    in correlation analyses of fish data. Can. J. Fish. Aquat. Sci. 55:2127-2140.
Bretherton, C.S. et al. (1999) The effective number of spatial degrees of freedom of a
    time-varying field. J. Climate 12:1990-2009.
Newey, W.K. & West, K.D. (1987) A simple, positive semi-definite, heteroskedasticity and
    autocorrelation consistent covariance matrix. Econometrica 55:703-708.
"""
from __future__ import annotations

import numpy as np
from scipy import stats as _st


def _centre(a: np.ndarray) -> np.ndarray:
    return a - a.mean(axis=-1, keepdims=True)


def pearson_r(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Pearson correlation along the last axis (batched; NaN where a series is constant)."""
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    xc, yc = _centre(x), _centre(y)
    num = (xc * yc).sum(-1)
    den = np.sqrt((xc * xc).sum(-1) * (yc * yc).sum(-1))
    with np.errstate(invalid="ignore", divide="ignore"):
        r = num / den
    return np.clip(r, -1.0, 1.0)


def correlation_p(r: np.ndarray, n: np.ndarray | float) -> np.ndarray:
    """Two-sided p of a correlation r from n (possibly effective, non-integer) pairs.

    t = r sqrt((n - 2) / (1 - r^2)) against Student t with n - 2 degrees of freedom; this
    is the test of scipy.stats.pearsonr when n is the number of pairs. The degrees of
    freedom are floored at 1 so that a tiny effective sample size gives p near 1, not NaN.
    """
    r = np.asarray(r, float)
    df = np.maximum(np.asarray(n, float) - 2.0, 1.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = r * np.sqrt(df / np.maximum(1.0 - r * r, 1e-300))
    p = 2.0 * _st.t.sf(np.abs(t), df)
    return np.where(np.isnan(r), np.nan, np.minimum(p, 1.0))


def autocorrelation(x: np.ndarray, max_lag: int) -> np.ndarray:
    """Sample autocorrelation rho(1..max_lag) with the usual biased estimator.

    rho(j) = sum_{t=1}^{N-j} (x_t - xbar)(x_{t+j} - xbar) / sum_t (x_t - xbar)^2
    (Box & Jenkins; the estimator Pyper & Peterman 1998 use). Returns shape (..., max_lag).
    """
    x = np.asarray(x, float)
    xc = _centre(x)
    den = (xc * xc).sum(-1)
    n = x.shape[-1]
    out = np.empty(x.shape[:-1] + (max_lag,))
    for j in range(1, max_lag + 1):  # loop over a handful of lags, batched over series
        if j >= n:
            out[..., j - 1] = 0.0
            continue
        out[..., j - 1] = (xc[..., :-j] * xc[..., j:]).sum(-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return out / den[..., None]


def effective_n(x: np.ndarray, y: np.ndarray, max_lag: int | None = None) -> np.ndarray:
    """Pyper & Peterman (1998, eq. 1) effective sample size of the correlation of x and y.

    1/N* = 1/N + (2/N) sum_{j=1}^{J} rho_xx(j) rho_yy(j), with J = N // 5 by default and the
    biased sample autocorrelations of :func:`autocorrelation` (no extra (N-j)/N weight).
    N* is clipped to [2, N]: it cannot exceed the number of pairs.
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    n = x.shape[-1]
    J = max(1, n // 5) if max_lag is None else int(max_lag)
    ax = autocorrelation(x, J)
    ay = autocorrelation(y, J)
    inv = 1.0 / n + (2.0 / n) * np.nansum(ax * ay, axis=-1)
    with np.errstate(divide="ignore"):
        neff = 1.0 / inv
    neff = np.where(inv <= 0, n, neff)
    return np.clip(neff, 2.0, float(n))


def effective_n_ar1(r1x: np.ndarray, r1y: np.ndarray, n: int) -> np.ndarray:
    """Bretherton et al. (1999) AR(1) shortcut: N* = N (1 - r1x r1y) / (1 + r1x r1y)."""
    prod = np.asarray(r1x) * np.asarray(r1y)
    return n * (1.0 - prod) / (1.0 + prod)


def detrend(v: np.ndarray, t: np.ndarray | None = None) -> np.ndarray:
    """Residuals of v after least-squares removal of a straight line in t (default 0..n-1)."""
    v = np.asarray(v, float)
    n = v.shape[-1]
    t = np.arange(n, dtype=float) if t is None else np.asarray(t, float)
    tc = t - t.mean()
    vc = _centre(v)
    slope = (vc * tc).sum(-1, keepdims=True) / (tc * tc).sum()
    return vc - slope * tc


def detrended_r(x: np.ndarray, y: np.ndarray, t: np.ndarray | None = None) -> np.ndarray:
    """Pearson r after removing a linear trend in year from both series."""
    return pearson_r(detrend(x, t), detrend(y, t))


def differenced_r(x: np.ndarray, y: np.ndarray, years: np.ndarray | None = None) -> np.ndarray:
    """Pearson r of first differences, using only steps between consecutive years."""
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    dx, dy = np.diff(x, axis=-1), np.diff(y, axis=-1)
    if years is not None:
        keep = np.diff(np.asarray(years)) == 1
        dx, dy = dx[..., keep], dy[..., keep]
    if dx.shape[-1] < 3:
        return np.full(np.broadcast_shapes(dx.shape[:-1], dy.shape[:-1]), np.nan)
    return pearson_r(dx, dy)


def newey_west_lags(n: int) -> int:
    """Default HAC truncation lag floor(4 (n/100)^(2/9)) (Newey & West 1994 rule of thumb)."""
    return int(np.floor(4.0 * (n / 100.0) ** (2.0 / 9.0)))


def hac_slope(
    x: np.ndarray, y: np.ndarray, maxlags: int | None = None, small_sample: bool = False
) -> tuple[np.ndarray, np.ndarray]:
    """OLS slope of y on x (with intercept) and its Newey-West (1987) HAC standard error.

    Bartlett weights w_l = 1 - l / (L + 1). With ``small_sample`` the covariance is scaled
    by n / (n - 2). Agrees with statsmodels ``OLS(...).fit(cov_type="HAC",
    cov_kwds={"maxlags": L, "use_correction": small_sample})``.
    """
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    n = x.shape[-1]
    L = newey_west_lags(n) if maxlags is None else int(maxlags)
    xc = _centre(x)
    sxx = (xc * xc).sum(-1)
    slope = (xc * _centre(y)).sum(-1) / sxx
    intercept = y.mean(-1) - slope * x.mean(-1)
    resid = y - intercept[..., None] - slope[..., None] * x
    # Sandwich for the slope only: bread = (X'X)^-1 row of slope = [-xbar, 1] / sxx.
    # The score of the slope is u_t = resid_t * (x_t - xbar).
    u = resid * xc
    s = (u * u).sum(-1)
    for lag in range(1, L + 1):
        w = 1.0 - lag / (L + 1.0)
        s = s + 2.0 * w * (u[..., lag:] * u[..., :-lag]).sum(-1)
    var = s / (sxx * sxx)
    if small_sample:
        var = var * n / (n - 2.0)
    return slope, np.sqrt(np.maximum(var, 0.0))


def leave_one_out_r(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Pearson r with each observation left out in turn; shape (..., n), closed form via sums."""
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    n = x.shape[-1]
    sx, sy = x.sum(-1, keepdims=True), y.sum(-1, keepdims=True)
    sxx, syy = (x * x).sum(-1, keepdims=True), (y * y).sum(-1, keepdims=True)
    sxy = (x * y).sum(-1, keepdims=True)
    m = n - 1.0
    sx_, sy_ = sx - x, sy - y
    cxy = (sxy - x * y) - sx_ * sy_ / m
    cxx = (sxx - x * x) - sx_ * sx_ / m
    cyy = (syy - y * y) - sy_ * sy_ / m
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.clip(cxy / np.sqrt(cxx * cyy), -1.0, 1.0)


def windowed_r(x: np.ndarray, y: np.ndarray, width: int) -> np.ndarray:
    """Pearson r in every window of ``width`` consecutive observations; shape (..., n-width+1)."""
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    if x.shape[-1] < width:
        return np.empty(x.shape[:-1] + (0,))
    xw = np.lib.stride_tricks.sliding_window_view(x, width, axis=-1)
    yw = np.lib.stride_tricks.sliding_window_view(y, width, axis=-1)
    return pearson_r(xw, yw)
