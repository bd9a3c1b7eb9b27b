"""Effects in units, with intervals (lagsieve.evidence.effects, stats.correlation intervals).

Outside sources named beside each check:
- statsmodels OLS(...).fit(cov_type="HAC", cov_kwds={"maxlags": L, "use_correction": True}) for the
  corrected Newey-West standard error, and the plain OLS standard error;
- scipy.stats.pearsonr(...).confidence_interval() for Fisher's z interval at n_eff = n;
- hand formulas: Fisher z (tanh(atanh r -/+ 1.959964 / sqrt(n - 3))), ln(0.5) for a halving,
  100 (exp(v) - 1) for a log response;
- coverage measured on simulated AR(1) pairs (2,000 replicates, n = 30, phi = 0.5 in both).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from lagsieve.evidence.effects import add_effects, allowed_phrase, driver_step, effect_phrase, largest_allowed
from lagsieve.evidence.grading import build_evidence
from lagsieve.stats import correlation as st


def _ar1_batch(rng, reps, n, phi, burn=50):
    """reps independent AR(1) series (standard normal innovations), batched on axis 0."""
    e = rng.standard_normal((reps, n + burn))
    x = np.zeros_like(e)
    for t in range(1, n + burn):  # loop over time, batched over replicates
        x[:, t] = phi * x[:, t - 1] + e[:, t]
    return x[:, burn:]


# ----------------------------------------------------------------- slope interval
def test_slope_interval_uses_statsmodels_hac_se_with_correction():
    rng = np.random.default_rng(11)
    n = 30
    x = _ar1_batch(rng, 1, n, 0.5)[0]
    y = 0.8 * x + _ar1_batch(rng, 1, n, 0.5)[0]
    L = st.newey_west_lags(n)
    slope, se = st.hac_slope(x, y)
    X = sm.add_constant(x)
    hac = sm.OLS(y, X).fit(cov_type="HAC", cov_kwds={"maxlags": L, "use_correction": True})
    ols = sm.OLS(y, X).fit()
    r, n_eff = float(st.pearson_r(x, y)), float(st.effective_n(x, y))
    assert slope == pytest.approx(hac.params[1], rel=1e-10)
    # statsmodels' use_correction is the n/(n-k) scaling our interval applies (k = 2)
    assert se * np.sqrt(n / (n - 2)) == pytest.approx(hac.bse[1], rel=1e-10)
    df = n_eff - 2
    se_eff = ols.bse[1] * np.sqrt((n - 2) / df)  # plain OLS error rescaled to the effective sample size
    half = stats.t.ppf(0.975, df) * max(hac.bse[1], se_eff)
    lo, hi = st.slope_interval(slope, se, r, n, n_eff)
    assert (lo, hi) == pytest.approx((slope - half, slope + half), rel=1e-9)


def test_slope_interval_excludes_zero_exactly_when_the_effective_n_test_rejects():
    # the guard's t-test is correlation_p on n_eff (hand formula t = r sqrt(df / (1 - r^2)))
    r = np.array([0.2, 0.45, 0.6])
    slope = 2.0 * r  # sy / sx = 2
    n, n_eff = 30.0, 18.0
    se = np.full(3, 1e-6)  # a tiny HAC error: the guard decides
    lo, hi = st.slope_interval(slope, se, r, n, n_eff)
    excludes = (lo > 0) | (hi < 0)
    np.testing.assert_array_equal(excludes, st.correlation_p(r, n_eff) < 0.05)


def test_slope_interval_coverage_on_ar1_pairs():
    """2,000 independent AR(1) pairs (n = 30, phi = 0.5 both): the plain normal interval from the
    HAC error covers the true slope 0 about 83% of the time; ours about 95%."""
    rng = np.random.default_rng(2005)
    n, reps = 30, 2000
    x, y = _ar1_batch(rng, reps, n, 0.5), _ar1_batch(rng, reps, n, 0.5)
    slope, se = st.hac_slope(x, y)
    r, n_eff = st.pearson_r(x, y), st.effective_n(x, y)
    normal = np.mean(np.abs(slope) <= 1.959964 * se)
    lo, hi = st.slope_interval(slope, se, r, n, n_eff)
    ours = np.mean((lo <= 0) & (hi >= 0))
    print(f"coverage, n = 30, phi = 0.5: normal {normal:.3f}, ours {ours:.3f}")
    assert normal < 0.88
    assert 0.93 <= ours <= 0.97


def test_slope_interval_missing_inputs_stay_missing():
    lo, hi = st.slope_interval(np.nan, np.nan, np.nan, 20, np.nan)
    assert np.isnan(lo) and np.isnan(hi)
    lo, hi = st.slope_interval(0.0, 0.1, 0.0, 20, 12)  # r = 0: the HAC error alone
    assert hi == pytest.approx(stats.t.ppf(0.975, 10) * 0.1 * np.sqrt(20 / 18))


# ----------------------------------------------------------------- Fisher interval of r
def test_fisher_interval_matches_scipy_at_plain_n():
    rng = np.random.default_rng(3)
    x = rng.normal(size=25)
    y = 0.5 * x + rng.normal(size=25)
    res = stats.pearsonr(x, y)
    ci = res.confidence_interval(0.95)  # scipy: Fisher z on the number of pairs
    lo, hi = st.fisher_interval(res.statistic, 25)
    assert (lo, hi) == pytest.approx((ci.low, ci.high), abs=1e-12)


def test_fisher_interval_by_hand_on_effective_n_and_its_floor():
    # hand computation: r = 0.5, n_eff = 12: atanh(0.5) = 0.549306, half = 1.959964 / 3
    lo, hi = st.fisher_interval(0.5, 12.0)
    assert lo == pytest.approx(np.tanh(0.549306 - 0.653321), abs=1e-6)
    assert hi == pytest.approx(np.tanh(0.549306 + 0.653321), abs=1e-6)
    assert (lo, hi) == pytest.approx((-0.1038, 0.8345), abs=1e-3)
    # n_eff <= 4: the denominator n - 3 is floored at 1
    lo, hi = st.fisher_interval(0.3, 2.5)
    assert (lo, hi) == pytest.approx((np.tanh(np.arctanh(0.3) - 1.959964), np.tanh(np.arctanh(0.3) + 1.959964)),
                                     abs=1e-6)


# ----------------------------------------------------------------- effects in units
SERIES = [{"id": "M", "label": "natural mortality", "unit": "per year", "transform": "none"},
          {"id": "logM", "label": "natural mortality", "unit": "per year", "transform": "log"},
          {"id": "forage", "label": "forage biomass", "unit": "kt", "transform": "log"},
          {"id": "oxy", "label": "bottom oxygen", "unit": "ml/l", "transform": "none"},
          {"id": "seals", "label": "seal numbers", "transform": "none"},
          {"id": "catch", "label": "bycatch", "unit": "t", "transform": "log1p"}]


def _rows(**over):
    base = {"response": "M", "driver": "forage", "lag": 1, "n": 30, "r": -0.6, "n_eff": 20.0,
            "slope": -0.1, "slope_se": 0.02, "grade": "none"}
    return pd.DataFrame([{**base, **o} for o in over.get("rows", [{}])])


def test_log_driver_effect_is_the_halving_with_interval_carried():
    ev = add_effects(_rows(), SERIES)
    row = ev.iloc[0]
    # ln(0.5) = -0.693147: a halving of a natural-log driver (prep.align.apply_transform uses np.log)
    assert row["effect"] == pytest.approx(-0.1 * -0.693147, rel=1e-6)
    assert row["effect_ci_low"] == pytest.approx(row["slope_ci_high"] * np.log(0.5))
    assert row["effect_ci_high"] == pytest.approx(row["slope_ci_low"] * np.log(0.5))
    assert row["effect_basis"] == "for a halving of forage biomass"
    assert row["effect_unit"] == "per year"
    # set aside: the bound farthest from zero, with its sign
    assert row["effect_largest_allowed"] == pytest.approx(row["effect_ci_high"])


def test_unit_driver_no_unit_driver_and_supported_grade():
    rows = [{"driver": "oxy", "slope": 0.05, "r": 0.5, "grade": "strong"},
            {"driver": "seals", "slope": -0.02, "r": -0.4, "grade": "weak"}]
    ev = add_effects(_rows(rows=rows), SERIES)
    assert list(ev["effect_basis"]) == ["per 1 ml/l of bottom oxygen", "per unit of seal numbers"]
    np.testing.assert_allclose(ev["effect"], [0.05, -0.02])
    np.testing.assert_allclose(ev["effect_ci_low"], ev["slope_ci_low"])
    assert np.isnan(ev["effect_largest_allowed"].iloc[0])  # strong: no equivalence statement
    lo, hi = ev["effect_ci_low"].iloc[1], ev["effect_ci_high"].iloc[1]
    assert ev["effect_largest_allowed"].iloc[1] == (lo if abs(lo) > abs(hi) else hi)


def test_log_response_gives_percent_change():
    ev = add_effects(_rows(rows=[{"response": "logM", "driver": "oxy", "slope": 0.1, "r": 0.5}]), SERIES)
    row = ev.iloc[0]
    assert row["effect_unit"] == "%"
    assert row["effect"] == pytest.approx(100 * (np.exp(0.1) - 1))  # hand formula 100 (e^b - 1)
    assert row["effect_ci_low"] == pytest.approx(100 * np.expm1(row["slope_ci_low"]))


def test_log1p_driver_halving_from_its_median():
    screened = np.log1p([10.0, 30.0, 50.0])  # median 30 t
    step, words = driver_step(SERIES[-1], "catch", screened)
    assert step == pytest.approx(np.log(16.0 / 31.0))  # ln(1 + 15) - ln(1 + 30)
    assert words == "for a halving of bycatch from its median (30 t)"


def test_no_metadata_says_the_screened_scale():
    ev = add_effects(_rows(), None)
    assert ev["effect_basis"].iloc[0] == "per unit of forage on the scale it was screened"
    assert ev["effect"].iloc[0] == pytest.approx(-0.1)


def test_largest_allowed_is_the_far_bound():
    np.testing.assert_allclose(largest_allowed([-0.02, -0.5, 0.1], [0.09, 0.2, 0.3]), [0.09, -0.5, 0.3])


# ----------------------------------------------------------------- words
def test_effect_phrase_words():
    row = {"response": "M", "effect": 0.06, "effect_ci_low": 0.03, "effect_ci_high": 0.09,
           "effect_basis": "for a halving of forage biomass", "effect_unit": "per year",
           "effect_largest_allowed": 0.09}
    assert effect_phrase(row, response_label="M") == \
        "M rises by 0.060 per year (95% CI 0.030\u20130.090) for a halving of forage biomass"
    assert allowed_phrase(row, response_label="M") == ("effects on M larger than 0.090 per year for a halving "
                                                       "of forage biomass are unlikely (95% CI 0.030 to 0.090)")
    row.update(effect=-0.02, effect_ci_low=-0.05, effect_ci_high=0.01)
    assert effect_phrase(row) == \
        "M changes by -0.020 per year (95% CI -0.050 to 0.010) for a halving of forage biomass"
    row.update(effect=-12.3, effect_ci_low=-25.0, effect_ci_high=-3.0, effect_unit="%")
    assert effect_phrase(row, response_label="M").startswith("M falls by 12% (95% CI 3\u201325%)")
    assert "strong effect" not in effect_phrase(row)
    assert effect_phrase({"effect": np.nan}) == "" and allowed_phrase({"effect_largest_allowed": np.nan}) == ""


def test_effect_phrase_uses_given_unit_when_the_row_has_none():
    row = {"response": "M", "effect": 1.5, "effect_ci_low": 1.0, "effect_ci_high": 2.0,
           "effect_basis": "per 1 ml/l of bottom oxygen"}
    assert effect_phrase(row, "per year") == "M rises by 1.5 per year (95% CI 1.0\u20132.0) per 1 ml/l of bottom oxygen"


# ----------------------------------------------------------------- in the evidence table
def test_build_evidence_adds_the_effect_columns():
    years = np.arange(1990, 2020)
    table = pd.DataFrame({"M": np.linspace(0.2, 0.3, 30), "forage": np.linspace(1, 2, 30),
                          "oxy": np.cos(years)}, index=years)
    hyps = pd.DataFrame([{"response": "M", "driver": d, "lag": 1, "n": 29, "r": r, "n_eff": 20.0,
                          "slope": b, "slope_se": 0.01, "p_naive": 0.5, "p_surrogate": 0.5, "status": "ok",
                          "expected_sign": "any"} for d, r, b in (("forage", -0.3, -0.05), ("oxy", 0.1, 0.01))])
    ev = build_evidence(hyps, table, {"alpha": 0.05, "fdr": 0.1, "min_overlap": 15}, SERIES).set_index("driver")
    assert ev.loc["forage", "effect_basis"] == "for a halving of forage biomass"
    assert ev.loc["forage", "effect"] == pytest.approx(-0.05 * np.log(0.5))
    assert ev.loc["oxy", "effect_basis"] == "per 1 ml/l of bottom oxygen"
    assert ev[["slope_ci_low", "r_ci_low", "effect_largest_allowed"]].notna().all().all()
