"""Inverse-variance weighting of the forecasting regressions, checked against statsmodels WLS."""
from __future__ import annotations

import numpy as np
import pandas as pd
import statsmodels.api as sm

from lagsieve.prep.align import inverse_variance_weights, se_table
from lagsieve.stats.backtest import rolling_origin


def test_weighted_rolling_origin_matches_statsmodels_wls():
    rng = np.random.default_rng(7)
    T, initial = 30, 12
    x = rng.normal(size=(1, 1, T))
    y = 0.6 * x[0, 0] + rng.normal(size=T)
    ylag = np.r_[0.0, y[:-1]]
    year = np.arange(T) + 1990.0
    w = inverse_variance_weights(rng.uniform(0.2, 1.0, size=T))
    res = rolling_origin(y, ylag, year, x, np.array([0]), initial, weights=w)
    for i in range(initial, T):
        # trend baseline + driver, fitted by statsmodels WLS on the training rows only
        X = sm.add_constant(np.column_stack([year[:i], x[0, 0, :i]]))
        fit = sm.WLS(y[:i], X, weights=w[:i]).fit()
        pred = fit.params @ np.r_[1.0, year[i], x[0, 0, i]]
        assert abs(res.model_forecast["trend"][0, i - initial] - pred) < 1e-8
        base = sm.WLS(y[:i], np.ones((i, 1)), weights=w[:i]).fit().params[0]
        assert abs(res.baseline_forecast["climatology"][i - initial] - base) < 1e-10


def test_se_table_delta_method():
    annual = pd.DataFrame({"series": ["a", "a", "b", "b"], "year": [2000, 2001, 2000, 2001],
                           "value": [2.0, 4.0, 1.0, 3.0], "se": [0.2, 0.4, 0.1, 0.3]})
    se = se_table(annual, {"a": "log", "b": "none"})
    # log scale: se(log v) ~ se / v (delta method)
    assert np.allclose(se["a"].to_numpy(), [0.1, 0.1])
    assert np.allclose(se["b"].to_numpy(), [0.1, 0.3])
    w = inverse_variance_weights(np.array([1.0, 2.0]))
    assert np.allclose(w, np.array([1.0, 0.25]) / 0.625)


def test_process_variance_is_recovered_and_weights_follow_it():
    """y = trend + process noise (sd 0.3) + observation error with known se (0.05-0.3): the
    method-of-moments process variance is about unbiased over 2,000 simulated series (expected
    0.09, measured 0.0900; the moment estimator is unbiased before the floor at 0, a textbook fact), and the
    weights 1/(tau^2 + se^2) spread far less than 1/se^2 (DerSimonian & Laird 1986 for the idea)."""
    from lagsieve.prep.align import process_variance

    rng = np.random.default_rng(11)
    T = 40
    se = rng.uniform(0.05, 0.3, size=T)
    t = np.arange(T)
    est = [process_variance(0.02 * t + rng.normal(0, 0.3, T) + rng.normal(0, se), se) for _ in range(2000)]
    assert abs(np.mean(est) - 0.09) < 0.005
    y = 0.02 * t + rng.normal(0, 0.3, T) + rng.normal(0, se)
    w_se, w_tau = inverse_variance_weights(se), inverse_variance_weights(se, y=y)
    assert w_se.max() / w_se.min() > 20 and w_tau.max() / w_tau.min() < 2.5  # measured 26.7 and 1.97
    # without process variance (pure observation error) the two weightings agree closely
    y0 = 0.02 * t + rng.normal(0, se)
    assert process_variance(y0, se) < 0.01
    # only the first n_ref values are used
    y_late = y.copy()
    y_late[30:] += 50.0
    assert process_variance(y_late, se, n_ref=30) == process_variance(y, se, n_ref=30)
