"""Relationships that change: a test for a change in regression coefficients at an unknown
year, the most likely year with its interval, and moving-window correlations with a
surrogate band.

Every statistic works on a batch: the regressors carry the batch (surrogates) on the first
axis, so the real driver and all of its surrogates are tested in one array operation.

The model of a break at candidate index ``tau`` (the first observation of the new regime,
d_t = 1 for t >= tau) is the partial structural change regression

    y_t = X_t' beta + d_t X_t[changing]' delta + e_t

whose ``tested`` columns are the coefficients tested for a change, and whose ``nuisance``
columns may change at the same year under the null and the alternative alike. The F
statistic at tau compares the fit with and without the tested shifts; the sup-F (sup-Wald
with a homoscedastic variance) is its largest value over candidates trimmed by 15% at
each end (Andrews 1993).

References
----------
Andrews, D.W.K. (1993) Tests for parameter instability and structural change with unknown
    change point. Econometrica 61:821-856.
Bai, J. (1997) Estimation of a change point in multiple regression models. Rev. Econ.
    Stat. 79:551-563.
Yao, Y.-C. (1987) Approximating the distribution of the maximum likelihood estimate of the
    change-point in a sequence of independent random variables. Ann. Stat. 15:1321-1328.
Freedman, D. & Lane, D. (1983) A nonstochastic interpretation of reported significance
    levels. J. Bus. Econ. Stat. 1:292-298.
Schreiber, T. & Schmitz, A. (1996) Improved surrogate data for nonlinearity tests. Phys.
    Rev. Lett. 77:635-638.
Litzow, M.A. et al. (2018) Proc. R. Soc. B 285 (from memory: moving-window correlations to
    show environment-biology relationships that strengthen, fade or reverse over decades).
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy import optimize
from scipy.stats import norm

from lagsieve.stats.correlation import windowed_r
from lagsieve.stats.surrogates import phase_randomised

TRIM = 0.15  # share of the record kept out of each end (Andrews 1993's usual 15%)
WINDOW_YEARS = 15  # moving-window length: common practice for annual ecological series
BAND_LEVEL = 0.95  # pointwise surrogate band of the moving-window correlation
IAAFT_ROUNDS = 10  # spectrum / amplitude adjustments of the residual surrogates


@dataclass(frozen=True)
class SupF:
    """F statistics of a break at every candidate index, for every batch member.

    ``f`` (S, C) the F statistic at each candidate; ``candidates`` (C,) the candidate
    indices (first observation of the new regime); ``stat`` (S,) the sup-F; ``at`` (S,) the
    index where it is reached; ``df`` the numerator and denominator degrees of freedom."""

    f: np.ndarray
    candidates: np.ndarray
    stat: np.ndarray
    at: np.ndarray
    df: tuple[int, int]


def candidate_indices(n: int, n_changing: int, trim: float = TRIM) -> np.ndarray:
    """Indices tau of the first observation of a new regime, each segment at least
    ceil(trim n) observations long and longer than the number of changing coefficients."""
    h = max(int(np.ceil(trim * n - 1e-9)), n_changing + 1)
    return np.arange(h, n - h + 1)


def _cross_products(X: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, ...]:
    """Whole-record and after-each-index sums of X_t X_t' and X_t y_t: (S, p, p), (S, n, p, p),
    (S, p), (S, n, p); the 'after' sums at index tau run over t >= tau."""
    M = X[..., :, None] * X[..., None, :]
    v = X * y[..., None]
    post_M = np.flip(np.cumsum(np.flip(M, -3), -3), -3)
    post_v = np.flip(np.cumsum(np.flip(v, -2), -2), -2)
    return M.sum(-3), post_M, v.sum(-2), post_v


def _rss(G, Gp, g, gp, yy, cols) -> np.ndarray:
    """Residual sums of squares of y on [X, d X[:, cols]] at every candidate: (S, C)."""
    S, C, p = Gp.shape[0], Gp.shape[1], G.shape[-1]
    k = p + len(cols)
    A = np.empty((S, C, k, k))
    A[..., :p, :p] = G[:, None]
    A[..., :p, p:] = Gp[..., :, cols]
    A[..., p:, :p] = Gp[..., cols, :]
    A[..., p:, p:] = Gp[..., cols, :][..., :, cols]
    b = np.concatenate([np.broadcast_to(g[:, None], (S, C, p)), gp[..., cols]], axis=-1)
    coef = np.linalg.solve(A, b[..., None])[..., 0]
    return yy[:, None] - np.einsum("sck,sck->sc", coef, b)


def sup_f(y: np.ndarray, X: np.ndarray, tested: list[int], nuisance: list[int] = (),
          trim: float = TRIM) -> SupF:
    """Sup-F test of a change in the coefficients of ``X`` columns ``tested`` at an unknown
    index, with the ``nuisance`` columns free to change at the same index (Andrews 1993).

    ``y`` (n,) or (S, n); ``X`` (n, p) or (S, n, p), the batch first. At each candidate tau:
    F = ((RSS_r - RSS_u) / q) / (RSS_u / (n - k_u)), the restricted model lets the nuisance
    coefficients change at tau, the unrestricted model the nuisance and tested ones
    (q = len(tested), k_u = p + q + len(nuisance)). Put the regressors on a common scale
    first (F does not depend on it) so that the normal equations are well conditioned."""
    X = np.asarray(X, float)
    y = np.asarray(y, float)
    if X.ndim == 2:
        X = X[None]
    S, n, p = max(X.shape[0], y.shape[0] if y.ndim == 2 else 1), X.shape[1], X.shape[2]
    X, y = np.broadcast_to(X, (S, n, p)), np.broadcast_to(y, (S, n))
    nuisance, tested = list(nuisance), list(tested)
    cand = candidate_indices(n, len(tested) + len(nuisance), trim)
    G, post_M, g, post_v = _cross_products(X, y)
    Gp, gp = post_M[:, cand], post_v[:, cand]
    yy = np.einsum("sn,sn->s", y, y)
    rss_u = _rss(G, Gp, g, gp, yy, sorted(nuisance + tested))
    rss_r = _rss(G, Gp, g, gp, yy, sorted(nuisance))
    df_den = n - p - len(tested) - len(nuisance)
    with np.errstate(invalid="ignore", divide="ignore"):
        f = ((rss_r - rss_u) / len(tested)) / (rss_u / df_den)
    return _sup(f, cand, (len(tested), df_den))


def slope_break_sup_f(x: np.ndarray, y: np.ndarray, trim: float = TRIM) -> SupF:
    """Sup-F of a change in the slope of y = a + b x + e, the intercept free to change at the
    same year. ``x`` (S, n) or (n,) and ``y`` (n,) or (S, n), broadcast against each other: the
    real driver and its surrogates against one response, or one driver against a batch of
    responses.

    Why the intercept may change too: a regime shift usually moves the response's level as
    well. With the intercept held fixed, a level shift alone (unrelated to the driver) would
    load on d_t x_t whenever x is not centred on zero in the new regime and be read as a
    change of slope; testing both together would call a level shift alone an unstable
    relationship. Letting the intercept change under both hypotheses tests the slope only."""
    x, y = np.broadcast_arrays(np.atleast_2d(np.asarray(x, float)), np.atleast_2d(np.asarray(y, float)))
    xs, ys = _unit_scale(x), _unit_scale(y)
    n = xs.shape[-1]
    cand = candidate_indices(n, 2, trim)
    # with intercept and slope free on each side the fits are separate regressions: every sum
    # they need is a cumulative sum, so no system is solved (sup_f gives the same F, tested)
    terms = (xs, xs * xs, xs * ys, ys, ys * ys)
    pre = [np.cumsum(v, -1)[..., cand - 1] for v in terms]
    tot = [v.sum(-1, keepdims=True) for v in terms]
    sides = [(cand.astype(float), *pre), ((n - cand).astype(float), *[t - p for t, p in zip(tot, pre)])]
    cxx, cxy, cyy = [], [], []
    for m, sx, sxx, sxy, sy, syy in sides:
        cxx.append(sxx - sx * sx / m)
        cxy.append(sxy - sx * sy / m)
        cyy.append(syy - sy * sy / m)
    with np.errstate(invalid="ignore", divide="ignore"):
        rss_u = sum(c_yy - c_xy * c_xy / c_xx for c_xx, c_xy, c_yy in zip(cxx, cxy, cyy))
        rss_r = sum(cyy) - (cxy[0] + cxy[1]) ** 2 / (cxx[0] + cxx[1])
        f = (rss_r - rss_u) / (rss_u / (n - 4))
    return _sup(f, cand, (1, n - 4))


def _unit_scale(v: np.ndarray) -> np.ndarray:
    """Rows of ``v`` centred and scaled to unit sd (constant rows only centred): F does not
    depend on the scale, and the sums stay well conditioned."""
    sd = v.std(-1, keepdims=True)
    return (v - v.mean(-1, keepdims=True)) / np.where(sd > 0, sd, 1.0)


def iaaft(e: np.ndarray, n_surrogates: int, rng: np.random.Generator, rounds: int = IAAFT_ROUNDS) -> np.ndarray:
    """Iterated amplitude-adjusted Fourier surrogates of a complete series ``e`` (Schreiber &
    Schmitz 1996): (B, n), every row a rearrangement of the values of ``e`` (its marginal
    distribution exactly, heavy tails included) whose periodogram is close to that of ``e``.
    Start from phase-randomised surrogates put in the rank order of ``e``'s values, then
    ``rounds`` times impose the Fourier amplitudes of ``e`` and restore its values by rank.
    Every surrogate of the batch in each step at once; the phases as spec / |spec| (no
    trigonometric functions: the same rearrangements as exp(i angle(spec)) in
    ``tests/test_breaks.py``, at about two thirds of the CPU)."""
    e = np.asarray(e, float)
    n, srt = e.shape[-1], np.sort(e)
    amp = np.abs(np.fft.rfft(e - e.mean()))
    s = phase_randomised(e - e.mean(), n_surrogates, rng)
    for _ in range(rounds + 1):
        s = _in_rank_order(srt, s)
        spec = np.fft.rfft(s - s.mean(-1, keepdims=True), axis=-1)
        s = np.fft.irfft(amp * _unit_phases(spec), n=n, axis=-1)
    return _in_rank_order(srt, s)


def _unit_phases(spec: np.ndarray) -> np.ndarray:
    """spec / |spec|, and 1 where spec is 0 (as exp(i angle(0)) = 1)."""
    size = np.abs(spec)
    return np.divide(spec, size, out=np.ones_like(spec), where=size > 0)


def _in_rank_order(srt: np.ndarray, s: np.ndarray) -> np.ndarray:
    """The sorted values ``srt`` (n,) rearranged in the rank order of every row of ``s`` (B, n):
    srt[rank of s_t] at t, by one sort of each row and a scatter (the same rearrangement as
    ``srt[argsort(argsort(s))]``, with one sort instead of two)."""
    out = np.empty(s.shape)
    out[np.arange(s.shape[0])[:, None], np.argsort(s, axis=-1)] = srt
    return out


def slope_break_residual_test(x: np.ndarray, y: np.ndarray, n_surrogates: int, rng: np.random.Generator,
                              trim: float = TRIM) -> SupF:
    """The sup-F of a change in slope of y on the real driver ``x`` (n,) and its null from
    surrogates of the residuals of the whole-record line: row 0 of the result is the real
    statistic, rows 1..B the sup-F of each residual surrogate on the same ``x``.

    Under the null the line holds throughout, y = a + b x + e, and F depends neither on a nor
    on b, so the sup-F of y equals that of e on x. The null keeps the real driver and replaces
    e by IAAFT surrogates of the estimated residuals (:func:`iaaft`), in the manner of the
    residual permutations of Freedman & Lane (1983): the same driver, the residuals' own
    distribution (heavy tails included) and autocorrelation. Surrogate drivers tested against
    y instead pair a surrogate with residuals dominated by the Gaussian b x part, so outliers in
    the real residuals inflated the real sup-F more than the surrogates' (bench/README.md)."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    xc = x - x.mean()
    sxx = float(xc @ xc)
    b = float(xc @ (y - y.mean())) / sxx if sxx > 0 else 0.0
    e = y - y.mean() - b * xc
    real = slope_break_sup_f(x, y, trim)
    null = slope_break_sup_f(x, iaaft(e, n_surrogates, rng), trim)
    return _sup(np.concatenate([real.f, null.f]), real.candidates, real.df)


def _sup(f: np.ndarray, cand: np.ndarray, df: tuple[int, int]) -> SupF:
    """The sup-F result from the F statistics (S, C) at the candidates (NaN where undefined)."""
    f = np.where(np.isfinite(f), np.maximum(f, 0.0), np.nan)
    filled = np.where(np.isnan(f), -np.inf, f)
    at = cand[np.argmax(filled, axis=1)]
    stat = np.where(np.all(np.isnan(f), axis=1), np.nan, filled.max(axis=1))
    return SupF(f=f, candidates=cand, stat=stat, at=at, df=df)


# ----------------------------------------------------------------------------- break date


def argmax_cdf(x: np.ndarray) -> np.ndarray:
    """CDF of the argmax of W(s) - |s|/2 over the real line, W a two-sided Brownian motion
    (Yao 1987; Bai 1997, the limit of the scaled break-date error):
    G(x) = 1 + sqrt(x / (2 pi)) exp(-x/8) - (x + 5)/2 Phi(-sqrt(x)/2) + 3/2 e^x Phi(-3 sqrt(x)/2)
    for x > 0, and G(x) = 1 - G(-x) for x < 0."""
    x = np.asarray(x, float)
    a = np.abs(x)
    r = np.sqrt(a)
    # e^a Phi(-3 r / 2) through the log of Phi, which stays finite for large a
    tail = np.exp(a + norm.logcdf(-1.5 * r))
    g = 1.0 + np.sqrt(a / (2 * np.pi)) * np.exp(-a / 8.0) - 0.5 * (a + 5.0) * norm.cdf(-0.5 * r) + 1.5 * tail
    return np.where(x >= 0, g, 1.0 - g)


@lru_cache(maxsize=8)
def argmax_quantile(level: float) -> float:
    """The ``level`` quantile of the argmax of W(s) - |s|/2 (about 11.0 at 0.975, Bai 1997,
    from memory)."""
    return float(optimize.brentq(lambda v: argmax_cdf(v) - level, 0.0, 500.0))


@dataclass(frozen=True)
class BreakFit:
    """The regression on each side of a break at index ``at`` (first index of the new regime):
    intercept and slope before and after, their standard errors from the pooled residual
    variance, and Bai's (1997) interval for the index (``low``, ``high``, inclusive)."""

    at: int
    intercept_before: float
    slope_before: float
    slope_before_se: float
    intercept_after: float
    slope_after: float
    slope_after_se: float
    sigma2: float
    low: int
    high: int


def _side(x: np.ndarray, y: np.ndarray) -> tuple[float, float, float, float]:
    """OLS of y on (1, x) on one side: intercept, slope, RSS, centred sum of squares of x."""
    xc = x - x.mean()
    sxx = float(xc @ xc)
    b = float(xc @ (y - y.mean())) / sxx if sxx > 0 else np.nan
    a = float(y.mean() - b * x.mean())
    e = y - a - b * x
    return a, b, float(e @ e), sxx


def break_fit(x: np.ndarray, y: np.ndarray, at: int, level: float = 0.95) -> BreakFit:
    """Intercepts and slopes of y = a + b x + e before and after index ``at`` (OLS on each
    side, standard errors from the pooled variance RSS / (n - 4)), and the (``level``)
    interval for the break index of Bai (1997) with homoscedastic errors and the same
    regressor moments on both sides: at -/+ (floor(c / L) + 1), L = delta' Q delta / sigma^2,
    delta the shift of (intercept, slope), Q the mean of z_t z_t' (z = (1, x)), c the
    (1 + level)/2 quantile of argmax W(s) - |s|/2; clipped to the record."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    n = len(y)
    a1, b1, rss1, sxx1 = _side(x[:at], y[:at])
    a2, b2, rss2, sxx2 = _side(x[at:], y[at:])
    sigma2 = (rss1 + rss2) / (n - 4)
    delta = np.array([a2 - a1, b2 - b1])
    Z = np.column_stack([np.ones(n), x])
    L = float(delta @ (Z.T @ Z / n) @ delta) / sigma2 if sigma2 > 0 else np.inf
    c = argmax_quantile(0.5 + level / 2.0)
    half = int(np.floor(c / L)) + 1 if L > 0 else n
    return BreakFit(at=at, intercept_before=a1, slope_before=b1, slope_before_se=float(np.sqrt(sigma2 / sxx1)),
                    intercept_after=a2, slope_after=b2, slope_after_se=float(np.sqrt(sigma2 / sxx2)),
                    sigma2=float(sigma2), low=max(0, at - half), high=min(n - 1, at + half))


def mean_shift_interval(y: np.ndarray, at: int, level: float = 0.95) -> tuple[int, int]:
    """Bai's (1997) interval for the index of a shift in the mean alone (Q = 1):
    at -/+ (floor(c sigma^2 / delta^2) + 1)."""
    y = np.asarray(y, float)
    d = y[at:].mean() - y[:at].mean()
    resid = np.r_[y[:at] - y[:at].mean(), y[at:] - y[at:].mean()]
    sigma2 = float(resid @ resid) / (len(y) - 2)
    half = int(np.floor(argmax_quantile(0.5 + level / 2.0) * sigma2 / (d * d))) + 1
    return max(0, at - half), min(len(y) - 1, at + half)


# ----------------------------------------------------------------------------- moving windows


@dataclass(frozen=True)
class WindowBand:
    """Moving-window correlations of the real driver (``r``, one per window of ``width``
    consecutive observations starting at ``start``) and the pointwise surrogate band
    (``low``, ``high``: the (1 -/+ level)/2 quantiles of the surrogates' r in that window)."""

    start: np.ndarray
    width: int
    r: np.ndarray
    low: np.ndarray
    high: np.ndarray


def window_band(x: np.ndarray, y: np.ndarray, width: int = WINDOW_YEARS, level: float = BAND_LEVEL) -> WindowBand:
    """Pearson r of y with x[0] in every window of ``width`` consecutive observations, and the
    band the surrogates x[1:] reach in the same windows (Litzow et al. 2018 read moving-window
    correlations against such a reference, from memory; the surrogate band is our choice).
    ``x`` (1 + B, n), ``y`` (n,)."""
    x = np.atleast_2d(np.asarray(x, float))
    r = windowed_r(x, np.asarray(y, float), width)  # (S, W); y's windows centred once, broadcast against x's
    W = r.shape[-1]
    if x.shape[0] > 1 and W:
        low, high = np.nanquantile(r[1:], [(1 - level) / 2, (1 + level) / 2], axis=0)
    else:
        low = high = np.full(W, np.nan)
    return WindowBand(start=np.arange(W), width=width, r=r[0], low=low, high=high)
