"""Tests for lagsieve.stats.backtest (rolling-origin forecasts, baselines, skill, DM-HLN, re-test)
and for the out-of-sample parts of lagsieve.screen.hypothesis.screen_hypothesis. Clark-West, the
trend + AR(1) baseline's own checks and the spline re-test: tests/test_forecast_tests.py.

Outside sources named beside each check:
- Diebold & Mariano 1995, J. Bus. Econ. Stat. 13:253-263, with the small-sample correction of
  Harvey, Leybourne & Newbold 1997, Int. J. Forecasting 13:281-291: for h = 1 it reduces to the
  one-sample t-test of the loss differential, checked against scipy.stats.ttest_1samp.
- Every rolling-origin and re-test forecast is recomputed with statsmodels.api.OLS fits
  (fit on the training rows, choose the lag with the smallest training RSS, predict).
- Rolling-origin evaluation: Tashman 2000, Int. J. Forecasting 16:437-450.
- Selection bias and spurious trend correlation: common practice (the reason the tool exists).
"""
from __future__ import annotations

import copy

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from helpers import ar1
from scipy import stats

from lagsieve.evidence import grading as evidence
from lagsieve.io import config
from lagsieve.prep.align import forecast_frame, shift_batch
from lagsieve.screen import hypothesis
from lagsieve.stats import backtest
from lagsieve.stats import correlation as st


def _ar1(rng, n, phi, burn=50):
    return ar1(rng, n, phi, burn)


def _screen(**kw):
    sc = copy.deepcopy(config.SCREEN_DEFAULTS)
    sc.update(kw)
    return sc


def _table(years, **cols):
    return pd.DataFrame(cols, index=pd.Index(np.asarray(years), name="year"))


# ----------------------------------------------------------------- Diebold-Mariano-HLN
def test_dm_hln_h1_equals_one_sample_t_test():
    # For h = 1: DM = dbar / sqrt(gamma0 / n), gamma0 = sum (d - dbar)^2 / n, and the HLN factor
    # is sqrt((n + 1 - 2 + 0) / n) = sqrt((n - 1) / n). Hence DM_HLN = dbar / sqrt(s^2 / n) with
    # s^2 the (n - 1)-divisor variance: the one-sample t statistic of d, on n - 1 df.
    rng = np.random.default_rng(41)
    for n in (8, 20, 45):
        e_m = rng.normal(0, 1.0, n)
        e_b = rng.normal(0, 1.3, n)
        d = e_b**2 - e_m**2
        res = backtest.diebold_mariano(e_m, e_b, h=1)
        ref = stats.ttest_1samp(d, 0.0, alternative="greater")  # scipy.stats.ttest_1samp
        assert res.n == n
        assert res.statistic == pytest.approx(ref.statistic, rel=1e-10, abs=1e-10)
        assert res.p_value == pytest.approx(ref.pvalue, rel=1e-10, abs=1e-10)
        two = backtest.diebold_mariano(e_m, e_b, h=1, alternative="two-sided")
        ref2 = stats.ttest_1samp(d, 0.0)
        assert two.p_value == pytest.approx(ref2.pvalue, rel=1e-10, abs=1e-10)


def test_dm_hln_h2_against_hand_computation():
    # Harvey, Leybourne & Newbold 1997 (Int. J. Forecasting 13:281-291), eq. for the modified
    # statistic (from memory): DM* = DM * sqrt((n + 1 - 2h + h (h - 1) / n) / n), with
    # DM = dbar / sqrt(V / n), V = gamma0 + 2 gamma1 for h = 2, gamma_k = sum (d_t - dbar)(d_{t-k} - dbar) / n,
    # compared with Student t on n - 1 df. Computed with explicit loops.
    rng = np.random.default_rng(42)
    n = 30
    e_m = rng.normal(0, 1.0, n)
    e_b = rng.normal(0.3, 1.2, n)
    d = [e_b[t] ** 2 - e_m[t] ** 2 for t in range(n)]
    dbar = sum(d) / n
    g0 = sum((d[t] - dbar) ** 2 for t in range(n)) / n
    g1 = sum((d[t] - dbar) * (d[t - 1] - dbar) for t in range(1, n)) / n
    h = 2
    dm = dbar / np.sqrt((g0 + 2 * g1) / n)
    dm_hln = dm * np.sqrt((n + 1 - 2 * h + h * (h - 1) / n) / n)
    p = stats.t.sf(dm_hln, n - 1)
    res = backtest.diebold_mariano(e_m, e_b, h=2)
    assert res.statistic == pytest.approx(dm_hln, rel=1e-10)
    assert res.p_value == pytest.approx(p, rel=1e-10)


def test_dm_degenerate_cases():
    assert np.isnan(backtest.diebold_mariano(np.ones(2), np.ones(2)).statistic)
    assert np.isnan(backtest.diebold_mariano(np.ones(10), np.ones(10)).p_value)  # zero variance
    with pytest.raises(ValueError):
        backtest.diebold_mariano(np.ones(5), np.arange(5.0), alternative="less")


# ----------------------------------------------------------------- rolling origin vs statsmodels
def _design_raw(b, ylag, year):
    if b == "climatology":
        return np.ones((len(year), 1))
    if b == "persistence":
        return np.column_stack([np.ones(len(year)), ylag])
    if b == "trend_ar1":  # y_t = a + b t + u_t, u_t = phi u_{t-1} + e_t  <=>  y_t = c0 + c1 t + phi y_{t-1} + e_t
        return np.column_stack([np.ones(len(year)), ylag, year.astype(float)])
    return np.column_stack([np.ones(len(year)), year.astype(float)])


def _reference_rolling(y, ylag, year, X, lags, initial, which):
    """Explicit loop of statsmodels OLS fits: for each origin, baseline and driver, fit on the
    training rows, pick the lag with the smallest training RSS and predict the next row."""
    T = len(y)
    base, model, chosen = {}, {}, {}
    for b in backtest.BASELINES:
        Z = _design_raw(b, ylag, year)
        base[b] = np.array([sm.OLS(y[:i], Z[:i]).fit().predict(Z[i:i + 1])[0] for i in range(initial, T)])
        model[b] = np.zeros((len(which), T - initial))
        chosen[b] = np.zeros((len(which), T - initial), int)
        for si, s in enumerate(which):
            for oi, i in enumerate(range(initial, T)):
                best = None
                for li, lag in enumerate(lags):
                    W = np.column_stack([Z, X[s, li]])
                    fit = sm.OLS(y[:i], W[:i]).fit()
                    if best is None or fit.ssr < best[0]:
                        best = (fit.ssr, lag, fit.predict(W[i:i + 1])[0])
                chosen[b][si, oi] = best[1]
                model[b][si, oi] = best[2]
    return base, model, chosen


def _forecast_inputs(seed, n=36, n_surr=6):
    """A response with a lag-1 driver effect, a trend, and driver surrogates, on a table."""
    rng = np.random.default_rng(seed)
    years = np.arange(1981, 1981 + n)
    x = _ar1(rng, n, 0.5)
    y = np.r_[0.0, 0.7 * x[:-1]] + 0.04 * np.arange(n) + 0.6 * rng.normal(size=n)
    table = _table(years, y=y, x=x)
    lags = [0, 1, 2]
    ff = forecast_frame(table, "y", "x", lags)
    batch = hypothesis.driver_batch(table, "x", n_surr, "phase", seed=3)
    X = np.stack([shift_batch(batch, k)[:, ff.rows] for k in lags], axis=1)  # (S, L, T)
    return ff, X, np.asarray(lags)


def test_rolling_origin_matches_statsmodels_loop():
    ff, X, lags = _forecast_inputs(51)
    initial = 12
    ro = backtest.rolling_origin(ff.y, ff.ylag, ff.years, X, lags, initial)
    which = [0, 1, 2, 3]  # the real driver and three surrogates
    base, model, chosen = _reference_rolling(ff.y, ff.ylag, ff.years, X, lags, initial, which)
    assert ro.n == len(ff.y) - initial == 22
    np.testing.assert_array_equal(ro.years, ff.years[initial:])
    np.testing.assert_array_equal(ro.observed, ff.y[initial:])
    scale = np.abs(ff.y).max()
    for b in backtest.BASELINES:
        np.testing.assert_allclose(ro.baseline_forecast[b], base[b], rtol=1e-8, atol=1e-8 * scale)
        np.testing.assert_allclose(ro.model_forecast[b][which], model[b], rtol=1e-8, atol=1e-8 * scale)
        np.testing.assert_array_equal(ro.chosen_lag[b][which], chosen[b])
    # the lag really varies between surrogates / origins somewhere, so the choice is exercised
    assert len(np.unique(np.concatenate([chosen[b].ravel() for b in backtest.BASELINES]))) > 1

    # skills from the reference forecasts
    obs = ff.y[initial:]
    mse_b = {b: np.mean((obs - base[b]) ** 2) for b in backtest.BASELINES}
    hardest = min(mse_b, key=mse_b.get)
    assert ro.hardest == hardest
    for b in backtest.BASELINES:
        mse_m = np.mean((obs[None, :] - model[b]) ** 2, axis=-1)
        np.testing.assert_allclose(ro.added_skill[b][which], 1 - mse_m / mse_b[b], rtol=1e-8, atol=1e-10)
    # the candidate: at every origin the baseline + lag with the least GCV = n RSS / (n - 1.4 p)^2
    # on the training rows (the splines' GCV with gamma 1.4, edf = p), from statsmodels OLS fits
    cfc = np.empty((len(which), ro.n))
    for si, w in enumerate(which):
        for oi, i in enumerate(range(initial, len(ff.y))):
            best = None
            for b in backtest.BASELINES:
                for li in range(len(lags)):
                    Z = backtest.baseline_design(b, ff.ylag, ff.years.astype(float))
                    W = np.column_stack([Z, X[w, li]])
                    fit = sm.OLS(ff.y[:i], W[:i]).fit()
                    gcv = i * fit.ssr / (i - 1.4 * W.shape[1]) ** 2
                    if best is None or gcv < best[0]:
                        best = (gcv, float(W[i] @ fit.params))
            cfc[si, oi] = best[1]
    np.testing.assert_allclose(ro.candidate_fc[which], cfc, rtol=1e-8, atol=1e-8 * scale)
    mse_c = np.mean((obs[None, :] - cfc) ** 2, axis=-1)
    for b in backtest.BASELINES:
        np.testing.assert_allclose(ro.skill[b][which], 1 - mse_c / mse_b[b], rtol=1e-8, atol=1e-10)
    # the candidate's skill against the hardest baseline is the smallest of its skills
    sk = np.stack([ro.skill[b] for b in backtest.BASELINES])
    np.testing.assert_allclose(sk.min(axis=0), ro.min_skill, rtol=1e-12, atol=1e-14)
    np.testing.assert_allclose(ro.skill[hardest], ro.min_skill, rtol=1e-12, atol=1e-14)
    e_m, e_b = ro.errors(0)
    np.testing.assert_allclose(e_m, obs - cfc[0], atol=1e-8 * scale)
    np.testing.assert_allclose(e_b, obs - base[hardest], atol=1e-8 * scale)


def test_rolling_origin_offset_response_matches_statsmodels():
    # a response far from zero (e.g. a level of 600 units) stresses the cumulative-sum solve
    ff, X, lags = _forecast_inputs(52, n=30, n_surr=2)
    y = ff.y + 600.0
    ylag = ff.ylag + 600.0
    ro = backtest.rolling_origin(y, ylag, ff.years, X, lags, 10)
    base, model, chosen = _reference_rolling(y, ylag, ff.years, X, lags, 10, [0, 1])
    for b in backtest.BASELINES:
        np.testing.assert_allclose(ro.baseline_forecast[b], base[b], rtol=1e-8)
        np.testing.assert_allclose(ro.model_forecast[b][[0, 1]], model[b], rtol=1e-8)
        np.testing.assert_array_equal(ro.chosen_lag[b][[0, 1]], chosen[b])


def test_rolling_origin_rejects_bad_initial():
    ff, X, lags = _forecast_inputs(53, n=20, n_surr=1)
    with pytest.raises(ValueError):
        backtest.rolling_origin(ff.y, ff.ylag, ff.years, X, lags, len(ff.y))
    with pytest.raises(ValueError):
        backtest.rolling_origin(ff.y, ff.ylag, ff.years, X, lags, 2)


# ----------------------------------------------------------------- no look-ahead
def _world(seed, years):
    rng = np.random.default_rng(seed)
    n = len(years)
    x = _ar1(rng, n, 0.5)
    y = np.r_[0.0, 0.6 * x[:-1]] + 0.03 * np.arange(n) + 0.7 * rng.normal(size=n)
    return _table(years, resp=y, drv=x)


def test_no_look_ahead_screen_hypothesis_bitwise():
    years = np.arange(1980, 2020)
    T = 2010
    a = _world(61, years)
    b = a.copy()
    late = b.index > T
    rng = np.random.default_rng(62)
    b.loc[late, "resp"] = rng.normal(50.0, 20.0, late.sum())  # every later value changed
    b.loc[late, "drv"] = rng.normal(-30.0, 10.0, late.sum())
    assert (a.loc[late] != b.loc[late]).all().all()
    sc = _screen(surrogates=49, lags=[0, 1, 2], validation={"initial_years": 12, "holdout_years": 5})
    args = ({"id": "resp"}, {"id": "drv"}, [0, 1, 2], sc)
    _, ha, fa, _ = hypothesis.screen_hypothesis(a, *args)
    _, hb, fb, _ = hypothesis.screen_hypothesis(b, *args)
    ea, eb = fa[fa.year <= T], fb[fb.year <= T]
    assert len(ea) == T - (1982 + 12) + 1 == 17  # forecast rows start at 1994
    cols = [f"{k}_{bl}" for k in ("baseline", "model", "lag") for bl in backtest.BASELINES]
    for c in cols + ["observed", "year"]:
        assert np.array_equal(ea[c].to_numpy(), eb[c].to_numpy()), c
    # the later years did change, so the test can see a leak if one existed
    assert not np.array_equal(fa[fa.year > T]["model_trend"].to_numpy(), fb[fb.year > T]["model_trend"].to_numpy())
    assert ha["r"] != hb["r"]


def test_no_look_ahead_rolling_origin_bitwise():
    ff, X, lags = _forecast_inputs(63, n=40, n_surr=8)
    # Same memory layout for both runs: numpy's reductions (the mean and sd of the first rows)
    # may round differently for a strided and a contiguous array (1 ulp), which is not a leak.
    X = np.ascontiguousarray(X)
    cut = 28  # rows > cut are changed
    initial = 12
    ra = backtest.rolling_origin(ff.y, ff.ylag, ff.years, X, lags, initial)
    rng = np.random.default_rng(64)
    y2, X2 = ff.y.copy(), X.copy()
    y2[cut + 1:] = rng.normal(10, 5, len(y2) - cut - 1)
    ylag2 = np.r_[ff.ylag[:1], y2[:-1]]
    np.testing.assert_array_equal(ylag2[:cut + 1], ff.ylag[:cut + 1])
    X2[..., cut + 1:] = rng.normal(-4, 3, X2[..., cut + 1:].shape)
    rb = backtest.rolling_origin(y2, ylag2, ff.years, X2, lags, initial)
    k = cut + 1 - initial  # forecasts of rows initial..cut
    for b in backtest.BASELINES:
        assert np.array_equal(ra.baseline_forecast[b][:k], rb.baseline_forecast[b][:k])
        assert np.array_equal(ra.model_forecast[b][:, :k], rb.model_forecast[b][:, :k])
        assert np.array_equal(ra.chosen_lag[b][:, :k], rb.chosen_lag[b][:, :k])
        assert not np.array_equal(ra.model_forecast[b][:, k:], rb.model_forecast[b][:, k:])


def test_forecast_of_a_year_ignores_that_years_response():
    # The forecast of row i may use the driver at row i (lag 0 is a same-year driver) but never
    # the response y_i itself: change only the response from row c on and every forecast of
    # rows <= c must stay bitwise the same (ylag of row c + 1 is y_c, so row c + 1 may move).
    ff, X, lags = _forecast_inputs(65, n=40, n_surr=4)
    X = np.ascontiguousarray(X)
    c, initial = 25, 12
    ra = backtest.rolling_origin(ff.y, ff.ylag, ff.years, X, lags, initial)
    y2 = ff.y.copy()
    y2[c:] += np.random.default_rng(66).normal(5.0, 2.0, len(y2) - c)
    ylag2 = np.r_[ff.ylag[:1], y2[:-1]]
    rb = backtest.rolling_origin(y2, ylag2, ff.years, X, lags, initial)
    k = c + 1 - initial  # forecasts of rows initial..c
    for b in backtest.BASELINES:
        assert np.array_equal(ra.baseline_forecast[b][:k], rb.baseline_forecast[b][:k])
        assert np.array_equal(ra.model_forecast[b][:, :k], rb.model_forecast[b][:, :k])
    # and the same through screen_hypothesis, on the table
    years = np.arange(1980, 2020)
    a = _world(67, years)
    b2 = a.copy()
    b2.loc[b2.index >= 2005, "resp"] += 3.0
    sc = _screen(surrogates=19, lags=[0, 1, 2], validation={"initial_years": 12, "holdout_years": 5})
    fa = hypothesis.screen_hypothesis(a, {"id": "resp"}, {"id": "drv"}, [0, 1, 2], sc)[2]
    fb = hypothesis.screen_hypothesis(b2, {"id": "resp"}, {"id": "drv"}, [0, 1, 2], sc)[2]
    for col in [f"model_{bl}" for bl in backtest.BASELINES] + [f"baseline_{bl}" for bl in backtest.BASELINES]:
        assert np.array_equal(fa.loc[fa.year <= 2005, col].to_numpy(), fb.loc[fb.year <= 2005, col].to_numpy())


def test_surrogate_p_pays_for_the_lag_choice():
    # p_surrogate ranks the real driver's best-lag |r| among the surrogates' best-lag |r|
    # (each surrogate picks its own best lag), recomputed here from the same surrogate batch;
    # p_surrogate_lag (one row per lag) does not pay for the choice.
    # Independent AR(1) series (seed 75): measured best lag 0 with p_surrogate_lag 0.03 at that
    # lag, but p_surrogate 0.06 once the choice among three lags is paid for (lag-selected).
    years = np.arange(1980, 2016)
    rng = np.random.default_rng(75)
    table = _table(years, resp=_ar1(rng, 36, 0.5), drv=_ar1(rng, 36, 0.5))
    lags = [0, 1, 2]
    sc = _screen(surrogates=99, lags=lags)
    rows, h, _, _ = hypothesis.screen_hypothesis(table, {"id": "resp"}, {"id": "drv"}, lags, sc)
    batch = hypothesis.driver_batch(table, "drv", 99, "phase", sc["seed"])
    y = table["resp"].to_numpy()
    per_lag = []
    for k in lags:
        xk = shift_batch(batch, k)
        ok = ~np.isnan(xk[0])
        per_lag.append(np.abs(st.pearson_r(xk[:, ok], y[ok][None, :])))
    per_lag = np.array(per_lag)  # (L, 1 + B)
    best = per_lag.max(axis=0)
    expected = (1 + np.sum(best[1:] >= best[0])) / 100
    assert h["p_surrogate"] == pytest.approx(expected, abs=1e-12)
    for li, k in enumerate(lags):
        got = rows.loc[rows.lag == k, "p_surrogate_lag"].iloc[0]
        assert got == pytest.approx((1 + np.sum(per_lag[li, 1:] >= per_lag[li, 0])) / 100, abs=1e-12)
    assert h["lag"] == lags[int(np.argmax(per_lag[:, 0]))]
    chosen = rows.loc[rows.lag == h["lag"], "p_surrogate_lag"].iloc[0]
    assert (chosen, h["p_surrogate"]) == (pytest.approx(0.03), pytest.approx(0.06))
    ev = evidence.build_evidence(pd.DataFrame([h]), table, sc)
    assert "lag-selected" in ev["flags"].iloc[0]


# ----------------------------------------------------------------- selection bias
N_WORLDS = 20
N_CAND = 30


def _noise_world(seed, n=40):
    rng = np.random.default_rng(1000 + seed)
    cols = {"y": _ar1(rng, n, 0.5)}
    for i in range(N_CAND):
        cols[f"d{i:02d}"] = _ar1(rng, n, 0.5)
    return _table(np.arange(1980, 1980 + n), **cols)


def _best_in_sample(table, lags, last_row):
    """The candidate and lag with the largest |r| over response rows 2..last_row-1 (the rows the
    forecast frame keeps with lags up to 2); the tool's own in-sample statistic (max over lags)."""
    y = table["y"].to_numpy()
    best = (-1.0, None)
    for d in table.columns.drop("y"):
        x = table[d].to_numpy()
        for k in lags:
            r = abs(float(st.pearson_r(x[2 - k:last_row - k], y[2:last_row])))
            best = max(best, (r, d))
    return best


def test_selection_bias_best_of_30_noise_drivers():
    # 30 AR(1) (phi 0.5) noise candidates against an AR(1) response, n = 40, 20 seeded worlds.
    # The first forecast origin trains on 15 rows (1982-1996).
    #
    # (a) Chosen on the years before the first forecast origin (so the forecasts are truly out
    #     of sample): best in-sample |r| 0.62..0.86 (min 0.618), yet the mean out-of-sample
    #     skill is -0.29, no world shows positive skill, and none is graded strong
    #     (12 none, 8 spurious-trend).
    # (b) Chosen on all 40 years (the forecast years took part in the choice): best |r|
    #     0.41..0.60 (min 0.407 > 0.35), mean skill +0.04 with 9/20 positive (selection leaks
    #     into the "out-of-sample" years), and graded on its own 3 of 20 come out strong. Graded together with the other
    #     29 hypotheses of their world, as the tool does, none is strong (q >= 0.3): see
    #     test_selection_bias_all_candidates_graded_together.
    lags = [0, 1, 2]
    sc = _screen(surrogates=99, lags=lags, validation={"initial_years": 15})
    r_a, sk_a, g_a, r_b, sk_b = [], [], [], [], []
    for seed in range(N_WORLDS):
        table = _noise_world(seed)
        for last_row, rs, sks, gs in ((2 + 15, r_a, sk_a, g_a), (40, r_b, sk_b, None)):
            r, d = _best_in_sample(table, lags, last_row)
            _, h, _, _ = hypothesis.screen_hypothesis(table, {"id": "y"}, {"id": d}, lags, sc)
            rs.append(r)
            sks.append(h["oos_skill"])
            if gs is not None:
                ev = evidence.build_evidence(pd.DataFrame([h]), table, sc)
                gs.append(ev["grade"].iloc[0])
    assert min(r_a) > 0.6 and min(r_b) > 0.35
    assert np.mean(sk_a) <= 0.0  # measured -0.29
    assert sum(s > 0 for s in sk_a) == 0
    assert "strong" not in g_a
    assert np.mean(sk_b) > np.mean(sk_a)  # measured +0.04 vs -0.29: the leak of full-sample choice
    assert np.mean(sk_b) < 0.1


def test_selection_bias_all_candidates_graded_together():
    # The three worlds where the full-sample best candidate, graded on its own, came out
    # strong with three baselines (seeds 11, 14, 16): graded together with all 30 candidates, the
    # BH q-values (Benjamini & Hochberg 1995, JRSS B 57:289-300) stop any of them being strong.
    # Measured min q = 0.30 in each world (the smallest surrogate p with 99 surrogates is 0.01).
    # Alone, with the fourth baseline (trend + AR(1)), seeds 11 and 14 are still strong and seed 16
    # moderate (its re-test skill against the hardest baseline fell from +0.07 to -0.06).
    lags = [0, 1, 2]
    sc = _screen(surrogates=99, lags=lags, validation={"initial_years": 15})
    for seed in (11, 14, 16):
        table = _noise_world(seed)
        hyps = [hypothesis.screen_hypothesis(table, {"id": "y"}, {"id": d}, lags, sc)[1]
                for d in table.columns.drop("y")]
        ev = evidence.build_evidence(pd.DataFrame(hyps), table, sc)
        assert len(ev) == N_CAND
        assert (ev["grade"] != "strong").all()
        assert ev["q_value"].min() >= 0.25
        # ...while the best one alone would have been strong
        _, d = _best_in_sample(table, lags, 40)
        alone = evidence.build_evidence(ev[ev.driver == d].drop(columns=["q_value", "grade", "flags", "rank",
                                                                      "summary", "collinear_with"]), table, sc)
        assert alone["grade"].iloc[0] in ("strong", "moderate")


# ----------------------------------------------------------------- true effect and shared trend
def test_true_lagged_effect_beats_all_baselines():
    # y_t = 0.8 x_{t-1} + 0.5 e_t + 0.05 t, x AR(1) phi 0.3, n = 40, 20 seeded replicates.
    # Measured: lag 1 chosen in 20/20; skill > 0 against all three baselines in 20/20
    # (min over replicates of the candidate's smallest skill 0.17); 14/20 graded strong, 6 moderate.
    lags = [0, 1, 2]
    sc = _screen(surrogates=99, lags=lags)
    n = 40
    years = np.arange(1980, 1980 + n)
    min_sk, grades, chosen = [], [], []
    for seed in range(20):
        rng = np.random.default_rng(2000 + seed)
        x = _ar1(rng, n + 1, 0.3)
        y = 0.8 * x[:-1] + 0.5 * rng.normal(size=n) + 0.05 * np.arange(n)
        table = _table(years, y=y, x=x[1:])
        _, h, _, _ = hypothesis.screen_hypothesis(table, {"id": "y"}, {"id": "x"}, lags, sc)
        ev = evidence.build_evidence(pd.DataFrame([h]), table, sc)
        skills = [h[f"oos_skill_{b}"] for b in backtest.BASELINES]
        assert all(s > 0 for s in skills), (seed, skills)
        assert h["oos_skill"] == pytest.approx(min(skills), abs=1e-12)
        min_sk.append(min(skills))
        grades.append(ev["grade"].iloc[0])
        chosen.append(h["lag"])
    assert chosen.count(1) == 20
    assert min(min_sk) > 0.1
    assert grades.count("strong") >= 12
    assert set(grades) <= {"strong", "moderate"}


@pytest.mark.parametrize("phi, min_share_skill, min_share_added", [(0.0, 0.7, 0.7), (0.4, 0.55, 0.7)])
def test_shared_trend_only_has_no_skill_against_trend_baseline(phi, min_share_skill, min_share_added):
    # x and y share a linear trend 0.06 t plus independent AR(1) noise (0.7 sd units), n = 40,
    # 30 seeded replicates. Naively the correlation looks strong, but against the trend
    # baseline the driver adds nothing in most replicates. Measured (30 replicates):
    #   phi 0.0: r 0.38..0.71, p_naive < 0.05 in 30/30; oos_skill_trend <= 0 in 23/30 (77%);
    #            oos_added_trend <= 0 in 24/30 (80%); graded spurious-trend 26, moderate 3, strong 1.
    #   phi 0.4: r 0.22..0.73, p_naive < 0.05 in 27/30; oos_skill_trend <= 0 in 18/30 (60%);
    #            oos_added_trend <= 0 in 23/30 (77%); spurious-trend 24, none 3, moderate 1,
    #            weak 1, strong 1.
    # Surrogates keep the driver's trend, so the surrogate p is not fooled by the shared trend:
    # p_surrogate <= 0.05 in 4/30 (phi 0) and 3/30 (phi 0.4); with surrogate_keep_trend off it
    # would be 21/30 and 15/30 (measured).
    # With phi 0.4 persistence is the hardest baseline in half the replicates; the candidate is
    # then persistence + driver, and its skill against the trend baseline is partly the skill of
    # persistence over trend, hence the lower share for oos_skill_trend than for oos_added_trend
    # (what the driver adds to the trend baseline itself).
    lags = [0, 1, 2]
    sc = _screen(surrogates=99, lags=lags)
    n = 40
    years = np.arange(1980, 1980 + n)
    sk_trend, added, grades, p_naive, p_surr = [], [], [], [], []
    for seed in range(30):
        rng = np.random.default_rng(4000 + seed)
        tr = 0.06 * np.arange(n)
        y = tr + 0.7 * _ar1(rng, n, phi)
        x = tr + 0.7 * _ar1(rng, n, phi)
        table = _table(years, y=y, x=x)
        _, h, _, _ = hypothesis.screen_hypothesis(table, {"id": "y"}, {"id": "x"}, lags, sc)
        ev = evidence.build_evidence(pd.DataFrame([h]), table, sc)
        sk_trend.append(h["oos_skill_trend"])
        added.append(h["oos_added_trend"])
        grades.append(ev["grade"].iloc[0])
        p_naive.append(h["p_naive"])
        p_surr.append(h["p_surrogate"])
    assert np.mean(np.array(p_naive) < 0.05) >= 0.85
    assert np.mean(np.array(p_surr) <= 0.05) <= 0.2
    assert np.mean(np.array(sk_trend) <= 0) >= min_share_skill
    assert np.mean(np.array(added) <= 0) >= min_share_added
    # With one reason per verdict and four baselines (measured): phi 0.0 spurious-trend 26,
    # no-forecast-skill 2, strong 1, moderate 1; phi 0.4 spurious-trend 19, autocorrelation-only 5,
    # none 3, no-forecast-skill 2, moderate 1. Every set-aside reason counts as set aside here.
    assert grades.count("spurious-trend") >= 17
    assert sum(g not in ("strong", "moderate", "weak") for g in grades) >= 26
    assert grades.count("strong") <= 2  # a 5% false-positive rate allows about 1.5 of 30


# ----------------------------------------------------------------- re-test
@pytest.mark.parametrize("baseline", ["trend", "persistence", "climatology", "trend_ar1"])
def test_retest_matches_manual_statsmodels(baseline):
    ff, X, lags = _forecast_inputs(71, n=34, n_surr=1)
    holdout = 6
    rt = backtest.retest(ff.y, ff.ylag, ff.years, X[0], lags, holdout, baseline)
    T = len(ff.y)
    tr = slice(0, T - holdout)
    te = slice(T - holdout, T)
    mse_b = {}
    for b in backtest.BASELINES:
        Z = _design_raw(b, ff.ylag, ff.years)
        fit = sm.OLS(ff.y[tr], Z[tr]).fit()  # frozen at the end of the training years
        mse_b[b] = np.mean((ff.y[te] - fit.predict(Z[te])) ** 2)
    Z = _design_raw(baseline, ff.ylag, ff.years)
    best = None
    for li, lag in enumerate(lags):
        W = np.column_stack([Z, X[0, li]])
        fit = sm.OLS(ff.y[tr], W[tr]).fit()
        if best is None or fit.ssr < best[0]:
            best = (fit.ssr, lag, fit.predict(W[te]))
    mse_c = np.mean((ff.y[te] - best[2]) ** 2)
    assert rt.lag == best[1]
    assert rt.baseline == baseline
    np.testing.assert_array_equal(rt.years, ff.years[te])
    for b in backtest.BASELINES:
        assert rt.skill[b] == pytest.approx(1 - mse_c / mse_b[b], rel=1e-8, abs=1e-10)
    assert rt.min_skill == pytest.approx(min(1 - mse_c / m for m in mse_b.values()), rel=1e-8, abs=1e-10)


def test_retest_ignores_holdout_values_when_fitting():
    # changing the held-out responses changes the scores but not the frozen coefficients:
    # the chosen lag stays the same whatever the held-out years hold.
    ff, X, lags = _forecast_inputs(72, n=34, n_surr=1)
    a = backtest.retest(ff.y, ff.ylag, ff.years, X[0], lags, 6, "trend")
    y2 = ff.y.copy()
    y2[-6:] += 100.0
    b = backtest.retest(y2, ff.ylag, ff.years, X[0], lags, 6, "trend")
    assert a.lag == b.lag
    assert a.skill != b.skill


def test_skill_score():
    assert backtest.skill_score(1.0, 2.0) == 0.5
    assert backtest.skill_score(2.0, 2.0) == 0.0
    np.testing.assert_allclose(backtest.skill_score(np.array([3.0, 1.0]), 2.0), [-0.5, 0.5])


def test_backtest_windows_defaults_and_configured_values():
    # defaults: initial = max(10, round(0.4 n)), holdout = max(3, round(0.15 n))
    assert hypothesis.backtest_windows(40, {}) == (16, 6)
    assert hypothesis.backtest_windows(20, {}) == (10, 3)
    assert hypothesis.backtest_windows(40, {"initial_years": 12, "holdout_years": 5}) == (12, 5)
    assert hypothesis.backtest_windows(40, {"initial_years": None}) == (16, 6)
