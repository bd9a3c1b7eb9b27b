"""Vintages of a response (response key ``vintages``): its retrospective pattern and, with
``screen.real_time``, the forecasts made in real time.

The screen itself, its grades and every other statistic use the latest vintage: the series of
the inputs. The vintages add, per response, Mohn's rho over the last five peels
(:func:`lagsieve.stats.retro.mohn_rho`; columns ``mohn_rho``, ``mohn_peels``), and per
hypothesis with ``screen.real_time`` the skill of one-step forecasts trained at every origin
on the series as then published and scored against the first published value of the target
year (:func:`lagsieve.stats.retro.realtime_forecasts`: the hypothesis's lag, its candidate's
baseline plus a line in the driver, against its hardest baseline; columns ``rt_skill``,
``rt_n``). ``rt_mode`` says which forecasts each row's skill came from.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from lagsieve.prep.align import apply_transform
from lagsieve.stats.retro import mohn_rho, realtime_forecasts

RETRO_COLUMNS = ["mohn_rho", "mohn_peels", "rt_skill", "rt_n", "rt_mode"]
LATEST = "latest vintage"  # rt_mode of the screen's rolling origin
REAL_TIME = "latest vintage; real time beside"


def realtime_row(row: dict, table: pd.DataFrame, wide: pd.DataFrame) -> dict:
    """``rt_skill`` and ``rt_n`` of one hypothesis (nothing without a lag)."""
    if pd.isna(row.get("lag")):
        return {}
    latest = table[row["response"]].dropna()
    lag = int(row["oos_lag"]) if not pd.isna(row.get("oos_lag")) else int(row["lag"])
    rt = realtime_forecasts(wide, latest, table[row["driver"]], lag, row.get("oos_baseline") or "trend",
                            row.get("oos_hardest") or "trend")
    return {"rt_skill": rt.skill, "rt_n": rt.n}


def add_vintages(ev: pd.DataFrame, table: pd.DataFrame, vintages: dict[str, tuple],
                 real_time: bool = False) -> pd.DataFrame:
    """``ev`` with ``RETRO_COLUMNS`` for the responses in ``vintages``: response id -> (wide
    vintage table as published, :func:`lagsieve.io.estimates.wide`; the latest series as
    published, index year; the response's transform). Mohn's rho is computed on the published
    scale, the real-time forecasts on the screened one."""
    ev = ev.copy()
    for c in RETRO_COLUMNS:
        ev[c] = np.nan
    ev["rt_mode"] = ev["rt_mode"].astype(object)
    for rid, (wide, latest, transform) in vintages.items():
        rows = ev.index[ev["response"] == rid]
        m = mohn_rho(wide, latest)
        ev.loc[rows, "mohn_rho"] = m.rho
        ev.loc[rows, "mohn_peels"] = m.n_peels
        ev.loc[rows, "rt_mode"] = REAL_TIME if real_time else LATEST
        if not real_time:
            continue
        screened = wide.apply(lambda c: pd.Series(apply_transform(c.to_numpy(float), transform), index=c.index))
        for i in rows:
            for k, v in realtime_row(ev.loc[i].to_dict(), table, screened).items():
                ev.at[i, k] = v
    return ev
