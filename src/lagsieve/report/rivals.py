"""The report's competing explanations (issue 16): per response, the skill each driver adds given
each competitor (``conditional.csv``), the model set with its Akaike weights (``models.csv``), the
variance partition of the top pair and plain sentences. :func:`read_outputs` reads the evidence
stage's two files, :func:`plan_rivals` plans the partition figures, :func:`section` gives the plain
data of ``templates/rivals.html``.

Large studies get summary forms, said in words on the page: beyond ``MATRIX_MAX_COMPETITORS``
competitors a response's matrix shows each driver's strongest rival only, its model table the
``MODELS_SHOWN`` best models (all of them are in models.csv), and partition figures are drawn for
at most ``PARTITION_MAX_FIGURES`` responses."""
from __future__ import annotations

from pathlib import Path

import pandas as pd

from lagsieve.evidence.rivals import strongest_rival
from lagsieve.formats import is_missing, number, p_text, text
from lagsieve.io.names import slug
from lagsieve.report import figures as fg

__all__ = ["MATRIX_MAX_COMPETITORS", "MODELS_SHOWN", "PARTITION_MAX_FIGURES", "plan_rivals", "read_outputs",
           "section"]

MATRIX_MAX_COMPETITORS = 10  # columns of a response's added-skill matrix (a table row must stay readable)
MODELS_SHOWN = 8             # rows of a response's model table on the page
PARTITION_MAX_FIGURES = 30   # partition figures in one report (one small panel each)
#: Shading of the added-skill matrix: (upper edge of the band, CSS class, words of the legend),
#: lowest band first; a cell without a skill is not shaded. Colours in templates/grades.css.
SKILL_BANDS = ((0.0, "sk-none", "nothing added (0 or less)"), (0.10, "sk-low", "up to 0.10"),
               (0.25, "sk-mid", "0.10 to 0.25"), (float("inf"), "sk-high", "more than 0.25"))


def read_outputs(evidence_csv) -> dict | None:
    """``conditional.csv`` and ``models.csv`` beside ``evidence_csv`` as frames; None when the
    evidence stage wrote neither (an older results folder)."""
    folder = Path(evidence_csv).parent
    paths = {k: folder / f"{k}.csv" for k in ("conditional", "models")}
    if not any(p.is_file() for p in paths.values()):
        return None
    return {k: pd.read_csv(p, keep_default_na=False, na_values=[""]) if p.is_file() else pd.DataFrame()
            for k, p in paths.items()}


def _names(label, ids) -> str:
    """Labels of ``+``- or ``;``-joined series ids, joined with ' and '."""
    parts = [p for p in text(ids).replace(";", "+").split("+") if p]
    return " and ".join(label(p) for p in parts)


def _rows(frame: pd.DataFrame, rid: str) -> pd.DataFrame:
    return frame[frame["response"] == rid] if len(frame) and "response" in frame else frame.iloc[0:0]


def top_pair(models: pd.DataFrame) -> dict | None:
    """The two-driver model with the largest Akaike weight (None without one)."""
    pairs = models[(models.get("n_drivers") == 2) & models["weight"].notna()] if len(models) else models
    return None if not len(pairs) else pairs.sort_values("weight", ascending=False, kind="mergesort").iloc[0].to_dict()


def plan_rivals(out: dict | None, label, invented: bool) -> list[fg.FigureJob]:
    """The partition figure of the top pair of every response with one (at most
    ``PARTITION_MAX_FIGURES``)."""
    if out is None or not len(out["models"]):
        return []
    jobs = []
    for rid in sorted(out["models"]["response"].unique()):
        pair = top_pair(_rows(out["models"], rid))
        if pair is None or len(jobs) >= PARTITION_MAX_FIGURES:
            continue
        a, b = text(pair["drivers"]).split(";")
        jobs.append(fg.FigureJob(f"partition__{slug(rid)}", "variance_fractions", dict(
            fractions=[pair[k] for k in ("unique_first", "shared", "unique_second", "residual")],
            labels=[label(a), label(b)], response=label(rid), invented=invented)))
    return jobs


def sentence(row: dict, label) -> str:
    """What a driver adds given a competitor, in one plain sentence."""
    d, c = label(row["driver"]), _names(label, row["competitor"])
    add, p = row.get("added_skill"), row.get("p_added_surrogate")
    if is_missing(add):
        nums = f"partial r {number(row.get('partial_r'), '{:+.2f}')}, p = {p_text(row.get('p_partial_surrogate'))}"
    else:
        nums = f"added skill {number(add, '{:+.2f}')}, p = {p_text(p)}"
    if row.get("keeps_support") in (True, "True", "true", 1):
        return f"{d} still adds skill once {c} is in the model ({nums})"
    if not is_missing(add) and float(add) <= 0:
        return f"{d} adds nothing once {c} is in the model ({nums})"
    return f"{d} adds too little once {c} is in the model to keep its support ({nums})"


def mutual(cond: pd.DataFrame, label) -> list[str]:
    """Sentences for pairs of drivers tested both ways: each keeps its support given the other,
    or neither does (they carry the same signal)."""
    done = {(r["driver"], r["competitor"]): r.get("keeps_support") in (True, "True", "true", 1)
            for r in cond.to_dict("records")}
    out = []
    for (a, b), kept in sorted(done.items()):
        if a < b and (b, a) in done and kept == done[(b, a)]:
            out.append(f"{label(a)} and {label(b)} each keep their support given the other: the data do not choose "
                       f"between them, and both keep their grades" if kept else
                       f"{label(a)} and {label(b)} carry the same signal: neither adds enough given the other")
    return out


def skill_band(added) -> str:
    """The CSS class of an added skill's band (``SKILL_BANDS``); '' when there is no skill."""
    if is_missing(added):
        return ""
    return next(cls for top, cls, _ in SKILL_BANDS if float(added) <= top)


def matrix(cond: pd.DataFrame, label) -> dict:
    """The added-skill matrix (drivers x competitors) of one response, or each driver's strongest
    rival only beyond ``MATRIX_MAX_COMPETITORS`` competitors."""
    comps = sorted(cond["competitor"].unique())
    drivers = list(dict.fromkeys(cond["driver"]))
    summary = len(comps) > MATRIX_MAX_COMPETITORS
    if summary:
        cond = pd.DataFrame([strongest_rival(g) for _, g in cond.groupby("driver", sort=False)])
        comps = ["strongest rival"]
    cells = {(r["driver"], "strongest rival" if summary else r["competitor"]): r for r in cond.to_dict("records")}
    rows = []
    for d in drivers:
        line = []
        for c in comps:
            r = cells.get((d, c))
            line.append(None if r is None else {
                "text": number(r.get("added_skill"), "{:+.2f}") or "n/a", "p": p_text(r.get("p_added_surrogate")),
                "who": _names(label, r["competitor"]) if summary else "",
                "kept": r.get("keeps_support") in (True, "True", "true", 1), "band": skill_band(r.get("added_skill"))})
        rows.append({"driver": label(d), "cells": line})
    return {"columns": [c if summary else _names(label, c) for c in comps], "rows": rows, "summary": summary,
            "n_competitors": len(set(cond["competitor"])) if not summary else None,
            "bands": [{"cls": cls, "words": words} for _, cls, words in SKILL_BANDS]}


def model_rows(models: pd.DataFrame, label) -> list[dict]:
    """The best ``MODELS_SHOWN`` models of one response, as words and numbers."""
    out = []
    for r in models.head(MODELS_SHOWN).to_dict("records"):
        ids = [d for d in text(r.get("drivers")).split(";") if d]
        coefs, ses = text(r.get("coefficients")).split(";"), text(r.get("coefficient_ses")).split(";")
        terms = [f"{label(d)} (lag {lag}): {number(b, '{:+.3g}')} ± {number(s, '{:.2g}')}"
                 for d, lag, b, s in zip(ids, text(r.get("lags")).split(";"), coefs, ses)]
        out.append({"model": " + ".join(label(d) for d in ids) or "no driver", "terms": terms,
                    "ar1": number(r.get("ar1"), "{:.2f}"), "delta": number(r.get("delta_aicc"), "{:.1f}"),
                    "weight": number(r.get("weight"), "{:.2f}"), "skill": number(r.get("oos_skill"), "{:+.2f}")})
    return out


def _response_block(rid: str, out: dict, label, figs_planned: set) -> dict | None:
    cond, models = _rows(out["conditional"], rid), _rows(out["models"], rid)
    if not len(cond) and not len(models):
        return None
    cond = cond[cond["competitor"].astype(str) != ""] if len(cond) else cond
    skipped = [text(s) for s in models.get("status", pd.Series(dtype=str)) if text(s).startswith("skipped")]
    pair = top_pair(models) if not skipped else None
    return {"id": rid, "label": label(rid), "matrix": matrix(cond, label) if len(cond) else None,
            "sentences": [sentence(r, label) for r in cond.to_dict("records")] + mutual(cond, label),
            "models": model_rows(models, label) if not skipped else [], "n_models": 0 if skipped else len(models),
            "skipped": skipped[0][len("skipped: "):] if skipped else "",
            "n_years": None if skipped or not len(models) else number(models["n"].iloc[0], "{:.0f}"),
            "pair": None if pair is None else {"names": [label(d) for d in text(pair["drivers"]).split(";")],
                                               "figure": f"partition__{slug(rid)}",
                                               "drawn": f"partition__{slug(rid)}" in figs_planned,
                                               "shared": number(pair.get("shared"), "{:.0%}"),
                                               "weight": number(pair.get("weight"), "{:.2f}")}}


def section(out: dict | None, response_ids: list[str], label) -> dict | None:
    """The plain data of the competing-explanations section (None without the evidence stage's files)."""
    if out is None:
        return None
    planned = {j.name for j in plan_rivals(out, label, False)}
    blocks = [b for rid in response_ids for b in [_response_block(rid, out, label, planned)] if b is not None]
    n_pairs = sum(b["pair"] is not None for b in blocks)
    return {"responses": blocks, "models_shown": MODELS_SHOWN, "max_competitors": MATRIX_MAX_COMPETITORS,
            "figures_capped": n_pairs > PARTITION_MAX_FIGURES, "max_figures": PARTITION_MAX_FIGURES,
            "any": bool(blocks), "n_pairs": n_pairs}
