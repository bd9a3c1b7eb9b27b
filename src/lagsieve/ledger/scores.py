"""Proper scores of the ledger's forecasts, batched over forecasts (plain numpy/scipy arrays).

* :func:`interval_score`: the interval score of a central (1 - alpha) prediction interval
  [l, u] at the observation y, (u - l) + (2/alpha)(l - y) 1{y < l} + (2/alpha)(y - u) 1{y > u}
  (Gneiting & Raftery 2007, JASA 102:359-378, eq. 43); lower is better, and it rewards a
  narrow interval only when the observation falls inside it.
* :func:`crps_normal`: the continuous ranked probability score of a normal forecast
  N(mu, sigma^2), sigma [z (2 Phi(z) - 1) + 2 phi(z) - 1/sqrt(pi)] with z = (y - mu) / sigma
  (Gneiting & Raftery 2007, eq. 21; Gneiting et al. 2005, Mon. Wea. Rev. 133:1098-1118);
  in the units of the forecast, lower is better, and equal to the absolute error for sigma -> 0.
* :func:`gaussian_sd`: the standard deviation of "the Gaussian forecast" of a ledger entry:
  the normal centred on the point forecast whose central interval at ``level`` is the
  forecast's interval, (u - l) / (2 Phi^-1((1 + level) / 2)). It is computed from the stored
  interval, so it exists for every forecast ever recorded (also those of older ledgers).
"""
from __future__ import annotations

import numpy as np

from lagsieve.stats.distributions import norm_cdf, norm_pdf, norm_ppf

INV_SQRT_PI = 1.0 / np.sqrt(np.pi)


def interval_score(lower, upper, observed, level) -> np.ndarray:
    """Interval score of the central ``level`` interval [lower, upper] at ``observed``."""
    lower, upper, y = (np.asarray(a, float) for a in (lower, upper, observed))
    alpha = 1.0 - np.asarray(level, float)
    return (upper - lower) + (2.0 / alpha) * (np.maximum(lower - y, 0.0) + np.maximum(y - upper, 0.0))


def crps_normal(mu, sigma, observed) -> np.ndarray:
    """CRPS of the normal forecast N(mu, sigma^2) at ``observed`` (closed form)."""
    mu, sigma, y = (np.asarray(a, float) for a in (mu, sigma, observed))
    z = (y - mu) / sigma
    return sigma * (z * (2.0 * norm_cdf(z) - 1.0) + 2.0 * norm_pdf(z) - INV_SQRT_PI)


def gaussian_sd(lower, upper, level) -> np.ndarray:
    """The sd of the normal whose central ``level`` interval is [lower, upper]."""
    return (np.asarray(upper, float) - np.asarray(lower, float)) / (2.0 * norm_ppf(0.5 + np.asarray(level, float) / 2.0))


def ar1_coefficient(resid, years) -> float:
    """The lag-1 autocorrelation of residuals, from pairs of consecutive years only:
    sum e_t e_(t-1) / sum e_t^2 (the Yule-Walker estimate); nan with fewer than 3 pairs."""
    e, t = np.asarray(resid, float), np.asarray(years, float)
    pair = np.diff(t) == 1.0
    if pair.sum() < 3:
        return float("nan")
    return float(np.sum(e[1:][pair] * e[:-1][pair]) / np.sum(e * e))


def ar1_inflation(rho: float, cap: float = 0.9) -> float:
    """The variance factor (1 + rho) / (1 - rho) of an estimated mean under AR(1) errors
    (Bartlett 1946; the effective sample size n (1 - rho) / (1 + rho)), with rho clipped to
    [0, cap]: negative autocorrelation never narrows the interval, and the cap keeps one
    short series from making it unbounded."""
    r = 0.0 if not np.isfinite(rho) else float(np.clip(rho, 0.0, cap))
    return (1.0 + r) / (1.0 - r)
