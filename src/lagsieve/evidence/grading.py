"""From statistics to evidence: q-values, flags, grades and ranks, in a fixed vocabulary.

The grade rule is documented in ``GRADE_RULES`` (shown in the report and the README) and
implemented in :func:`grade_row`. Its false-positive rate is measured by
``bench/calibration.py`` on simulated worlds where the truth is known.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from lagsieve.evidence.effects import add_effects, allowed_phrase, effect_phrase
from lagsieve.evidence.vocabulary import COLLINEAR_R, DRIVER_TREND_R2, GRADE_ORDER, SHORT_OVERLAP_YEARS, SUPPORTED
from lagsieve.formats import skill_percent
from lagsieve.stats.backtest import BASELINES
from lagsieve.stats.multiplicity import bh_qvalues, family_qvalues, simes_p

#: Hypothesis columns the grading reads. A screen in which no hypothesis reached a stage (no
#: out-of-sample forecast anywhere, every pair constant) writes none of that stage's columns:
#: they are then added, empty, so that every hypothesis is graded by the same rules.
GRADED_COLUMNS = ("lag", "n", "r", "p_naive", "n_eff", "p_adjusted", "p_detrended", "p_differenced",
                  "trend_p_response", "trend_p_driver", "driver_trend_r2", "p_surrogate", "p_surrogate_lag",
                  "oos_skill", *(f"oos_skill_{b}" for b in BASELINES), "oos_n", "oos_p_surrogate", "retest_skill")
TREND_BASELINES = tuple(b for b in BASELINES if b.startswith("trend"))  # the baselines that forecast a trend


def driver_correlations(table: pd.DataFrame, drivers: list[str], min_years: int = 10) -> pd.DataFrame:
    """Pairwise-complete Pearson r between drivers (transformed, same year); NaN below min_years."""
    return lagged_driver_correlations(table, dict.fromkeys(drivers, 0), min_years)


def lagged_driver_correlations(table: pd.DataFrame, lags: dict[str, int], min_years: int = 10) -> pd.DataFrame:
    """Pairwise-complete Pearson r between drivers as they are paired with one response: each
    driver shifted by its own lag (row t holds driver d of year t - lags[d]); NaN below min_years.
    Two drivers that echo each other at another lag are collinear where they meet the response."""
    shifted = pd.DataFrame({d: table[d].shift(int(k)) for d, k in lags.items()}, index=table.index)
    return shifted.corr(method="pearson", min_periods=min_years)


def collinear_partners(ev: pd.DataFrame, table: pd.DataFrame) -> list[str]:
    """For every hypothesis, the other drivers of its response correlated with it at |r| >
    COLLINEAR_R at the lags paired with the response (``;``-joined, sorted); a hypothesis
    without a lag is taken at lag 0."""
    out = pd.Series("", index=ev.index, dtype=object)
    for rid, grp in ev.groupby("response", sort=False):
        lags = {d: (0 if pd.isna(k) else int(k)) for d, k in zip(grp["driver"], grp["lag"])}
        corr = lagged_driver_correlations(table, lags)
        for i, d in zip(grp.index, grp["driver"]):
            c = corr[d].drop(d).abs()
            out[i] = ";".join(sorted(c[c > COLLINEAR_R].index))
    return out.tolist()


def _get(row, key, default=np.nan):
    v = row.get(key, default)
    return default if v is None or (isinstance(v, float) and np.isnan(v)) else v


def _yes(row, key) -> bool:
    """A yes/no entry of a row; missing (NaN, as a CSV gives it for a hypothesis that never
    reached the check) is no."""
    v = row.get(key, False)
    return False if v is None or (isinstance(v, float) and np.isnan(v)) else bool(v)


def _at_most(value: float, level: float) -> bool:
    """value <= level; a value that could not be computed (NaN) is not significant."""
    return bool(value <= level)


def shared_trend(row: dict, alpha: float) -> bool:
    """The shared-trend reason (flag ``trend-shared``): naively significant; both series carry
    a significant trend (:func:`lagsieve.stats.correlation.trend_test`; a test that is missing
    counts as a trend); neither the detrended nor the differenced correlation is significant;
    and a trend baseline forecasts as well as the candidate (skill <= 0 against the harder of
    the trend baselines; missing skill counts as not beaten)."""
    if not _at_most(_get(row, "p_naive"), alpha):
        return False
    trends = all(not _get(row, k) > alpha for k in ("trend_p_response", "trend_p_driver"))
    gone = not _at_most(_get(row, "p_detrended"), alpha) and not _at_most(_get(row, "p_differenced"), alpha)
    skills = [_get(row, f"oos_skill_{b}") for b in TREND_BASELINES]
    skills = [v for v in skills if not np.isnan(v)]
    trend_as_good = not skills or min(skills) <= 0
    return trends and gone and trend_as_good


def _forecasts_survive(row: dict) -> bool:
    """Out-of-sample skill over the hardest baseline that surrogates rarely reach (the
    moderate rule's forecast part)."""
    return _get(row, "oos_skill") > 0 and _at_most(_get(row, "oos_p_surrogate"), 0.10)


def reason_flags(row: dict, alpha: float) -> list[str]:
    """The flags that name a reason to set a hypothesis aside (one reason, one word; see
    ``SET_ASIDE`` in the vocabulary). At most one of ``trend-shared``, ``autocorrelation-only``
    and ``no-forecast-skill``; ``driver-trend`` is said whenever the driver is mostly a line."""
    f = []
    p_naive, p_s = _get(row, "p_naive"), _get(row, "p_surrogate")
    if shared_trend(row, alpha):
        f.append("trend-shared")
    elif _at_most(p_naive, alpha) and not _at_most(p_s, alpha):
        f.append("autocorrelation-only")
    elif _at_most(p_s, alpha) and not np.isnan(_get(row, "oos_skill")) and not _forecasts_survive(row):
        f.append("no-forecast-skill")
    if _get(row, "driver_trend_r2") >= DRIVER_TREND_R2:
        f.append("driver-trend")
    return f


def unstable(row: dict, alpha: float) -> bool:
    """The ``unstable`` rule: the sup-F test of a change in slope at an unknown year
    (:mod:`lagsieve.evidence.stability`) has surrogate p <= alpha. A hypothesis not tested
    (a grade outside ``stability.TESTED_GRADES``, or too few years: ``break_p`` missing) is not
    flagged."""
    return _at_most(_get(row, "break_p"), alpha)


def flags_for(row: dict, alpha: float, fdr: float) -> list[str]:
    """The flag codes of one hypothesis row (see ``FLAGS``)."""
    status = str(row.get("status", "ok"))
    if status.startswith("failed"):
        return ["failed"]
    f = reason_flags(row, alpha)
    p_s, n = _get(row, "p_surrogate"), _get(row, "n", 0)
    if _get(row, "n_eff") < n / 2:
        f.append("autocorrelated")
    if _get(row, "lags_tried", 1) > 1 and _get(row, "p_surrogate_lag") <= alpha < p_s:
        f.append("lag-selected")
    if n < SHORT_OVERLAP_YEARS:
        f.append("short-overlap")
    if _get(row, "loo_max_change") > 0.2 or _yes(row, "loo_sign_flip"):
        f.append("influential-year")
    if unstable(row, alpha):
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


def _set_aside_grade(flags: list[str]) -> str | None:
    """The grade naming the one reason a hypothesis is set aside, if its flags give one."""
    if "trend-shared" in flags:
        return "trend-confounded" if "driver-trend" in flags else "spurious-trend"
    for reason in ("autocorrelation-only", "no-forecast-skill"):
        if reason in flags:
            return reason
    return None


def grade_row(row: dict, flags: list[str], alpha: float, fdr: float, min_overlap: int) -> str:
    """The grade of one hypothesis under ``GRADE_RULES`` (first rule that holds)."""
    if not str(row.get("status", "ok")).startswith("ok") or _get(row, "n", 0) < min_overlap \
            or np.isnan(_get(row, "oos_skill")):
        return "insufficient-data"
    sign_ok = "sign-unexpected" not in flags
    trend = "trend-shared" in flags
    skills = [_get(row, f"oos_skill_{b}") for b in BASELINES]
    q, ps, pos = _get(row, "q_value"), _get(row, "p_surrogate"), _get(row, "oos_p_surrogate")
    sk = _get(row, "oos_skill")
    retested = not np.isnan(_get(row, "retest_skill"))
    if q <= fdr and pos <= 0.05 and all(s > 0 for s in skills) and sign_ok and not trend \
            and "failed-retest" not in flags and retested:
        return "strong"
    if ps <= alpha and sk > 0 and pos <= 0.10 and sign_ok and not trend:
        return "moderate"
    reason = _set_aside_grade(flags)
    if reason:
        return reason
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


def _lead_direction(row: dict) -> str:
    lag = row.get("lag")
    unit = "season" if row.get("lag_unit") == "season" else "year"  # a monthly driver of a season response
    lead = f"same {unit}" if lag == 0 else f"{int(lag)}-{unit} lead" if lag == lag and lag is not None else "no lag"
    r = _get(row, "r")
    return f"{lead}, {'positive' if r > 0 else 'negative' if r < 0 else 'no'}"


def _skill_words(row: dict) -> str:
    """Out-of-sample skill in words: mean squared forecast error X% lower than the baseline's."""
    sk, n_oos = _get(row, "oos_skill"), int(_get(row, "oos_n", 0))
    hardest = row.get("oos_hardest") or "hardest"
    if sk > 0:
        return f"squared forecast error {skill_percent(sk)} below that of the {hardest} baseline over {n_oos} forecasts"
    return f"no skill over the {hardest} baseline over {n_oos} forecasts"


def set_aside_sentence(row: dict) -> str | None:
    """Why a hypothesis graded with one of ``SET_ASIDE`` was set aside, with its numbers."""
    g = row["grade"]
    p = {k: _get(row, k) for k in ("p_naive", "p_surrogate", "r_detrended", "r_diff", "driver_trend_r2",
                                   "oos_skill", "oos_p_surrogate")}
    if g == "spurious-trend":
        return (f"set aside as a shared trend (naive p = {p['p_naive']:.3f}; detrended r = {p['r_detrended']:.2f}; "
                f"differenced r = {p['r_diff']:.2f}; a trend forecasts as well)")
    if g == "trend-confounded":
        return (f"set aside: the driver is mostly its own trend (r^2 with the year {p['driver_trend_r2']:.2f}), "
                f"so no screen can tell its effect apart from a trend shared with the response "
                f"(naive p = {p['p_naive']:.3f}; detrended r = {p['r_detrended']:.2f})")
    if g == "autocorrelation-only":
        return (f"set aside as autocorrelation only: no stronger than surrogates with the same spectrum "
                f"(naive p = {p['p_naive']:.3f}; surrogate p = {p['p_surrogate']:.2f})")
    if g == "no-forecast-skill":
        return (f"set aside for no forecast skill: supported in sample (surrogate p = {p['p_surrogate']:.2f}), "
                f"but {_skill_words(row)} (surrogate p of skill {p['oos_p_surrogate']:.2f})")
    return None


def _effect_words(row: dict, label: str | None) -> str:
    """'; ' + the effect in units (supported) or the largest effect still allowed (set aside)."""
    words = effect_phrase(row, response_label=label) if row["grade"] in SUPPORTED \
        else allowed_phrase(row, response_label=label)
    return f"; {words}" if words else ""


def summary_sentence(row: dict, min_overlap: int = 0, label: str | None = None) -> str:
    """A plain-words line for the report: what supports the hypothesis, or why it was set aside,
    with the effect in the response's units (``label`` names the response). Evidence is strong
    or weak; an effect is never called strong."""
    g = row["grade"]
    head = _lead_direction(row)
    if g == "insufficient-data":
        return f"insufficient data: {insufficient_reason(row, min_overlap)}"
    if g in ("strong", "moderate", "weak"):
        said = f"{head}: {g} evidence ({_skill_words(row)}; q = {_get(row, 'q_value'):.2f})"
    else:
        aside = set_aside_sentence(row)
        flags = row.get("flags", "")
        said = f"{head}: {aside}" if aside else \
            f"{head}: no support (surrogate p = {_get(row, 'p_surrogate'):.2f}; " \
            f"out-of-sample skill {_get(row, 'oos_skill'):+.2f})" + (f"; flags: {flags}" if flags else "")
    return said + _rival_words(row) + _effect_words(row, label)


def _rival_words(row: dict) -> str:
    """'; capped: <rival> explains the same signal (...)' for a driver its rival capped, else ''."""
    rival = str(row.get("rival", "") or "")
    if not rival or rival == "nan":
        return ""
    added = _get(row, "rival_added_skill")
    skill = f"skill added given it {added:+.2f}" if not np.isnan(added) else "no forecast test given it"
    return f"; capped at weak: {rival} explains the same signal ({skill})"


def study_qvalues(ev: pd.DataFrame, fdr: float, families: pd.DataFrame | None = None) -> np.ndarray:
    """q-values of every hypothesis: Benjamini-Hochberg over the study; with ``families``
    (response, driver, family, family_p: the groups of a series screened jointly,
    :func:`lagsieve.evidence.joint.joint_table`) the groups of a joint series and driver are one
    family whose joint test enters the study-wide control once
    (:func:`lagsieve.stats.multiplicity.family_qvalues`)."""
    p = ev["p_surrogate"].to_numpy(float)
    if families is None or not len(families):
        return bh_qvalues(p)
    return family_qvalues(p, *family_labels(ev, families), fdr)


def family_labels(ev: pd.DataFrame, families: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """(family label, family p) of every hypothesis of ``ev``: the joint family that
    ``families`` names for its response and driver, else a family of its own (p NaN). A family's
    p is Simes' combination of its members' own surrogate p-values (:func:`simes_p`): the joint
    fit's test of "no group responds" (``p_any``) pools the groups' residual variance, so a
    driver that acts on one group only lost its family to the noise of the others (on the demo,
    spring temperature on M of age 2: q 0.23 with ``p_any``, against 0.001 alone)."""
    key = ev[["response", "driver"]].reset_index(drop=True).merge(
        families[["response", "driver", "family"]], how="left", on=["response", "driver"])
    alone = pd.Series([f"#{i}" for i in range(len(ev))])
    label = key["family"].where(key["family"].notna(), alone).to_numpy(object)
    p = pd.Series(ev["p_surrogate"].to_numpy(float))
    simes = p.groupby(label).transform(lambda v: simes_p(v.to_numpy()))
    return label, np.where(key["family"].notna(), simes.to_numpy(float), np.nan)


def grade_hypotheses(hypotheses: pd.DataFrame, table: pd.DataFrame, screen: dict,
                     families: pd.DataFrame | None = None) -> pd.DataFrame:
    """Study-wide q-values (``families``: see :func:`study_qvalues`), collinear partners (at
    the lags paired with each response), flags and grades of every hypothesis, before ranks and
    sentences (:func:`finish_evidence`)."""
    ev = hypotheses.copy()
    for col in GRADED_COLUMNS:
        if col not in ev:
            ev[col] = np.nan
    alpha, fdr, min_overlap = screen["alpha"], screen["fdr"], screen["min_overlap"]
    ev["q_value"] = study_qvalues(ev, fdr, families)
    ev["collinear_with"] = collinear_partners(ev, table) if len(ev) else []
    flags, grades = [], []
    for row in ev.to_dict("records"):
        f = flags_for(row, alpha, fdr)
        flags.append(";".join(f))
        grades.append(grade_row(row, f, alpha, fdr, min_overlap))
    ev["flags"] = flags
    ev["grade"] = grades
    ev["grade"] = cap_collinear(ev)
    return ev


def finish_evidence(ev: pd.DataFrame, table: pd.DataFrame, screen: dict,
                    series: list[dict] | None = None) -> pd.DataFrame:
    """Ranks within each response, effects in units and the one-sentence summaries of graded
    hypotheses (:func:`grade_hypotheses`, and any cap by a rival in between)."""
    ev = ev.copy()
    ev["_g"] = ev["grade"].map(GRADE_ORDER)
    ev = ev.sort_values(["response", "_g", "oos_p_surrogate", "p_surrogate", "oos_skill"],
                        ascending=[True, True, True, True, False], na_position="last", kind="mergesort")
    ev["rank"] = ev.groupby("response").cumcount() + 1
    ev = ev.drop(columns="_g")
    ev = add_effects(ev, series, table)  # series: config entries (label, unit, transform)
    labels = {s["id"]: s.get("label") for s in series or []}
    ev["summary"] = [summary_sentence(r, screen["min_overlap"], labels.get(r["response"]))
                     for r in ev.to_dict("records")]
    return ev.reset_index(drop=True)


def build_evidence(hypotheses: pd.DataFrame, table: pd.DataFrame, screen: dict,
                   series: list[dict] | None = None) -> pd.DataFrame:
    """Study-wide evidence: q-values, collinearity, flags, grades, ranks (no rival check; see
    :mod:`lagsieve.evidence.rivals` for the grades that survive their strongest rival)."""
    return finish_evidence(grade_hypotheses(hypotheses, table, screen), table, screen, series)
