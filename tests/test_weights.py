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
