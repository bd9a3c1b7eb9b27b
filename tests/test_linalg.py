"""Tests for lagsieve.stats.linalg: the expanding-window normal equations shared by the backtest,
the conditional tests, the model sets and the draws of a response.

Outside source beside each check: every window's fit is recomputed with statsmodels
(``statsmodels.api.WLS`` on the training rows: coefficients, ssr and the forecast of the next
row). The partitioned normal equations (Seber & Lee 2003, section 3.7, from memory) must give the
same least-squares fit as the whole system; the degenerate case is common practice (an added
column with no variation of its own beyond the shared design must leave a finite fit).
"""
from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import linalg as scipy_linalg

from lagsieve.stats import linalg


def _design(rng, T):
    year = np.arange(T, dtype=float)
    ylag = rng.normal(size=T)
    return np.column_stack([np.ones(T), ylag, (year - year.mean()) / year.std()])


def _wls_window(y, W, w, o):
    """statsmodels.api.WLS on rows [0, o): (ssr, forecast of row o)."""
    res = sm.WLS(y[:o], W[:o], weights=w[:o]).fit()
    return float(res.ssr), float(W[o] @ res.params)


@pytest.mark.parametrize("k", [1, 2])
def test_added_columns_equal_statsmodels_wls_at_every_window(k):
    """expanding_added (shared baseline + k columns of each member, weighted) against one
    statsmodels WLS fit per member and window: ssr and forecast to 1e-8 relative."""
    rng = np.random.default_rng(3)
    T, initial = 36, 14
    Z = _design(rng, T)
    X = rng.normal(size=(3, 2, T, k)) + np.linspace(0, 1, T)[:, None]  # (S, L, T, k)
    y = 10.0 + Z[:, 1] * 0.4 + X[0, 0, :, 0] * 0.7 + rng.normal(0, 0.5, T)
    w = rng.uniform(0.5, 2.0, T)
    origins = np.arange(initial, T)
    fit = linalg.expanding_added(Z, X, y, origins, weights=w)
    assert fit.rss.shape == fit.forecast.shape == (3, 2, len(origins))
    for s in range(3):
        for li in range(2):
            W = np.column_stack([Z, X[s, li]])
            for i, o in enumerate(origins):
                ssr, fc = _wls_window(y, W, w, o)
                assert fit.rss[s, li, i] == pytest.approx(ssr, rel=1e-8)
                assert fit.forecast[s, li, i] == pytest.approx(fc, rel=1e-8)
    for i, o in enumerate(origins):  # the shared design alone
        ssr, fc = _wls_window(y, Z, w, o)
        assert fit.shared.rss[i] == pytest.approx(ssr, rel=1e-8)
        assert fit.shared.forecast[i] == pytest.approx(fc, rel=1e-8)


@pytest.mark.parametrize("k", [1, 2])
def test_members_with_their_own_design_and_response_equal_statsmodels_wls(k):
    """expanding_shared and expanding_added for a batch whose members each have their own
    response and design (draws of a response, each with its own previous year), weighted: every
    member's shared fit and every member crossed with every added column set against one
    statsmodels WLS fit per window: ssr and forecast to 1e-8 relative (the ridge, 1e-10 of the
    trace, moves the fit a little)."""
    rng = np.random.default_rng(8)
    T, initial, D = 32, 13, 3
    Z = np.stack([_design(rng, T) for _ in range(D)])  # (D, T, p): each member's own previous year
    X = rng.normal(size=(2, T, k)) + np.linspace(0, 1, T)[:, None]  # (L, T, k), shared by the members
    y = 4.0 + 0.6 * Z[:, :, 1] + 0.5 * X[0, :, 0] + rng.normal(0, 0.5, (D, T))  # (D, T)
    w = rng.uniform(0.5, 2.0, T)
    origins = np.arange(initial, T)
    shared = linalg.expanding_shared(Z, y, origins, weights=w)
    fit = linalg.expanding_added(Z, X, y, origins, weights=w)
    assert shared.rss.shape == fit.shared.rss.shape == (D, len(origins))
    assert fit.rss.shape == fit.forecast.shape == (D, 2, len(origins))
    for d in range(D):
        for i, o in enumerate(origins):
            ssr, fc = _wls_window(y[d], Z[d], w, o)
            assert shared.rss[d, i] == pytest.approx(ssr, rel=1e-8)
            assert shared.forecast[d, i] == pytest.approx(fc, rel=1e-8)
            for li in range(2):
                ssr, fc = _wls_window(y[d], np.column_stack([Z[d], X[li]]), w, o)
                assert fit.rss[d, li, i] == pytest.approx(ssr, rel=1e-8)
                assert fit.forecast[d, li, i] == pytest.approx(fc, rel=1e-8)


def test_members_sharing_one_design_broadcast_their_responses():
    """One design with a response per member (y (D, T), Z (T, p)), nothing added: each member's
    fit is statsmodels OLS of its own response on the window's rows."""
    rng = np.random.default_rng(9)
    T = 28
    Z = _design(rng, T)
    y = rng.normal(size=(4, T)) + 3.0
    fit = linalg.expanding_added(Z, np.zeros((2, T, 0)), y, np.arange(11, T))
    assert fit.rss.shape == (4, 2, T - 11)
    for d in range(4):
        for i, o in enumerate(range(11, T)):
            res = sm.OLS(y[d, :o], Z[:o]).fit()
            assert np.allclose(fit.rss[d, :, i], res.ssr, rtol=1e-9)
            assert np.allclose(fit.forecast[d, :, i], Z[o] @ res.params, rtol=1e-9)


def test_no_added_columns_is_the_shared_fit():
    """k = 0: every member's fit is the shared design's (statsmodels OLS)."""
    rng = np.random.default_rng(4)
    T = 30
    Z = _design(rng, T)
    y = rng.normal(size=T)
    fit = linalg.expanding_added(Z, np.zeros((5, T, 0)), y, np.arange(12, T))
    for i, o in enumerate(range(12, T)):
        res = sm.OLS(y[:o], Z[:o]).fit()
        assert np.allclose(fit.rss[:, i], res.ssr, rtol=1e-10)
        assert np.allclose(fit.forecast[:, i], Z[o] @ res.params, rtol=1e-10)


def test_added_column_without_variation_of_its_own_stays_finite():
    """A member whose column is constant in the first windows (collinear with the intercept):
    finite fits, and from the window where it varies on, statsmodels' fit (common practice)."""
    rng = np.random.default_rng(5)
    T, initial = 30, 12
    Z = _design(rng, T)
    x = rng.normal(size=T)
    x[:15] = 2.0
    y = rng.normal(size=T) + 0.5 * x
    origins = np.arange(initial, T)
    fit = linalg.expanding_added(Z, x[None, :, None], y, origins)
    assert np.all(np.isfinite(fit.rss)) and np.all(np.isfinite(fit.forecast))
    W = np.column_stack([Z, x])
    for i, o in enumerate(origins):
        if o > 17:
            ssr, fc = _wls_window(y, W, np.ones(T), o)
            assert fit.forecast[0, i] == pytest.approx(fc, rel=1e-6)


def test_window_cross_equals_sums_over_each_window():
    """window_cross against the plain sum of outer products over each window (the definition)."""
    rng = np.random.default_rng(6)
    A, B = rng.normal(size=(4, 20, 3)), rng.normal(size=(4, 20, 2))
    w = rng.uniform(size=20)
    origins = np.array([5, 9, 19])
    out = linalg.window_cross(A, B, linalg.window_mask(origins, 20, w))
    for j, o in enumerate(origins):
        ref = np.einsum("mt,mtp,mtq->mpq", np.broadcast_to(w[:o], (4, o)), A[:, :o], B[:, :o])
        np.testing.assert_allclose(out[:, j], ref, rtol=1e-12)


@pytest.mark.parametrize("q", [1, 2, 5, 7, 11])
def test_spd_inverse_equals_scipy_inverse(q):
    """spd_inverse (Cholesky across the stack up to 7 x 7, LAPACK above) against
    scipy.linalg.inv matrix by matrix, on positive definite matrices with condition numbers up
    to about 1e8."""
    rng = np.random.default_rng(q)
    F = rng.normal(size=(6, 5, q, q))
    A = F @ np.swapaxes(F, -1, -2) + 1e-6 * np.eye(q)
    out = linalg.spd_inverse(A)
    for idx in np.ndindex(6, 5):
        ref = scipy_linalg.inv(A[idx])
        np.testing.assert_allclose(out[idx], ref, rtol=1e-6, atol=1e-9 * np.abs(ref).max())


def test_spd_inverse_falls_back_on_a_matrix_that_is_not_positive_definite():
    """An indefinite member (Cholesky fails): the stack is inverted by LAPACK instead
    (scipy.linalg.inv as the reference)."""
    A = np.stack([np.eye(3) * 2.0, np.diag([1.0, -1.0, 3.0])])
    out = linalg.spd_inverse(A)
    np.testing.assert_allclose(out[1], scipy_linalg.inv(A[1]), rtol=1e-14)


@pytest.mark.parametrize("q", [1, 3, 8, 11])
def test_spd_solve_equals_scipy_solve(q):
    """spd_solve (Cholesky factor, then forward and back substitution across the stack) against
    scipy.linalg.solve(assume_a="pos") matrix by matrix, several right-hand sides, on positive
    definite matrices with condition numbers up to about 1e8; B broadcast over the stack too."""
    rng = np.random.default_rng(40 + q)
    F = rng.normal(size=(6, 5, q, q))
    A = F @ np.swapaxes(F, -1, -2) + 1e-6 * np.eye(q)
    B = rng.normal(size=(6, 5, q, 3))
    out = linalg.spd_solve(A, B)
    shared = linalg.spd_solve(A, B[0, 0])
    for idx in np.ndindex(6, 5):
        ref = scipy_linalg.solve(A[idx], B[idx], assume_a="pos")
        np.testing.assert_allclose(out[idx], ref, rtol=1e-6, atol=1e-9 * np.abs(ref).max())
        ref0 = scipy_linalg.solve(A[idx], B[0, 0], assume_a="pos")
        np.testing.assert_allclose(shared[idx], ref0, rtol=1e-6, atol=1e-9 * np.abs(ref0).max())


def test_spd_solve_falls_back_on_a_matrix_that_is_not_positive_definite():
    """An indefinite member (Cholesky fails): the stack is solved by LU instead (scipy.linalg.solve
    as the reference)."""
    A = np.stack([np.eye(3) * 2.0, np.diag([1.0, -1.0, 3.0])])
    B = np.arange(6.0).reshape(3, 2)
    out = linalg.spd_solve(A, B)
    np.testing.assert_allclose(out[1], scipy_linalg.solve(A[1], B), rtol=1e-14)
    np.testing.assert_allclose(out[0], B / 2.0, rtol=1e-14)


@pytest.mark.parametrize("r", [1, 2, 3, 4, 6])
def test_symmetric_eigh_equals_scipy_eigh(r):
    """symmetric_eigh (Jacobi across the stack up to 4 x 4, LAPACK above) against
    scipy.linalg.eigh: ascending eigenvalues to 1e-12 of the norm, each eigenvector the same
    up to its sign, the input left unchanged; repeated eigenvalues included (identity blocks)."""
    rng = np.random.default_rng(10 + r)
    F = rng.normal(size=(40, r, r))
    A = F @ np.swapaxes(F, -1, -2)
    A[:5] = np.eye(r) * 2.0  # a repeated eigenvalue: any orthonormal basis will do
    before = A.copy()
    vals, vecs = linalg.symmetric_eigh(A)
    assert np.array_equal(A, before)
    for i in range(len(A)):
        ref_vals, ref_vecs = scipy_linalg.eigh(A[i])
        scale = max(1.0, np.abs(ref_vals).max())
        np.testing.assert_allclose(vals[i], ref_vals, atol=1e-12 * scale)
        np.testing.assert_allclose(vecs[i] @ np.diag(vals[i]) @ vecs[i].T, A[i], atol=1e-12 * scale)
        np.testing.assert_allclose(vecs[i].T @ vecs[i], np.eye(r), atol=1e-12)
        if i >= 5 and np.min(np.diff(ref_vals), initial=np.inf) > 1e-6 * scale:
            np.testing.assert_allclose(np.abs(np.sum(vecs[i] * ref_vecs, axis=0)), 1.0, atol=1e-9)
