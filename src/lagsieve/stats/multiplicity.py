"""Multiple-testing control across all hypotheses of a study.

Benjamini, Y. & Hochberg, Y. (1995) Controlling the false discovery rate: a practical and
powerful approach to multiple testing. J. R. Stat. Soc. B 57:289-300.
"""
from __future__ import annotations

import numpy as np


def bh_qvalues(p: np.ndarray) -> np.ndarray:
    """Benjamini-Hochberg adjusted p-values (q-values): q_(i) = min_{k >= i} m p_(k) / k.

    Computed by ``scipy.stats.false_discovery_control(method="bh")`` on the non-missing
    values: NaN p-values keep NaN and do not count in m. Equals statsmodels'
    ``multipletests(p, method="fdr_bh")[1]`` on the non-missing values.
    """
    # imported here: the report reaches this module through the grade rule and needs no
    # q-values, and scipy.stats costs a job about 0.3 s of CPU to import (-X importtime)
    from scipy.stats import false_discovery_control

    p = np.asarray(p, float)
    q = np.full_like(p, np.nan)
    ok = ~np.isnan(p)
    if ok.any():
        q[ok] = false_discovery_control(p[ok], method="bh")
    return q


def simes_p(p: np.ndarray) -> float:
    """Simes' (1986, Biometrika 73:751-754) p of the intersection "no hypothesis of the set
    holds": min over k of m p_(k) / k on the non-missing values (NaN when none). It equals the
    smallest Benjamini-Hochberg q-value of the set, and is valid for positively dependent tests
    (Sarkar 1998, Ann. Stat. 26:494-504), such as the age groups of one series against one driver;
    Benjamini & Bogomolov (2014) use it to select families."""
    p = np.asarray(p, float)
    p = np.sort(p[~np.isnan(p)])
    if not len(p):
        return float("nan")
    return float(min(1.0, np.min(len(p) * p / np.arange(1, len(p) + 1))))


def family_level_q(p: np.ndarray, family: np.ndarray, family_p: np.ndarray) -> np.ndarray:
    """Per hypothesis, the Benjamini-Hochberg q-value of its family among all families (one p
    per family: ``family_p``, or the hypothesis's own p for a family of one; see
    :func:`family_qvalues`)."""
    p, family_p = np.asarray(p, float), np.asarray(family_p, float)
    family = np.asarray(family, object)
    own = np.where(np.isnan(family_p), p, family_p)
    labels, first, back = np.unique(family, return_index=True, return_inverse=True)
    return bh_qvalues(own[first])[back.reshape(-1)]


def family_qvalues(p: np.ndarray, family: np.ndarray, family_p: np.ndarray, level: float) -> np.ndarray:
    """Adjusted p-values of hypotheses tested in families (Benjamini & Bogomolov 2014, Selective
    inference on multiple families of hypotheses, J. R. Stat. Soc. B 76:297-318).

    ``family`` (n,) labels the hypotheses of one family; ``family_p`` (n,) is the p of the
    family's own test of "no hypothesis of the family holds" (the same value on every member;
    NaN for a hypothesis alone, whose own p stands for its family). The families are selected
    by Benjamini-Hochberg at ``level`` (R of m selected), and within a selected family its
    hypotheses by Benjamini-Hochberg at level R q / m. Returned per hypothesis: its family's
    BH q-value for a family of one (the plain BH q-values when every family has one member),
    else max(family q, within-family q m / R) capped at 1, which is <= ``level`` exactly when
    the two-stage procedure rejects the hypothesis at ``level`` (the value depends on ``level``
    through R). The expected share of false discoveries among the selected families is at
    most ``level``, and so is the average over them of the share within each family."""
    p, family = np.asarray(p, float), np.asarray(family, object)
    q = family_level_q(p, family, family_p)
    labels, first = np.unique(family, return_index=True)
    m = int(np.sum(~np.isnan(q[first])))
    r = max(1, int(np.sum(q[first] <= level)))
    for f in labels:
        members = np.flatnonzero(family == f)
        if len(members) > 1:
            within = bh_qvalues(p[members]) * m / r
            q[members] = np.minimum(np.maximum(q[members], within), 1.0)
    return q
