"""Tests for lagsieve.surrogates.

Outside sources named beside each check:
- Phase randomisation keeping the periodogram: Ebisuzaki 1997, J. Climate 10:2147-2153;
  Theiler et al. 1992, Physica D 58:77-94. Spectra via numpy.fft.rfft.
- Yule-Walker AR fits: statsmodels.regression.linear_model.yule_walker(x, order, method="mle")
  (the biased autocovariance, divisor n).
- AR sieve bootstrap: Buhlmann 1997, Bernoulli 3:123-148.
- AIC overfitting of AR order: Shibata 1976, Biometrika 63:117-126 (AIC is not consistent:
  it picks a too-large order with positive probability even for long series; from memory).
- Least-squares trend: numpy.polyfit.
- Monte Carlo p-value p = (1 + #{T* >= t}) / (1 + B): Davison & Hinkley 1997, Bootstrap Methods
  and their Application, section 4.2 (from memory); scipy.stats.monte_carlo_test (alternative
  "greater") computes the same p.
"""
from __future__ import annotations

import warnings

import numpy as np
import pytest
from statsmodels.regression.linear_model import yule_walker

from helpers import ar1
from lagsieve.stats import correlation as st
from lagsieve.stats import surrogates as su
_ar1 = ar1  # shared simulator (conftest)


# ----------------------------------------------------------------- phase randomisation
@pytest.mark.parametrize("n", [31, 40])
def test_phase_randomised_keeps_periodogram_and_mean(n):
    rng = np.random.default_rng(1)
    x = 3.0 + _ar1(rng, n, 0.6)
    s = su.phase_randomised(x, 200, np.random.default_rng(2))
    assert s.shape == (200, n)
    p0 = np.abs(np.fft.rfft(x)) ** 2
    ps = np.abs(np.fft.rfft(s, axis=-1)) ** 2
    np.testing.assert_allclose(ps, np.broadcast_to(p0, ps.shape), rtol=1e-8, atol=1e-8 * p0.max())
    np.testing.assert_allclose(s.mean(-1), x.mean(), rtol=1e-12)
    # the surrogates are not copies of x
    assert np.abs(s - x).max(axis=-1).min() > 0.1


def test_phase_randomised_nyquist_term_real_and_signed_for_even_n():
    rng = np.random.default_rng(3)
    n = 24
    x = _ar1(rng, n, 0.4)
    s = su.phase_randomised(x, 400, np.random.default_rng(4))
    ny0 = np.fft.rfft(x)[-1]
    ny = np.fft.rfft(s, axis=-1)[:, -1]
    assert abs(ny0.imag) < 1e-12
    assert np.abs(ny.imag).max() < 1e-9 * abs(ny0.real)
    np.testing.assert_allclose(np.abs(ny.real), abs(ny0.real), rtol=1e-10)
    share_flipped = np.mean(np.sign(ny.real) != np.sign(ny0.real))
    assert 0.4 < share_flipped < 0.6  # random sign; measured 0.52 for this seed


def test_phase_randomised_phases_independent_of_original():
    rng = np.random.default_rng(5)
    n, K = 33, 3000
    x = _ar1(rng, n, 0.5)
    s = su.phase_randomised(x, K, np.random.default_rng(6))
    fx = np.fft.rfft(x)[1:]  # odd n: frequencies 1..16, all randomised
    fs = np.fft.rfft(s, axis=-1)[:, 1:]
    dphi = np.angle(fs) - np.angle(fx)[None, :]
    R = np.abs(np.exp(1j * dphi).mean(axis=0))  # mean resultant length per frequency
    # Uniform phases: P(R > c) ~ exp(-K c^2) (Rayleigh test, common practice), so for
    # c = 0.07 and K = 3000 that is exp(-14.7) ~ 4e-7 per frequency. Measured max R: 0.035.
    assert R.max() < 0.07
    # the correlation of a surrogate with the original averages 0: its sd over surrogates is
    # sqrt(sum w_k^2 / 2) with w_k the share of variance at frequency k; allow 4 sd / sqrt(K).
    r = st.pearson_r(s, x[None, :])
    w = np.abs(fx) ** 2 / np.sum(np.abs(fx) ** 2)
    sd = np.sqrt(np.sum(w**2) / 2.0)
    assert r.std() == pytest.approx(sd, rel=0.1)
    assert abs(r.mean()) < 4 * sd / np.sqrt(K)


def test_phase_randomised_seed_determinism():
    x = _ar1(np.random.default_rng(7), 30, 0.5)
    a = su.phase_randomised(x, 10, np.random.default_rng(99))
    b = su.phase_randomised(x, 10, np.random.default_rng(99))
    c = su.phase_randomised(x, 10, np.random.default_rng(100))
    assert np.array_equal(a, b)
    assert not np.allclose(a, c)


# ----------------------------------------------------------------- make_surrogates
def _slope(v):
    return np.polyfit(np.arange(len(v)), v, 1)[0]  # numpy.polyfit least-squares line


@pytest.mark.parametrize("method", ["phase", "ar-sieve"])
def test_make_surrogates_keep_trend_same_least_squares_slope(method):
    rng = np.random.default_rng(8)
    n = 40
    x = 0.1 * np.arange(n) + _ar1(rng, n, 0.5)
    s = su.make_surrogates(x, 20, np.random.default_rng(9), method, keep_trend=True)
    for si in s:
        assert _slope(si) == pytest.approx(_slope(x), abs=1e-8)


@pytest.mark.parametrize("method", ["phase", "ar-sieve"])
def test_make_surrogates_keep_trend_shares_trend_on_average(method):
    # What does hold: the original's fitted line is added back to every surrogate, so the
    # surrogate slopes scatter around the original slope (mean within 2 standard errors), and
    # without keep_trend the phase surrogates lose the trend (mean slope near 0).
    rng = np.random.default_rng(8)
    n = 40
    x = 0.1 * np.arange(n) + _ar1(rng, n, 0.5)
    s = su.make_surrogates(x, 400, np.random.default_rng(9), method, keep_trend=True)
    slopes = np.array([_slope(si) for si in s])
    assert abs(slopes.mean() - _slope(x)) < 2 * slopes.std() / np.sqrt(len(slopes)) + 1e-12
    if method == "phase":
        s0 = su.make_surrogates(x, 400, np.random.default_rng(9), method, keep_trend=False)
        slopes0 = np.array([_slope(si) for si in s0])
        assert abs(slopes0.mean()) < 0.3 * _slope(x)


@pytest.mark.parametrize("method", ["phase", "ar-sieve"])
def test_make_surrogates_keeps_nan_positions(method):
    rng = np.random.default_rng(10)
    x = 0.05 * np.arange(30) + _ar1(rng, 30, 0.5)
    x[[4, 5, 17]] = np.nan
    s = su.make_surrogates(x, 15, np.random.default_rng(11), method)
    assert s.shape == (15, 30)
    assert np.array_equal(np.isnan(s), np.broadcast_to(np.isnan(x), s.shape))


def test_fill_for_surrogates_linear_interpolation():
    x = np.array([1.0, np.nan, 3.0, np.nan, np.nan, 9.0])
    filled, bad = su.fill_for_surrogates(x)
    np.testing.assert_allclose(filled, [1, 2, 3, 5, 7, 9])
    assert bad.tolist() == [False, True, False, True, True, False]


def test_make_surrogates_unknown_method():
    with pytest.raises(ValueError, match="unknown surrogate method"):
        su.make_surrogates(np.arange(10.0), 3, np.random.default_rng(0), "shuffle")


# ----------------------------------------------------------------- AR sieve
def test_yule_walker_matches_statsmodels():
    x = _ar1(np.random.default_rng(12), 200, 0.7)
    for p in (1, 2, 3):
        phi, s2 = su._yule_walker(x, p)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", FutureWarning)
            rho, sigma = yule_walker(x, order=p, method="mle")  # statsmodels, divisor n
        np.testing.assert_allclose(phi, rho, atol=1e-12)
        assert s2 == pytest.approx(sigma**2, rel=1e-12)


def test_ar_order_aic_long_ar1():
    # AIC = n log(sigma2) + 2p over Yule-Walker fits, recomputed with statsmodels' yule_walker;
    # the order must agree exactly. For long AR(1) (phi 0.7, n = 2000) the order is 1 in most
    # series but AIC overfits now and then (Shibata 1976): measured 13 of 20 seeds pick 1,
    # none picks 0.
    orders = []
    for seed in range(20):
        x = _ar1(np.random.default_rng(500 + seed), 2000, 0.7)
        n = len(x)
        aics = [n * np.log(np.var(x))]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", FutureWarning)
            for p in range(1, 11):
                _, sigma = yule_walker(x, order=p, method="mle")
                aics.append(n * np.log(sigma**2) + 2 * p)
        got = su.ar_order_aic(x)
        assert got == int(np.argmin(aics))
        orders.append(got)
    assert orders.count(1) >= 12
    assert 0 not in orders
    assert max(set(orders), key=orders.count) == 1


def test_ar_sieve_keeps_lag1_autocorrelation():
    # 500 AR-sieve surrogates of an AR(1) phi = 0.7 series, n = 60. The surrogates' mean lag-1
    # autocorrelation sits a little below the original's, by about the small-sample bias of
    # r1 (~ (1 + 4 phi) / n = 0.06, from memory). Measured for this seed: original 0.715,
    # surrogate mean 0.641 (AIC order 1). Tolerance 0.1.
    x = _ar1(np.random.default_rng(0), 60, 0.7)
    r1 = st.autocorrelation(x, 1)[0]
    s = su.ar_sieve(x, 500, np.random.default_rng(100))
    assert s.shape == (500, 60)
    r1s = st.autocorrelation(s, 1)[:, 0]
    assert abs(r1s.mean() - r1) < 0.1
    assert r1s.mean() > 0.5
    # surrogates are centred on the original mean and are not copies of it
    assert abs(s.mean() - x.mean()) < 0.5 * x.std()
    assert np.abs(st.pearson_r(s, x[None, :])).mean() < 0.3


def test_ar_sieve_fixed_order_recursion():
    # with order 0 the surrogates are iid resamples of the centred series plus its mean
    x = np.array([1.0, 4.0, 2.0, 7.0, 5.0, 3.0, 6.0, 8.0])
    s = su.ar_sieve(x, 50, np.random.default_rng(1), order=0)
    allowed = set(np.round(x - x.mean() + x.mean(), 12))
    assert set(np.round(s.ravel(), 12)) <= allowed


# ----------------------------------------------------------------- Monte Carlo p-values
def test_monte_carlo_p_by_hand_from_the_published_definition():
    """p = (1 + #{T* >= t}) / (1 + B) (Davison & Hinkley 1997, section 4.2, from memory), over the
    non-missing null values, worked by hand: null (1, 2, 3, NaN, 0.5) has B = 4 values; t = 2
    is reached by 2 and 3 (a tie counts), so p = 3/5; t = 3.5 by none, p = 1/5; t = 0 by all,
    p = 5/5; a missing t gives NaN."""
    null = np.array([1.0, 2.0, 3.0, np.nan, 0.5])
    p = su.monte_carlo_p(np.array([2.0, 3.5, 0.0, np.nan]), null)
    np.testing.assert_array_equal(p[:3], [3 / 5, 1 / 5, 1.0])
    assert np.isnan(p[3])
    assert su.monte_carlo_p(2.0, null) == 3 / 5


def test_monte_carlo_p_equals_the_screen_surrogate_p_and_scipy_monte_carlo_test():
    """Every observed value at once equals the screen's scalar surrogate_p (observed first, then
    the surrogates; NaN surrogates and ties included) and scipy.stats.monte_carlo_test with the
    same null sample (alternative "greater": (1 + #{null >= t}) / (1 + B))."""
    from scipy import stats as sps

    from lagsieve.screen.hypothesis import surrogate_p

    rng = np.random.default_rng(11)
    null = np.round(rng.normal(size=199), 1)  # rounded: ties with the observed values
    null[[3, 50]] = np.nan
    obs = np.r_[np.round(rng.normal(size=20) * 1.5, 1), np.nan, np.inf, -np.inf]
    p = su.monte_carlo_p(obs, null)
    for o, pv in zip(obs, p):
        ref = surrogate_p(np.r_[o, null])
        assert (np.isnan(pv) and np.isnan(ref)) or pv == ref
    kept = null[~np.isnan(null)]
    off_grid = obs[:5] + 0.05  # no tie within scipy's tolerance of ties

    def first(x, axis):
        return np.take(x, 0, axis=axis)

    for o, pv in zip(off_grid, su.monte_carlo_p(off_grid, null)):
        res = sps.monte_carlo_test(np.array([o]), lambda size: kept.reshape(size), first, vectorized=True,
                                   n_resamples=len(kept), alternative="greater")
        assert pv == pytest.approx(res.pvalue, rel=1e-12)
