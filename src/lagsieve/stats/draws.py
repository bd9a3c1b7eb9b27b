"""Draws of a response (posterior samples or bootstrap replicates of an assessment's whole
series) as a batch dimension on the response side, as the surrogates are on the driver side.

* :func:`pick_draws`: which of the supplied draws are used, chosen reproducibly from the
  study's seed and the response id.
* :func:`best_lag_stats`: the in-sample statistic of the screen (the directed Pearson r at
  every lag and its best lag) for every draw at once.
* :func:`draw_slopes`: the OLS slope and its Newey-West standard error for every draw at once
  (:func:`lagsieve.stats.correlation.hac_slope` broadcast over the draws).
* :func:`rubin`: estimates of the draws combined by Rubin's rules.

References
----------
Rubin, D.B. (1987) Multiple Imputation for Nonresponse in Surveys. Wiley, New York.
"""
from __future__ import annotations

import hashlib
from dataclasses import dataclass

import numpy as np

from lagsieve.stats import correlation as st


@dataclass(frozen=True)
class Pooled:
    """Estimates of m draws combined by Rubin's rules (batched over leading axes)."""

    estimate: np.ndarray  # mean of the draws' estimates
    within: np.ndarray  # W: mean of the draws' variances
    between: np.ndarray  # B: variance of the estimates across draws (divisor m - 1)
    m: int

    @property
    def total(self) -> np.ndarray:
        """T = W + (1 + 1/m) B."""
        return self.within + (1.0 + 1.0 / self.m) * self.between

    @property
    def se(self) -> np.ndarray:
        return np.sqrt(self.total)

    @property
    def between_share(self) -> np.ndarray:
        """(1 + 1/m) B / T: the share of the total variance that comes from the draws
        disagreeing (Rubin's fraction of missing information without its df correction)."""
        with np.errstate(invalid="ignore", divide="ignore"):
            return (1.0 + 1.0 / self.m) * self.between / self.total


def rubin(estimates: np.ndarray, variances: np.ndarray) -> Pooled:
    """Combine per-draw estimates and their variances (draws on the last axis) by Rubin's
    rules (Rubin 1987): estimate = mean, total variance T = W + (1 + 1/m) B with W the mean
    within-draw variance and B the between-draw variance (divisor m - 1). Draws whose estimate
    or variance is missing are left out (m counts the others)."""
    q = np.asarray(estimates, float)
    u = np.asarray(variances, float)
    ok = ~(np.isnan(q) | np.isnan(u))
    m = int(ok.sum(-1).min()) if q.size else 0
    if m < 2:
        nan = np.full(q.shape[:-1], np.nan)
        return Pooled(nan, nan, nan, m)
    qm = np.where(ok, q, 0.0)
    est = qm.sum(-1) / ok.sum(-1)
    within = np.where(ok, u, 0.0).sum(-1) / ok.sum(-1)
    between = (np.where(ok, q - est[..., None], 0.0) ** 2).sum(-1) / (ok.sum(-1) - 1)
    return Pooled(est, within, between, m)


def pick_draws(labels: np.ndarray, n_wanted: int, seed: int, response_id: str) -> np.ndarray:
    """The labels of the draws used: all of them when there are at most ``n_wanted``, else
    ``n_wanted`` drawn without replacement by a generator keyed on the study's seed and a
    stable hash of the response id (as the surrogates are keyed on the driver id), in their
    sorted order."""
    labels = np.sort(np.unique(np.asarray(labels)))
    if len(labels) <= n_wanted:
        return labels
    tag = int.from_bytes(hashlib.sha256(f"draws:{response_id}".encode()).digest()[:8], "little")
    rng = np.random.default_rng(np.random.SeedSequence([int(seed), tag]))
    return np.sort(rng.choice(labels, size=n_wanted, replace=False))


def best_lag_stats(x_lags: np.ndarray, Y: np.ndarray, sign: str) -> tuple[np.ndarray, np.ndarray]:
    """(r (D, L), best-lag directed statistic (D,)) of every draw.

    ``x_lags`` (L, T) holds the driver shifted by each lag on the response's year axis (NaN
    where absent), ``Y`` (D, T) the draws on that axis. At each lag r is computed on the years
    where the driver and the draws are present, as the screen does for the response; the
    statistic is r, -r or |r| for an expected sign positive, negative or any, and its maximum
    over the lags is the screen's best-lag statistic (the lag chosen within every draw)."""
    Y = np.asarray(Y, float)
    D, L = Y.shape[0], x_lags.shape[0]
    r = np.full((D, L), np.nan)
    present = ~np.isnan(Y).any(axis=0)
    for li in range(L):
        ok = present & ~np.isnan(x_lags[li])
        if ok.sum() >= 3:
            r[:, li] = st.pearson_r(x_lags[li, ok][None, :], Y[:, ok])
    d = r if sign == "positive" else -r if sign == "negative" else np.abs(r)
    with np.errstate(invalid="ignore"):
        best = np.where(np.isnan(d).all(-1), np.nan, np.nanmax(np.where(np.isnan(d), -np.inf, d), axis=-1))
    return r, best


def draw_slopes(x: np.ndarray, Y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(slope (D,), HAC standard error (D,)): the OLS slope of every draw on ``x`` (T,) with an
    intercept and its Newey-West (1987) standard error, as the screen's ``slope`` and
    ``slope_se`` (:func:`lagsieve.stats.correlation.hac_slope`, one call for every draw)."""
    return st.hac_slope(np.asarray(x, float)[None, :], np.asarray(Y, float))
