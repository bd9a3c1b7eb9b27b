"""What each section of the page shows, as plain data for its template (``templates/<section>.html``).
Words of the page that are data (headings, tooltips, captions of columns) live here; markup does not."""
from __future__ import annotations

import json

import pandas as pd

from lagsieve.evidence.effects import allowed_phrase, effect_cell, effect_phrase
from lagsieve.evidence.vocabulary import COLLINEAR_R, FLAGS, GRADES, SUPPORTED
from lagsieve.report import figures as fg
from lagsieve.report.context import Context, not_computed, ranked, row_lead, set_aside_reason, summary_line
from lagsieve.formats import is_missing, lag_range, number, p_text, text
from lagsieve.stats.backtest import BASELINES
from lagsieve.report.methods import methods_paragraphs, reference_list
from lagsieve.report.seasons import by_season

CAUTIONS = [
    ("Association is not cause.", "A driver that tracks the response may share a cause with it, "
     "or stand in for another series that was not screened."),
    ("A screening generates hypotheses.", "It ranks candidate drivers for closer study; it does not "
     "test mechanisms, and a driver set aside here is not shown to be unimportant."),
    ("Results inform, and do not replace, review.", "They are material for the assessment body's own "
     "review and are used only under the local management rules."),
]

NAV = [("summary", "Summary"), ("overview", "Evidence map"), ("table", "Ranked evidence"),
       ("hypotheses", "Leading hypotheses"), ("data", "Data"), ("methods", "Methods"), ("provenance", "Provenance")]

EFFECT_NOTE = ("Effect: the change in the response, in its units (% for a log-transformed response), for a "
               "one-unit change of the driver, or for a halving of a log-transformed driver, at the chosen lag; "
               "95% interval from the slope's autocorrelation-robust standard error on the effective sample size.")

TABLE_COLS = [  # key, heading, key to the column (printed below the table and shown on hover), kind, format
    ("response", "Response", "the response series; sorting by it keeps the study's order of responses", "response", None),
    ("rank", "Rank", "rank within the response (1 = best supported); sorting by it keeps each response together",
     "rank", "{:.0f}"),
    ("driver", "Driver", "the driver series, with its category below", "driver", None),
    ("grade", "Grade", "grade by the rules listed below the table", "grade", None),
    ("lag", "Lag", "driver lead in years at the chosen lag", "num", "{:.0f}"),
    ("n", "n", "overlapping years at the chosen lag", "num", "{:.0f}"),
    ("r", "r", "Pearson r at the chosen lag", "num", "{:+.2f}"),
    ("n_eff", "n eff", "effective sample size allowing for autocorrelation", "num", "{:.1f}"),
    ("p_adjusted", "p adj", "p-value of r with the effective sample size", "p", None),
    ("p_surrogate", "p surr", "surrogate p-value, best lag chosen inside every surrogate", "p", None),
    ("q_value", "q", "Benjamini-Hochberg q-value over all hypotheses of the study", "p", None),
    ("oos_skill", "Skill", "out-of-sample skill over the hardest baseline (named below the value): "
     "1 - MSE(model)/MSE(baseline)", "num", "{:+.2f}"),
    ("oos_n", "Fcst", "number of out-of-sample forecasts", "num", "{:.0f}"),
    ("oos_p_surrogate", "p skill", "surrogate p-value of the out-of-sample skill", "p", None),
    ("retest_skill", "Re-test", "skill on the latest years, fitted before them", "num", "{:+.2f}"),
    ("effect", "Effect (95% CI)", EFFECT_NOTE, "effect", None),
    ("flags", "Flags", "cautions, defined in the list of flags below the table", "flags", None),
]

#: Baselines as the table names them under a skill (the keys are the ids of stats.backtest).
BASELINE_WORDS = {"climatology": "climatology", "persistence": "persistence", "trend": "trend",
                  "trend_ar1": "trend + AR(1)", "harmonic": "annual cycle",
                  "harmonic_persistence": "annual cycle + last anomaly"}

PANEL_ALTS = {"overlay": "standardised overlay", "scatter": "scatter with fit", "lags": "lag profile of r",
              "forecasts": "out-of-sample forecasts", "nulls": "surrogate null distribution",
              "gam": "GAM partial effect"}

GRADE_SORT = {g: i for i, g in enumerate(fg.GRADE_STYLE)}  # sort key of the grade column

SERIES_HEADER = ("id", "label", "role (kind or category)", "unit", "transform", "annual value", "lags",
                 "expected sign", "years (n)")


# ----------------------------------------------------------------------------- heading, summary
def page_words(ctx: Context) -> dict:
    """Words of the page's frame: title, ids, versions, cautions, navigation."""
    st, prov = ctx.study, ctx.provenance
    return {"title": st.raw.get("title") or st.id, "study_id": st.id, "invented": ctx.invented,
            "tool_version": str(prov.get("tool_version", "")),
            "made": str(prov.get("finished", prov.get("started", ""))),
            "description": st.raw.get("description") or "", "cautions": CAUTIONS,
            "nav": NAV if ctx.condition is None else _with_condition(NAV)}


def _with_condition(nav: list) -> list:
    """The navigation with the condition section after the data section."""
    at = [a for a, _ in nav].index("data") + 1
    return nav[:at] + [("condition", "Condition")] + nav[at:]


def _aside_groups(ctx: Context, aside: list[dict]) -> list[tuple[str, list[dict]]]:
    groups: dict[str, list[dict]] = {}
    for row in aside:
        groups.setdefault(set_aside_reason(row, ctx.label), []).append(
            {"summary": summary_line(row), "driver": ctx.label(row["driver"]),
             "lead": row_lead(row)})
    return [(reason[:1].upper() + reason[1:], who) for reason, who in groups.items()]


def _response_summary(ctx: Context, rid) -> dict:
    sub = ranked(ctx.rows, rid)
    supported = [{"grade": row["grade"], "driver": ctx.label(row["driver"]), "summary": summary_line(row),
                  "partners": [ctx.label(p) for p in text(row.get("collinear_with")).split(";") if p]}
                 for row in sub if row["grade"] in SUPPORTED]
    return {"id": rid, "label": ctx.label(rid), "supported": supported,
            "aside": _aside_groups(ctx, [row for row in sub if row["grade"] not in SUPPORTED]),
            "by_season": by_season(ctx, rid)}


def summary(ctx: Context) -> dict:
    ev = ctx.evidence
    counts = ev["grade"].value_counts() if len(ev) else pd.Series(dtype=int)
    return {"n_responses": len(ctx.study.response_ids), "n_drivers": len(ctx.study.driver_ids),
            "n_hypotheses": len(ev), "first_year": int(ctx.table.index.min()), "last_year": int(ctx.table.index.max()),
            "counts": [(g, int(counts.get(g, 0))) for g in GRADES if counts.get(g, 0)],
            "none_supported": not ev["grade"].isin(SUPPORTED).any() if len(ev) else True,
            "not_computed": not_computed(ctx),
            "responses": [_response_summary(ctx, r["id"]) for r in ctx.study.responses if not r.get("season_of")]}


# ----------------------------------------------------------------------------- evidence table
def _cell(ctx: Context, row: dict, key: str, kind: str, fmt: str | None) -> dict:
    v = row.get(key)
    if kind in ("response", "driver"):
        return {"kind": kind, "v": ctx.label(v), "text": ctx.label(v), "id": text(v),
                "note": text(row.get("category")) if kind == "driver" else ""}
    if key == "oos_skill":
        hardest = text(row.get("oos_hardest"))
        return {"kind": "skill", "v": number(v, "{:.6g}"), "text": number(v, fmt),
                "note": BASELINE_WORDS.get(hardest, hardest)}
    if kind == "effect":
        value, note = effect_cell(row)
        return {"kind": "effect", "v": number(v, "{:.6g}"), "text": value, "note": note}
    if kind == "grade":
        return {"kind": "grade", "v": GRADE_SORT.get(text(v), 9), "text": text(v)}
    if kind == "flags":
        return {"kind": "flags", "v": text(v), "text": text(v)}
    if kind == "p":
        return {"kind": "num", "v": number(v, "{:.6g}"), "text": p_text(v)}
    if kind in ("num", "rank"):
        return {"kind": "num", "v": number(v, "{:.6g}"), "text": number(v, fmt)}
    return {"kind": "plain", "v": text(v), "text": text(v)}


def _table_row(ctx: Context, row: dict, order: dict) -> dict:
    """One row of the table: its cells, and what the column searches and the sort read."""
    group = order.get(row.get("response"), len(order))
    cells = [_cell(ctx, row, key, kind, fmt) for key, _, _, kind, fmt in TABLE_COLS]
    for c in cells:
        if c["kind"] == "response":  # the response column sorts in the study's order of responses
            c["v"] = group
    return {"response": text(row.get("response")), "grade": text(row.get("grade")), "group": group,
            "driver": " ".join([ctx.label(row.get("driver")), text(row.get("driver")), text(row.get("category"))]),
            "flags": " ".join(c for c in text(row.get("flags")).split(";") if c), "cells": cells}


def evidence_table(ctx: Context) -> dict:
    """Columns (key, heading, key text, sort type) and one row of cells per hypothesis, with the
    choices of the column searches (responses by label, grades, the flags the table holds)."""
    sort_type = {"num": "num", "p": "num", "effect": "num", "rank": "num", "grade": "num", "response": "num"}
    columns = [{"key": key, "name": name, "tip": tip, "type": sort_type.get(kind, "text"), "group": kind == "rank",
                "cls": f"c-{key.replace('_', '-')}" + (" num" if kind in ("num", "p", "rank") else "")}
               for key, name, tip, kind, _ in TABLE_COLS]
    order = {r: i for i, r in enumerate(ctx.study.response_ids)}
    rows = [_table_row(ctx, row, order) for row in ctx.rows]
    present = {c for row in rows for c in row["flags"].split()}
    return {"columns": columns, "rows": rows, "grades": list(GRADES), "effect_note": EFFECT_NOTE,
            "flags": [c for c in FLAGS if c in present],
            "responses": [(r, ctx.label(r)) for r in ctx.study.response_ids]}


# ----------------------------------------------------------------------------- leading hypotheses
def key_numbers(row: dict) -> list[tuple[str, str]]:
    """The numbers shown under a hypothesis' heading (those that are not empty)."""
    items = [("r", number(row.get("r"), "{:+.2f}")),
             ("n / n eff", f'{number(row.get("n"), "{:.0f}")} / {number(row.get("n_eff"), "{:.1f}")}'),
             ("p adj", p_text(row.get("p_adjusted"))), ("p surr", p_text(row.get("p_surrogate"))),
             ("q", p_text(row.get("q_value"))), ("r detrended", number(row.get("r_detrended"), "{:+.2f}")),
             ("r 95% CI", _range(row, "r_ci_low", "r_ci_high", "{:+.2f}"))]
    for b in BASELINES:
        items.append((f"skill vs {b}", number(row.get(f"oos_skill_{b}"), "{:+.2f}")))
    test = "CW p" if row.get("oos_test") == "clark-west" else "DM p"
    items += [(test, p_text(row.get("oos_p"))), ("p skill (surr)", p_text(row.get("oos_p_surrogate"))),
              ("re-test", f'{number(row.get("retest_skill"), "{:+.2f}")} {text(row.get("retest_years"))}')]
    return [(k, v) for k, v in items if v.strip()]


def _range(row: dict, low: str, high: str, fmt: str) -> str:
    lo, hi = number(row.get(low), fmt), number(row.get(high), fmt)
    return f"{lo} to {hi}" if lo and hi else ""


def _panel(ctx: Context, key: str, info: dict) -> dict:
    row, sc = info["row"], ctx.study.screen
    rid, did = row["response"], row["driver"]
    gam_row = info.get("gam_row")
    figures = []
    for name in info["names"]:
        kind = name.rsplit("__", 1)[1]
        figures.append((name, kind, f"{PANEL_ALTS[kind]}: {ctx.label(rid)} and {ctx.label(did)}"))
    return {"key": key, "response": rid, "response_label": ctx.label(rid), "driver_label": ctx.label(did),
            "rank": int(row["rank"]), "lead": row_lead(row), "grade": row.get("grade"),
            "summary": summary_line(row), "flags": row.get("flags"), "numbers": key_numbers(row),
            "effect": effect_phrase(row, ctx.units.get(rid, ""), ctx.label(rid)),
            "allowed": allowed_phrase(row, ctx.units.get(rid, ""), ctx.label(rid)),
            "shape": text(gam_row.get("shape")) if gam_row is not None else "", "figures": figures,
            "set_aside": bool(info.get("set_aside")),
            "scatter_smooth": info.get("scatter_smooth"), "smooth_trend": info.get("smooth_trend"),
            "forecast_n": info.get("forecast_n", ""), "null_n": info.get("null_n", ""),
            "hardest": text(row.get("oos_hardest")), "keep_trend": sc.get("surrogate_keep_trend", True),
            "gam_trend": bool(sc.get("gam_trend")), "weighted": sc.get("weights", "none") != "none"}


def hypotheses(ctx: Context, panels: dict) -> dict:
    out, current = [], None
    for key, info in panels.items():
        p = _panel(ctx, key, info)
        p["new_response"] = p["response"] != current
        current = p["response"]
        out.append(p)
    return {"top": int(ctx.study.report.get("top", 3)), "panels": out}


# ----------------------------------------------------------------------------- data, methods, provenance
def data(ctx: Context) -> dict:
    notes = ctx.notes
    if not len(notes):
        return {"changed": [], "warnings": [], "collinear_r": COLLINEAR_R}
    rows = [{"series": text(r["series"]), "year": "" if is_missing(r["year"]) else int(r["year"]),
             "action": text(r["action"]), "reason": text(r["reason"])} for r in notes.to_dict("records")]
    return {"changed": [r for r in rows if r["action"] != "warning"],
            "warnings": [r for r in rows if r["action"] == "warning"], "collinear_r": COLLINEAR_R}


def _series_row(ctx: Context, role: str, s: dict, cov: pd.DataFrame | None) -> list[str]:
    yrs = ""
    if cov is not None and s["id"] in cov.index:
        c = cov.loc[s["id"]]
        yrs = f"{text(c['first_year'])}\u2013{text(c['last_year'])} ({text(c['years_observed'])})"
    agg = s.get("aggregate")
    driver = role == "driver"
    return [s["id"], s.get("label", ""),
            f"driver ({s.get('category', 'other')})" if driver else f"response ({s.get('kind', 'other')})",
            s.get("unit", ""), s.get("transform", "none"),
            f"{agg.get('how', 'mean')} of months {lag_range(agg['months'])}" if agg else "",
            lag_range(s.get("lags") or ctx.study.screen["lags"]) if driver else "",
            s.get("expected_sign", "") if driver else "", yrs]


def methods_text(ctx: Context) -> tuple[list[str], list]:
    """The methods' paragraphs and references (report.methods), made once per context: the page
    and the document both show them (:meth:`Context.once`)."""
    return ctx.once("methods", methods_paragraphs)


def methods(ctx: Context, tables: dict) -> dict:
    paragraphs, refs = methods_text(ctx)
    cov = tables.get("coverage")
    cov = cov.set_index("series") if cov is not None and len(cov) else None
    series = [_series_row(ctx, role, s, cov)
              for role, items in (("response", ctx.study.responses), ("driver", ctx.study.drivers)) for s in items]
    return {"paragraphs": paragraphs, "references": reference_list(refs), "series_header": SERIES_HEADER,
            "series": series}


def provenance(ctx: Context) -> dict:
    prov = ctx.provenance
    run = [("study", prov.get("study")), ("tool", f"lagsieve {prov.get('tool_version')}"),
           ("config", prov.get("config_path")), ("config SHA-256", prov.get("config_sha256")),
           ("seed", prov.get("seed"))]
    for k, label in (("inputs_prepared", "align stage output written"), ("screened", "last screen output written"),
                     ("started", "report stage started"), ("finished", "report written")):
        if prov.get(k):
            run.append((label, prov[k]))
    return {"run": [(str(k), str(v)) for k, v in run],
            "inputs": [(str(k), str(v)) for k, v in prov.get("inputs_sha256", {}).items()],
            "versions": [(str(k), str(v)) for k, v in prov.get("versions", {}).items()],
            "config": json.dumps(prov.get("config", {}), indent=1, default=str, ensure_ascii=False),
            "settings": json.dumps(ctx.study.screen, indent=1, default=str, ensure_ascii=False)}
