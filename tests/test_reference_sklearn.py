"""The rolling origin against scikit-learn: the same expanding windows (TimeSeriesSplit with
one test year) and the same forecasts from LinearRegression fits."""
from __future__ import annotations

import numpy as np
from sklearn.linear_model import LinearRegression
from sklearn.model_selection import TimeSeriesSplit

from lagsieve.stats.backtest import rolling_origin


def test_rolling_origin_equals_sklearn_expanding_splits():
    rng = np.random.default_rng(11)
    T, initial = 28, 10
    x = rng.normal(size=(1, 2, T))  # one driver, two candidate lags
    y = 0.5 * x[0, 1] + 0.02 * np.arange(T) + rng.normal(scale=0.5, size=T)
    ylag = np.r_[0.0, y[:-1]]
    year = 2000.0 + np.arange(T)
    res = rolling_origin(y, ylag, year, x, np.array([0, 1]), initial)
    splits = list(TimeSeriesSplit(n_splits=T - initial, test_size=1).split(y))
    assert len(splits) == res.n
    for j, (train, test) in enumerate(splits):
        assert train.tolist() == list(range(initial + j)) and test.tolist() == [initial + j]
        # persistence baseline + driver, lag chosen by training RSS, as lagsieve does
        best = None
        for li in range(2):
            X = np.column_stack([ylag, x[0, li]])
            m = LinearRegression().fit(X[train], y[train])
            rss = float(np.sum((y[train] - m.predict(X[train])) ** 2))
            if best is None or rss < best[0]:
                best = (rss, float(m.predict(X[test])[0]))
        assert abs(res.model_forecast["persistence"][0, j] - best[1]) < 1e-8
