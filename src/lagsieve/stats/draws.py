"""Draws of a response (posterior samples or bootstrap replicates of an assessment's whole
series) as a batch dimension on the response side, as the surrogates are on the driver side.

* :func:`pick_draws`: which of the supplied draws are used, chosen reproducibly from the
  study's seed and the response id.
* :func:`best_lag_stats`: the in-sample statistic of the screen (the directed Pearson r at
  every lag and its best lag) for every draw at once.
* :func:`draw_slopes`: the OLS slope and its Newey-West standard error for every draw at once
  (:func:`lagsieve.stats.correlation.hac_slope` broadcast over the draws).
* :func:`rubin`: estimates of the draws combined by Rubin's rules.
* :func:`draw_skills`: the screen's rolling origin (:func:`lagsieve.stats.backtest.rolling_origin`)
  of the real driver run for every draw at once: the skill of the candidate against every
  baseline, draw by draw.

References
----------
Rubin, D.B. (1987) Multiple Imputation for Nonresponse in Surveys. Wiley, New York.
"""
from __future__ import annotations

import hashlib
from dataclasses import dataclass

import numpy as np

from lagsieve.stats import correlation as st
from lagsieve.stats.backtest import BASELINES, CandidatePool, baseline_design, scale_from_start, skill_score
from lagsieve.stats.linalg import expanding_added
from lagsieve.stats.splines import (
    bspline_basis,
    default_n_basis,
    difference_penalty,
    expanding_penalised,
    penalty_block,
)


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


def _draw_gam(Z: np.ndarray, Xs: np.ndarray, Y: np.ndarray, origins: np.ndarray, n_basis: int, retune_every: int):
    """(forecast, GCV), each (D, L, O): the spline candidate of
    :func:`lagsieve.stats.backtest.gam_candidate` of every draw, on its own baseline's design
    ``Z`` (D, T, p) (the baseline's terms beside the B-splines of the driver ``Xs`` (L, T),
    whose knots span the first window) and its own response Y (D, T), centred on its first
    window's mean."""
    head = Xs[..., : origins[0]]
    B = bspline_basis(Xs, n_basis, lo=head.min(-1), hi=head.max(-1))  # (L, T, K)
    D, L = Y.shape[0], Xs.shape[0]
    others = np.broadcast_to(Z[:, None, :, 1:], (D, L) + Z.shape[1:2] + (Z.shape[2] - 1,))
    W = np.concatenate([others, np.broadcast_to(B, (D,) + B.shape)], axis=-1)
    P = penalty_block(difference_penalty(n_basis, 2), Z.shape[2] - 1)
    level = np.sum(Y[:, : origins[0]], -1, keepdims=True) / origins[0]
    yc = np.broadcast_to((Y - level)[:, None, :], (D, L, Y.shape[1]))
    fc, gcv, _ = expanding_penalised(W, P, yc, origins, retune_every=retune_every)
    return fc + level[:, None], gcv


def draw_skills(Y: np.ndarray, Ylag: np.ndarray, year: np.ndarray, X: np.ndarray, lags, initial: int,
                models: tuple[str, ...] = ("linear",), retune_every: int = 5) -> dict[str, np.ndarray]:
    """baseline -> (D,) skill of the candidate against that baseline, for every draw Y (D, T)
    (Ylag (D, T) its previous years) of the real driver X (L, T) at every lag: the numbers of
    :func:`lagsieve.stats.backtest.rolling_origin` run draw by draw (unweighted; its ``skill``),
    in one batch. Every draw makes its own choices at every origin (baseline + driver at a lag,
    or the spline on its own first window's AIC baseline, by GCV on the training years), and
    its scaling of the previous year is its own first window's."""
    Y = np.asarray(Y, float)
    D, T = Y.shape
    origins = np.arange(initial, T)
    Xs = scale_from_start(np.asarray(X, float), initial)
    yl, yr = scale_from_start(np.asarray(Ylag, float), initial), scale_from_start(np.asarray(year, float), initial)
    pool, base_fc, aic, designs = CandidatePool(origins.astype(float)), {}, [], []
    for i, b in enumerate(BASELINES):
        Z = np.stack([baseline_design(b, yl[d], yr) for d in range(D)])  # (D, T, p): the previous year is the draw's
        fit = expanding_added(Z, Xs[..., None], Y, origins)  # each draw's own baseline, the driver at every lag added
        base_fc[b] = fit.shared.forecast  # (D, O)
        pool.add_linear(Z.shape[2] + 1, fit.rss, fit.forecast, np.asarray(lags), i)  # (D, L, O)
        aic.append(initial * np.log(np.maximum(fit.shared.rss[:, 0], 1e-300) / initial) + 2 * Z.shape[2])
        designs.append(Z)
    if "gam" in models:
        cand0 = np.argmin(np.stack(aic), axis=0)  # (D,) each draw's spline baseline (first window's AIC)
        fc_gam, gcv_gam = np.empty((D, len(Xs), len(origins))), np.empty((D, len(Xs), len(origins)))
        for i in np.unique(cand0):
            on = cand0 == i
            fc_gam[on], gcv_gam[on] = _draw_gam(designs[i][on], Xs, Y[on], origins, default_n_basis(initial),
                                                retune_every)
        pool.add(gcv_gam, fc_gam, np.asarray(lags), 0)  # the baseline index is bookkeeping only
    _, cand_fc = pool.choose()
    mse_c = np.mean((Y[:, origins] - cand_fc) ** 2, -1)
    return {b: skill_score(mse_c, np.mean((Y[:, origins] - f) ** 2, -1)) for b, f in base_fc.items()}
