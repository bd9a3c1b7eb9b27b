"""The response as an estimate, inside stage `evidence`: draws and vintages read from the
files the responses name (keys ``draws`` and ``vintages``) and judged
(:mod:`lagsieve.evidence.draws`, :mod:`lagsieve.evidence.retro`)."""
from __future__ import annotations

import pandas as pd

from lagsieve.evidence.draws import add_draws, draw_matrix
from lagsieve.evidence.retro import add_vintages
from lagsieve.io.config import Study
from lagsieve.io.estimates import read_draws, read_vintages, wide


def _latest(annual: pd.DataFrame, rid: str) -> pd.Series:
    """The response as published (untransformed), index year."""
    a = annual[annual["series"] == rid]
    return pd.Series(a["value"].to_numpy(float), index=a["year"].to_numpy(int)).sort_index()


def add_estimates(ev: pd.DataFrame, study: Study, table: pd.DataFrame, annual: pd.DataFrame,
                  nulls: pd.DataFrame, se: pd.DataFrame | None) -> pd.DataFrame:
    """``ev`` with the draw columns and the vintage columns (empty for responses without them)."""
    screen = study.screen
    draws, vintages = {}, {}
    for r in study.responses:
        rid, tr = r["id"], r.get("transform", "none")
        if r.get("draws"):
            frame = read_draws(r["draws"], study.base_dir, rid, _latest(annual, rid).index)
            draws[rid] = draw_matrix(frame, table, tr, int(screen["draws"]), screen["seed"], rid)
        if r.get("vintages"):
            latest = _latest(annual, rid)
            frame = read_vintages(r["vintages"], study.base_dir, rid, int(latest.index.max()))
            vintages[rid] = (wide(frame, "vintage"), latest, tr)
    lags = {d["id"]: study.lags_for(d) for d in study.drivers}
    weights_se = se if screen.get("weights") == "inverse-variance" else None
    ev = add_draws(ev, table, draws, nulls, lags, screen, weights_se)
    return add_vintages(ev, table, vintages, bool(screen.get("real_time")))
