"""Screen one hypothesis: one response against one candidate driver, at every lag.

For a driver the real series and its surrogates form one batch (axis 0, the real driver
first), so every statistic below, in sample and out of sample, is computed for the real
driver and for B unrelated series with the same spectrum in the same array operation.
The lag is chosen exactly the same way for the real driver and for every surrogate, so the
surrogate p-values pay for the choice of lag.
"""
from __future__ import annotations

import hashlib
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from lagsieve.formats import short_number
from lagsieve.prep.align import forecast_frame, inverse_variance_weights, shift_batch
from lagsieve.prep.checks import MIN_FORECASTS
from lagsieve.stats import correlation as st
from lagsieve.stats.backtest import (
    BASELINES,
    RollingOriginResult,
    clark_west,
    diebold_mariano,
    retest,
    rolling_origin,
    skill_score,
)
from lagsieve.stats.shapes import shape_word
from lagsieve.stats.splines import fit_pspline, partial_effect, smooth_gain, smooth_p_value
from lagsieve.stats.surrogates import make_surrogates, monte_carlo_p

MIN_YEARS = 6  # overlapping years a lag needs to be screened

#: Columns of the best lag's linear screen row copied into the hypothesis row.
BEST_LAG_COLUMNS = ("lag", "n", "first_year", "last_year", "r", "p_naive", "n_eff", "p_adjusted", "r_detrended",
                    "p_detrended", "r_diff", "p_differenced", "trend_p_response", "trend_p_driver",
                    "driver_trend_r2", "slope", "slope_se", "p_surrogate_lag")
#: Columns of the best lag's spline screen row copied into the hypothesis row.
GAM_COLUMNS = ("edf", "deviance_explained", "p_smooth", "shape")


def driver_rng(seed: int, driver_id: str) -> np.random.Generator:
    """The generator of a driver's surrogates: derived from the study seed and the driver id
    (a stable hash), so results do not depend on the order of drivers or responses."""
    tag = int.from_bytes(hashlib.sha256(driver_id.encode()).digest()[:8], "little")
    return np.random.default_rng(np.random.SeedSequence([int(seed), tag]))


def directed(r: np.ndarray, expected_sign: str) -> np.ndarray:
    """The test statistic of a correlation given the sign stated before the screening:
    r for 'positive', -r for 'negative', |r| for 'any'."""
    if expected_sign == "positive":
        return r
    if expected_sign == "negative":
        return -r
    return np.abs(r)


def surrogate_p(stat: np.ndarray) -> float:
    """(1 + #{surrogate >= observed}) / (B + 1); stat[0] is observed, stat[1:] the surrogates
    (:func:`lagsieve.stats.surrogates.monte_carlo_p`)."""
    s = np.asarray(stat, float)
    return float(monte_carlo_p(s[0], s[1:]))


def min_p_combined(stats: list[np.ndarray]) -> float:
    """Surrogate p of the best of several statistics (Westfall & Young 1993 min-p): each
    statistic is turned into its surrogate p for every member of the batch, the minimum is
    taken across statistics, and the observed minimum is ranked among the surrogates'."""
    ps = []
    for st_ in stats:
        v = np.where(np.isnan(st_), -np.inf, st_)  # a missing statistic supports nothing
        srt = np.sort(v)
        # for every member: 1 + how many OTHER members (the observed one included) reach it
        ge_all = len(v) - np.searchsorted(srt, v, side="left")  # counts the member itself
        ps.append(ge_all / len(v))
    pmin = np.min(np.stack(ps), axis=0)
    return float((1 + np.sum(pmin[1:] <= pmin[0])) / len(pmin))


def driver_batch(table: pd.DataFrame, driver: str, n_surrogates: int, method: str, seed: int,
                 keep_trend: bool = True) -> np.ndarray:
    """(1 + B, n_years) array: the real driver and B surrogates on the table's year axis.

    Surrogates are generated over the driver's observed span only; interior gaps stay gaps.
    """
    x = table[driver].to_numpy(dtype=float)
    obs = np.flatnonzero(~np.isnan(x))
    out = np.full((n_surrogates + 1, len(x)), np.nan)
    out[0] = x
    if len(obs) >= 4 and n_surrogates > 0:
        lo, hi = obs[0], obs[-1] + 1
        out[1:, lo:hi] = make_surrogates(x[lo:hi], n_surrogates, driver_rng(seed, driver), method, keep_trend)
    return out


def backtest_windows(n_rows: int, settings: dict) -> tuple[int, int]:
    """(initial training years, re-test years) of the backtest of a hypothesis with ``n_rows``
    usable years; ``settings`` is the config section ``screen.validation``.

    Defaults when the config is silent: initial = max(10, round(0.4 n)), holdout =
    max(3, round(0.15 n)); the configured values are used as given.
    """
    initial = int(settings.get("initial_years") or max(10, round(0.4 * n_rows)))
    holdout = int(settings.get("holdout_years") or max(3, round(0.15 * n_rows)))
    return initial, holdout


def lagged_driver_batch(table: pd.DataFrame, did: str, lags: list[int], screen: dict) -> np.ndarray:
    """(S, L, n_years): the driver and its surrogates (:func:`driver_batch`) at every lag in years."""
    batch = driver_batch(table, did, int(screen["surrogates"]), screen["surrogate_method"], screen["seed"],
                         screen.get("surrogate_keep_trend", True))
    return np.stack([shift_batch(batch, k) for k in lags], axis=1)


def screen_hypothesis(table: pd.DataFrame, response: dict, driver: dict, lags: list[int], screen: dict,
                      response_se: np.ndarray | None = None, season=None):
    """Screen rows, hypothesis row, forecasts and null statistics for one response x driver.

    ``response_se`` (n_years,) holds the response's standard errors on the table's axis; with
    ``screen['weights'] == 'inverse-variance'`` the forecasting fits are weighted by 1/se^2.
    ``season`` (a :class:`lagsieve.screen.seasonal.SeasonScreen`, for a season response): a
    monthly driver is lagged in seasons and the harmonic baselines join the backtest.
    """
    rid, did = response["id"], driver["id"]
    sign = driver.get("expected_sign", "any")
    use_gam = "gam" in screen["models"]
    in_seasons = season is not None and did in season.drivers
    if in_seasons:
        lags = list(season.lags)
        xl = season.lagged_batch(did, table.index.to_numpy(), screen)
    else:
        xl = lagged_driver_batch(table, did, lags, screen)
    scan = _scan_lags(table, rid, did, sign, lags, xl, screen)
    screen_rows = pd.DataFrame(scan.rows)
    hyp = {"response": rid, "driver": did, "category": driver.get("category", "other"),
           "expected_sign": sign, "model": "linear", "lags_tried": len(lags)}
    if season is not None:
        unit = "season" if in_seasons else "year"
        screen_rows = screen_rows.assign(season=season.season, lag_unit=unit)
        hyp.update(season=season.season, lag_unit=unit)
    if not scan.data:
        hyp.update(status=f"insufficient: {no_lag_reason(table, rid, did, lags, xl[0])}", n=int(screen_rows["n"].max()))
        return screen_rows, hyp, None, None
    max_stat = _in_sample_evidence(hyp, scan, screen_rows, lags, use_gam)
    nulls = [pd.DataFrame({"response": rid, "driver": did, "test": "in-sample", "statistic": "best-lag r (directed)",
                           "value": max_stat[1:], "observed": max_stat[0]})]
    extra = season.baselines if season is not None else None
    fc, oos_null, oos_reason = _out_of_sample(hyp, table, rid, lags, xl, screen, response_se, extra)
    if oos_null is not None:
        nulls.append(oos_null)
    if use_gam:
        g = screen_rows[(screen_rows["model"] == "gam") & (screen_rows["lag"] == hyp["lag"])]
        if len(g):
            for col in GAM_COLUMNS:
                hyp[col] = g.iloc[0].get(col)
    hyp["status"] = f"insufficient: {oos_reason}" if oos_reason else "ok"
    return screen_rows, hyp, fc, pd.concat(nulls, ignore_index=True)


# --------------------------------------------------------------------------- what could not be screened


def constant_value(values: np.ndarray) -> float | None:
    """The value of a series that takes one value in every observed year (at least two); None
    otherwise. Tested exactly (max == min): a constant's mean is not always exact in floating
    point, so its centred values can be 1e-17 noise that a correlation would divide by."""
    v = np.asarray(values, float)
    v = v[~np.isnan(v)]
    return float(v[0]) if len(v) >= 2 and v.max() == v.min() else None


def constant_words(series: str, value: float) -> str:
    """'m:age2 is constant (0.2 every year): correlations are undefined'."""
    return f"{series} is constant ({short_number(value)} every year): correlations are undefined"


def no_lag_reason(table: pd.DataFrame, rid: str, did: str, lags: list[int], lagged: np.ndarray | None = None) -> str:
    """Why no lag of a hypothesis could be screened, in plain words (``lagged``: the real
    driver at every lag, (L, n_years), when it is not the table's column shifted in years)."""
    x = table[did].to_numpy(float) if did in table else lagged[0]
    for sid, v in ((rid, table[rid].to_numpy(float)), (did, x)):
        value = constant_value(v)
        if value is not None:
            return constant_words(sid, value)
    y = table[rid].to_numpy(float)
    if lagged is None:
        lagged = np.stack([shift_batch(x[None, :], k)[0] for k in lags])
    counts = [int((~(np.isnan(y) | np.isnan(xk))).sum()) for xk in lagged]
    if max(counts) == 0:
        return f"{did} has no value in any year of {rid} at the lags tried ({', '.join(map(str, lags))})"
    if max(counts) < MIN_YEARS:
        return f"no lag has {MIN_YEARS} overlapping years (most: {max(counts)})"
    return f"{rid} or {did} is constant over the years they share at every lag: correlations are undefined"


# --------------------------------------------------------------------------- in sample


@dataclass
class _LagScan:
    """In-sample statistics of every lag, for the real driver and its surrogates."""

    rows: list[dict] = field(default_factory=list)  # screen rows: lag x model
    stats: list[np.ndarray] = field(default_factory=list)  # per lag: (S,) directed r
    gam_stats: list[np.ndarray] = field(default_factory=list)  # per lag: (S,) spline gain (with gam)
    data: dict[int, tuple] = field(default_factory=dict)  # lag -> (x, y, years) of the real driver


def _scan_lags(table, rid, did, sign, lags, xl, screen) -> _LagScan:
    """Linear (and spline) statistics at every lag on the years where both series are present
    (``xl``: the driver batch at every lag, (S, L, n_years))."""
    y_full = table[rid].to_numpy(dtype=float)
    years_full = table.index.to_numpy()
    use_gam = "gam" in screen["models"]
    scan = _LagScan()
    for li, k in enumerate(lags):
        xk = xl[:, li]
        ok = ~(np.isnan(y_full) | np.isnan(xk[0]))
        n = int(ok.sum())
        base = {"response": rid, "driver": did, "lag": k, "model": "linear", "n": n,
                "first_year": int(years_full[ok][0]) if n else None,
                "last_year": int(years_full[ok][-1]) if n else None}
        skip = f"fewer than {MIN_YEARS} overlapping years" if n < MIN_YEARS else _constant_pair(
            rid, y_full[ok], did, xk[0, ok])
        if skip:
            scan.rows.append(dict(base, status=f"skipped: {skip}"))
            scan.stats.append(np.full(xl.shape[0], np.nan))
            if use_gam:
                scan.gam_stats.append(np.full(xl.shape[0], np.nan))
            continue
        x, y, yrs = xk[:, ok], y_full[ok], years_full[ok]
        r_all = st.pearson_r(x, y[None, :])
        stat = directed(r_all, sign)
        scan.stats.append(stat)
        scan.data[k] = (x[0], y, yrs)
        if use_gam:
            g_row, g_stat = _gam_lag(x, y, yrs, screen, sign, stat)
            scan.rows.append(dict(base, model="gam", **g_row))
            scan.gam_stats.append(g_stat)
        scan.rows.append(dict(base, **_linear_lag_row(x[0], y, yrs, float(r_all[0]), stat)))
    return scan


def _constant_pair(rid: str, y: np.ndarray, did: str, x: np.ndarray) -> str | None:
    """Why a lag cannot be screened when one series is constant over the shared years."""
    for sid, v in ((rid, y), (did, x)):
        if constant_value(v) is not None:
            return f"{sid} is constant over these years ({short_number(v[0])})"
    return None


def _linear_lag_row(x: np.ndarray, y: np.ndarray, yrs: np.ndarray, r: float, stat: np.ndarray) -> dict:
    """Correlation statistics of the real driver ``x`` at one lag."""
    n = len(y)
    neff = float(st.effective_n(x, y))
    r_det = float(st.detrended_r(x, y, yrs))
    slope, se = st.hac_slope(x, y)
    n_eff_det = st.effective_n(st.detrend(x, yrs), st.detrend(y, yrs))
    (r_ty, p_ty), (r_tx, p_tx) = st.trend_test(y, yrs), st.trend_test(x, yrs)
    return {"r": r, "p_naive": float(st.correlation_p(r, n)), "n_eff": neff,
            "p_adjusted": float(st.correlation_p(r, neff)), "r_detrended": r_det,
            "p_detrended": float(st.correlation_p(r_det, n_eff_det)), "r_diff": float(st.differenced_r(x, y, yrs)),
            "p_differenced": float(st.differenced_p(x, y, yrs)),
            "trend_p_response": float(p_ty), "trend_p_driver": float(p_tx), "driver_trend_r2": float(r_tx**2),
            "slope": float(slope), "slope_se": float(se), "p_surrogate_lag": surrogate_p(stat), "status": "ok"}


def _gam_lag(x, y, yrs, screen, sign, stat) -> tuple[dict, np.ndarray]:
    """Spline screen row and gain statistic at one lag; a skipped row when too few years."""
    try:
        g_row, g_stat = gam_screen_row(x, y, yrs, screen)
    except ValueError as exc:  # too few years for the spline at this lag
        return {"status": f"skipped: {exc}"}, np.full(x.shape[0], np.nan)
    if sign != "any":  # the spline's gain counts only in the direction stated beforehand
        g_stat = g_stat * np.sign(stat)
    return g_row, g_stat


def gam_screen_row(x: np.ndarray, y: np.ndarray, years: np.ndarray, screen: dict) -> tuple[dict, np.ndarray]:
    """In-sample penalised-spline statistics at one lag for the real driver (x[0]) and the
    deviance explained of every surrogate (x[1:]), smoothing chosen by GCV for each."""
    trend = years.astype(float) if screen.get("gam_trend") else None
    batch = smooth_gain(x, y, trend=trend)  # statistics only: every surrogate's gain
    real = fit_pspline(x[0], y, trend=trend)
    grid = np.linspace(np.min(x[0]), np.max(x[0]), 60)
    pe = partial_effect(real, grid)
    scale = float(np.std(y))
    row = {"edf": float(real.edf), "deviance_explained": float(real.deviance_explained),
           "p_smooth": float(smooth_p_value(real)),
           "shape": shape_word(grid, pe.curve, pe.se, scale=scale), "status": "ok"}
    # share of the residual variation of the null model (a, or a + b year) explained by f
    return row, np.asarray(batch.gain, float)


def _in_sample_evidence(hyp: dict, scan: _LagScan, screen_rows: pd.DataFrame, lags, use_gam: bool) -> np.ndarray:
    """Add the best lag's statistics, the surrogate p-values and the stability checks to
    ``hyp``; return the best-lag statistic of every batch member (S,)."""
    stats = np.stack(scan.stats)  # (L, S)
    best_lag = lags[int(np.nanargmax(stats[:, 0]))]
    lin = screen_rows[screen_rows["model"] == "linear"]
    best = lin[lin["lag"] == best_lag].iloc[0].to_dict()
    max_stat = np.nanmax(stats, axis=0)  # best lag within every surrogate, as for the real one
    hyp.update({k: best[k] for k in BEST_LAG_COLUMNS})
    if use_gam:
        gam_max = np.nanmax(np.stack(scan.gam_stats), axis=0)
        hyp["p_surrogate_linear"] = surrogate_p(max_stat)
        hyp["p_surrogate_gam"] = surrogate_p(gam_max)
        hyp["p_surrogate"] = min_p_combined([max_stat, gam_max])
    else:
        hyp["p_surrogate"] = surrogate_p(max_stat)
    hyp.update(_stability(*scan.data[best_lag][:2]))
    return max_stat


def _stability(x: np.ndarray, y: np.ndarray) -> dict:
    """Leave-one-year-out correlations at the chosen lag (changes in time are the break test's,
    :mod:`lagsieve.evidence.stability`)."""
    r = float(st.pearson_r(x, y))
    loo = st.leave_one_out_r(x, y)
    return {
        "loo_max_change": float(np.nanmax(np.abs(loo - r))),
        "loo_sign_flip": bool(np.any(np.sign(loo) != np.sign(r))),
    }


# --------------------------------------------------------------------------- out of sample


def _out_of_sample(hyp: dict, table, rid, lags, xl, screen, response_se, extra=None):
    """Backtest (rolling origin) and re-test of the hypothesis: adds the ``oos_*`` and
    ``retest_*`` entries to ``hyp``; returns (forecasts, null statistics, reason). ``reason``
    says in plain words why the backtest cannot be judged (None when it can); with fewer
    than MIN_FORECASTS forecasts the forecasts and nulls are None too.

    The re-test on the latest years fits the form the forecasts chose (``model``: a line, or
    the penalised spline when the spline won at most origins) on the candidate's baseline,
    and records it in ``retest_model``. ``extra``: more baselines' forecasts on the table's
    years (the harmonic ones of a season response), also beaten by the candidate or not."""
    ff = forecast_frame(table, rid, None, lags, driver_lags=xl[0])
    initial, holdout = backtest_windows(len(ff.years), screen.get("validation", {}))
    hyp.update(oos_initial=initial, oos_n=max(0, len(ff.years) - initial))
    if len(ff.years) - initial < MIN_FORECASTS:
        return None, None, too_few_forecasts(len(ff.years), initial)
    X = xl[:, :, ff.rows]  # (S, L, T)
    models = tuple(m for m in ("linear", "gam") if m in screen["models"])
    w = None
    if screen.get("weights") == "inverse-variance" and response_se is not None:
        w = inverse_variance_weights(response_se[ff.rows], n_ref=initial, y=ff.y)
    ro = rolling_origin(ff.y, ff.ylag, ff.years, X, np.asarray(lags), initial, models=models, weights=w)
    hyp.update(_backtest_summary(ro))
    ms = ro.min_skill
    if extra:
        ms = _extra_baselines(hyp, ro, extra, table.index.to_numpy())
    did = hyp["driver"]
    null = pd.DataFrame({"response": rid, "driver": did, "test": "out-of-sample",
                         "statistic": "skill vs hardest baseline", "value": ms[1:], "observed": ms[0]})
    fc = _forecast_table(ro, rid, did)
    for name, f in (extra or {}).items():
        fc[f"baseline_{name}"] = f[np.searchsorted(table.index.to_numpy(), ro.years)]
    fc["extrapolated"] = _extrapolated(X[0], ro.candidate_lag[0], np.asarray(lags), initial)
    if len(ff.years) - holdout >= max(10, initial // 2):
        rt = retest(ff.y, ff.ylag, ff.years, X[0], np.asarray(lags), holdout, ro.candidate, weights=w,
                    model=hyp.get("model", "linear"))
        hyp["retest_skill"] = rt.min_skill
        hyp["retest_model"] = rt.model
        hyp["retest_years"] = f"{int(rt.years[0])}-{int(rt.years[-1])}"
    reason = None if np.isfinite(hyp["oos_skill"]) else (
        "out-of-sample skill is undefined: a baseline forecasts the response without error")
    return fc, null, reason


def _extra_baselines(hyp: dict, ro: RollingOriginResult, extra: dict, years: np.ndarray) -> np.ndarray:
    """The candidate's skill against further baselines (``extra``: forecasts on ``years``) in
    ``oos_skill_<name>``; where one is harder than the backtest's hardest it becomes the hardest
    (``oos_skill``, ``oos_hardest``, ``oos_p`` by Diebold-Mariano with the HLN correction: the
    candidate is not nested in it) and ``oos_p_surrogate`` is taken against it. Returns the
    skill against the hardest baseline of every batch member, (S,)."""
    ms = ro.min_skill
    mse_c = np.mean((ro.observed[None, :] - ro.candidate_forecast) ** 2, axis=-1)
    for name, f in extra.items():
        fb = f[np.searchsorted(years, ro.years)]
        if not np.all(np.isfinite(fb)):
            hyp[f"oos_skill_{name}"] = np.nan
            continue
        sk = skill_score(mse_c, np.mean((ro.observed - fb) ** 2))
        hyp[f"oos_skill_{name}"] = float(sk[0])
        if sk[0] < ms[0]:
            hyp.update(oos_skill=float(sk[0]), oos_hardest=name,
                       oos_p=diebold_mariano(ro.observed - ro.candidate_forecast[0], ro.observed - fb).p_value,
                       oos_test="diebold-mariano")
        ms = np.minimum(ms, sk)
    hyp["oos_p_surrogate"] = surrogate_p(ms)
    return ms


def too_few_forecasts(usable: int, initial: int) -> str:
    """Why a hypothesis has no out-of-sample forecasts, in plain words."""
    left = max(0, usable - initial)
    return (f"no out-of-sample forecasts (the first training window of {initial} years leaves {left} of "
            f"{usable} usable years to forecast; at least {MIN_FORECASTS} are needed)")


def _backtest_summary(ro: RollingOriginResult) -> dict:
    """The hypothesis entries of the real driver's backtest (``model`` with the spline).

    ``oos_p`` tests the candidate against the hardest baseline, and ``oos_test`` names the
    test. When the candidate is built on that baseline at most origins (``candidate ==
    hardest``: the baseline is the candidate without the driver, a nested comparison) it is
    the Clark & West (2007) adjusted MSPE test; otherwise (a candidate on another baseline,
    not nested) Diebold-Mariano with the Harvey-Leybourne-Newbold (1997) correction."""
    sk = ro.skill
    out = {}
    for b in BASELINES:
        out[f"oos_skill_{b}"] = float(sk[b][0])
        out[f"oos_added_{b}"] = float(ro.added_skill[b][0])
    ms = ro.min_skill
    out["oos_skill"] = float(ms[0])
    out["oos_hardest"] = ro.hardest
    out["oos_baseline"] = ro.candidate
    e_m, e_b = ro.errors()
    if ro.candidate == ro.hardest:
        out["oos_p"], out["oos_test"] = clark_west(e_m, e_b).p_value, "clark-west"
    else:
        out["oos_p"], out["oos_test"] = diebold_mariano(e_m, e_b).p_value, "diebold-mariano"
    out["oos_p_surrogate"] = surrogate_p(ms)
    lag_counts = pd.Series(ro.candidate_lag[0]).value_counts()
    out["oos_lag"] = int(lag_counts.index[0])
    out["oos_lag_share"] = float(lag_counts.iloc[0] / ro.n)
    if ro.chosen_model is not None:
        share_gam = float(np.mean(ro.chosen_model[0] == "gam"))
        out["model"] = "gam" if share_gam > 0.5 else "linear"
        out["oos_model_share"] = share_gam if share_gam > 0.5 else 1.0 - share_gam
        out["gam_gain"] = float(ro.gam_gain[0])
    return out


def _forecast_table(ro: RollingOriginResult, rid: str, did: str) -> pd.DataFrame:
    """The real driver's backtest forecasts, one row per forecast year (the columns gathered
    first and the frame built once)."""
    cols = {"response": rid, "driver": did, "year": ro.years, "observed": ro.observed}
    for b in BASELINES:
        cols[f"baseline_{b}"] = ro.baseline_forecast[b]
        cols[f"model_{b}"] = ro.model_forecast[b][0]
        cols[f"lag_{b}"] = ro.chosen_lag[b][0]
    if ro.chosen_model is not None:
        cols["model_chosen"] = ro.chosen_model[0]
        cols["gam_only"] = ro.gam_forecast[0]
        cols["linear_only"] = ro.linear_forecast[0]
    cols.update(hardest=ro.hardest, candidate=ro.candidate_fc[0], candidate_baseline=ro.candidate_baseline[0],
                candidate_lag=ro.candidate_lag[0])
    return pd.DataFrame(cols)


def _extrapolated(X: np.ndarray, lag_used: np.ndarray, lags: np.ndarray, initial: int) -> np.ndarray:
    """Whether each forecast's driver value lies outside the driver's range in its training
    years (at the lag used for that forecast): such forecasts extrapolate a fitted curve."""
    T = X.shape[-1]
    out = np.zeros(T - initial, bool)
    for j, o in enumerate(range(initial, T)):
        li = int(np.flatnonzero(lags == lag_used[j])[0])
        train = X[li, :o]
        out[j] = X[li, o] < train.min() or X[li, o] > train.max()
    return out
