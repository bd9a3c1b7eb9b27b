"""Surrogate drivers that keep a series' autocorrelation but break any link to the response.

All generators return an array of shape (n_surrogates, n): the batch dimension first.

References
----------
Ebisuzaki, W. (1997) A method to estimate the statistical significance of a correlation
    when the data are serially correlated. J. Climate 10:2147-2153.
Theiler, J. et al. (1992) Testing for nonlinearity in time series: the method of surrogate
    data. Physica D 58:77-94.
Buhlmann, P. (1997) Sieve bootstrap for time series. Bernoulli 3:123-148.
Davison, A.C. & Hinkley, D.V. (1997) Bootstrap Methods and their Application. Cambridge
    University Press (section 4.2, from memory).
"""
from __future__ import annotations

import numpy as np
from scipy.linalg import solve_toeplitz


def phase_randomised(x: np.ndarray, n_surrogates: int, rng: np.random.Generator) -> np.ndarray:
    """Ebisuzaki (1997) phase-randomised surrogates of a complete series ``x``.

    The Fourier amplitudes are kept; the phases of frequencies 1..floor((n-1)/2) are drawn
    uniformly on [0, 2 pi); the zero-frequency term (the mean) is kept; for even n the
    Nyquist term stays real and keeps its amplitude, with a random sign. The periodogram of
    every surrogate therefore equals that of ``x``.
    """
    x = np.asarray(x, float)
    n = x.shape[-1]
    spec = np.fft.rfft(x)
    m = spec.shape[-1]
    phases = rng.uniform(0.0, 2.0 * np.pi, size=(n_surrogates, m))
    rot = np.exp(1j * phases)
    rot[:, 0] = 1.0
    if n % 2 == 0:
        rot[:, -1] = np.where(rng.uniform(size=n_surrogates) < 0.5, -1.0, 1.0)
    return np.fft.irfft(spec[None, :] * rot, n=n, axis=-1)


def _yule_walker(x: np.ndarray, order: int) -> tuple[np.ndarray, float]:
    """AR coefficients and innovation variance by the Yule-Walker equations."""
    xc = x - x.mean()
    n = len(xc)
    acov = np.array([np.dot(xc[: n - k], xc[k:]) / n for k in range(order + 1)])
    if order == 0:
        return np.zeros(0), float(acov[0])
    phi = solve_toeplitz(acov[:order], acov[1 : order + 1])
    sigma2 = float(acov[0] - np.dot(phi, acov[1 : order + 1]))
    return phi, max(sigma2, 1e-12 * acov[0] + 1e-300)


def ar_order_aic(x: np.ndarray, max_order: int | None = None) -> int:
    """AR order minimising AIC = n log(sigma2) + 2p over Yule-Walker fits (0..max_order)."""
    n = len(x)
    max_order = max(1, min(10, n // 4)) if max_order is None else max_order
    aics = [n * np.log(_yule_walker(x, p)[1]) + 2 * p for p in range(max_order + 1)]
    return int(np.argmin(aics))


def ar_sieve(
    x: np.ndarray,
    n_surrogates: int,
    rng: np.random.Generator,
    order: int | None = None,
    burn_in: int = 100,
) -> np.ndarray:
    """AR-sieve bootstrap surrogates (Buhlmann 1997): fit AR(p) by Yule-Walker with p by AIC,
    resample the centred residuals with replacement and run the recursion from a burn-in.

    Suited to very short series, where phase randomisation has few frequencies to draw.
    """
    x = np.asarray(x, float)
    n = len(x)
    p = ar_order_aic(x) if order is None else int(order)
    phi, _ = _yule_walker(x, p)
    mu = x.mean()
    xc = x - mu
    if p > 0:
        lagged = np.column_stack([xc[p - k - 1 : n - k - 1] for k in range(p)])
        resid = xc[p:] - lagged @ phi
    else:
        resid = xc.copy()
    resid = resid - resid.mean()
    total = n + burn_in
    draws = rng.choice(resid, size=(n_surrogates, total), replace=True)
    out = np.zeros((n_surrogates, total))
    for t in range(total):  # loop over time, batched over all surrogates
        acc = draws[:, t].copy()
        for k in range(min(p, t)):
            acc += phi[k] * out[:, t - k - 1]
        out[:, t] = acc
    return out[:, burn_in:] + mu


def fill_for_surrogates(x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Linearly interpolate interior NaNs so a spectrum can be taken; returns (filled, was_nan).

    Used only to generate surrogates of a driver with gaps; the gap years are masked again
    before any statistic is computed, so no filled value ever enters a test.
    """
    x = np.asarray(x, float)
    bad = np.isnan(x)
    if not bad.any():
        return x, bad
    idx = np.arange(len(x))
    filled = x.copy()
    filled[bad] = np.interp(idx[bad], idx[~bad], x[~bad])
    return filled, bad


def linear_trend(x: np.ndarray) -> np.ndarray:
    """Least-squares straight line through a complete series (its fitted values)."""
    t = np.arange(len(x), dtype=float)
    b, a = np.polyfit(t, x, 1)
    return a + b * t


def make_surrogates(
    x: np.ndarray,
    n_surrogates: int,
    rng: np.random.Generator,
    method: str = "phase",
    keep_trend: bool = True,
) -> np.ndarray:
    """Surrogates of ``x`` (NaN kept where ``x`` is NaN) by ``method`` 'phase' or 'ar-sieve'.

    With ``keep_trend`` (the default) the surrogates are drawn for the residuals of a
    least-squares linear trend and the trend is added back: every surrogate shares the real
    driver's trend, so a driver can only beat its surrogates through what it carries beyond
    that trend. Phase randomisation of a raw trending series would instead scatter the trend
    over all frequencies (the end-to-end jump of a ramp is not periodic), making the real
    trend look special and trend-only drivers look significant.
    """
    filled, bad = fill_for_surrogates(x)
    trend = linear_trend(filled) if keep_trend else np.zeros_like(filled)
    resid = filled - trend
    if method == "phase":
        s = phase_randomised(resid, n_surrogates, rng)
    elif method == "ar-sieve":
        s = ar_sieve(resid, n_surrogates, rng)
    else:
        raise ValueError(f"unknown surrogate method {method!r}")
    if keep_trend:
        # the randomised residuals carry a small chance slope of their own: remove each
        # surrogate's least-squares line so that every surrogate has exactly the real trend
        t = np.arange(s.shape[1], dtype=float) - (s.shape[1] - 1) / 2.0
        slope = (s - s.mean(1, keepdims=True)) @ t / (t @ t)
        s = s - s.mean(1, keepdims=True) - slope[:, None] * t[None, :]
    s = s + trend[None, :]
    s[:, bad] = np.nan
    return s


def monte_carlo_p(observed: np.ndarray, null: np.ndarray) -> np.ndarray:
    """Monte Carlo p-value of every observed statistic against one null sample of B values:
    p = (1 + #{null >= observed}) / (1 + B) (Davison & Hinkley 1997, section 4.2, from memory:
    the observed value counted as one of the draws, so p is never 0), over the null's
    non-missing values; NaN where the observed value is missing. ``observed`` may be a scalar
    or an array (every value at once, by a sort of the null and a binary search); the screen's
    :func:`lagsieve.screen.hypothesis.surrogate_p` is this p of the real driver among its
    surrogates."""
    null = np.asarray(null, float)
    null = np.sort(null[~np.isnan(null)])
    obs = np.asarray(observed, float)
    above = len(null) - np.searchsorted(null, obs, side="left")  # how many null values reach obs
    return np.where(np.isnan(obs), np.nan, (1.0 + above) / (len(null) + 1))
