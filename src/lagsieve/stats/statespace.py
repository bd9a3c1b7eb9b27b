"""Regression with known observation error and AR(1) process error, fitted by the Kalman filter.

A response estimated with a known standard error se_t (an assessment output, a survey index)
is the true response plus observation error, and the true response depends on the driver
with autocorrelated process error:

    y_t  = mu_t + eps_t,                 eps_t ~ N(0, se_t^2), se_t known
    mu_t = X_t beta + u_t,               X_t = (1, x_{t-k}) for a driver at lag k
    u_t  = phi u_{t-1} + eta_t,          eta_t ~ N(0, s2)

In state-space form (Durbin & Koopman 2012, ch. 3-4) the state is u_t: transition phi,
state variance s2, design 1, a time-varying observation intercept X_t beta and a time-varying,
known observation variance H_t = se_t^2. beta, phi and s2 are estimated by exact Gaussian
maximum likelihood with the Kalman filter's prediction-error decomposition, the state started
from its stationary distribution N(0, s2 / (1 - phi^2)); standard errors come from the
observed information (the numerical Hessian of the log-likelihood at the estimate).
A year without a response value, a driver value or an se is a missing observation: the state
runs on through it, so gaps cost information but never break the AR(1) chain. With se_t = 0
the model is the regression with AR(1) errors of :mod:`lagsieve.stats.modelset`.

``phi`` may also be fixed; phi = 1 makes u_t a random walk with a diffuse initial state, and
with no regressors and a constant H_t that is the local level model of Durbin & Koopman (2012,
ch. 2), which the tests fit to the Nile flow series.

Why a small ``MLEModel`` subclass rather than statsmodels' SARIMAX: SARIMAX's
``measurement_error=True`` estimates one constant observation variance, whereas here the
variance is known and different in every year; SARIMAX's parameter updates do not manage a
time-varying observation covariance, so setting one by hand would rely on its internals. The
subclass states every system matrix explicitly in a few lines and keeps statsmodels' filter,
optimiser and information matrix. statsmodels is imported only when a model is fitted (its
state-space modules take 1-3 s to import on a 2-core machine), so that a study that does
not ask for this fit never pays for it.

The share of the response's variance that is observation error is reported as
mean(se_t^2) / (mean(se_t^2) + s2 / (1 - phi^2)): of the variance of the response around the
driver's line, the part the known errors account for.

References
----------
Durbin, J. & Koopman, S.J. (2012) Time Series Analysis by State Space Methods, 2nd ed. Oxford
    University Press, Oxford.
Harvey, A.C. (1989) Forecasting, Structural Time Series Models and the Kalman Filter.
    Cambridge University Press, Cambridge.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from lagsieve.stats.modelset import PHI_BOUND, fit_ar1_regression

MIN_OBSERVED = 8  # observed years a fit needs (four parameters, about two years each)


@dataclass(frozen=True)
class KnownErrorFit:
    """A regression with known observation error and AR(1) process error (module docstring)."""

    beta: np.ndarray      # (p,) coefficients of the columns of X
    beta_se: np.ndarray   # (p,) their standard errors (observed information)
    phi: float            # AR(1) coefficient of the process error (fixed when phi_se is NaN)
    phi_se: float
    process_var: float    # s2, the innovation variance of the process error
    obs_var: float        # mean se_t^2 over the observed years
    loglik: float         # the maximised exact log-likelihood
    n: int                # observed years
    converged: bool       # the optimiser reported convergence

    @property
    def stationary_var(self) -> float:
        """Variance of the process error u_t, s2 / (1 - phi^2) (NaN for |phi| >= 1)."""
        return self.process_var / (1.0 - self.phi**2) if abs(self.phi) < 1 else float("nan")

    @property
    def obs_share(self) -> float:
        """Share of the variance around the driver's line that is observation error."""
        total = self.obs_var + self.stationary_var
        return self.obs_var / total if total > 0 else float("nan")


def _model_class():
    """The ``MLEModel`` subclass, built on first use."""
    # Imported here, not at module level: statsmodels' state-space modules take 1-3 s to import
    # (python -X importtime, 2-core machine), paid only by a study that asks for this fit.
    from statsmodels.tsa.statespace.mlemodel import MLEModel
    from statsmodels.tsa.statespace.tools import constrain_stationary_univariate as constrain
    from statsmodels.tsa.statespace.tools import unconstrain_stationary_univariate as unconstrain

    class KnownErrorAR1(MLEModel):
        """y_t = X_t beta + u_t + eps_t, Var eps_t = H_t known, u_t AR(1) (or a random walk)."""

        def __init__(self, y, X, obs_var, phi=None, start=None):
            self.X, self.fixed_phi, self._start = X, phi, start
            init = "diffuse" if phi is not None and phi == 1 else None
            super().__init__(y, k_states=1, initialization=init)
            self["design", 0, 0] = self["selection", 0, 0] = 1.0
            self["obs_cov"] = np.asarray(obs_var, float)[None, None, :]
            self["obs_intercept"] = np.zeros((1, len(y)))
            if phi is not None:
                self["transition", 0, 0] = phi
                if phi != 1:
                    self.ssm.initialize_known([0.0], [[1.0]])  # replaced in update()

        @property
        def param_names(self):
            return [f"beta{i}" for i in range(self.X.shape[1])] + (["phi"] if self.fixed_phi is None else []) + ["s2"]

        @property
        def start_params(self):
            return np.asarray(self._start, float)

        def transform_params(self, unconstrained):
            p = np.array(unconstrained, dtype=float, ndmin=1)
            if self.fixed_phi is None:
                p[-2] = constrain(p[-2:-1])[0] * PHI_BOUND
            p[-1] = p[-1] ** 2
            return p

        def untransform_params(self, constrained):
            p = np.array(constrained, dtype=float, ndmin=1)
            if self.fixed_phi is None:
                p[-2] = unconstrain(p[-2:-1] / PHI_BOUND)[0]
            p[-1] = np.sqrt(p[-1])
            return p

        def update(self, params, **kwargs):
            params = super().update(params, **kwargs)
            k = self.X.shape[1]
            self["obs_intercept"] = (self.X @ params[:k])[None, :]
            phi = params[k] if self.fixed_phi is None else self.fixed_phi
            self["transition", 0, 0] = phi
            self["state_cov", 0, 0] = params[-1]
            if phi != 1:
                self.ssm.initialize_known([0.0], [[params[-1] / (1.0 - phi * phi)]])
            return params

    return KnownErrorAR1


def _start(y: np.ndarray, X: np.ndarray, obs_var: np.ndarray, phi: float | None) -> np.ndarray:
    """Starting values: the regression with AR(1) errors of the observed years taken as
    consecutive, its residual variance split into the known part and the rest."""
    ols = fit_ar1_regression(y, X) if X.shape[1] else None
    beta = ols.beta if ols is not None else np.zeros(0)
    f = float(np.clip(ols.phi, -0.9, 0.9)) if ols is not None else 0.5
    resid = y - X @ beta if X.shape[1] else np.diff(y)
    total = float(np.var(resid))
    if phi is None:
        rest = max(total - float(np.mean(obs_var)), 0.1 * total)
        return np.r_[beta, f, rest * (1.0 - f * f)]
    rest = max(total - float(np.mean(obs_var)) * (2.0 if phi == 1 else 1.0), 0.1 * total)
    return np.r_[beta, rest * (1.0 - phi * phi if phi != 1 else 1.0)]


def _maximise(model, start: np.ndarray):
    """BFGS from ``start`` (on four parameters 3-5 times faster than L-BFGS-B here, same
    optimum); when it stops short, Nelder-Mead and BFGS again."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # convergence and Hessian warnings: reported as ``converged``
        res = model.fit(start, method="bfgs", maxiter=1000, disp=False, cov_type="approx")
        if not res.mle_retvals.get("converged", False):
            nm = model.fit(res.params, method="nm", maxiter=4000, disp=False, cov_type="none")
            res = model.fit(nm.params, method="bfgs", maxiter=1000, disp=False, cov_type="approx")
    return res


def fit_known_error(y, X, se, phi: float | None = None) -> KnownErrorFit:
    """Exact maximum-likelihood fit of the model of the module docstring.

    ``y`` (n,) the response on consecutive years (NaN where missing), ``X`` (n, p) its
    regressors with the intercept column (p may be 0), ``se`` (n,) the known standard errors
    (0 for none); ``phi`` None to estimate it, or a fixed value (1: a random walk with a
    diffuse start). A year missing any of y, X or se is a missing observation. Values are
    scaled by the sd of y inside the fit and reported on their own scale."""
    y, se = np.asarray(y, float), np.asarray(se, float)
    X = np.asarray(X, float).reshape(len(y), -1)
    ok = np.isfinite(y) & np.isfinite(se) & np.isfinite(X).all(axis=1)
    n = int(ok.sum())
    if n < MIN_OBSERVED:
        raise ValueError(f"{n} observed years; the fit needs at least {MIN_OBSERVED}")
    if X.shape[1] and np.linalg.matrix_rank(X[ok]) < X.shape[1]:
        raise ValueError("the regressors are collinear over the observed years (a constant driver?)")
    span = slice(np.flatnonzero(ok)[0], np.flatnonzero(ok)[-1] + 1)
    y, X, se, ok = y[span], X[span], se[span], ok[span]
    c = float(np.std(y[ok])) or 1.0
    ys = np.where(ok, y / c, np.nan)
    Xs = np.where(ok[:, None], X, 0.0)
    H = np.where(ok, (se / c) ** 2, 0.0)
    model = _model_class()(ys, Xs, H, phi=phi, start=_start(ys[ok], Xs[ok], H[ok], phi))
    res = _maximise(model, model.start_params)
    p, bse, k = np.asarray(res.params, float), np.asarray(res.bse, float), X.shape[1]
    scale = np.r_[np.full(k, c), np.ones(int(phi is None)), c * c]
    own = model.__class__(np.where(ok, y, np.nan), Xs, np.where(ok, se**2, 0.0), phi=phi, start=p * scale)
    free_phi = phi is None
    return KnownErrorFit(beta=p[:k] * c, beta_se=bse[:k] * c,
                         phi=float(p[k]) if free_phi else float(phi),
                         phi_se=float(bse[k]) if free_phi else float("nan"),
                         process_var=float(p[-1]) * c * c, obs_var=float(np.mean(H[ok])) * c * c,
                         loglik=float(own.loglike(p * scale)), n=n,  # on the data's own scale
                         converged=bool(res.mle_retvals.get("converged", False)))


def known_error_regression(y, x, se) -> KnownErrorFit:
    """The driver's regression: intercept and slope of ``x`` (the driver already at its lag,
    on the same consecutive years as ``y``), known ``se``, phi estimated."""
    x = np.asarray(x, float)
    return fit_known_error(y, np.column_stack([np.ones_like(x), x]), se)
