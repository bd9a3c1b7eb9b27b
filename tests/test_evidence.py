"""Tests for lagsieve.evidence.grading: flags, grades, ranks, q-values, collinearity caps, and the
Granger-Newbold spurious-regression setting end to end.

Outside sources named beside each check:
- Rules under test: vocabulary.FLAGS and vocabulary.GRADE_RULES (the tool's documented vocabulary).
- BH q-values: Benjamini & Hochberg 1995, J. R. Stat. Soc. B 57:289-300 (checked against
  statsmodels.stats.multitest.multipletests(method="fdr_bh")).
- Spurious regressions between independent random walks: Granger & Newbold 1974,
  J. Econometrics 2:111-120.
- Collinearity threshold |r| > 0.7: Dormann et al. 2013, Ecography 36:27-46.
"""
from __future__ import annotations

import copy
import re

import numpy as np
import pandas as pd
import pytest
from helpers import REPO
from statsmodels.stats.multitest import multipletests

from lagsieve.io import config

from lagsieve.evidence import vocabulary

from lagsieve.screen import response as screening
from lagsieve.evidence.grading import build_evidence, cap_collinear, flags_for, grade_row

ALPHA, FDR, MIN_OVERLAP = 0.05, 0.10, 15


def strong_row(**kw):
    """A hand-built hypothesis row that meets every condition of 'strong' and raises no flag."""
    row = {
        "response": "R1", "driver": "a", "status": "ok", "n": 40, "lags_tried": 3, "lag": 1,
        "expected_sign": "positive", "r": 0.6,
        "p_naive": 0.0001, "p_adjusted": 0.001, "p_detrended": 0.001, "n_eff": 35.0,
        "p_surrogate": 0.001, "p_surrogate_lag": 0.001, "q_value": 0.01,
        "loo_max_change": 0.05, "loo_sign_flip": False,
        "break_p": 0.5,
        "retest_skill": 0.3, "collinear_with": "",
        "oos_skill": 0.3, "oos_skill_climatology": 0.5, "oos_skill_persistence": 0.4, "oos_skill_trend": 0.3,
        "oos_skill_trend_ar1": 0.35, "p_differenced": 0.002, "trend_p_response": 0.01, "trend_p_driver": 0.01,
        "driver_trend_r2": 0.3,
        "oos_p_surrogate": 0.01, "oos_n": 24, "oos_hardest": "trend",
    }
    row.update(kw)
    return row


def _flags(**kw):
    return flags_for(strong_row(**kw), ALPHA, FDR)


def _grade(**kw):
    row = strong_row(**kw)
    return grade_row(row, flags_for(row, ALPHA, FDR), ALPHA, FDR, MIN_OVERLAP)


def test_base_row_has_no_flags_and_is_strong():
    assert _flags() == []
    assert _grade() == "strong"


# ----------------------------------------------------------------- one test per flag
# a row whose naive correlation is significant, both series trend, nothing survives detrending or
# differencing, and the trend baseline forecasts as well: the shared-trend reason (GRADE_RULES)
SHARED = dict(p_detrended=0.3, p_differenced=0.4, oos_skill=-0.05, oos_skill_trend=-0.05, q_value=0.5,
              p_surrogate=0.3)


def test_flag_trend_shared_needs_every_part():
    assert "trend-shared" in _flags(**SHARED)
    assert "trend-shared" in _flags(**dict(SHARED, oos_skill_trend=0.1, oos_skill_trend_ar1=-0.01))  # either trend
    assert "trend-shared" in _flags(**dict(SHARED, p_naive=0.05))  # boundary: p <= alpha
    assert "trend-shared" not in _flags(**dict(SHARED, p_naive=0.2))  # not naively significant
    assert "trend-shared" not in _flags(**dict(SHARED, p_detrended=0.01))  # survives detrending
    assert "trend-shared" not in _flags(**dict(SHARED, p_differenced=0.01))  # survives differencing
    assert "trend-shared" not in _flags(**dict(SHARED, trend_p_response=0.3))  # the response has no trend
    assert "trend-shared" not in _flags(**dict(SHARED, trend_p_driver=0.3))  # the driver has no trend
    assert "trend-shared" not in _flags(**dict(SHARED, oos_skill_trend=0.05))  # both trend baselines beaten
    # a trend test that could not be made counts as a trend (conservative)
    assert "trend-shared" in _flags(**dict(SHARED, trend_p_driver=np.nan))
    # a correlation that survives detrending is never called a shared trend (GUIDE vocabulary)
    assert "trend-shared" not in _flags(p_detrended=0.01, p_surrogate=0.3, q_value=0.5)


def test_flag_driver_trend():
    assert "driver-trend" in _flags(driver_trend_r2=0.8)
    assert "driver-trend" not in _flags(driver_trend_r2=0.79)
    assert "driver-trend" not in _flags(driver_trend_r2=np.nan)


def test_reason_flags_are_exclusive():
    reasons = {"trend-shared", "autocorrelation-only", "no-forecast-skill"}
    assert reasons & set(_flags(**SHARED)) == {"trend-shared"}
    assert reasons & set(_flags(p_surrogate=0.2, q_value=0.5)) == {"autocorrelation-only"}
    assert reasons & set(_flags(oos_skill=-0.01, oos_skill_trend=-0.01)) == {"no-forecast-skill"}
    assert reasons & set(_flags(oos_p_surrogate=0.11)) == {"no-forecast-skill"}
    assert reasons & set(_flags()) == set()


def test_flag_autocorrelated():
    assert "autocorrelated" in _flags(n_eff=19.9)  # n = 40: below n / 2
    assert "autocorrelated" not in _flags(n_eff=20.0)
    assert "autocorrelated" not in _flags(n_eff=np.nan)


def test_flag_lag_selected():
    f = _flags(p_surrogate_lag=0.01, p_surrogate=0.2)
    assert "lag-selected" in f
    assert "lag-selected" not in _flags(p_surrogate_lag=0.01, p_surrogate=0.2, lags_tried=1)
    assert "lag-selected" not in _flags(p_surrogate_lag=0.01, p_surrogate=0.04)  # survives the payment
    assert "lag-selected" not in _flags(p_surrogate_lag=0.06, p_surrogate=0.2)


def test_flag_short_overlap():
    assert "short-overlap" in _flags(n=24)
    assert "short-overlap" not in _flags(n=25)
    assert vocabulary.SHORT_OVERLAP_YEARS == 25


def test_flag_influential_year():
    assert "influential-year" in _flags(loo_max_change=0.21)
    assert "influential-year" not in _flags(loo_max_change=0.2)
    assert "influential-year" in _flags(loo_sign_flip=True)


def test_flag_unstable():
    # the break test's surrogate p at alpha (tests/test_breaks.py checks the test itself)
    assert "unstable" in _flags(break_p=0.05)
    assert "unstable" not in _flags(break_p=0.051)
    assert "unstable" not in _flags(break_p=np.nan)  # not tested: too few years or graded below weak
    # the old split-half rule is gone: halves of opposite sign alone raise nothing
    assert "unstable" not in _flags(r_first_half=-0.1, r_second_half=0.6, window_sign_flip=True)


def test_flag_failed_retest():
    assert "failed-retest" in _flags(retest_skill=0.0)
    assert "failed-retest" in _flags(retest_skill=-0.2, p_surrogate=0.2, q_value=0.05)  # significant by q
    # not significant in sample: a failed re-test is not flagged
    assert "failed-retest" not in _flags(retest_skill=-0.2, p_surrogate=0.2, q_value=0.5)
    assert "failed-retest" not in _flags(retest_skill=np.nan)


def test_flag_collinear():
    assert "collinear" in _flags(collinear_with="b")
    assert "collinear" not in _flags(collinear_with=None)
    assert "collinear" not in _flags(collinear_with="")


def test_flag_sign_unexpected():
    assert "sign-unexpected" in _flags(expected_sign="positive", r=-0.6)
    assert "sign-unexpected" in _flags(expected_sign="negative", r=0.6)
    assert "sign-unexpected" not in _flags(expected_sign="negative", r=-0.6)
    assert "sign-unexpected" not in _flags(expected_sign="any", r=-0.6)


def test_flag_failed_status_only():
    assert _flags(status="failed: singular matrix", n=3) == ["failed"]


def test_every_flag_code_is_documented():
    row = strong_row(n_eff=5, p_surrogate_lag=0.01, p_surrogate=0.2, n=20, driver_trend_r2=0.9,
                     loo_max_change=0.5, break_p=0.01, retest_skill=-1, q_value=0.01,
                     collinear_with="b", r=-0.6)
    others = {"failed", "trend-shared", "no-forecast-skill"}  # the reasons are exclusive: one per row
    f = set(flags_for(row, ALPHA, FDR))
    f |= set(flags_for(strong_row(**SHARED), ALPHA, FDR)) | set(flags_for(strong_row(oos_skill=-0.1), ALPHA, FDR))
    # explained-by-rival is given after grading, by evidence.rivals.cap_by_rivals (tests/test_conditional.py)
    assert f == set(vocabulary.FLAGS) - {"failed", "explained-by-rival"}
    assert others - {"failed"} <= f


# ----------------------------------------------------------------- one test per grade
def test_grade_strong_needs_every_condition():
    assert _grade() == "strong"
    assert _grade(q_value=0.11) != "strong"
    assert _grade(oos_p_surrogate=0.06) != "strong"
    assert _grade(oos_skill_persistence=-0.01) != "strong"  # skill > 0 against every baseline
    assert _grade(oos_skill_climatology=0.0) != "strong"
    assert _grade(r=-0.6) != "strong"  # sign stated beforehand
    assert _grade(retest_skill=-0.1) != "strong"  # failed-retest
    assert _grade(**dict(SHARED, q_value=0.01, oos_p_surrogate=0.01)) != "strong"  # trend-shared
    assert _grade(oos_skill_trend_ar1=-0.01) != "strong"  # the fourth baseline counts too
    # a correlation that collapses after detrending but forecasts better than every baseline stays strong
    assert _grade(p_detrended=0.3) == "strong"


def test_grade_moderate():
    # q above the FDR level, but paid-for surrogate p <= alpha, positive skill, skill p <= 0.10
    assert _grade(q_value=0.2) == "moderate"
    assert _grade(oos_p_surrogate=0.08) == "moderate"
    assert _grade(q_value=0.2, oos_p_surrogate=0.11) != "moderate"
    assert _grade(q_value=0.2, oos_skill=-0.01, oos_skill_trend=-0.01) != "moderate"


def test_grade_weak():
    base = dict(p_naive=0.2, q_value=0.5, p_surrogate=0.5, oos_p_surrogate=0.5, oos_skill=-0.1,
                oos_skill_trend=-0.1, p_adjusted=0.2)
    assert _grade(**base) == "none"
    assert _grade(**dict(base, p_adjusted=0.04)) == "weak"
    assert _grade(**dict(base, p_surrogate=0.09)) == "weak"
    assert _grade(**dict(base, oos_skill=0.05, oos_skill_trend=0.05, oos_p_surrogate=0.2)) == "weak"
    assert _grade(**dict(base, oos_skill=0.05, oos_skill_trend=0.05, oos_p_surrogate=0.21)) == "none"
    # supported in sample and out of sample, but the sign is the opposite of the one stated: weak
    assert _grade(r=-0.6) == "weak"


def test_grade_none():
    assert _grade(p_naive=0.4, p_adjusted=0.5, p_detrended=0.5, p_surrogate=0.6, q_value=0.8,
                  oos_skill=-0.2, oos_skill_trend=-0.2, oos_p_surrogate=0.7) == "none"


def test_grade_spurious_trend_and_trend_confounded():
    assert _grade(**SHARED) == "spurious-trend"
    assert _grade(**dict(SHARED, driver_trend_r2=0.95)) == "trend-confounded"
    # in-sample support does not rescue a shared trend: it blocks moderate too
    assert _grade(**dict(SHARED, p_surrogate=0.01, q_value=0.2)) == "spurious-trend"


def test_grade_autocorrelation_only():
    # survives detrending, not surrogates with the same spectrum
    assert _grade(p_surrogate=0.2, q_value=0.5) == "autocorrelation-only"
    assert _grade(p_surrogate=0.08, q_value=0.5) == "autocorrelation-only"  # once weak, now named
    # not naively significant: nothing to set aside; the forecasts' support keeps it weak
    assert _grade(p_surrogate=0.2, q_value=0.5, p_naive=0.06, p_adjusted=0.2) == "weak"


def test_grade_no_forecast_skill():
    assert _grade(oos_skill=-0.02, oos_skill_trend=-0.02) == "no-forecast-skill"
    assert _grade(oos_p_surrogate=0.2, q_value=0.5) == "no-forecast-skill"


def test_grade_insufficient_data():
    assert _grade(n=14) == "insufficient-data"  # below min_overlap
    assert _grade(oos_skill=np.nan) == "insufficient-data"
    assert _grade(status="insufficient: no lag has 6 overlapping years") == "insufficient-data"
    assert _grade(status="failed: boom") == "insufficient-data"


def test_grade_vocabulary_documented():
    assert set(vocabulary.GRADES) == set(vocabulary.GRADE_RULES) == set(vocabulary.GRADE_ORDER)


# ----------------------------------------------------------------- build_evidence
def _study_table(seed=0, n=40):
    rng = np.random.default_rng(seed)
    a = rng.normal(size=n)
    return pd.DataFrame({
        "R1": rng.normal(size=n), "R2": rng.normal(size=n),
        "a": a, "b": a + 0.3 * rng.normal(size=n),  # r(a, b) ~ 0.96: collinear
        "c": rng.normal(size=n), "d": rng.normal(size=n),
    }, index=pd.Index(np.arange(1980, 1980 + n), name="year"))


def _hyps():
    rows = [
        strong_row(response="R1", driver="c", p_surrogate=0.004, oos_skill=0.3, oos_p_surrogate=0.01),
        strong_row(response="R1", driver="d", p_surrogate=0.6, p_naive=0.3, p_adjusted=0.5,
                   oos_skill=-0.2, oos_skill_trend=-0.2, oos_p_surrogate=0.8),  # none
        strong_row(response="R1", driver="a", p_surrogate=0.002, oos_skill=0.2, oos_p_surrogate=0.02),
        strong_row(response="R2", driver="c", p_surrogate=0.03, oos_skill=0.1, oos_p_surrogate=0.04,
                   n=10),  # insufficient (n < 15)
        strong_row(response="R2", driver="d", p_surrogate=0.001, oos_skill=0.35, oos_p_surrogate=0.01),
        strong_row(response="R2", driver="b", **SHARED),  # spurious-trend
    ]
    for r in rows:
        for k in ("q_value", "collinear_with"):
            r.pop(k)
    return pd.DataFrame(rows)


def _screen():
    return copy.deepcopy(config.SCREEN_DEFAULTS)


def test_build_evidence_q_values_grades_and_ranks():
    hyps = _hyps()
    ev = build_evidence(hyps, _study_table(), _screen())
    assert len(ev) == 6
    # study-wide BH q-values over all six p_surrogate, matched by (response, driver)
    q_ref = multipletests(hyps["p_surrogate"], method="fdr_bh")[1]
    ref = dict(zip(zip(hyps.response, hyps.driver), q_ref))
    for r, d, q in zip(ev.response, ev.driver, ev.q_value):
        assert q == pytest.approx(ref[(r, d)], rel=1e-12)
    g = dict(zip(zip(ev.response, ev.driver), ev.grade))
    assert g == {("R1", "c"): "strong", ("R1", "a"): "strong", ("R1", "d"): "none",
                 ("R2", "d"): "strong", ("R2", "b"): "spurious-trend", ("R2", "c"): "insufficient-data"}
    # ranks: 1..k within each response, in grade order; among equal grades the smaller
    # out-of-sample surrogate p first (c: 0.01 before a: 0.02)
    r1 = ev[ev.response == "R1"]
    assert r1["driver"].tolist() == ["c", "a", "d"]
    assert r1["rank"].tolist() == [1, 2, 3]
    r2 = ev[ev.response == "R2"]
    assert r2["driver"].tolist() == ["d", "b", "c"]
    assert r2["rank"].tolist() == [1, 2, 3]
    assert ev.loc[ev["rank"] == 1, "grade"].tolist() == ["strong", "strong"]
    # collinear partners are listed only when screened for the same response
    cw = dict(zip(zip(ev.response, ev.driver), ev.collinear_with))
    assert cw[("R1", "a")] == "" and cw[("R2", "b")] == ""
    assert all(isinstance(s, str) and s for s in ev["summary"])


def test_build_evidence_rank_ties_broken_by_surrogate_p_then_skill():
    rows = [strong_row(driver=d, p_surrogate=ps, oos_p_surrogate=0.01, oos_skill=sk)
            for d, ps, sk in (("c", 0.004, 0.2), ("d", 0.004, 0.5), ("a", 0.001, 0.1))]
    for r in rows:
        r.pop("q_value"), r.pop("collinear_with")
    ev = build_evidence(pd.DataFrame(rows), _study_table(), _screen())
    assert ev["driver"].tolist() == ["a", "d", "c"]  # smaller p_surrogate, then higher skill
    assert ev["rank"].tolist() == [1, 2, 3]


def test_build_evidence_caps_collinear_strong_driver():
    # a and b are collinear (|r| ~ 0.96 > 0.7); both strong for R1; b forecasts better, so a is
    # capped at moderate and listed after b.
    rows = [strong_row(driver="a", oos_skill=0.2, p_surrogate=0.001),
            strong_row(driver="b", oos_skill=0.4, p_surrogate=0.002),
            strong_row(driver="c", oos_skill=0.1, p_surrogate=0.003)]
    for r in rows:
        r.pop("q_value"), r.pop("collinear_with")
    table = _study_table()
    assert abs(table["a"].corr(table["b"])) > vocabulary.COLLINEAR_R
    ev = build_evidence(pd.DataFrame(rows), table, _screen())
    g = dict(zip(ev.driver, ev.grade))
    assert g == {"a": "moderate", "b": "strong", "c": "strong"}
    cw = dict(zip(ev.driver, ev.collinear_with))
    assert cw == {"a": "b", "b": "a", "c": ""}
    assert "collinear" in ev.loc[ev.driver == "a", "flags"].iloc[0]
    assert ev.loc[ev.driver == "a", "rank"].iloc[0] == 3


def test_cap_collinear_rules():
    ev = pd.DataFrame({
        "response": ["R1"] * 4 + ["R2"],
        "driver": ["a", "b", "c", "e", "a"],
        "grade": ["strong", "strong", "strong", "moderate", "strong"],
        "collinear_with": ["b", "a", "e", "c", "b"],
        "oos_skill": [0.2, 0.4, 0.1, 0.9, 0.1],
    })
    capped = cap_collinear(ev).tolist()
    # a: partner b strong and better -> moderate; b: partner a worse -> stays strong;
    # c: partner e better but only moderate -> stays strong; R2/a: partner b not screened for R2.
    assert capped == ["moderate", "strong", "strong", "moderate", "strong"]
    assert ev["grade"].tolist()[0] == "strong"  # input not modified


# ----------------------------------------------------------------- Granger & Newbold 1974
def test_granger_newbold_random_walks_not_graded_strong():
    # Granger & Newbold 1974 (J. Econometrics 2:111-120): the naive regression/correlation test
    # between independent random walks rejects far more often than its nominal level.
    # 60 seeded pairs, n = 50, lags 0..2, 99 surrogates; each pair screened and graded on its own.
    # Measured: naive p < 0.05 at lag 0 in 45/60 (0.75) and at the best lag in 49/60 (0.82);
    # Pyper-Peterman adjusted p < 0.05 in 9/60 (0.15); surrogate p (lag paid) <= 0.05 in
    # 4/60 (0.067); graded strong 1/60 (0.017). With one reason per verdict (issue 15), measured:
    # autocorrelation-only 41, none 11, no-forecast-skill 4, trend-confounded 3, spurious-trend 1:
    # the surrogates with the same spectrum, not detrending, are what sets random walks aside.
    lags = [0, 1, 2]
    sc = copy.deepcopy(config.SCREEN_DEFAULTS)
    sc.update(surrogates=99, lags=lags)
    n = 50
    years = np.arange(1970, 1970 + n)
    p0, pbest, padj, grades = [], [], [], []
    for seed in range(60):
        rng = np.random.default_rng(3000 + seed)
        table = pd.DataFrame({"y": np.cumsum(rng.normal(size=n)), "x": np.cumsum(rng.normal(size=n))},
                             index=pd.Index(years, name="year"))
        s, h, _, _ = screening.screen_hypothesis(table, {"id": "y"}, {"id": "x"}, lags, sc)
        ev = build_evidence(pd.DataFrame([h]), table, sc)
        p0.append(float(s.loc[s.lag == 0, "p_naive"].iloc[0]))
        pbest.append(h["p_naive"])
        padj.append(h["p_adjusted"])
        grades.append(ev["grade"].iloc[0])
    naive_rate = np.mean(np.array(p0) < 0.05)
    assert naive_rate > 0.5  # measured 0.75
    assert np.mean(np.array(pbest) < 0.05) >= naive_rate
    assert np.mean(np.array(padj) < 0.05) < 0.25  # measured 0.15
    strong_share = grades.count("strong") / len(grades)
    assert strong_share <= 0.05  # measured 1/60
    assert grades.count("autocorrelation-only") >= 30
    assert grades.count("moderate") + grades.count("strong") <= 6


# ----------------------------------------------------------------- one reason, one word (issue 15)
def _ar1(rng, n, phi):
    """Stationary AR(1) with unit marginal variance."""
    e = rng.normal(size=n) * np.sqrt(1 - phi * phi)
    x = np.empty(n)
    x[0] = rng.normal()
    for t in range(1, n):
        x[t] = phi * x[t - 1] + e[t]
    return x


def test_trend_free_world_is_never_called_a_shared_trend():
    """A world in which no series has a trend: independent AR(1) pairs (phi 0.3, 0.6, 0.9) and,
    in every fourth world, a planted one-year-lagged effect (corr 0.7), n = 40 pairs, lags 0-2,
    99 surrogates. Before the reasons were separated, the single flag `trend-shared` fired on
    14 of these 60 hypotheses (the old rule is recomputed below); the issue's target is at most
    5% shared-trend verdicts. Measured with this code: 0 of 60; null pairs: none 31,
    autocorrelation-only 11, weak 1, moderate 1, strong 1; planted: strong 7, moderate 4,
    autocorrelation-only 3, no-forecast-skill 1."""
    sc = copy.deepcopy(config.SCREEN_DEFAULTS)
    sc.update(surrogates=99, lags=[0, 1, 2])
    n, grades, old_rule = 42, [], 0
    for seed in range(60):
        rng = np.random.default_rng(7100 + seed)
        phi = (0.3, 0.6, 0.9)[seed % 3]
        x, y = _ar1(rng, n, phi), _ar1(rng, n, phi)
        if seed % 4 == 0:
            y = 0.7 / np.sqrt(1 - 0.49) * np.r_[np.nan, x[:-1]] + rng.normal(size=n)
        y[:2] = np.nan
        table = pd.DataFrame({"y": y, "x": x}, index=pd.Index(np.arange(1970, 1970 + n), name="year"))
        _, h, _, _ = screening.screen_hypothesis(table, {"id": "y"}, {"id": "x"}, [0, 1, 2], sc)
        grades.append(build_evidence(pd.DataFrame([h]), table, sc)["grade"].iloc[0])
        old_rule += h["p_naive"] <= ALPHA and (not h["p_detrended"] <= ALPHA or not h["p_surrogate"] <= ALPHA
                                               or h["oos_skill_trend"] <= 0)
    shared = sum(g in ("spurious-trend", "trend-confounded") for g in grades)
    assert shared <= 3  # at most 5% of 60
    assert old_rule >= 10  # the world is one where the single old flag misfired (measured 14)
    planted = [g for i, g in enumerate(grades) if i % 4 == 0]
    assert sum(g in vocabulary.SUPPORTED for g in planted) >= 9  # measured 11 of 15


def test_a_linear_driver_is_trend_confounded_not_spurious():
    """A driver that is a straight line plus a little noise, against a trending response with no
    link: the screen cannot tell the driver from a trend, and says exactly that. Measured:
    trend-confounded 11 of 12, autocorrelation-only 1."""
    sc = copy.deepcopy(config.SCREEN_DEFAULTS)
    sc.update(surrogates=99, lags=[0, 1])
    found = []
    for seed in range(12):
        rng = np.random.default_rng(500 + seed)
        t = np.arange(41, dtype=float)
        x = t / 10 + 0.3 * rng.normal(size=41)
        y = t / 10 + _ar1(rng, 41, 0.5)
        y[0] = np.nan
        table = pd.DataFrame({"y": y, "x": x}, index=pd.Index(np.arange(1980, 2021), name="year"))
        _, h, _, _ = screening.screen_hypothesis(table, {"id": "y"}, {"id": "x"}, [0, 1], sc)
        ev = build_evidence(pd.DataFrame([h]), table, sc).iloc[0]
        assert h["driver_trend_r2"] > 0.9 and "driver-trend" in ev["flags"]
        found.append(ev["grade"])
    assert "spurious-trend" not in found
    assert found.count("trend-confounded") >= 6, found
    assert not set(found) & set(vocabulary.SUPPORTED)


def test_readme_tables_document_every_grade_and_flag():
    """The README's grade and flag tables name every code of the vocabulary, and no other (the
    documentation stays true; common practice, no outside source)."""
    text = (REPO / "README.md").read_text(encoding="utf-8")
    grades = text[text.index("### Grades"):text.index("### Flags")]
    flags = text[text.index("### Flags"):text.index("## Output files")]
    assert re.findall(r"^\| `([a-z-]+)` \|", grades, re.M) == list(vocabulary.GRADES)
    assert re.findall(r"^\| `([a-z-]+)` \|", flags, re.M) == list(vocabulary.FLAGS)
