"""Honest out-of-sample evidence: rolling-origin one-step forecasts with nested lag choice.

At every forecast origin the coefficients and the driver's lag are estimated from the
training years alone (an expanding window), and the next year is forecast. A candidate
model is a baseline plus the driver, so the driver must add skill beyond what the
baseline already captures:

* climatology: y_t = a
* persistence: y_t = a + phi y_{t-1}      (AR(1) of the response)
* trend:       y_t = a + b year_t
* trend_ar1:   y_t = a + b year_t + u_t, u_t = phi u_{t-1} + e_t (a linear trend with AR(1)
  errors). Substituting u_{t-1} = y_{t-1} - a - b year_{t-1} gives exactly
  y_t = c0 + c1 year_t + phi y_{t-1} + e_t with c0 = a (1 - phi) + b phi, c1 = b (1 - phi),
  so it is fitted by least squares on [1, y_{t-1}, year_t] (conditional least squares of the
  AR(1)-error regression, the first year conditioned on) in the same batched machinery.
  A response that both trends and is autocorrelated is harder to beat with both than with
  either alone.

Forecast comparisons (see :func:`clark_west` and :func:`diebold_mariano`): the candidate
against the baseline it is built on is a nested comparison (the baseline is the candidate
with the driver's coefficient set to zero), tested with the Clark & West (2007) adjusted
MSPE test; comparisons of models that are not nested use Diebold-Mariano with the
Harvey-Leybourne-Newbold correction.

Everything is batched: the driver axis (the real driver first, then its surrogates), the
lag axis and the origin axis are stacked and the normal equations of every training window are
one product with the window mask (:mod:`lagsieve.stats.linalg`), so a whole rolling-origin
evaluation is a handful of array operations.

References
----------
Tashman, L.J. (2000) Out-of-sample tests of forecasting accuracy: an analysis and review.
    Int. J. Forecasting 16:437-450.
Bergmeir, C., Hyndman, R.J. & Koo, B. (2018) A note on the validity of cross-validation
    for evaluating autoregressive time series prediction. Comput. Stat. Data Anal. 120:70-83.
Diebold, F.X. & Mariano, R.S. (1995) Comparing predictive accuracy. J. Bus. Econ. Stat.
    13:253-263.
Harvey, D., Leybourne, S. & Newbold, P. (1997) Testing the equality of prediction mean
    squared errors. Int. J. Forecasting 13:281-291.
Clark, T.E. & West, K.D. (2007) Approximately normal tests for equal predictive accuracy
    in nested models. J. Econometrics 138:291-311.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from lagsieve.stats.distributions import t_sf
from lagsieve.stats.linalg import expanding_added
from lagsieve.stats.splines import (
    GCV_GAMMA,
    bspline_basis,
    default_n_basis,
    difference_penalty,
    expanding_penalised,
    penalised_window_fit,
    penalty_block,
)

#: The baselines every candidate must beat, in the order of every table and figure.
BASELINES = ("climatology", "persistence", "trend", "trend_ar1")


def baseline_design(baseline: str, ylag: np.ndarray, year: np.ndarray) -> np.ndarray:
    """Regressors (T, p) of a baseline: intercept, plus y_{t-1} and/or the year.

    ``trend_ar1`` (a linear trend with AR(1) errors) is [1, y_{t-1}, year]: the AR(1)-error
    model y_t = a + b t + u_t, u_t = phi u_{t-1} + e_t is exactly the regression
    y_t = c0 + c1 t + phi y_{t-1} + e_t (see the module docstring).
    """
    one = np.ones_like(year, dtype=float)
    if baseline == "climatology":
        return one[:, None]
    if baseline == "persistence":
        return np.column_stack([one, ylag])
    if baseline == "trend":
        return np.column_stack([one, year.astype(float)])
    if baseline == "trend_ar1":
        return np.column_stack([one, ylag, year.astype(float)])
    raise ValueError(f"unknown baseline {baseline!r}")


def scale_from_start(a: np.ndarray, n_start: int) -> np.ndarray:
    """Centre and scale along the last axis with statistics of the first n_start rows only.

    The rows before the first forecast origin are training years for every origin, so this
    conditioning step carries no information from later years into any forecast. Every
    rolling origin of the package scales its columns this way (the screen's, the draws' in
    :mod:`lagsieve.stats.draws`, the nested one of :mod:`lagsieve.stats.conditional`, the
    model sets' of :mod:`lagsieve.stats.modelset`).
    """
    head = a[..., :n_start]
    mu = head.mean(-1, keepdims=True)
    sd = head.std(-1, keepdims=True)
    sd = np.where(sd > 0, sd, 1.0)
    return (a - mu) / sd


def _first_window_level(y: np.ndarray, w: np.ndarray | None, n_start: int) -> float:
    """(Weighted) mean of the first ``n_start`` rows: training rows of every window."""
    w = np.ones(len(y)) if w is None else np.asarray(w, float)
    return float(np.sum(w[:n_start] * y[:n_start]) / np.sum(w[:n_start]))


@dataclass
class RollingOriginResult:
    """Out-of-sample forecasts of one hypothesis for the real driver and its surrogates.

    Axis 0 of every driver-dependent array is the driver batch: index 0 is the real driver.

    The *candidate* is a baseline plus the driver; at every origin its baseline, lag (and
    with GAMs its form) are chosen by GCV on the training years only, so no later year
    decides the form of any forecast. The *hardest* baseline is, in hindsight,
    the one with the lowest out-of-sample MSE; it is used only to score. ``skill[b]`` is the
    candidate's skill against baseline b and ``min_skill`` its minimum over the baselines
    (the skill against the hardest one); ``added_skill[b]`` is what the driver adds to
    baseline b itself.
    """

    years: np.ndarray  # (n_origins,) the forecast years
    observed: np.ndarray  # (n_origins,)
    baseline_forecast: dict[str, np.ndarray]  # baseline -> (n_origins,)
    model_forecast: dict[str, np.ndarray]  # baseline -> (S, n_origins): baseline + driver
    chosen_lag: dict[str, np.ndarray]  # baseline -> (S, n_origins) lag chosen in training
    added_skill: dict[str, np.ndarray]  # baseline -> (S,): 1 - MSE(b + driver) / MSE(b)
    hardest: str
    candidate: str = "trend"  # the baseline the real driver's candidate used most often
    candidate_fc: np.ndarray | None = None  # (S, n_origins) the candidate's forecasts
    candidate_lag: np.ndarray | None = None  # (S, n_origins) its lag at every origin
    candidate_baseline: np.ndarray | None = None  # (S, n_origins) its baseline at every origin
    lags: np.ndarray = field(default_factory=lambda: np.zeros(0, int))
    chosen_model: np.ndarray | None = None  # (S, n_origins) 'linear' or 'gam' (with gam)
    gam_gain: np.ndarray | None = None  # (S,) 1 - MSE(gam only) / MSE(linear only)
    gam_forecast: np.ndarray | None = None  # (S, n_origins) hardest baseline + spline only
    linear_forecast: np.ndarray | None = None  # (S, n_origins) hardest baseline + line only

    @property
    def n(self) -> int:
        return len(self.years)

    @property
    def candidate_forecast(self) -> np.ndarray:
        """(S, n_origins) forecasts of the candidate (a baseline plus the driver)."""
        return self.candidate_fc

    @property
    def skill(self) -> dict[str, np.ndarray]:
        """baseline -> (S,) skill of the candidate against that baseline."""
        mse_c = np.mean((self.observed[None, :] - self.candidate_forecast) ** 2, axis=-1)
        return {b: skill_score(mse_c, np.mean((self.observed - f) ** 2)) for b, f in self.baseline_forecast.items()}

    @property
    def min_skill(self) -> np.ndarray:
        """Skill against the hardest baseline (the minimum over baselines), per driver: (S,)."""
        return np.min(np.stack(list(self.skill.values())), axis=0)

    def errors(self, which: int = 0) -> tuple[np.ndarray, np.ndarray]:
        """(candidate errors, hardest-baseline errors) of driver ``which``."""
        return (
            self.observed - self.candidate_forecast[which],
            self.observed - self.baseline_forecast[self.hardest],
        )


def rolling_origin(
    y: np.ndarray,
    ylag: np.ndarray,
    year: np.ndarray,
    X: np.ndarray,
    lags: np.ndarray,
    initial: int,
    models: tuple[str, ...] = ("linear",),
    n_basis: int | None = None,
    chunk: int = 512,
    retune_every: int = 5,
    weights: np.ndarray | None = None,
) -> RollingOriginResult:
    """Expanding-window one-step-ahead forecasts with the lag chosen inside each window.

    Parameters
    ----------
    y, ylag, year : (T,) response, response one year earlier, and year, on the rows where
        the response, its previous year and the driver at every candidate lag are present.
    X : (S, L, T) driver values at each candidate lag (row t holds x_{year_t - lag}); index
        0 of the first axis is the real driver, the rest are surrogates.
    lags : (L,) the candidate lags.
    initial : number of rows in the first training window; forecasts are made for rows
        initial..T-1.

    The lag minimising the training residual sum of squares of baseline + driver is chosen
    at each origin (all lags have the same number of parameters, so this equals choosing by
    AIC). Driver and year columns are scaled with statistics of the first ``initial`` rows
    only, which leaves every forecast unchanged in exact arithmetic and keeps later years out.

    With ``"gam"``, the line and the spline (:func:`gam_candidate`) of every lag compete at
    every origin; every form is scored by GCV = n RSS / (n - 1.4 edf)^2 on the training
    years (edf of a line: its coefficients). The spline has ``default_n_basis(initial)``
    basis functions (about initial / 4, at least 5: the first window decides, as for the
    knots). ``weights`` (T,) make every fit weighted; forecast errors stay unweighted.
    """
    y = np.asarray(y, float)
    T = len(y)
    if initial < 3 or initial >= T:
        raise ValueError("initial window must leave at least one forecast")
    origins = np.arange(initial, T)
    lags = np.asarray(lags)
    Xs, yl, yr = (scale_from_start(np.asarray(a, float), initial) for a in (X, ylag, year))
    fits = {b: _baseline_fits(b, y, yl, yr, Xs, lags, origins, weights) for b in BASELINES}
    hardest = min(BASELINES, key=lambda b: fits[b].mse)
    cand0 = min(BASELINES, key=lambda b: fits[b].aic_first)  # the spline is built on this baseline
    # the pool of candidate forms at every origin: every baseline + the driver at every lag,
    # (and the spline on the first window's AIC baseline); the least GCV on the training
    # years wins, for the real driver and every surrogate alike
    pool = CandidatePool(origins.astype(float))
    for i, b in enumerate(BASELINES):
        pool.add_linear(fits[b].n_params, fits[b].rss, fits[b].fc, lags, i)
    extra = {}
    if "gam" in models:
        K = n_basis or default_n_basis(initial)  # fixed by the first training window, not by later years
        fc_gam, gcv_gam = _gam_forms(baseline_design(cand0, yl, yr), Xs, y, origins, initial, K, chunk,
                                     retune_every, weights)
        pool.add(gcv_gam, fc_gam, lags, BASELINES.index(cand0))
        extra = _gam_comparison(y[origins], fc_gam, gcv_gam, fits[cand0].model_fc)
    pick, cand_fc = pool.choose()
    if "gam" in models:
        extra["chosen_model"] = np.where(pick >= len(BASELINES) * len(lags), "gam", "linear")
    chosen_base = pool.baseline_index[pick]
    counts = np.bincount(chosen_base[0], minlength=len(BASELINES))
    return RollingOriginResult(
        years=np.asarray(year)[origins],
        observed=y[origins],
        baseline_forecast={b: f.forecast for b, f in fits.items()},
        model_forecast={b: f.model_fc for b, f in fits.items()},
        chosen_lag={b: f.lag for b, f in fits.items()},
        added_skill={b: f.added for b, f in fits.items()},
        hardest=hardest,
        candidate=BASELINES[int(np.argmax(counts))],
        candidate_fc=cand_fc,
        candidate_lag=pool.lag[pick],
        candidate_baseline=np.asarray(BASELINES)[chosen_base],
        lags=lags,
        **extra,
    )


@dataclass(frozen=True)
class _BaselineFits:
    """Expanding-window fits of one baseline, alone and plus the driver at every lag."""

    n_params: int          # parameters of baseline + driver
    forecast: np.ndarray   # (O,) the baseline alone
    aic_first: float       # AIC of the baseline alone in the first window
    mse: float             # out-of-sample MSE of the baseline alone
    rss: np.ndarray        # (S, L, O) training RSS of baseline + driver at every lag
    fc: np.ndarray         # (S, L, O) forecasts of baseline + driver at every lag
    model_fc: np.ndarray   # (S, O) at the lag of least training RSS
    lag: np.ndarray        # (S, O) that lag
    added: np.ndarray      # (S,) 1 - MSE(baseline + driver) / MSE(baseline)


def _baseline_fits(b: str, y, yl, yr, Xs, lags, origins, weights) -> _BaselineFits:
    """Fits of baseline ``b`` and of ``b`` + driver for every driver of the batch and lag: the
    baseline's normal equations are shared by the batch, the driver is an added column
    (:func:`lagsieve.stats.linalg.expanding_added`)."""
    initial = int(origins[0])
    S, L, _ = Xs.shape
    Z = baseline_design(b, yl, yr)  # (T, p)
    fit = expanding_added(Z, Xs[..., None], y, origins, weights)  # (S, L, O)
    base_fc, rss0 = fit.shared.forecast, fit.shared.rss
    rss, fc = fit.rss, fit.forecast
    pick = np.argmin(rss, axis=1)  # (S, O)
    model_fc = np.take_along_axis(fc, pick[:, None, :], axis=1)[:, 0, :]
    mse_base = np.mean((y[origins] - base_fc) ** 2)
    mse_m = np.mean((y[origins][None, :] - model_fc) ** 2, axis=-1)
    return _BaselineFits(
        n_params=Z.shape[1] + 1,
        forecast=base_fc,
        aic_first=initial * np.log(max(rss0[0], 1e-300) / initial) + 2 * Z.shape[1],
        mse=mse_base,
        rss=rss,
        fc=fc,
        model_fc=model_fc,
        lag=lags[pick],
        added=skill_score(mse_m, mse_base) if mse_base > 0 else np.full(S, np.nan),
    )


class CandidatePool:
    """Candidate forms (baseline + driver at a lag, linear or spline) competing by GCV on the
    training years at every origin: the choice :func:`rolling_origin` makes at every origin,
    shared with :func:`lagsieve.stats.draws.draw_skills` (every draw of a response its own
    choice). Add the forms of every kind (:meth:`add`, :meth:`add_linear`), then :meth:`choose`.
    Arrays are (S, L, O): members of the batch, lags, origins."""

    def __init__(self, n_train: np.ndarray):
        self.n_train = n_train  # (O,) training rows at every origin
        self.gcv, self.fc = [], []
        self.lag = np.zeros(0, int)
        self.baseline_index = np.zeros(0, int)

    def add(self, gcv: np.ndarray, fc: np.ndarray, lags: np.ndarray, baseline: int) -> None:
        """Forms of one kind at every lag: gcv and fc (S, L, O)."""
        self.gcv.append(gcv)
        self.fc.append(fc)
        self.lag = np.r_[self.lag, lags]
        self.baseline_index = np.r_[self.baseline_index, np.full(len(lags), baseline)]

    def add_linear(self, n_params: int, rss: np.ndarray, fc: np.ndarray, lags: np.ndarray, baseline: int) -> None:
        """Linear forms with ``n_params`` coefficients, training RSS and forecasts ``rss``, ``fc``
        (S, L, O), scored by the splines' GCV (gamma 1.4, edf = number of coefficients)."""
        n_tr = self.n_train
        den = np.maximum(n_tr - GCV_GAMMA * n_params, 1e-9)
        self.add(n_tr * rss / den**2, fc, lags, baseline)

    def choose(self) -> tuple[np.ndarray, np.ndarray]:
        """(pick, forecast), each (S, O): the form of least GCV at every origin."""
        pick = np.argmin(np.concatenate(self.gcv, axis=1), axis=1)  # (S, O)
        fc = np.take_along_axis(np.concatenate(self.fc, axis=1), pick[:, None, :], axis=1)[:, 0, :]
        return pick, fc


def _gam_forms(Z, Xs, y, origins, initial, n_basis, chunk, retune_every, weights):
    """Forecasts and GCV (S, L, O) of baseline ``Z`` + spline, in chunks of the driver batch
    (chunks bound the memory of the stacked systems)."""
    fc_gam = np.empty(Xs.shape[:2] + (len(origins),))
    gcv_gam = np.empty_like(fc_gam)
    for lo in range(0, Xs.shape[0], chunk):
        sl = slice(lo, lo + chunk)
        fc_gam[sl], gcv_gam[sl], _ = gam_candidate(Z, Xs[sl], y, origins, initial, n_basis, retune_every,
                                                   weights)
    return fc_gam, gcv_gam


def _gam_comparison(observed, fc_gam, gcv_gam, lin_only) -> dict:
    """The spline alone (lag of least GCV) against the line alone (lag of least RSS), both on
    the same baseline: forecasts and ``gam_gain`` = 1 - MSE(spline) / MSE(line)."""
    gam_only = np.take_along_axis(fc_gam, np.argmin(gcv_gam, axis=1)[:, None, :], axis=1)[:, 0, :]
    mse_gam = np.mean((observed[None, :] - gam_only) ** 2, axis=-1)
    mse_lin = np.mean((observed[None, :] - lin_only) ** 2, axis=-1)
    return {"gam_gain": skill_score(mse_gam, mse_lin), "gam_forecast": gam_only, "linear_forecast": lin_only}


def gam_candidate(Z: np.ndarray, Xs: np.ndarray, y: np.ndarray, origins: np.ndarray, initial: int,
                  n_basis: int, retune_every: int = 5, weights: np.ndarray | None = None):
    """Rolling-origin forecasts of baseline + f(driver) for every driver in the batch and lag.

    f is a cubic P-spline (Eilers & Marx 1996) with ``n_basis`` B-splines whose knots span
    the driver's range in the first ``initial`` training years (so no later value moves a
    knot); beyond that range the basis continues linearly. The baseline's intercept is
    absorbed by the B-spline basis (it sums to one). Returns forecast, GCV and edf, each
    (S, L, n_origins), at the GCV-best smoothing parameter of each training window.
    """
    head = Xs[..., :initial]
    others = Z[:, 1:]  # baseline terms without the intercept
    # (S, L, T, p - 1 + K): room for the baseline terms in front of the B-splines, filled in place
    W = bspline_basis(Xs, n_basis, lo=head.min(-1), hi=head.max(-1), lead=others.shape[1])
    W[..., :others.shape[1]] = others
    P = penalty_block(difference_penalty(n_basis, 2), others.shape[1])
    # centred on the first window's mean and shifted back: exact, because constants lie in
    # the span of the basis and in the null space of the penalty; it keeps the solver's tiny
    # ridge from acting in proportion to the response's level
    level = _first_window_level(y, weights, initial)
    fc, gcv, edf = expanding_penalised(W, P, y - level, origins, retune_every=retune_every, weights=weights)
    return fc + level, gcv, edf


def skill_score(mse_model: float | np.ndarray, mse_baseline: float | np.ndarray):
    """Forecast skill 1 - MSE(model) / MSE(baseline); 0 = no better than the baseline."""
    return 1.0 - np.asarray(mse_model) / np.asarray(mse_baseline)


@dataclass(frozen=True)
class DMResult:
    statistic: float
    p_value: float
    n: int


def diebold_mariano(
    e_model: np.ndarray, e_baseline: np.ndarray, h: int = 1, alternative: str = "greater"
) -> DMResult:
    """Diebold-Mariano test of equal squared-error loss with the Harvey, Leybourne & Newbold
    (1997) small-sample correction.

    d_t = e_baseline_t^2 - e_model_t^2 (positive when the model is better). The statistic
    dbar / sqrt(V/n), V = gamma_0 + 2 sum_{k<h} gamma_k, is multiplied by
    sqrt((n + 1 - 2h + h(h-1)/n) / n) and compared with Student t on n - 1 df.
    ``alternative='greater'`` (default) tests whether the model forecasts better.
    """
    d = np.asarray(e_baseline, float) ** 2 - np.asarray(e_model, float) ** 2
    n = len(d)
    if n < 3:
        return DMResult(np.nan, np.nan, n)
    dbar = d.mean()
    dc = d - dbar
    v = np.dot(dc, dc) / n
    for k in range(1, h):
        v += 2.0 * np.dot(dc[k:], dc[:-k]) / n
    if v <= 0:
        return DMResult(np.nan, np.nan, n)
    dm = dbar / np.sqrt(v / n)
    dm *= np.sqrt((n + 1 - 2 * h + h * (h - 1) / n) / n)
    if alternative == "greater":
        p = t_sf(dm, n - 1)
    elif alternative == "two-sided":
        p = 2 * t_sf(abs(dm), n - 1)
    else:
        raise ValueError("alternative must be 'greater' or 'two-sided'")
    return DMResult(float(dm), float(p), n)


@dataclass(frozen=True)
class CWResult:
    """Clark-West test: statistic, one-sided p-value, forecasts, mean adjusted loss difference."""

    statistic: float
    p_value: float
    n: int
    mean_adjusted: float


def clark_west(e_model: np.ndarray, e_baseline: np.ndarray) -> CWResult:
    """Clark & West (2007) adjusted MSPE test of a baseline nested in the model (one-step forecasts).

    With model 1 the baseline (nested) and model 2 the baseline plus the driver,
    f_t = e1_t^2 - [e2_t^2 - (yhat1_t - yhat2_t)^2] (J. Econometrics 138:291-311, eq. 3.3 as
    recalled from memory). The forecasts enter only through yhat1 - yhat2 = e2 - e1, so the
    errors suffice. Under the null that the driver's coefficient is zero the larger model's
    MSPE is inflated by estimating it; the adjustment term removes that noise, which is why
    the plain Diebold-Mariano comparison is undersized here.

    The statistic is the one-sided t statistic of mean f > 0, fbar / sqrt(s^2 / n) with s^2
    the sample variance of f (divisor n - 1; for one-step forecasts no autocorrelation
    terms are needed), referred to Student t on n - 1 df: the same number as an OLS of f on a
    constant. Clark & West refer it to the standard normal; Student t is slightly more
    conservative at the 20-40 forecasts of annual series (sizes measured in
    tests/test_forecast_tests.py).
    """
    e1 = np.asarray(e_baseline, float)
    e2 = np.asarray(e_model, float)
    f = e1**2 - (e2**2 - (e2 - e1) ** 2)
    n = len(f)
    if n < 3:
        return CWResult(np.nan, np.nan, n, np.nan)
    fbar = float(f.mean())
    s2 = float(np.var(f, ddof=1))
    if not s2 > 0:
        return CWResult(np.nan, np.nan, n, fbar)
    t = fbar / np.sqrt(s2 / n)
    return CWResult(float(t), float(t_sf(t, n - 1)), n, fbar)


@dataclass(frozen=True)
class RetestResult:
    """Skill on the latest years of the candidate (``baseline`` + driver) fitted before them."""

    skill: dict[str, float]  # baseline -> skill of the candidate against it on the held-out years
    lag: int
    years: np.ndarray
    baseline: str
    model: str = "linear"  # the driver's form: 'linear' or 'gam' (penalised spline)

    @property
    def min_skill(self) -> float:
        return float(min(self.skill.values()))


def retest(
    y: np.ndarray,
    ylag: np.ndarray,
    year: np.ndarray,
    X: np.ndarray,
    lags: np.ndarray,
    holdout: int,
    baseline: str = "trend",
    weights: np.ndarray | None = None,
    model: str = "linear",
    n_basis: int | None = None,
) -> RetestResult:
    """Fit on all but the last ``holdout`` rows (lag chosen there), score those rows.

    X is (L, T) for the real driver. The candidate is ``baseline`` plus the driver in the
    form the rolling-origin forecasts chose: a straight line (``model='linear'``) or a cubic
    P-spline (``model='gam'``) with ``default_n_basis(training rows)`` basis functions, knots
    on the driver's range in the training rows and the smoothing parameter chosen by GCV with
    gamma 1.4 on those rows (the rules of :func:`rolling_origin`). The lag is the one of least
    training GCV (for lines: least RSS). Coefficients are frozen at the end of the training
    part; each held-out year is forecast from its own predictors (driver value, previous
    response, year). Skill is 1 - MSE(candidate) / MSE(b) for every baseline b fitted on the
    same training years.
    """
    if model not in ("linear", "gam"):
        raise ValueError("model must be 'linear' or 'gam'")
    y = np.asarray(y, float)
    T = len(y)
    n_train = T - holdout
    Xs = scale_from_start(np.asarray(X, float), n_train)
    yl = scale_from_start(np.asarray(ylag, float), n_train)
    yr = scale_from_start(np.asarray(year, float), n_train)
    sw = np.sqrt(np.ones(T) if weights is None else np.asarray(weights, float))[:n_train]
    mse_b = {}
    for b in BASELINES:
        Z = baseline_design(b, yl, yr)
        beta0 = np.linalg.lstsq(Z[:n_train] * sw[:, None], y[:n_train] * sw, rcond=None)[0]
        mse_b[b] = float(np.mean((y[n_train:] - (Z @ beta0)[n_train:]) ** 2))
    Z = baseline_design(baseline, yl, yr)
    if model == "gam":
        pred, li = _retest_spline(Z, Xs, y, n_train, n_basis or default_n_basis(n_train), weights)
    else:
        pred, li = _retest_line(Z, Xs, y, n_train, sw)
    mse_c = float(np.mean((y[n_train:] - pred[n_train:]) ** 2))
    skill = {b: float(skill_score(mse_c, m)) for b, m in mse_b.items()}
    return RetestResult(skill=skill, lag=int(np.asarray(lags)[li]), years=np.asarray(year)[n_train:],
                        baseline=baseline, model=model)


def _retest_line(Z, Xs, y, n_train, sw) -> tuple[np.ndarray, int]:
    """(predictions (T,), lag index) of baseline + a line in the driver, lag of least training RSS."""
    yt = y[:n_train]
    best = None
    for li in range(Xs.shape[0]):  # a handful of lags
        W = np.column_stack([Z, Xs[li]])
        beta, *_ = np.linalg.lstsq(W[:n_train] * sw[:, None], yt * sw, rcond=None)
        rss = float(np.sum(sw**2 * (yt - W[:n_train] @ beta) ** 2))
        if best is None or rss < best[0]:
            best = (rss, li, W @ beta)
    return best[2], best[1]


def _retest_spline(Z, Xs, y, n_train, n_basis, weights) -> tuple[np.ndarray, int]:
    """(predictions (T,), lag index) of baseline + P-spline in the driver, every lag at once.

    Same construction as :func:`gam_candidate` with one training window: knots on the
    training range, the baseline's intercept absorbed by the basis, the response centred on
    its training mean and shifted back, lambda and lag by least GCV (gamma 1.4)."""
    head = Xs[:, :n_train]
    B = bspline_basis(Xs, n_basis, lo=head.min(-1), hi=head.max(-1))  # (L, T, K)
    others = Z[:, 1:]
    W = np.concatenate([np.broadcast_to(others, (Xs.shape[0],) + others.shape), B], axis=-1)
    P = penalty_block(difference_penalty(n_basis, 2), others.shape[1])
    level = _first_window_level(y, weights, n_train)
    beta, _, _, gcv = penalised_window_fit(W, P, y - level, n_train, weights=weights)
    li = int(np.argmin(gcv))
    return W[li] @ beta[li] + level, li
