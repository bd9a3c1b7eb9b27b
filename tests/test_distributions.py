"""lagsieve.stats.distributions against scipy.stats (the reference library), which computes
the same tails and quantiles; the screen imports the former to spare a job scipy.stats's
import."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from lagsieve.stats import distributions as dist

X = np.array([-40.0, -3.0, -1.0, -1e-12, 0.0, 0.5, 2.0, 10.0, np.inf, np.nan])
DF = np.array([1.0, 2.5, 5.0, 10.0, 30.0, 100.0, 0.0, np.nan])


def test_student_t_tail_and_quantile():
    x, df = np.meshgrid(X, DF)
    np.testing.assert_allclose(dist.t_sf(x, df), stats.t.sf(x, df), rtol=1e-12, atol=0, equal_nan=True)
    q = np.array([1e-6, 0.025, 0.5, 0.975, 1 - 1e-9, np.nan])  # quantiles in (0, 1), as the callers ask
    qq, dd = np.meshgrid(q, DF)
    np.testing.assert_allclose(dist.t_ppf(qq, dd), stats.t.ppf(qq, dd), rtol=1e-12, equal_nan=True)


@pytest.mark.parametrize("dfn, dfd", [(1, 5), (3, 20), (2.7, 11.3), (10, 200), (0, 5), (np.nan, 5)])
def test_f_tail_including_below_zero(dfn, dfd):
    """Below 0 (a statistic a rounding error took there) the tail is 1, as scipy.stats gives."""
    np.testing.assert_allclose(dist.f_sf(X, dfn, dfd), stats.f.sf(X, dfn, dfd), rtol=1e-12, equal_nan=True)


def test_normal_functions():
    np.testing.assert_allclose(dist.norm_cdf(X), stats.norm.cdf(X), rtol=1e-12, equal_nan=True)
    np.testing.assert_allclose(dist.norm_pdf(X), stats.norm.pdf(X), rtol=1e-12, atol=1e-300, equal_nan=True)
    q = np.array([0.0, 1e-9, 0.025, 0.5, 0.975, 1.0, np.nan])
    np.testing.assert_allclose(dist.norm_ppf(q), stats.norm.ppf(q), rtol=1e-12, equal_nan=True)
    assert dist.norm_ppf(0.975) == pytest.approx(1.959963984540054, abs=1e-12)  # the familiar 1.96
