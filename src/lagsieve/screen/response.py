"""Screen one response against all of its candidate drivers.

For every driver the real series and its surrogates form one batch (axis 0, the real
driver first), so every statistic below, in sample and out of sample, is computed for the
real driver and for B unrelated series with the same spectrum in the same array operation.
The lag is chosen exactly the same way for the real driver and for every surrogate, so the
surrogate p-values pay for the choice of lag.
"""
from __future__ import annotations

import hashlib
from dataclasses import dataclass

import numpy as np
import pandas as pd

from lagsieve.stats import correlation as st
from lagsieve.prep.align import forecast_frame, inverse_variance_weights, shift_batch
from lagsieve.stats.surrogates import make_surrogates
from lagsieve.stats.splines import fit_pspline, partial_effect, shape_word, smooth_p_value
from lagsieve.stats.backtest import BASELINES, diebold_mariano, retest, rolling_origin

MIN_FORECASTS = 5


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
    """(1 + #{surrogate >= observed}) / (B + 1); stat[0] is observed, stat[1:] the surrogates."""
    s = np.asarray(stat, float)
    obs, null = s[0], s[1:]
    if np.isnan(obs):
        return np.nan
    null = null[~np.isnan(null)]
    return float((1 + np.sum(null >= obs)) / (len(null) + 1))


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


@dataclass
class ResponseScreen:
    """Everything screened for one response: tidy frames, one row per unit."""

    screen: pd.DataFrame  # response x driver x lag x model
    hypotheses: pd.DataFrame  # response x driver (before study-wide q-values and grades)
    forecasts: pd.DataFrame  # out-of-sample forecasts of the real driver, by year
    nulls: pd.DataFrame  # surrogate statistics, for the report


def validation_windows(n_rows: int, validation: dict) -> tuple[int, int]:
    """(initial training years, re-test years) for a hypothesis with ``n_rows`` usable years.

    Defaults when the config is silent: initial = max(10, round(0.4 n)), holdout =
    max(3, round(0.15 n)); the configured values are used as given.
    """
    initial = int(validation.get("initial_years") or max(10, round(0.4 * n_rows)))
    holdout = int(validation.get("holdout_years") or max(3, round(0.15 * n_rows)))
    return initial, holdout


def screen_hypothesis(table: pd.DataFrame, response: dict, driver: dict, lags: list[int], screen: dict,
                      response_se: np.ndarray | None = None):
    """Screen rows, hypothesis row, forecasts and null statistics for one response x driver.

    ``response_se`` (n_years,) holds the response's standard errors on the table's axis; with
    ``screen['weights'] == 'inverse-variance'`` the forecasting fits are weighted by 1/se^2.
    """
    rid, did = response["id"], driver["id"]
    sign = driver.get("expected_sign", "any")
    B = int(screen["surrogates"])
    batch = driver_batch(table, did, B, screen["surrogate_method"], screen["seed"],
                         screen.get("surrogate_keep_trend", True))
    y_full = table[rid].to_numpy(dtype=float)
    years_full = table.index.to_numpy()
    rows, stats, per_lag, gam_stats = [], [], {}, []
    use_gam = "gam" in screen["models"]
    for k in lags:
        xk = shift_batch(batch, k)
        ok = ~(np.isnan(y_full) | np.isnan(xk[0]))
        n = int(ok.sum())
        base = {"response": rid, "driver": did, "lag": k, "model": "linear", "n": n,
                "first_year": int(years_full[ok][0]) if n else None,
                "last_year": int(years_full[ok][-1]) if n else None}
        if n < 6:
            rows.append(dict(base, status="skipped: fewer than 6 overlapping years"))
            stats.append(np.full(B + 1, np.nan))
            if use_gam:
                gam_stats.append(np.full(B + 1, np.nan))
            continue
        x, y, yrs = xk[:, ok], y_full[ok], years_full[ok]
        r_all = st.pearson_r(x, y[None, :])
        r = float(r_all[0])
        neff = float(st.effective_n(x[0], y))
        r_det = float(st.detrended_r(x[0], y, yrs))
        slope, se = st.hac_slope(x[0], y)
        stat = directed(r_all, sign)
        stats.append(stat)
        per_lag[k] = (x[0], y, yrs)
        if use_gam:
            try:
                g_row, g_stat = gam_screen_row(x, y, yrs, screen)
                if sign != "any":  # the spline's gain counts only in the direction stated beforehand
                    g_stat = g_stat * np.sign(stat)
            except ValueError as exc:  # too few years for the spline at this lag
                g_row, g_stat = {"status": f"skipped: {exc}"}, np.full(B + 1, np.nan)
            rows.append(dict(base, model="gam", **g_row))
            gam_stats.append(g_stat)
        rows.append(dict(base, r=r, p_naive=float(st.correlation_p(r, n)), n_eff=neff,
                         p_adjusted=float(st.correlation_p(r, neff)),
                         r_detrended=r_det,
                         p_detrended=float(st.correlation_p(r_det, st.effective_n(st.detrend(x[0], yrs), st.detrend(y, yrs)))),
                         r_diff=float(st.differenced_r(x[0], y, yrs)),
                         slope=float(slope), slope_se=float(se),
                         p_surrogate_lag=surrogate_p(stat), status="ok"))
    screen_rows = pd.DataFrame(rows)
    stats = np.stack(stats)  # (L, S)
    hyp = {"response": rid, "driver": did, "category": driver.get("category", "other"),
           "expected_sign": sign, "model": "linear", "lags_tried": len(lags)}
    if not per_lag:
        hyp.update(status="insufficient: no lag has 6 overlapping years", n=int(screen_rows["n"].max()))
        return screen_rows, hyp, None, None
    best_idx = int(np.nanargmax(stats[:, 0]))
    best_lag = lags[best_idx]
    lin = screen_rows[screen_rows["model"] == "linear"]
    best = lin[lin["lag"] == best_lag].iloc[0].to_dict()
    max_stat = np.nanmax(stats, axis=0)  # best lag within every surrogate, as for the real one
    hyp.update({k: best[k] for k in ("lag", "n", "first_year", "last_year", "r", "p_naive", "n_eff",
                                      "p_adjusted", "r_detrended", "p_detrended", "r_diff", "slope", "slope_se", "p_surrogate_lag")})
    if use_gam:
        gam_max = np.nanmax(np.stack(gam_stats), axis=0)
        hyp["p_surrogate_linear"] = surrogate_p(max_stat)
        hyp["p_surrogate_gam"] = surrogate_p(gam_max)
        hyp["p_surrogate"] = min_p_combined([max_stat, gam_max])
    else:
        hyp["p_surrogate"] = surrogate_p(max_stat)
    x, y, yrs = per_lag[best_lag]
    hyp.update(_stability(x, y))
    nulls = [pd.DataFrame({"response": rid, "driver": did, "test": "in-sample", "statistic": "best-lag r (directed)",
                           "value": max_stat[1:], "observed": max_stat[0]})]
    fc = None
    ff = forecast_frame(table, rid, did, lags)
    initial, holdout = validation_windows(len(ff.years), screen.get("validation", {}))
    hyp.update(oos_initial=initial, oos_n=max(0, len(ff.years) - initial))
    if len(ff.years) - initial >= MIN_FORECASTS:
        X = np.stack([shift_batch(batch, k)[:, ff.rows] for k in lags], axis=1)  # (S, L, T)
        models = tuple(m for m in ("linear", "gam") if m in screen["models"])
        w = None
        if screen.get("weights") == "inverse-variance" and response_se is not None:
            w = inverse_variance_weights(response_se[ff.rows], n_ref=initial)
        ro = rolling_origin(ff.y, ff.ylag, ff.years, X, np.asarray(lags), initial, models=models, weights=w)
        sk = ro.skill
        for b in BASELINES:
            hyp[f"oos_skill_{b}"] = float(sk[b][0])
            hyp[f"oos_added_{b}"] = float(ro.added_skill[b][0])
        ms = ro.min_skill
        hyp["oos_skill"] = float(ms[0])
        hyp["oos_hardest"] = ro.hardest
        hyp["oos_baseline"] = ro.candidate
        e_m, e_b = ro.errors()
        hyp["oos_p"] = diebold_mariano(e_m, e_b).p_value
        hyp["oos_p_surrogate"] = surrogate_p(ms)
        lag_counts = pd.Series(ro.candidate_lag[0]).value_counts()
        hyp["oos_lag"] = int(lag_counts.index[0])
        hyp["oos_lag_share"] = float(lag_counts.iloc[0] / ro.n)
        if ro.chosen_model is not None:
            share_gam = float(np.mean(ro.chosen_model[0] == "gam"))
            hyp["model"] = "gam" if share_gam > 0.5 else "linear"
            hyp["oos_model_share"] = share_gam if share_gam > 0.5 else 1.0 - share_gam
            hyp["gam_gain"] = float(ro.gam_gain[0])
        nulls.append(pd.DataFrame({"response": rid, "driver": did, "test": "out-of-sample",
                                   "statistic": "skill vs hardest baseline", "value": ms[1:], "observed": ms[0]}))
        fc = pd.DataFrame({"response": rid, "driver": did, "year": ro.years, "observed": ro.observed})
        for b in BASELINES:
            fc[f"baseline_{b}"] = ro.baseline_forecast[b]
            fc[f"model_{b}"] = ro.model_forecast[b][0]
            fc[f"lag_{b}"] = ro.chosen_lag[b][0]
        if ro.chosen_model is not None:
            fc["model_chosen"] = ro.chosen_model[0]
            fc["gam_only"] = ro.gam_forecast[0]
            fc["linear_only"] = ro.linear_forecast[0]
        fc["hardest"] = ro.hardest
        fc["candidate"] = ro.candidate_fc[0]
        fc["candidate_baseline"] = ro.candidate_baseline[0]
        fc["candidate_lag"] = ro.candidate_lag[0]
        fc["extrapolated"] = _extrapolated(X[0], ro.candidate_lag[0], np.asarray(lags), initial)
        if len(ff.years) - holdout >= max(10, initial // 2):
            rt = retest(ff.y, ff.ylag, ff.years, X[0], np.asarray(lags), holdout, ro.candidate, weights=w)
            hyp["retest_skill"] = rt.min_skill
            hyp["retest_years"] = f"{int(rt.years[0])}-{int(rt.years[-1])}"
    if use_gam:
        g = screen_rows[(screen_rows["model"] == "gam") & (screen_rows["lag"] == hyp["lag"])]
        if len(g):
            for col in ("edf", "deviance_explained", "p_smooth", "shape"):
                hyp[col] = g.iloc[0].get(col)
    hyp["status"] = "ok"
    return screen_rows, hyp, fc, pd.concat(nulls, ignore_index=True)


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


def gam_screen_row(x: np.ndarray, y: np.ndarray, years: np.ndarray, screen: dict) -> tuple[dict, np.ndarray]:
    """In-sample penalised-spline statistics at one lag for the real driver (x[0]) and the
    deviance explained of every surrogate (x[1:]), smoothing chosen by GCV for each."""
    trend = years.astype(float) if screen.get("gam_trend") else None
    fit = fit_pspline(x, y, trend=trend)
    real = fit_pspline(x[0], y, trend=trend)
    grid = np.linspace(np.min(x[0]), np.max(x[0]), 60)
    pe = partial_effect(real, grid)
    scale = float(np.std(y))
    row = {"edf": float(real.edf), "deviance_explained": float(real.deviance_explained),
           "p_smooth": float(smooth_p_value(real)),
           "shape": shape_word(grid, pe.curve, pe.se, scale=scale), "status": "ok"}
    # share of the residual variation of the null model (a, or a + b year) explained by f
    gain = 1.0 - fit.rss / fit.rss_null
    return row, np.asarray(gain, float)


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


def _stability(x: np.ndarray, y: np.ndarray, window: int = 15) -> dict:
    """Leave-one-year-out, split-half and rolling-window correlations at the chosen lag."""
    r = float(st.pearson_r(x, y))
    loo = st.leave_one_out_r(x, y)
    h = len(x) // 2
    win = st.windowed_r(x, y, window)
    strong_opposite = (np.sign(win) != np.sign(r)) & (np.abs(win) >= 0.3)
    return {
        "loo_max_change": float(np.nanmax(np.abs(loo - r))),
        "loo_sign_flip": bool(np.any(np.sign(loo) != np.sign(r))),
        "r_first_half": float(st.pearson_r(x[:h], y[:h])) if h >= 5 else np.nan,
        "r_second_half": float(st.pearson_r(x[h:], y[h:])) if len(x) - h >= 5 else np.nan,
        "window_sign_flip": bool(strong_opposite.any()) if win.size else False,
    }


def _screen_one(table, response, driver, lags, screen, se):
    """screen_hypothesis with a numerical failure turned into a ``failed: <reason>`` row."""
    rid = response["id"]
    try:
        return screen_hypothesis(table, response, driver, lags, screen, se)
    except (np.linalg.LinAlgError, ValueError, FloatingPointError, ZeroDivisionError) as exc:
        s = pd.DataFrame([{"response": rid, "driver": driver["id"], "lag": k, "model": "linear",
                           "status": f"failed: {exc}"} for k in lags])
        h = {"response": rid, "driver": driver["id"], "category": driver.get("category"),
             "expected_sign": driver.get("expected_sign"), "status": f"failed: {exc}"}
        return s, h, None, None


def _screen_one_packed(args):
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1):
        return _screen_one(*args)


def screen_response(table: pd.DataFrame, study, response_id: str, se_table: pd.DataFrame | None = None,
                    workers: int = 1) -> ResponseScreen:
    """Screen one response against every driver configured for it.

    A numerical failure inside one hypothesis is recorded in its row's ``status`` and the
    rest of the response is still screened. With ``workers > 1`` the drivers are screened in
    that many processes; every random draw is keyed by the driver (``driver_rng``), so the
    results are identical to a sequential run.
    """
    response = next(r for r in study.responses if r["id"] == response_id)
    se = None if se_table is None or response_id not in se_table else se_table[response_id].to_numpy(float)
    tasks = [(table, response, d, study.lags_for(d), study.screen, se) for d in study.drivers_for(response_id)]
    if workers > 1 and len(tasks) > 1:
        import multiprocessing as mp
        from concurrent.futures import ProcessPoolExecutor

        # longest first (years observed x lags, a proxy of the work), so that the last task to
        # start is a short one and the workers finish close together; results keep the order
        cost = [int(table[t[2]["id"]].notna().sum()) * len(t[3]) for t in tasks]
        order = sorted(range(len(tasks)), key=lambda i: -cost[i])
        with ProcessPoolExecutor(max_workers=min(workers, len(tasks)), mp_context=mp.get_context("fork")) as ex:
            done = list(ex.map(_screen_one_packed, [tasks[i] for i in order]))
        results = [None] * len(tasks)
        for i, r in zip(order, done):
            results[i] = r
    else:
        results = [_screen_one(*t) for t in tasks]
    screens = [r[0] for r in results]
    hyps = [r[1] for r in results]
    fcs = [r[2] for r in results if r[2] is not None]
    nulls = [r[3] for r in results if r[3] is not None]
    cat = lambda frames: pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()
    return ResponseScreen(cat(screens), pd.DataFrame(hyps), cat(fcs), cat(nulls))
