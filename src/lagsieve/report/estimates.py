"""The report's block of a response as an estimate: per response with draws, how many draws
were judged and the hypotheses whose grade depends on the draw taken (``draw_fragile``);
per response with vintages, Mohn's rho and which forecasts were made (the rolling origin on
the latest vintage, and with ``screen.real_time`` the real-time skill beside it). Plain data
for ``templates/estimates.html`` (:mod:`lagsieve.evidence.draws`, :mod:`lagsieve.evidence.retro`)."""
from __future__ import annotations

import pandas as pd

from lagsieve.formats import is_missing, number, text


def _yes(v) -> bool:
    return not is_missing(v) and str(v).lower() in ("true", "1", "1.0")


def _draw_rows(evidence: pd.DataFrame, label) -> list[dict]:
    """One row per hypothesis judged draw by draw, fragile ones first."""
    ev = evidence[evidence["draw_n"].notna()] if "draw_n" in evidence else evidence.iloc[:0]
    rows = [{"response": label(r["response"]), "driver": label(r["driver"]), "grade": text(r["grade"]),
             "share": number(r.get("draw_grade_share"), "{:.0%}"), "fragile": _yes(r.get("draw_fragile")),
             "slope": number(r["draw_slope"], "{:+.3g}"), "slope_se": number(r["draw_slope_se"], "{:.2g}"),
             "between": number(r.get("draw_between_share"), "{:.0%}"), "n": number(r["draw_n"], "{:.0f}")}
            for _, r in ev.iterrows()]
    return sorted(rows, key=lambda r: not r["fragile"])


def _vintage_rows(evidence: pd.DataFrame, label) -> list[dict]:
    """One row per response with vintages: Mohn's rho, its peels, the forecasts made, and the
    hypotheses with a real-time skill."""
    if "mohn_peels" not in evidence:
        return []
    out = []
    for rid, grp in evidence[evidence["rt_mode"].notna()].groupby("response", sort=False):
        first = grp.iloc[0]
        rt = grp[grp["rt_n"].notna()] if "rt_n" in grp else grp.iloc[:0]
        out.append({"response": label(rid), "rho": number(first["mohn_rho"], "{:+.1%}"),
                    "peels": number(first["mohn_peels"], "{:.0f}"), "mode": str(first["rt_mode"]),
                    "realtime": [{"driver": label(r["driver"]), "grade": text(r["grade"]),
                                  "skill": number(r["oos_skill"], "{:+.2f}"),
                                  "rt_skill": number(r["rt_skill"], "{:+.2f}"),
                                  "rt_n": number(r["rt_n"], "{:.0f}")} for _, r in rt.iterrows()]})
    return out


def section(evidence: pd.DataFrame, label) -> dict | None:
    """The block's data; None when no response has draws or vintages."""
    draws, vintages = _draw_rows(evidence, label), _vintage_rows(evidence, label)
    if not draws and not vintages:
        return None
    return {"draws": draws, "fragile": [r for r in draws if r["fragile"]], "vintages": vintages}
