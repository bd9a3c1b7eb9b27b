"""Tests for lagsieve.stats.multiplicity.bh_qvalues.

Outside sources named beside each check:
- statsmodels.stats.multitest.multipletests(p, method="fdr_bh")[1] (adjusted p-values).
- Benjamini & Hochberg 1995, J. R. Stat. Soc. B 57:289-300, worked example of 15 p-values.
- The step-up formula q_(i) = min_{k >= i} m p_(k) / k written out below (the hand-rolled
  implementation lagsieve used before it called scipy.stats.false_discovery_control).
"""
from __future__ import annotations

import numpy as np
import pytest
from statsmodels.stats.multitest import multipletests

from lagsieve.stats.multiplicity import bh_qvalues


@pytest.mark.parametrize("seed", range(5))
def test_bh_qvalues_match_statsmodels_ignoring_nan(seed):
    rng = np.random.default_rng(seed)
    m = 40
    # a mixture of near-null and small p-values, with ties and NaNs
    p = np.where(rng.uniform(size=m) < 0.3, rng.uniform(0, 0.01, m), rng.uniform(size=m))
    p[rng.choice(m, 3, replace=False)] = 0.5  # ties
    nan_at = rng.choice(m, 6, replace=False)
    p[nan_at] = np.nan
    q = bh_qvalues(p)
    ok = ~np.isnan(p)
    ref = multipletests(p[ok], method="fdr_bh")[1]  # statsmodels on the non-missing values
    assert np.isnan(q[nan_at]).all()
    np.testing.assert_allclose(q[ok], ref, rtol=1e-12, atol=1e-15)
    assert (q[ok] >= p[ok] * (1 - 1e-12)).all() and (q[ok] <= 1).all()  # m p / m may lose 1 ulp


def _step_up_reference(p):
    """q_(i) = min(1, min_{k >= i} m p_(k) / k) over the non-missing p; NaN stays NaN."""
    q = np.full_like(p, np.nan)
    ok = ~np.isnan(p)
    m = int(ok.sum())
    pv = p[ok]
    order = np.argsort(pv, kind="mergesort")
    ranked = pv[order] * m / np.arange(1, m + 1)
    ranked = np.minimum.accumulate(ranked[::-1])[::-1]
    out = np.empty(m)
    out[order] = np.minimum(ranked, 1.0)
    q[ok] = out
    return q


@pytest.mark.parametrize("seed", range(20))
def test_bh_qvalues_equal_the_step_up_formula(seed):
    rng = np.random.default_rng(100 + seed)
    m = int(rng.integers(2, 400))
    p = rng.uniform(size=m) ** rng.uniform(0.2, 5.0)  # from flat to piled up near 0
    p[rng.uniform(size=m) < 0.2] = 0.5  # ties
    p[rng.uniform(size=m) < 0.1] = np.nan
    q, ref = bh_qvalues(p), _step_up_reference(p)
    np.testing.assert_array_equal(np.isnan(q), np.isnan(p))
    ok = ~np.isnan(p)
    np.testing.assert_allclose(q[ok], ref[ok], rtol=1e-15, atol=0)


def test_bh_qvalues_all_nan_and_empty():
    assert np.isnan(bh_qvalues(np.array([np.nan, np.nan]))).all()
    assert bh_qvalues(np.array([])).shape == (0,)
    # a single p-value is its own q-value, whatever is missing beside it
    np.testing.assert_array_equal(bh_qvalues(np.array([np.nan, 0.3])), [np.nan, 0.3])


def test_bh_worked_example_1995():
    # The 15 p-values of the Benjamini & Hochberg (1995, JRSS B 57:289-300) example, from memory.
    # At q = 0.05 the step-up procedure rejects the four smallest: the largest k with
    # p_(k) <= k 0.05 / 15 is k = 4 (0.0095 <= 0.01333), while p_(5) = 0.0201 > 0.01667 and no
    # later p_(k) is below its line.
    p = np.array([0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459,
                  0.3240, 0.4262, 0.5719, 0.6528, 0.7590, 1.000])
    shuffled = np.random.default_rng(3).permutation(len(p))
    q = bh_qvalues(p[shuffled])
    back = np.empty_like(q)
    back[shuffled] = q
    assert int((back <= 0.05).sum()) == 4
    assert (back[:4] <= 0.05).all() and (back[4:] > 0.05).all()
    # hand values: q_(4) = 15 * 0.0095 / 4 = 0.035625; q_(5) = 15 * 0.0201 / 5 = 0.0603;
    # q_(1) = 15 * 0.0001 / 1 = 0.0015; q_(2) = 15 * 0.0004 / 2 = 0.003; q_(15) = 1.
    assert back[3] == pytest.approx(0.035625, rel=1e-12)
    assert back[4] == pytest.approx(0.0603, rel=1e-12)
    assert back[0] == pytest.approx(0.0015, rel=1e-12)
    assert back[1] == pytest.approx(0.003, rel=1e-12)
    assert back[-1] == 1.0
    np.testing.assert_allclose(back, multipletests(p, method="fdr_bh")[1], rtol=1e-12)
