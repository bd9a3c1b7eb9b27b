"""From statistics to evidence: q-values, flags, grades and ranks, in a fixed vocabulary.

The grade rule is documented in ``GRADE_RULES`` (shown in the report and the README) and
implemented in :func:`grade_row`. Its false-positive rate is measured by
``bench/calibration.py`` on simulated worlds where the truth is known.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from lagsieve.evidence.vocabulary import COLLINEAR_R, GRADE_ORDER, SHORT_OVERLAP_YEARS
from lagsieve.stats.multiplicity import bh_qvalues

#: Hypothesis columns the grading reads. A screen in which no hypothesis reached a stage (no
#: out-of-sample forecast anywhere, every pair constant) writes none of that stage's columns:
#: they are then added, empty, so that every hypothesis is graded by the same rules.
GRADED_COLUMNS = ("lag", "n", "r", "p_naive", "n_eff", "p_adjusted", "p_detrended", "p_surrogate",
                  "p_surrogate_lag", "oos_skill", "oos_skill_climatology", "oos_skill_persistence",
                  "oos_skill_trend", "oos_n", "oos_p_surrogate", "retest_skill")


def driver_correlations(table: pd.DataFrame, drivers: list[str], min_years: int = 10) -> pd.DataFrame:
    """Pairwise-complete Pearson r between drivers (transformed, same year); NaN below min_years."""
    return table[drivers].corr(method="pearson", min_periods=min_years)


def _get(row, key, default=np.nan):
    v = row.get(key, default)
    return default if v is None or (isinstance(v, float) and np.isnan(v)) else v


def _yes(row, key) -> bool:
    """A yes/no entry of a row; missing (NaN, as a CSV gives it for a hypothesis that never
    reached the check) is no."""
    v = row.get(key, False)
    return False if v is None or (isinstance(v, float) and np.isnan(v)) else bool(v)


def flags_for(row: dict, alpha: float, fdr: float) -> list[str]:
    """The flag codes of one hypothesis row (see ``FLAGS``)."""
    f = []
    status = str(row.get("status", "ok"))
    if status.startswith("failed"):
        return ["failed"]
    p_naive, p_s = _get(row, "p_naive"), _get(row, "p_surrogate")
    p_det = _get(row, "p_detrended")
    sk_trend = _get(row, "oos_skill_trend")
    n = _get(row, "n", 0)
    # a detrended test that could not be computed does not clear the trend
    if p_naive <= alpha and (not p_det <= alpha or not p_s <= alpha or (not np.isnan(sk_trend) and sk_trend <= 0)):
        f.append("trend-shared")
    if _get(row, "n_eff") < n / 2:
        f.append("autocorrelated")
    if _get(row, "lags_tried", 1) > 1 and _get(row, "p_surrogate_lag") <= alpha < p_s:
        f.append("lag-selected")
    if n < SHORT_OVERLAP_YEARS:
        f.append("short-overlap")
    if _get(row, "loo_max_change") > 0.2 or _yes(row, "loo_sign_flip"):
        f.append("influential-year")
    h1, h2 = _get(row, "r_first_half"), _get(row, "r_second_half")
    if (not np.isnan(h1) and not np.isnan(h2) and np.sign(h1) != np.sign(h2)) or _yes(row, "window_sign_flip"):
        f.append("unstable")
    significant = p_s <= alpha or _get(row, "q_value") <= fdr
    if significant and _get(row, "retest_skill") <= 0:
        f.append("failed-retest")
    if str(row.get("collinear_with", "") or ""):
        f.append("collinear")
    sign, r = row.get("expected_sign", "any"), _get(row, "r", 0.0)
    if (sign == "positive" and r < 0) or (sign == "negative" and r > 0):
        f.append("sign-unexpected")
    return f


def grade_row(row: dict, flags: list[str], alpha: float, fdr: float, min_overlap: int) -> str:
    """The grade of one hypothesis under ``GRADE_RULES`` (first rule that holds)."""
    if not str(row.get("status", "ok")).startswith("ok") or _get(row, "n", 0) < min_overlap \
            or np.isnan(_get(row, "oos_skill")):
        return "insufficient-data"
    sign_ok = "sign-unexpected" not in flags
    trend = "trend-shared" in flags
    skills = [_get(row, f"oos_skill_{b}") for b in ("climatology", "persistence", "trend")]
    q, ps, pos = _get(row, "q_value"), _get(row, "p_surrogate"), _get(row, "oos_p_surrogate")
    sk = _get(row, "oos_skill")
    retested = not np.isnan(_get(row, "retest_skill"))
    if q <= fdr and pos <= 0.05 and all(s > 0 for s in skills) and sign_ok and not trend \
            and "failed-retest" not in flags and retested:
        return "strong"
    if ps <= alpha and sk > 0 and pos <= 0.10 and sign_ok and not trend:
        return "moderate"
    if trend:
        return "spurious-trend"
    if _get(row, "p_adjusted") <= alpha or ps <= 0.10 or (sk > 0 and pos <= 0.20):
        return "weak"
    return "none"


def cap_collinear(ev: pd.DataFrame) -> pd.Series:
    """A strong driver collinear with a driver that forecasts better for the same response
    (higher out-of-sample skill, also graded strong) is capped at moderate: the data cannot
    tell the two apart, and the better forecaster is listed first."""
    grades = ev["grade"].copy()
    key = {(r, d): i for i, (r, d) in enumerate(zip(ev["response"], ev["driver"]))}
    for i, row in enumerate(ev.to_dict("records")):
        if row["grade"] != "strong" or not row.get("collinear_with"):
            continue
        for partner in str(row["collinear_with"]).split(";"):
            j = key.get((row["response"], partner))
            if j is not None and ev["grade"].iloc[j] == "strong" and ev["oos_skill"].iloc[j] > row["oos_skill"]:
                grades.iloc[i] = "moderate"
    return grades


def insufficient_reason(row: dict, min_overlap: int) -> str:
    """Why a hypothesis graded insufficient-data could not be judged, in plain words: the
    reason its status records, else the rule of :func:`grade_row` that it missed."""
    status = str(row.get("status", "") or "")
    kind, _, words = status.partition(":")
    if kind == "failed":
        return f"the computation failed ({words.strip()})"
    if kind == "insufficient" and words.strip():
        return words.strip()
    n = int(_get(row, "n", 0))
    if n < min_overlap:
        return f"{n} overlapping years, fewer than min_overlap {min_overlap}"
    return "no out-of-sample skill could be computed"


def summary_sentence(row: dict, min_overlap: int = 0) -> str:
    """A plain-words line for the report: what supports the hypothesis, or why it was set aside."""
    g = row["grade"]
    lag = row.get("lag")
    lead = "same year" if lag == 0 else f"{int(lag)}-year lead" if lag == lag and lag is not None else "no lag"
    r = _get(row, "r")
    direction = "positive" if r > 0 else "negative" if r < 0 else "no"
    sk, n_oos = _get(row, "oos_skill"), _get(row, "oos_n", 0)
    hardest = row.get("oos_hardest") or "hardest"
    q = _get(row, "q_value")
    if g in ("strong", "moderate", "weak"):
        skill = (f"adds {100 * sk:.0f}% skill over the {hardest} baseline over {int(n_oos)} forecasts"
                 if sk > 0 else f"no skill over the {hardest} baseline over {int(n_oos)} forecasts")
        return f"{lead}, {direction}: {g} ({skill}; q = {q:.2f})"
    flags = row.get("flags", "")
    if g == "spurious-trend":
        return f"{lead}, {direction}: set aside as a shared trend (naive p = {_get(row, 'p_naive'):.3f}; " \
               f"detrended r = {_get(row, 'r_detrended'):.2f}; surrogate p = {_get(row, 'p_surrogate'):.2f})"
    if g == "insufficient-data":
        return f"insufficient data: {insufficient_reason(row, min_overlap)}"
    return f"{lead}, {direction}: no support (surrogate p = {_get(row, 'p_surrogate'):.2f}; " \
           f"out-of-sample skill {sk:+.2f})" + (f"; flags: {flags}" if flags else "")


def build_evidence(hypotheses: pd.DataFrame, table: pd.DataFrame, screen: dict) -> pd.DataFrame:
    """Study-wide evidence: q-values over all hypotheses, collinearity, flags, grades, ranks."""
    ev = hypotheses.copy()
    for col in GRADED_COLUMNS:
        if col not in ev:
            ev[col] = np.nan
    alpha, fdr, min_overlap = screen["alpha"], screen["fdr"], screen["min_overlap"]
    ev["q_value"] = bh_qvalues(ev["p_surrogate"].to_numpy(float))
    drivers = sorted(ev["driver"].unique())
    corr = driver_correlations(table, drivers)
    partners = {}
    for d in drivers:
        c = corr[d].drop(d).abs()
        partners[d] = ";".join(sorted(c[c > COLLINEAR_R].index))
    ev["collinear_with"] = [
        ";".join(p for p in partners.get(d, "").split(";") if p and p in set(ev.loc[ev.response == r, "driver"]))
        for r, d in zip(ev["response"], ev["driver"])
    ]
    flags, grades = [], []
    for row in ev.to_dict("records"):
        f = flags_for(row, alpha, fdr)
        flags.append(";".join(f))
        grades.append(grade_row(row, f, alpha, fdr, min_overlap))
    ev["flags"] = flags
    ev["grade"] = grades
    ev["grade"] = cap_collinear(ev)
    ev["_g"] = ev["grade"].map(GRADE_ORDER)
    ev = ev.sort_values(["response", "_g", "oos_p_surrogate", "p_surrogate", "oos_skill"],
                        ascending=[True, True, True, True, False], na_position="last", kind="mergesort")
    ev["rank"] = ev.groupby("response").cumcount() + 1
    ev = ev.drop(columns="_g")
    ev["summary"] = [summary_sentence(r, min_overlap) for r in ev.to_dict("records")]
    return ev.reset_index(drop=True)
