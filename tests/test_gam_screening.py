"""GAM candidates inside the honest scheme: a threshold truth is found as nonlinear and
forecast better than a line; a linear truth gains nothing from the spline."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from lagsieve.io.config import SCREEN_DEFAULTS
from lagsieve.screen.hypothesis import screen_hypothesis


def _world(seed: int, shape: str, n: int = 45):
    rng = np.random.default_rng(seed)
    x = np.zeros(n + 1)
    for t in range(1, n + 1):  # AR(1) driver
        x[t] = 0.5 * x[t - 1] + rng.normal()
    xl = x[:-1]  # the driver one year earlier
    if shape == "threshold":
        signal = 1.6 * np.maximum(0.0, -0.3 - xl)  # flat above -0.3, steep below
    else:
        signal = 0.5 * xl
    y = 1.0 + signal + 0.25 * rng.normal(size=n)
    years = np.arange(1980, 1980 + n)
    table = pd.DataFrame({"y": y, "x": x[1:]}, index=pd.Index(years, name="year"))
    return table


SCREEN = dict(SCREEN_DEFAULTS, lags=[0, 1, 2], models=["linear", "gam"], surrogates=49,
              validation={"initial_years": 15, "holdout_years": 5})


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_threshold_truth_gam_beats_linear(seed):
    t = _world(seed, "threshold")
    _, hyp, fc, _ = screen_hypothesis(t, {"id": "y"}, {"id": "x", "expected_sign": "any"}, [0, 1, 2], SCREEN)
    assert hyp["gam_gain"] > 0.15, hyp["gam_gain"]
    assert hyp["model"] == "gam" and hyp["oos_lag"] == 1
    assert hyp["shape"] in ("threshold", "decreasing")
    # the forecast frame marks forecasts outside the training range of the driver
    assert fc["extrapolated"].dtype == bool


def test_linear_truth_no_gain():
    gains = []
    for seed in range(4):
        t = _world(100 + seed, "linear")
        _, hyp, _, _ = screen_hypothesis(t, {"id": "y"}, {"id": "x", "expected_sign": "any"}, [0, 1, 2], SCREEN)
        gains.append(hyp["gam_gain"])
    # a penalised spline on a linear truth shrinks to the line: no systematic out-of-sample gain
    assert np.mean(gains) <= 0.02 and max(gains) < 0.1, gains
