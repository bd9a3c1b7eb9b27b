"""The harmonic seasonal baseline of a within-year series, out of sample.

The annual cycle as Fourier terms: a level plus sin(2 pi k m / 12) and cos(2 pi k m / 12),
k = 1..K, m the month (a season's middle month for seasonal values); the usual representation
of a smooth seasonal cycle (Hyndman & Athanasopoulos 2021, Forecasting: Principles and
Practice, 3rd ed., section 7.4, "Fourier series"; West & Harrison 1997 give the same form for
seasonal dynamic models). Two baselines forecast each value from the values before it only:

* ``harmonic``: the cycle fitted by least squares to every earlier value;
* ``harmonic_persistence``: that fit plus the last earlier anomaly (value minus fit) carried
  forward, so that a warm winter predicts a warm spring.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["HARMONIC_BASELINES", "fourier_design", "harmonic_forecasts", "harmonic_order", "HarmonicForecasts"]

HARMONIC_BASELINES = ("harmonic", "harmonic_persistence")
MIN_FIT = 3  # values beyond the parameters a fit needs before it forecasts


def harmonic_order(months: np.ndarray, max_order: int = 2) -> int:
    """The largest K <= ``max_order`` that the distinct months identify: 2K + 1 parameters need
    at least 2K + 1 distinct months (four seasons: K = 1)."""
    distinct = len(np.unique(np.round(np.asarray(months, float), 6)))
    return int(max(0, min(max_order, (distinct - 1) // 2)))


def fourier_design(months: np.ndarray, order: int) -> np.ndarray:
    """(n, 1 + 2K) design: a column of ones, then sin(2 pi k m / 12), cos(2 pi k m / 12) for k = 1..K."""
    m = np.asarray(months, float)
    cols = [np.ones_like(m)]
    for k in range(1, order + 1):
        cols += [np.sin(2 * np.pi * k * m / 12), np.cos(2 * np.pi * k * m / 12)]
    return np.column_stack(cols)


@dataclass(frozen=True)
class HarmonicForecasts:
    """One-step forecasts of every target position by both baselines (NaN where too few
    earlier values)."""

    harmonic: np.ndarray
    harmonic_persistence: np.ndarray

    def as_dict(self) -> dict[str, np.ndarray]:
        return {"harmonic": self.harmonic, "harmonic_persistence": self.harmonic_persistence}


def harmonic_forecasts(y: np.ndarray, months: np.ndarray, targets: np.ndarray, order: int | None = None) -> HarmonicForecasts:
    """Forecasts of ``y[targets]`` from ``y[:target]`` (a series in time order, NaN for
    missing values; ``months`` the month of every value). The cycle is refitted at every target
    on the earlier values only; the anomaly carried forward is that of the last earlier value
    that is present."""
    y, months = np.asarray(y, float), np.asarray(months, float)
    K = harmonic_order(months) if order is None else int(order)
    X = fourier_design(months, K)
    h = np.full(len(targets), np.nan)
    hp = np.full(len(targets), np.nan)
    for j, t in enumerate(np.asarray(targets, int)):
        past = np.flatnonzero(np.isfinite(y[:t]))
        if len(past) < X.shape[1] + MIN_FIT:
            continue
        beta = np.linalg.lstsq(X[past], y[past], rcond=None)[0]
        h[j] = X[t] @ beta
        last = past[-1]
        hp[j] = h[j] + (y[last] - X[last] @ beta)
    return HarmonicForecasts(h, hp)
