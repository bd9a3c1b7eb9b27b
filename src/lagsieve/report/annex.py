"""The annex summary: one table per response of its drivers, in the words and units a manager
reads (evidence in words, the effect with its 95% interval in the response's units per the
driver's management unit, or for a driver set aside the largest effect the data still allow,
forecast skill in words, cautions in words, the rival that explains the same signal).

It is shown near the top of the report and the PDF (``templates/annex.html``), written as
``figures/summary.csv`` (:func:`annex_frame`) and is the first table of ``report.docx``.
Words say "strong evidence", never "strong effect": a grade is how sure the screening is of an
association, not the size of an effect (the effect column gives the size).
"""
from __future__ import annotations

import pandas as pd

from lagsieve.evidence.effects import _fmt, effect_cell
from lagsieve.evidence.vocabulary import GRADE_RULES, GRADE_WORDS, SUPPORTED
from lagsieve.formats import is_missing, number, skill_percent, text
from lagsieve.report.context import Context, flag_list, missing_last, row_lead, set_aside_reason

#: The grade as evidence in words (the grade codes themselves stay in the evidence table).
EVIDENCE_WORDS = {
    "strong": "strong evidence", "moderate": "moderate evidence", "weak": "weak evidence",
    "no-forecast-skill": "set aside: no forecast skill", "autocorrelation-only": "set aside: autocorrelation only",
    "trend-confounded": "set aside: driver is mostly a trend", "spurious-trend": "set aside: shared trend only",
    "none": "no evidence after adjustment", "insufficient-data": "not judged: too few data",
}

#: The baselines of the forecast test as a reader names them.
BASELINE_WORDS = {"climatology": "a mean-only", "persistence": "a last-year's-value", "trend": "a trend-only",
                  "trend_ar1": "a trend (with AR(1) errors)"}

#: Each flag in a few words, for the annex table (the full sentence is in the evidence table's key).
FLAG_WORDS = {
    "trend-shared": "may only share a trend", "driver-trend": "driver mostly a straight line",
    "autocorrelation-only": "no stronger than autocorrelated noise", "no-forecast-skill": "no forecast skill",
    "autocorrelated": "strongly autocorrelated", "lag-selected": "significant only at the chosen lead",
    "short-overlap": "short overlap (< 25 years)", "influential-year": "one year changes r much",
    "unstable": "slope changed at some year", "failed-retest": "no skill on the latest years",
    "collinear": "moves with another driver", "sign-unexpected": "sign opposite to the one expected",
    "explained-by-rival": "explained by a rival driver", "failed": "computation failed",
}

#: The cautions of the annex page, one line each (the report's header gives them in full).
ANNEX_CAUTIONS = ("Association is not cause: a driver that tracks the response may share a cause with it.",
                  "A screening generates hypotheses: it ranks candidate drivers for closer study.",
                  "Results inform, and do not replace, the assessment's own review.")

HEADER = ("Driver", "Lead", "Sign expected / found", "Evidence", "Effect (95% interval)", "Forecast skill",
          "Cautions", "Rival")


def sign_found(row: dict) -> str:
    r = row.get("r")
    return "" if is_missing(r) else ("positive" if float(r) > 0 else "negative")


def skill_words(row: dict) -> str:
    """'squared forecast error 69% lower than a trend-only forecast' (skill = 1 - MSE ratio)."""
    sk, base = row.get("oos_skill"), text(row.get("oos_hardest"))
    if is_missing(sk):
        return "not tested"
    against = BASELINE_WORDS.get(base, base or "the baseline")
    if float(sk) <= 0:
        return f"no better than {against} forecast"
    return f"squared forecast error {skill_percent(float(sk))} lower than {against} forecast"


def effect_words(row: dict) -> tuple[str, str]:
    """(value, note) of the effect cell: the effect and its interval for a supported driver;
    for a driver not carried forward, the largest effect the data still allow."""
    value, note = effect_cell(row)
    big = row.get("effect_largest_allowed")
    if text(row.get("grade")) in SUPPORTED or is_missing(big) or not value:
        return value, note
    lo, hi = float(row["effect_ci_low"]), float(row["effect_ci_high"])
    fmt = _fmt([big, lo, hi])
    return (f"at most {number(abs(float(big)), fmt)} either way",
            f"{note}; 95% interval {number(lo, fmt)} to {number(hi, fmt)}".lstrip("; "))


def statement(row: dict, rival_label: str) -> str:
    """A plain evidence statement for one driver."""
    g = text(row.get("grade"))
    if g in SUPPORTED:
        words = f"{EVIDENCE_WORDS[g].capitalize()} of an association: {GRADE_WORDS[g]}."
    else:
        words = f"Not carried forward: {set_aside_reason(row, lambda _: rival_label)}."
    if rival_label and "explained-by-rival" not in text(row.get("flags")):  # else the reason names it already
        words += f" {rival_label} explains the same signal."
    return words


def annex_row(ctx: Context, row: dict) -> dict:
    """One driver of one response as the annex shows it (plain strings) and as summary.csv keeps it."""
    rival = text(row.get("rival"))
    rival_label = ctx.label(rival) if rival else ""
    value, note = effect_words(row)
    g = text(row.get("grade"))
    return {"response": row["response"], "response_label": ctx.label(row["response"]), "rank": row.get("rank"),
            "driver": row["driver"], "driver_label": ctx.label(row["driver"]), "category": text(row.get("category")),
            "lag": row.get("lag"), "lead": row_lead(row), "expected_sign": text(row.get("expected_sign")),
            "sign_found": sign_found(row), "grade": g, "evidence": EVIDENCE_WORDS.get(g, g),
            "effect_text": value, "effect_note": note, "skill_words": skill_words(row),
            "caution_words": "; ".join(FLAG_WORDS.get(f, f) for f in flag_list(row.get("flags"))),
            "rival": rival, "rival_label": rival_label, "statement": statement(row, rival_label),
            "status": "supported" if g in SUPPORTED else "set aside",
            **{k: row.get(k) for k in ("effect", "effect_ci_low", "effect_ci_high", "effect_unit", "effect_basis",
                                       "effect_largest_allowed", "flags")}}


def annex_frame(ctx: Context) -> pd.DataFrame:
    """The annex summary as a table (``figures/summary.csv``): one row per hypothesis, by
    response in the study's order and rank within it. Made once per context (the page, the
    tables and the document show it; :meth:`Context.once`): do not change it."""
    return ctx.once("annex_frame", _annex_frame)


def _annex_frame(ctx: Context) -> pd.DataFrame:
    order = {rid: i for i, rid in enumerate(ctx.study.response_ids)}
    rows = sorted(ctx.rows, key=lambda r: (missing_last(order.get(r["response"])), missing_last(r.get("rank"))))
    return pd.DataFrame([annex_row(ctx, row) for row in rows])


def cells(r: dict) -> list[str]:
    """The annex table's cells of one row, in the order of ``HEADER`` (plain text)."""
    driver = r["driver_label"] + (f" ({r['category']})" if r["category"] else "")
    effect = r["effect_text"] + (f" {r['effect_note']}" if r["effect_note"] else "")
    signs = f"{r['expected_sign'] or 'not stated'} / {r['sign_found'] or '-'}"
    return [driver, r["lead"], signs, r["evidence"], effect, r["skill_words"], r["caution_words"], r["rival_label"]]


#: The grades the annex tables show a row for; every other driver is named on one line per
#: reason under its response's table, so the summary stays short (summary.csv keeps every row).
TABLE_GRADES = ("strong", "moderate", "weak")


def _others(rows: list[dict]) -> list[tuple[str, list[str]]]:
    """The drivers not in the table, grouped by the evidence words of their grade."""
    groups: dict[str, list[str]] = {}
    for r in rows:
        groups.setdefault(r["evidence"], []).append(r["driver_label"])
    return list(groups.items())


def section(ctx: Context) -> dict:
    """The data of ``templates/annex.html`` and of the document's summary: per response the
    drivers graded weak or better in a table, the others named on one line per reason. Made once
    per context (:meth:`Context.once`): do not change it."""
    return ctx.once("annex_section", _section)


def _section(ctx: Context) -> dict:
    frame = annex_frame(ctx)
    responses = []
    for rid in ctx.study.response_ids:
        rows = frame[frame["response"] == rid].to_dict("records") if len(frame) else []
        unit = ctx.units.get(rid, "")
        responses.append({"id": rid, "label": ctx.label(rid), "unit": unit,
                          "rows": [r for r in rows if r["grade"] in TABLE_GRADES],
                          "others": _others([r for r in rows if r["grade"] not in TABLE_GRADES])})
    return {"responses": responses, "header": HEADER, "cautions": ANNEX_CAUTIONS,
            "grade_rules": [(g, EVIDENCE_WORDS[g], GRADE_RULES[g]) for g in GRADE_RULES]}
