"""Model sets: regressions with AR(1) errors compared by AICc and Akaike weights, their
rolling-origin skill against the baselines, and variance partitioning by adjusted R^2.

A candidate model of a response is y_t = X_t beta + u_t, u_t = phi u_{t-1} + e_t, e_t ~ N(0, s2),
with X an intercept, the controls and up to three drivers, each at a fixed lag. It is fitted
by exact Gaussian maximum likelihood: for a given phi the Prais-Winsten transformation
(first row times sqrt(1 - phi^2), later rows y_t - phi y_{t-1}) makes the errors white, beta
and s2 follow by least squares, and the likelihood concentrated on phi,
-n/2 (log 2 pi + 1 + log s2(phi)) + 1/2 log(1 - phi^2) (Beach & MacKinnon 1978), is maximised
over phi in (-1, 1) with a bounded scalar search. The standard errors of beta are those of
the generalised least-squares estimate at the fitted phi, s2 (X*' X*)^-1 (the information of
beta and of the error parameters is block-diagonal in a Gaussian model). The test suite
checks the fit against statsmodels' state-space regression with AR(1) errors on the Lake
Huron levels.

Models are compared by AICc = -2 logL + 2k + 2k(k+1)/(n - k - 1), k counting beta, phi and
s2 (Hurvich & Tsai 1989), on the same years, and by Akaike weights
w_i = exp(-delta_i / 2) / sum_j exp(-delta_j / 2) (Burnham & Anderson 2002).

Out of sample, a model with k drivers is a baseline of :mod:`lagsieve.stats.backtest` plus k
columns; every model with the same k is one batch of the expanding-window solver, the
baseline chosen at every origin by least training GCV, skill against the hardest baseline.

Variance partitioning of two drivers A and B (given the controls C, which enter every fit)
into unique and shared fractions by adjusted R^2 (Borcard, Legendre & Drapeau 1992;
Peres-Neto, Legendre, Dray & Borcard 2006): unique A = R2a(ABC) - R2a(BC), unique B =
R2a(ABC) - R2a(AC), shared = R2a(AC) + R2a(BC) - R2a(ABC) - R2a(C), residual = 1 - R2a(ABC),
with R2a(C) = 0 without controls. The shared fraction can be negative (it is not a variance
component: Legendre & Legendre 2012, sec. 10.3.5, from memory).

References (journal details recalled from memory)
----------
Beach, C.M. & MacKinnon, J.G. (1978) A maximum likelihood procedure for regression with
    autocorrelated errors. Econometrica 46:51-58.
Hurvich, C.M. & Tsai, C.-L. (1989) Regression and time series model selection in small
    samples. Biometrika 76:297-307.
Burnham, K.P. & Anderson, D.R. (2002) Model Selection and Multimodel Inference, 2nd ed.
    Springer.
Borcard, D., Legendre, P. & Drapeau, P. (1992) Partialling out the spatial component of
    ecological variation. Ecology 73:1045-1055.
Peres-Neto, P.R., Legendre, P., Dray, S. & Borcard, D. (2006) Variation partitioning of
    species data matrices: estimation and comparison of fractions. Ecology 87:2614-2625.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import minimize_scalar

from lagsieve.stats.backtest import BASELINES, baseline_design, scale_from_start, skill_score
from lagsieve.stats.linalg import expanding_added
from lagsieve.stats.splines import GCV_GAMMA

PHI_BOUND = 0.995  # |phi| searched inside (-PHI_BOUND, PHI_BOUND): the stationary AR(1)


@dataclass(frozen=True)
class AR1Fit:
    """A regression with AR(1) errors fitted by exact maximum likelihood."""

    beta: np.ndarray   # (p,) coefficients of the columns of X
    se: np.ndarray     # (p,) their standard errors (GLS at the fitted phi)
    phi: float         # the AR(1) coefficient of the errors
    sigma2: float      # the innovation variance
    loglik: float      # the maximised exact Gaussian log-likelihood
    n: int

    @property
    def k(self) -> int:
        """Estimated parameters: the coefficients, phi and the innovation variance."""
        return len(self.beta) + 2

    @property
    def aicc(self) -> float:
        return aicc(self.loglik, self.k, self.n)


def prais_winsten(a: np.ndarray, phi: float) -> np.ndarray:
    """The AR(1) whitening of the rows of ``a`` (n, ...): sqrt(1 - phi^2) a_0, a_t - phi a_{t-1}."""
    a = np.asarray(a, float)
    out = np.empty_like(a)
    out[0] = np.sqrt(1.0 - phi * phi) * a[0]
    out[1:] = a[1:] - phi * a[:-1]
    return out


def _gls_at(y: np.ndarray, X: np.ndarray, phi: float):
    """(beta, rss, X*) of the least-squares fit of the whitened model at ``phi``."""
    ys, Xs = prais_winsten(y, phi), prais_winsten(X, phi)
    beta, *_ = np.linalg.lstsq(Xs, ys, rcond=None)
    r = ys - Xs @ beta
    return beta, float(r @ r), Xs


def _profile_loglik(y: np.ndarray, X: np.ndarray, phi: float) -> float:
    n = len(y)
    _, rss, _ = _gls_at(y, X, phi)
    return -0.5 * n * (np.log(2 * np.pi) + 1.0 + np.log(max(rss, 1e-300) / n)) + 0.5 * np.log(1.0 - phi * phi)


def fit_ar1_regression(y: np.ndarray, X: np.ndarray) -> AR1Fit:
    """Exact maximum-likelihood fit of y = X beta + u with AR(1) errors u (module docstring);
    ``X`` (n, p) holds the intercept column itself."""
    y, X = np.asarray(y, float), np.asarray(X, float)
    opt = minimize_scalar(lambda f: -_profile_loglik(y, X, f), bounds=(-PHI_BOUND, PHI_BOUND),
                          method="bounded", options={"xatol": 1e-7})
    phi = float(opt.x)
    beta, rss, Xs = _gls_at(y, X, phi)
    n = len(y)
    sigma2 = rss / n
    cov = sigma2 * np.linalg.pinv(Xs.T @ Xs)
    return AR1Fit(beta=beta, se=np.sqrt(np.diag(cov)), phi=phi, sigma2=sigma2, loglik=-float(opt.fun), n=n)


def aicc(loglik, k, n):
    """AICc = -2 logL + 2k + 2k(k+1)/(n-k-1) (Hurvich & Tsai 1989); NaN when n <= k + 1."""
    loglik, k, n = (np.asarray(a, float) for a in (loglik, k, n))
    den = n - k - 1
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(den > 0, -2 * loglik + 2 * k + 2 * k * (k + 1) / np.where(den > 0, den, 1.0), np.nan)


def akaike_weights(criterion) -> tuple[np.ndarray, np.ndarray]:
    """(delta, weight) of every model: delta_i = c_i - min c, w_i = exp(-delta_i/2) / sum
    (Burnham & Anderson 2002); a model without a criterion (NaN) gets NaN for both."""
    c = np.asarray(criterion, float)
    delta = c - np.nanmin(c)
    rel = np.where(np.isnan(delta), 0.0, np.exp(-0.5 * np.nan_to_num(delta, nan=0.0)))
    return delta, np.where(np.isnan(delta), np.nan, rel / rel.sum())


def adjusted_r2(y: np.ndarray, X: np.ndarray) -> float:
    """Adjusted R^2 of the least-squares fit of ``y`` on ``X`` (n, p; intercept included):
    1 - (1 - R^2)(n - 1)/(n - p) (Ezekiel 1930, the form of Peres-Neto et al. 2006)."""
    y, X = np.asarray(y, float), np.asarray(X, float)
    n, p = X.shape
    beta, *_ = np.linalg.lstsq(X, y, rcond=None)
    r = y - X @ beta
    tss = float(np.sum((y - y.mean()) ** 2))
    r2 = 1.0 - float(r @ r) / tss if tss > 0 else np.nan
    return 1.0 - (1.0 - r2) * (n - 1) / (n - p) if n > p else np.nan


def variance_partition(y: np.ndarray, A: np.ndarray, B: np.ndarray, C: np.ndarray | None = None) -> dict:
    """Unique and shared fractions of two explanatory sets A and B (each (n,) or (n, q)) given
    the controls C, by adjusted R^2 (module docstring): unique_a, unique_b, shared, residual."""
    n = len(y)
    one = np.ones((n, 1))
    cols = [np.asarray(v, float).reshape(n, -1) for v in (A, B)]
    Cc = one if C is None or np.size(C) == 0 else np.column_stack([one, np.asarray(C, float).reshape(n, -1)])
    r_abc = adjusted_r2(y, np.column_stack([Cc] + cols))
    r_ac, r_bc = adjusted_r2(y, np.column_stack([Cc, cols[0]])), adjusted_r2(y, np.column_stack([Cc, cols[1]]))
    r_c = adjusted_r2(y, Cc) if Cc.shape[1] > 1 else 0.0
    return {"unique_a": r_abc - r_bc, "unique_b": r_abc - r_ac, "shared": r_ac + r_bc - r_abc - r_c,
            "residual": 1.0 - r_abc}


def model_skill(y: np.ndarray, ylag: np.ndarray, year: np.ndarray, X: np.ndarray, initial: int) -> np.ndarray:
    """(M,) out-of-sample skill of M models with the same number of columns k: X (M, T, k)
    holds each model's fixed-lag columns (controls and drivers) on T complete years.

    At every origin each model is fitted on the training years as every baseline plus its k
    columns (one batched expanding-window solve per baseline), the baseline of least training
    GCV = n RSS / (n - 1.4 p)^2 gives the forecast, and the skill 1 - MSE(model)/MSE(baseline)
    is taken against the hardest baseline (the least of the four skills), as in the screen.
    With k = 0 the model is the baselines' own choice by GCV.
    """
    y = np.asarray(y, float)
    T = len(y)
    origins = np.arange(initial, T)
    M = X.shape[0]
    Xs = scale_from_start(np.moveaxis(np.asarray(X, float), 1, -1), initial)  # (M, k, T)
    Xs = np.moveaxis(Xs, -1, 1)  # (M, T, k)
    yl, yr = (scale_from_start(np.asarray(a, float), initial) for a in (ylag, year))
    n_tr = origins.astype(float)
    gcv, fc, base_mse = [], [], []
    for b in BASELINES:  # four baselines: shared by the models, each model's columns added
        Z = baseline_design(b, yl, yr)
        fit = expanding_added(Z, Xs, y, origins)  # (M, O)
        base_mse.append(np.mean((y[origins] - fit.shared.forecast) ** 2))
        fc.append(fit.forecast)
        gcv.append(n_tr * fit.rss / np.maximum(n_tr - GCV_GAMMA * (Z.shape[1] + Xs.shape[-1]), 1e-9) ** 2)
    pick = np.argmin(np.stack(gcv), axis=0)  # (M, O)
    chosen = np.take_along_axis(np.stack(fc), pick[None], axis=0)[0]
    mse = np.mean((y[origins][None, :] - chosen) ** 2, axis=-1)
    return np.min(np.stack([skill_score(mse, m) for m in base_mse]), axis=0)
