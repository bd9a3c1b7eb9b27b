"""Groups of one response screened jointly: a hierarchical (partially pooled) regression.

The model of one driver and the G groups of one series (age groups of natural mortality,
say), in the years every group is observed, is a random-coefficient regression (Gelman & Hill
2007, Data Analysis Using Regression and Multilevel/Hierarchical Models, Cambridge UP, ch. 13,
varying intercepts and slopes):

    y_gt = n_t' a_g + d_t' c_g + e_gt,   c_g ~ N(mu, Sigma),   e_gt ~ N(0, sigma^2)

with fixed coefficients a_g of each group on the *nuisance* columns n_t (none; or intercept
and year: every group its own level and linear trend, as the screen's detrended evidence asks)
and random coefficients c_g on the design d_t, whose last column is the driver x_{t-k}
(d_t = (1, x) in the classic varying-intercept, varying-slope model; d_t = x when the level
and trend are the nuisance). The slope's mean (last entry of mu) is the *shared slope* and
its standard deviation the *between-group spread*; a group's slope is pulled towards the
shared one by as much as its own data leave it uncertain (partial pooling).

The groups share one driver series, so on the common years the design is *balanced*: after
the nuisance columns are projected out, every group has the same design D. Then the group
least-squares coefficients c_g = (D'D)^-1 D'y_g are independent N(mu, V), V = Sigma +
sigma^2 W, W = (D'D)^-1, independent of the residual sums of squares, which gives closed forms
(:func:`balanced_fit`; on balanced data Searle, Casella & McCulloch 1992, Variance Components,
Wiley; from memory):

* the generalised least-squares estimate of mu is the mean of the c_g whatever Sigma is, with
  covariance V / G;
* REML: sigma^2 = pooled RSS / (G (T - p - q)) and Sigma = S_b - sigma^2 W, S_b the sample
  covariance of the c_g, whenever that is positive semi-definite (else REML sits on the
  boundary; the batch then clips Sigma's negative eigenvalues to zero);
* the best linear unbiased predictors (shrunken coefficients) c_g* = mean + Sigma V^-1 (c_g - mean).

``tests/test_joint.py`` checks these against statsmodels' MixedLM (REML) on the sleepstudy
data of lme4 (Bates et al. 2015, J. Stat. Softw. 67(1)). The closed forms make the surrogate
null cheap: a batch of surrogate drivers (the same surrogate for every group at once) is a
batch of designs, and every statistic a few array operations. The one real fit of each
hypothesis is statsmodels' MixedLM (:func:`mixed_fit`), which also handles the boundary, with
the likelihood-ratio test of one shared slope against group-specific slopes.

Out of sample (:func:`joint_rolling_origin`) the same partial pooling is applied at every
forecast origin to the driver coefficient of each group's baseline + driver regression (an
empirical-Bayes shrinkage of the G coefficients towards their mean, Efron & Morris 1975,
J. Am. Stat. Assoc. 70:311-319), with the lag chosen on the training years.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from scipy import stats as _st

from lagsieve.stats.backtest import BASELINES, baseline_design, skill_score
from lagsieve.stats.linalg import window_mask
from lagsieve.stats.modelset import aicc


def design(x: np.ndarray, intercept: bool) -> np.ndarray:
    """(..., T, p) the random-coefficient design of a batch of drivers x (..., T): [1, x] with
    ``intercept``, else [x]; the driver is the last column."""
    x = np.asarray(x, float)[..., None]
    return np.concatenate([np.ones_like(x), x], -1) if intercept else x


def residual_maker(nuisance: np.ndarray | None, T: int) -> np.ndarray:
    """(T, T) I - N N^+: what is left of a column after least squares on the nuisance columns N."""
    if nuisance is None or nuisance.shape[-1] == 0:
        return np.eye(T)
    return np.eye(T) - nuisance @ np.linalg.pinv(nuisance)


@dataclass(frozen=True)
class BalancedFit:
    """Closed-form REML fit of the random-coefficient model on balanced data, batched.

    Leading axes ``...`` are the driver batch (real driver first, then surrogates); the last
    coefficient is the driver's slope."""

    coef: np.ndarray      # (..., G, p) per-group least squares after the nuisance
    shared: np.ndarray    # (..., p) mean of the group coefficients: the GLS estimate of mu
    sigma2: np.ndarray    # (...,) residual variance (G (T - p - q) degrees of freedom)
    between: np.ndarray   # (..., p, p) S_b, sample covariance of the group coefficients
    W: np.ndarray         # (..., p, p) (D'D)^-1 after the nuisance

    @property
    def n_groups(self) -> int:
        return self.coef.shape[-2]

    @property
    def sigma(self) -> np.ndarray:
        """(..., p, p) Sigma = S_b - sigma^2 W, negative eigenvalues clipped to zero."""
        raw = self.between - self.sigma2[..., None, None] * self.W
        vals, vecs = np.linalg.eigh(raw)
        return (vecs * np.clip(vals, 0.0, None)[..., None, :]) @ np.swapaxes(vecs, -1, -2)

    @property
    def shared_cov(self) -> np.ndarray:
        """(..., p, p) covariance of the shared coefficients, (Sigma + sigma^2 W) / G."""
        return (self.sigma + self.sigma2[..., None, None] * self.W) / self.n_groups

    def shrunken(self) -> np.ndarray:
        """(..., G, p) the groups' best linear unbiased predictors."""
        V = self.sigma + self.sigma2[..., None, None] * self.W
        lam = self.sigma @ np.linalg.pinv(V)  # (..., p, p)
        dev = self.coef - self.shared[..., None, :]
        return self.shared[..., None, :] + dev @ np.swapaxes(lam, -1, -2)


@dataclass(frozen=True)
class DesignPart:
    """What :func:`balanced_fit` computes from the designs and the nuisance alone, shared by fits
    of other responses on the same designs (:func:`design_part`)."""

    H: np.ndarray    # (T, T) :func:`residual_maker` of the nuisance
    q: int           # the nuisance's rank
    Drt: np.ndarray  # (..., p, T) the designs after the nuisance, as rows
    W: np.ndarray    # (..., p, p) (D'D)^-1 after the nuisance


def design_part(D: np.ndarray, nuisance: np.ndarray | None = None) -> DesignPart:
    """:class:`DesignPart` of the batch of designs D (..., T, p) and ``nuisance`` (T, q)."""
    D = np.asarray(D, float)
    T = D.shape[-2]
    H = residual_maker(nuisance, T)
    q = 0 if nuisance is None else np.linalg.matrix_rank(nuisance)
    Dt = np.swapaxes(D, -1, -2)  # (..., p, T): the batch's designs as rows, so each product is one 2-D matmul
    Drt = (Dt.reshape(-1, T) @ H.T).reshape(Dt.shape)  # H symmetric: the designs after the nuisance
    return DesignPart(H=H, q=q, Drt=Drt, W=np.linalg.inv(Drt @ np.swapaxes(Drt, -1, -2)))


def balanced_fit(D: np.ndarray, Y: np.ndarray, nuisance: np.ndarray | None = None,
                 part: DesignPart | None = None) -> BalancedFit:
    """:class:`BalancedFit` of responses Y (G, T) on a batch of designs D (..., T, p)
    (:func:`design`), each group with its own fixed coefficients on ``nuisance`` (T, q);
    ``part``: :func:`design_part` of the same D and nuisance when another fit made it.

    Needs G >= 2 groups and T > p + q years, all observed (no NaN)."""
    Y = np.asarray(Y, float)
    G, T = Y.shape
    part = design_part(D, nuisance) if part is None else part
    Drt, W, q = part.Drt, part.W, part.q
    p = Drt.shape[-2]
    Yr = Y @ part.H
    coef = np.swapaxes(W @ (Drt.reshape(-1, T) @ Yr.T).reshape(Drt.shape[:-1] + (G,)), -1, -2)  # (..., G, p)
    fitted = coef @ Drt  # (..., G, T)
    sigma2 = np.sum((Yr - fitted) ** 2, (-1, -2)) / (G * (T - p - q))
    shared = coef.mean(-2)
    dev = coef - shared[..., None, :]
    between = np.swapaxes(dev, -1, -2) @ dev / (G - 1)
    return BalancedFit(coef=coef, shared=shared, sigma2=sigma2, between=between, W=W)


def slope_t(fit: BalancedFit) -> np.ndarray:
    """(..., G) every group's slope over its standard error with the pooled sigma^2."""
    return fit.coef[..., -1] / np.sqrt(fit.sigma2 * fit.W[..., -1, -1])[..., None]


def shared_t(fit: BalancedFit) -> np.ndarray:
    """(...,) the shared slope over its standard error in the model with one common slope
    (sigma^2 W / G): the statistic whose surrogate p tests the shared slope. Any statistic is
    valid under the surrogate null; this one is scale-free across lags."""
    return fit.shared[..., -1] / np.sqrt(fit.sigma2 * fit.W[..., -1, -1] / fit.n_groups)


def any_group_stat(fit: BalancedFit, sign: str = "any") -> np.ndarray:
    """(...,) the sum over the groups of their squared slope t (:func:`slope_t`), counting only
    slopes of the expected sign when one is stated ('positive' or 'negative'): large when any
    group responds, whether or not the others do; the statistic of the joint test of "no group
    responds" (a chi-square-type combination of the group tests)."""
    t = slope_t(fit)
    if sign == "positive":
        t = np.clip(t, 0.0, None)
    elif sign == "negative":
        t = np.clip(t, None, 0.0)
    return np.sum(t * t, -1)


def heterogeneity_ratio(fit: BalancedFit) -> np.ndarray:
    """(...,) the spread of the group slopes over what the residual noise alone gives them:
    S_b / (sigma^2 W) of the slope, the F ratio of a slope-by-group interaction."""
    return fit.between[..., -1, -1] / (fit.sigma2 * fit.W[..., -1, -1])


def heterogeneity_null(D: np.ndarray, Y: np.ndarray, nuisance: np.ndarray | None = None,
                       part: DesignPart | None = None) -> np.ndarray:
    """(S,) :func:`heterogeneity_ratio` of every member of the batch D (S, T, p) fitted to the
    residuals of the real driver's (D[0]) model with one common slope (the other coefficients
    of every group its own). For D[0] it equals the ratio on Y itself (the residuals differ from
    Y by the restricted model's columns); each surrogate meets the errors of a shared
    relationship, so the rank of D[0] among them tests "the slopes differ" while keeping the
    errors' autocorrelation (the residual idea of Freedman & Lane 1983, J. Bus. Econ. Stat.
    1:292-298). ``part``: :func:`design_part` of D and the nuisance when another fit made it."""
    fit = balanced_fit(D[0], Y, nuisance)
    T = Y.shape[1]
    other = D[0][:, :-1] if nuisance is None else np.column_stack([nuisance, D[0][:, :-1]])
    H = residual_maker(other if other.shape[1] else None, T)
    resid = (Y - fit.shared[-1] * D[0][:, -1][None, :]) @ H
    return heterogeneity_ratio(balanced_fit(D, resid, nuisance, part))


@dataclass(frozen=True)
class MixedFit:
    """The real driver's hierarchical fit by statsmodels' MixedLM (REML)."""

    shared: np.ndarray          # (p,) mean of the random coefficients (slope last)
    shared_se: np.ndarray       # (p,)
    sigma: np.ndarray           # (p, p) covariance of the random coefficients
    sigma2: float               # residual variance
    group_coef: np.ndarray      # (G, p) best linear unbiased predictors
    group_se: np.ndarray        # (G, p) their prediction standard errors
    lrt: float                  # 2 (REML logL with group slopes - REML logL with one slope)
    p_lrt: float                # against the boundary mixture (:func:`mixture_p`)
    converged: bool

    @property
    def spread(self) -> float:
        """Between-group standard deviation of the slopes."""
        return float(np.sqrt(max(self.sigma[-1, -1], 0.0)))


def mixture_p(lrt: float, n_random: int) -> float:
    """p of the likelihood ratio for the last of ``n_random`` random coefficients (its variance on
    the boundary, and its covariances with the others): the 50:50 mixture of chi2(n_random - 1)
    and chi2(n_random) (Self & Liang 1987, J. Am. Stat. Assoc. 82:605-610; Stram & Lee 1994,
    Biometrics 50:1171-1177); chi2(0) is a point mass at zero."""
    lrt = max(float(lrt), 0.0)
    low = _st.chi2.sf(lrt, n_random - 1) if n_random > 1 else float(lrt <= 0)
    return float(0.5 * low + 0.5 * _st.chi2.sf(lrt, n_random))


def prediction_se(sigma: np.ndarray, sigma2: float, W: np.ndarray, n_groups: int) -> np.ndarray:
    """(p,) prediction standard errors of a group's coefficients in a balanced design, the
    shared coefficients' uncertainty included: with V = Sigma + sigma^2 W and L = Sigma V^-1,
    Var = (I - L) Sigma + (I - L) (V / G) (I - L)' (the conditional variance given the shared
    coefficients, plus their own variance carried through)."""
    V = sigma + sigma2 * W
    IL = np.eye(len(V)) - sigma @ np.linalg.pinv(V)
    cov = IL @ sigma + IL @ (V / n_groups) @ IL.T
    return np.sqrt(np.clip(np.diag(cov), 0.0, None))


def _stacked(D: np.ndarray, G: int, nuisance: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    """(fixed design (G T, G q + p), random design (G T, p)) of the stacked groups."""
    T = D.shape[0]
    Dall = np.tile(D, (G, 1))
    if nuisance is None:
        return Dall, Dall
    own = np.kron(np.eye(G), nuisance)  # each group its own nuisance coefficients
    return np.column_stack([own, Dall]), Dall


def reml_loglik(D: np.ndarray, Y: np.ndarray, sigma: np.ndarray, sigma2: float,
                nuisance: np.ndarray | None = None) -> float:
    """The restricted (REML) log-likelihood at (Sigma, sigma^2) (Harville 1977, J. Am. Stat.
    Assoc. 72:320-338): -1/2 [(N - k) log 2 pi + log|V| + log|X'V^-1 X| + r'V^-1 r], V
    block-diagonal with blocks D Sigma D' + sigma^2 I, X the fixed design, r the GLS residuals
    (the constants of lme4 and statsmodels: both give -871.81 on sleepstudy)."""
    G, T = Y.shape
    X, _ = _stacked(D, G, nuisance)
    Vi1 = np.linalg.inv(D @ sigma @ D.T + sigma2 * np.eye(T))
    Vi = np.kron(np.eye(G), Vi1)
    info = X.T @ Vi @ X
    y = Y.reshape(-1)
    r = y - X @ np.linalg.solve(info, X.T @ Vi @ y)
    return -0.5 * ((G * T - X.shape[1]) * np.log(2 * np.pi) - G * np.linalg.slogdet(Vi1)[1]
                   + np.linalg.slogdet(info)[1] + float(r @ Vi @ r))


def one_slope_loglik(D: np.ndarray, Y: np.ndarray, nuisance: np.ndarray | None = None) -> float:
    """The largest REML log-likelihood with the slope shared (its variance and covariances
    zero) and the other random coefficients free (variances >= 0, no covariance), maximised
    numerically: the null of the heterogeneity likelihood-ratio test. (statsmodels' MixedLM
    reports an infinite likelihood when a variance ends at zero, so it is not used here.)
    With the slope the only random coefficient the null has no random effect left: a linear
    model, whose REML variance is RSS / (N - k) in closed form (Harville 1977)."""
    p = D.shape[1]
    if p == 1:
        X, _ = _stacked(D, Y.shape[0], nuisance)
        y = Y.reshape(-1)
        r = y - X @ np.linalg.lstsq(X, y, rcond=None)[0]
        return reml_loglik(D, Y, np.zeros((1, 1)), float(r @ r) / (len(y) - np.linalg.matrix_rank(X)), nuisance)
    # imported here: only the one real fit of each joint hypothesis optimises
    from scipy.optimize import minimize

    def neg(theta):  # theta = (log sigma^2, variances of the other coefficients / sigma^2)
        s2 = float(np.exp(theta[0]))
        return -reml_loglik(D, Y, np.diag(np.r_[np.asarray(theta[1:]) * s2, 0.0]), s2, nuisance)

    start = np.r_[np.log(max(float(np.var(Y - Y.mean(1, keepdims=True))), 1e-12)), np.full(p - 1, 0.5)]
    best = minimize(neg, start, method="L-BFGS-B", bounds=[(None, None)] + [(0.0, None)] * (p - 1))
    return float(-best.fun)


#: statsmodels' optimisers tried for every real fit, in turn, each from the closed form of
#: :func:`balanced_fit`; the first that converges to at least the closed form's REML likelihood is
#: kept, else the fit of the largest REML likelihood (its L-BFGS has been seen to stop at a
#: random-effects variance of zero with the fixed effects at zero and report convergence, where
#: BFGS and Powell agree on the closed form).
OPTIMISERS = ("bfgs", "powell")


def _mixed_model(D: np.ndarray, Y: np.ndarray, nuisance: np.ndarray | None, closed: BalancedFit):
    """statsmodels MixedLM of the stacked groups (fixed [group nuisance, D], random D by group),
    started from the closed form (on balanced data the REML estimate itself when it is inside the
    parameter space), by the first of :data:`OPTIMISERS` that reaches the closed form's REML
    likelihood, else the best of them by :func:`reml_loglik`."""
    # imported here: statsmodels costs 1-3 s, paid only by studies that screen groups jointly
    from statsmodels.regression.mixed_linear_model import MixedLM, MixedLMParams
    G, T = Y.shape
    X, Z = _stacked(D, G, nuisance)
    model = MixedLM(Y.reshape(-1), X, groups=np.repeat(np.arange(G), T), exog_re=Z)
    rel = closed.sigma / closed.sigma2 + 1e-12 * np.eye(D.shape[1])  # cov_re / scale as statsmodels has it (PD)
    start = MixedLMParams.from_components(np.zeros(X.shape[1]), cov_re=rel)
    target = reml_loglik(D, Y, closed.sigma, float(closed.sigma2), nuisance)
    fits = []
    for method in OPTIMISERS:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # boundary and convergence warnings: convergence is reported
            try:
                fit = model.fit(reml=True, method=method, start_params=start)
            except (np.linalg.LinAlgError, ValueError):
                continue
        fits.append((reml_loglik(D, Y, np.asarray(fit.cov_re, float), float(fit.scale), nuisance), fit))
        if fit.converged and fits[-1][0] >= target - 1e-9 * abs(target):
            break
    if not fits:
        raise np.linalg.LinAlgError("no optimiser fitted the mixed model")
    return max(fits, key=lambda f: f[0])[1]


def mixed_fit(D: np.ndarray, Y: np.ndarray, nuisance: np.ndarray | None = None,
              own: BalancedFit | None = None) -> MixedFit:
    """REML fit of the random-coefficient model of Y (G, T) on the design D (T, p) (driver last;
    each group its own fixed coefficients on ``nuisance`` (T, q)) by statsmodels' MixedLM; the
    likelihood-ratio test of group-specific slopes against one shared slope (same fixed
    effects, so REML likelihoods compare; :func:`one_slope_loglik`, :func:`mixture_p`); the
    groups' shrunken coefficients with their prediction standard errors (:func:`prediction_se`).
    ``own``: :func:`balanced_fit` of the same D, Y and nuisance when the caller has made it."""
    own = balanced_fit(D, Y, nuisance) if own is None else own  # the closed form, the optimisers' start
    full = _mixed_model(D, Y, nuisance, own)
    G = Y.shape[0]
    p = D.shape[1]
    sigma = np.asarray(full.cov_re, float)
    shared = np.asarray(full.fe_params, float)[-p:]
    V = sigma + float(full.scale) * own.W
    blup = shared[None, :] + (own.coef - shared[None, :]) @ (sigma @ np.linalg.pinv(V)).T  # = MixedLM's, also at zero
    lrt = float(max(0.0, 2.0 * (reml_loglik(D, Y, sigma, float(full.scale), nuisance)
                                - one_slope_loglik(D, Y, nuisance))))
    return MixedFit(shared=shared, shared_se=np.asarray(full.bse_fe, float)[-p:], sigma=sigma,
                    sigma2=float(full.scale), group_coef=blup,
                    group_se=np.tile(prediction_se(sigma, float(full.scale), own.W, G), (G, 1)),
                    lrt=lrt, p_lrt=mixture_p(lrt, p), converged=bool(full.converged))


def pooled_coefficients(c: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Empirical-Bayes partial pooling of G coefficients c (G, ...) with sampling variances
    v (G, ...) towards their mean: c* = mean + lam (c - mean), lam = max(0, 1 - mean(v) / s^2),
    s^2 the coefficients' sample variance (the positive-part shrinkage of Efron & Morris 1975;
    the between-group variance s^2 - mean(v) by the method of moments, zero when negative)."""
    mean = c.mean(0)
    s2 = c.var(0, ddof=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        lam = np.clip(np.where(s2 > 0, 1.0 - v.mean(0) / s2, 0.0), 0.0, 1.0)
    return mean + lam * (c - mean)


def _standardised(a: np.ndarray, n_start: int) -> np.ndarray:
    """Centred and scaled along the last axis by the first ``n_start`` values (training rows of
    every window, so no later year enters), for conditioning only: fits do not change."""
    head = a[..., :n_start]
    sd = head.std(-1, keepdims=True)
    return (a - head.mean(-1, keepdims=True)) / np.where(sd > 0, sd, 1.0)


@dataclass(frozen=True)
class _WindowFits:
    """Expanding-window fits of one group: the baseline alone and baseline + driver (FWL)."""

    fc0: np.ndarray   # (O,) baseline forecasts
    coef: np.ndarray  # (..., O) driver coefficient
    sxx: np.ndarray   # (..., O) driver sum of squares after the baseline
    lead: np.ndarray  # (..., O) driver at the origin after the baseline
    rss: np.ndarray   # (..., O) training RSS of baseline + driver


def window_fits(Z: np.ndarray, X: np.ndarray, y: np.ndarray, origins: np.ndarray) -> _WindowFits:
    """Least squares on rows [0, o) of y on Z (T, p) and of y on [Z, x] for every member x of
    X (..., T) and origin o, the driver's coefficient by the Frisch-Waugh-Lovell partial
    regression (the driver after the baseline), all windows at once: every window sum of the
    batch is one matrix product with the window mask (:func:`lagsieve.stats.linalg.window_mask`)."""
    last = origins - 1
    mask = window_mask(origins, len(y))  # (O, T)
    ZZ = np.cumsum(Z[:, :, None] * Z[:, None, :], 0)[last]
    ginv = np.linalg.pinv(ZZ)  # (O, p, p)
    d0 = (ginv @ np.cumsum(Z * y[:, None], 0)[last][..., None])[..., 0]  # (O, p)
    rss0 = np.cumsum(y * y)[last] - np.sum(np.cumsum(Z * y[:, None], 0)[last] * d0, -1)
    # the batch's arrays one column of Z at a time (p <= 4): (..., O) each, no stacks of tiny products
    cols = range(Z.shape[1])
    Zx = [X @ (mask * Z[:, j]).T for j in cols]  # Z'x
    q = [sum(ginv[:, j, r] * Zx[r] for r in cols) for j in cols]  # (Z'Z)^+ Z'x
    xx = (X * X) @ mask.T
    sxx = xx - sum(Zx[j] * q[j] for j in cols)
    sxy = X @ (mask * y).T - sum(Zx[j] * d0[:, j] for j in cols)
    ok = sxx > 1e-12 * xx
    coef = np.where(ok, sxy / np.where(ok, sxx, 1.0), 0.0)
    lead = X[..., origins] - sum(Z[origins, j] * q[j] for j in cols)
    return _WindowFits(fc0=np.sum(Z[origins] * d0, -1), coef=coef, sxx=np.where(ok, sxx, 0.0), lead=lead,
                       rss=rss0 - coef * sxy)


def first_window_baseline(y: np.ndarray, ylag: np.ndarray, year: np.ndarray, initial: int) -> str:
    """The baseline (of ``BASELINES``) with the least AICc on the first ``initial`` rows."""
    best, crit = BASELINES[0], np.inf
    for b in BASELINES:
        Z = baseline_design(b, ylag[:initial], year[:initial])
        rss = float(np.sum((y[:initial] - Z @ np.linalg.lstsq(Z, y[:initial], rcond=None)[0]) ** 2))
        c = float(aicc(-0.5 * initial * (np.log(2 * np.pi * max(rss, 1e-300) / initial) + 1), Z.shape[1] + 1, initial))
        if c < crit:
            best, crit = b, c
    return best


@dataclass(frozen=True)
class JointForecast:
    """Rolling-origin one-step forecasts of the partially pooled joint model, batched."""

    years: np.ndarray                      # (O,) forecast years
    observed: np.ndarray                   # (G, O)
    forecast: np.ndarray                   # (S, G, O) baseline + pooled driver coefficient
    lag: np.ndarray                        # (S, O) the lag chosen on the training years
    baseline: tuple[str, ...]              # per group: the baseline of its model (first window)
    baseline_forecast: dict[str, np.ndarray]  # baseline -> (G, O)

    @property
    def hardest(self) -> list[str]:
        """Per group, the baseline with the least out-of-sample MSE (used to score only)."""
        mse = {b: np.mean((self.observed - f) ** 2, -1) for b, f in self.baseline_forecast.items()}
        return [min(BASELINES, key=lambda b: mse[b][g]) for g in range(self.observed.shape[0])]

    def _hardest_sse(self) -> np.ndarray:
        return np.array([np.sum((self.observed[g] - self.baseline_forecast[b][g]) ** 2)
                         for g, b in enumerate(self.hardest)])

    @property
    def group_skill(self) -> np.ndarray:
        """(S, G) skill of each group's forecasts against its hardest baseline."""
        return skill_score(np.sum((self.observed - self.forecast) ** 2, -1), self._hardest_sse())

    @property
    def skill(self) -> np.ndarray:
        """(S,) 1 - sum_g SSE(joint) / sum_g SSE(hardest baseline of g): the joint fit's skill."""
        return skill_score(np.sum((self.observed - self.forecast) ** 2, (-1, -2)), self._hardest_sse().sum())


def joint_rolling_origin(Y: np.ndarray, Ylag: np.ndarray, year: np.ndarray, X: np.ndarray, lags: np.ndarray,
                         initial: int) -> JointForecast:
    """Expanding-window forecasts of every group g: its first-window baseline + the driver, the
    driver's coefficient pooled across the groups at every origin (:func:`pooled_coefficients`,
    each group's baseline refitted given it) and the lag of least pooled training RSS.

    Y, Ylag (G, T) the groups and their previous years, year (T,), X (S, L, T) the driver batch
    at every lag (index 0 the real driver); forecasts for rows initial..T-1. Only training rows
    enter any forecast (scaling from the first window, choices on the training years)."""
    G, T = Y.shape
    origins = np.arange(initial, T)
    Xs, yr = _standardised(np.asarray(X, float), initial), _standardised(np.asarray(year, float), initial)
    chosen, fits, base_fc = [], [], {b: np.empty((G, len(origins))) for b in BASELINES}
    for g in range(G):
        level = Y[g, :initial].mean()
        yl = _standardised(Ylag[g], initial)
        chosen.append(first_window_baseline(Y[g], yl, yr, initial))
        for b in BASELINES:
            Z = baseline_design(b, yl, yr)
            fit = window_fits(Z, Xs if b == chosen[g] else Xs[:1, :1], Y[g] - level, origins)
            base_fc[b][g] = fit.fc0 + level
            if b == chosen[g]:
                fits.append((fit, Z.shape[1], level))
    coef = np.stack([f.coef for f, _, _ in fits])  # (G, S, L, O)
    var = np.stack([f.rss / np.maximum(origins - p - 1, 1) / np.where(f.sxx > 0, f.sxx, np.inf) for f, p, _ in fits])
    pooled = pooled_coefficients(coef, var)
    rss = sum(f.rss + (pooled[g] - f.coef) ** 2 * f.sxx for g, (f, _, _) in enumerate(fits))  # (S, L, O)
    pick = np.argmin(rss, axis=1)  # (S, O)
    fc = np.stack([f.fc0 + lv + pooled[g] * f.lead for g, (f, _, lv) in enumerate(fits)])  # (G, S, L, O)
    fc = np.take_along_axis(fc, pick[None, :, None, :], axis=2)[:, :, 0, :]
    return JointForecast(years=np.asarray(year)[origins], observed=Y[:, origins], forecast=np.moveaxis(fc, 0, 1),
                         lag=np.asarray(lags)[pick], baseline=tuple(chosen), baseline_forecast=base_fc)
