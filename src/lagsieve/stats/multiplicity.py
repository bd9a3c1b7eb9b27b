"""Multiple-testing control across all hypotheses of a study.

Benjamini, Y. & Hochberg, Y. (1995) Controlling the false discovery rate: a practical and
powerful approach to multiple testing. J. R. Stat. Soc. B 57:289-300.
"""
from __future__ import annotations

import numpy as np
from scipy import stats


def bh_qvalues(p: np.ndarray) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values (q-values): q_(i) = min_{k >= i} m p_(k) / k.

    Computed by ``scipy.stats.false_discovery_control(method="bh")`` on the non-missing
    values: NaN p-values keep NaN and do not count in m. Equals statsmodels'
    ``multipletests(p, method="fdr_bh")[1]`` on the non-missing values.
    """
    p = np.asarray(p, float)
    q = np.full_like(p, np.nan)
    ok = ~np.isnan(p)
    if ok.any():
        q[ok] = stats.false_discovery_control(p[ok], method="bh")
    return q
