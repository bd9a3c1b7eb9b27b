"""Tests of lagsieve.ledger.scores (proper scores) and the AR(1) inflation of the ledger's
prediction interval.

Sources: the interval score and the CRPS of a normal forecast are those of Gneiting & Raftery
(2007), JASA 102:359-378 (eq. 43 and eq. 21, the latter as written by Gneiting et al. 2005,
Mon. Wea. Rev. 133:1098-1118; formulas as recalled from memory, checked here numerically):
the CRPS against scipy.integrate.quad of its definition, the integral over x of
(F(x) - 1{x >= y})^2; the interval score by hand.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, stats

from lagsieve.ledger.forecast import next_year_forecast, ols_forecast
from lagsieve.ledger.scores import ar1_coefficient, ar1_inflation, crps_normal, gaussian_sd, interval_score


def crps_by_quadrature(mu: float, sigma: float, y: float) -> float:
    """CRPS(F, y) = integral (F(x) - 1{x >= y})^2 dx (Gneiting & Raftery 2007, eq. 20), by quad
    on both sides of y."""
    F = stats.norm(mu, sigma).cdf
    left = integrate.quad(lambda x: F(x) ** 2, -np.inf, y, limit=200)[0]
    right = integrate.quad(lambda x: (1.0 - F(x)) ** 2, y, np.inf, limit=200)[0]
    return left + right


@pytest.mark.parametrize("mu, sigma, y", [(0.0, 1.0, 0.0), (0.3, 0.2, 0.9), (1.5, 2.5, -4.0), (-2.0, 0.05, -2.01)])
def test_crps_normal_equals_the_integral_of_its_definition(mu, sigma, y):
    assert crps_normal(mu, sigma, y) == pytest.approx(crps_by_quadrature(mu, sigma, y), rel=1e-7, abs=1e-10)


def test_crps_normal_by_hand_and_limits():
    # at y = mu: sigma (2 phi(0) - 1/sqrt(pi)) = sigma (2/sqrt(2 pi) - 1/sqrt(pi)) = 0.2337 sigma
    assert crps_normal(0.0, 1.0, 0.0) == pytest.approx(2 / np.sqrt(2 * np.pi) - 1 / np.sqrt(np.pi), rel=1e-14)
    assert crps_normal(0.0, 1.0, 0.0) == pytest.approx(0.23369497725510913, rel=1e-12)
    # sigma -> 0: the absolute error
    assert crps_normal(1.0, 1e-9, 1.7) == pytest.approx(0.7, rel=1e-8)
    # batched, and a sharper forecast is better when it is right
    got = crps_normal(np.zeros(3), np.array([0.5, 1.0, 2.0]), np.zeros(3))
    assert got.shape == (3,) and got[0] < got[1] < got[2]


def test_interval_score_by_hand():
    # 80 % interval [1, 3]: alpha = 0.2, penalty 2 / alpha = 10 per unit outside
    assert interval_score(1.0, 3.0, 2.0, 0.8) == pytest.approx(2.0)
    assert interval_score(1.0, 3.0, 3.5, 0.8) == pytest.approx(2.0 + 10 * 0.5)
    assert interval_score(1.0, 3.0, 0.0, 0.8) == pytest.approx(2.0 + 10 * 1.0)
    np.testing.assert_allclose(interval_score([1, 1], [3, 3], [1.0, 3.0], 0.8), [2.0, 2.0])


def test_gaussian_sd_reproduces_the_interval():
    sd = gaussian_sd(-1.2815515655446004, 1.2815515655446004, 0.8)  # z_0.9 from scipy.stats.norm.ppf(0.9)
    assert sd == pytest.approx(1.0, rel=1e-12)
    lo, hi = stats.norm(2.0, 0.3).interval(0.8)
    assert gaussian_sd(lo, hi, 0.8) == pytest.approx(0.3, rel=1e-12)


def test_ar1_coefficient_uses_consecutive_years_only():
    e = np.array([1.0, 0.5, -0.2, 0.4, -1.0, 0.3])
    years = np.arange(2000, 2006)
    want = np.sum(e[1:] * e[:-1]) / np.sum(e ** 2)  # Yule-Walker, uncentred, by hand
    assert ar1_coefficient(e, years) == pytest.approx(want, rel=1e-14)
    gap = np.array([2000, 2001, 2002, 2010, 2011, 2012])  # the pair (2002, 2010) is not a lag-1 pair
    want_gap = (e[1] * e[0] + e[2] * e[1] + e[4] * e[3] + e[5] * e[4]) / np.sum(e ** 2)
    assert ar1_coefficient(e, gap) == pytest.approx(want_gap, rel=1e-14)
    assert np.isnan(ar1_coefficient(e[:3], years[:3]))
    assert ar1_inflation(0.5) == pytest.approx(3.0) and ar1_inflation(-0.4) == 1.0 and ar1_inflation(np.nan) == 1.0
    assert ar1_inflation(0.99) == pytest.approx(19.0)  # capped at rho = 0.9


def _ar1_world(rng, n=30, phi=0.7):
    e = np.zeros(n + 1)
    for t in range(1, n + 1):
        e[t] = phi * e[t - 1] + rng.normal(0, 0.3)
    years = np.arange(1990, 1991 + n)
    x = rng.normal(size=n + 1)
    y = 0.5 + 0.6 * x + e  # the driver acts in the same year; lag 0 with the driver known in T + 1
    return pd.DataFrame({"r": y, "d": x}, index=pd.Index(years, name="year"))


def test_interval_is_widened_by_the_ar1_factor_of_autocorrelated_residuals():
    """With AR(1) errors (phi = 0.7) the residuals' rho is clearly positive and the parameter
    part of the interval is k times the classical one; with independent errors (rho clipped to 0
    or small) the interval stays within a few percent of the classical one."""
    rng = np.random.default_rng(11)
    table = _ar1_world(rng)
    obs = table.iloc[1:-1]  # the forecast path needs the response of the year before: the first year drops out
    W = np.column_stack([np.ones(len(obs)), obs["d"].to_numpy()])
    w0 = np.array([1.0, table["d"].iloc[-1]])
    p = ols_forecast(W, obs["r"].to_numpy(), w0, 0.8, years=obs.index.to_numpy())
    X = W.copy()
    beta, *_ = np.linalg.lstsq(X, obs["r"].to_numpy(), rcond=None)
    e = obs["r"].to_numpy() - X @ beta
    rho = ar1_coefficient(e, obs.index.to_numpy())
    assert rho > 0.4
    n, k = len(e), ar1_inflation(rho)
    s2 = e @ e / (n - 2)
    lev = w0 @ np.linalg.solve(X.T @ X, w0)
    t = stats.t.ppf(0.9, n - 2)
    assert p.upper - p.forecast == pytest.approx(t * np.sqrt(s2 * (1 + k * lev)), rel=1e-10)
    assert p.upper - p.forecast > t * np.sqrt(s2 * (1 + lev))
    # the whole forecast path (lag 0, driver already delivered for the target year) uses it too
    table.loc[table.index[-1], "r"] = np.nan
    f, why = next_year_forecast(table, table, {}, "r", "d", 0, "climatology")
    assert why == "" and f.upper - f.forecast == pytest.approx(p.upper - p.forecast, rel=1e-10)
