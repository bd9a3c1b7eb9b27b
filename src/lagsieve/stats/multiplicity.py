"""Multiple-testing control across all hypotheses of a study.

Benjamini, Y. & Hochberg, Y. (1995) Controlling the false discovery rate: a practical and
powerful approach to multiple testing. J. R. Stat. Soc. B 57:289-300.
"""
from __future__ import annotations

import numpy as np


def bh_qvalues(p: np.ndarray) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values (q-values): q_(i) = min_{k >= i} m p_(k) / k.

    NaN p-values are ignored (they keep NaN and do not count in m). Equals statsmodels'
    ``multipletests(p, method="fdr_bh")[1]`` on the non-missing values.
    """
    p = np.asarray(p, float)
    q = np.full_like(p, np.nan)
    ok = ~np.isnan(p)
    m = int(ok.sum())
    if m == 0:
        return q
    pv = p[ok]
    order = np.argsort(pv, kind="mergesort")
    ranked = pv[order] * m / np.arange(1, m + 1)
    ranked = np.minimum.accumulate(ranked[::-1])[::-1]
    out = np.empty(m)
    out[order] = np.minimum(ranked, 1.0)
    q[ok] = out
    return q
