"""The state-space check of the supported hypotheses (``screen.state_space: true``).

Every hypothesis graded weak or better, at its selected lag, is refitted once as a regression
with known observation error and AR(1) process error (:mod:`lagsieve.stats.statespace`): the
response is its true value plus an error of the known standard error of each year (the
response's ``se`` or ``cv`` column, on the screened scale), and the true value follows the
driver with autocorrelated process error. The columns ``STATE_SPACE_COLUMNS`` of evidence.csv
give the driver's slope and its standard error under that model, phi, the process variance and
the share of the variance around the driver's line that is observation error. A response
without an se gets ``skipped`` in ``ss_status`` and no fit; the other hypotheses stay empty.

The years fitted run from the first to the last year with the response, its se and the driver
at the lag; a year inside that span missing any of them is a missing observation.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from lagsieve.evidence.rivals import RIVAL_GRADES
from lagsieve.prep.align import lagged
from lagsieve.stats.statespace import MIN_OBSERVED, known_error_regression

STATE_SPACE_COLUMNS = ["ss_slope", "ss_slope_se", "ss_phi", "ss_process_var", "ss_obs_share", "ss_n", "ss_status"]
STATE_SPACE_GRADES = RIVAL_GRADES  # weak or better


def hypothesis_series(table: pd.DataFrame, se: pd.DataFrame, response: str, driver: str, lag: int):
    """(y, x, s) of one hypothesis on consecutive years: the response, the driver at ``lag`` and
    the response's se, NaN where missing; the span from the first to the last complete year."""
    y = table[response].to_numpy(float)
    x = lagged(table, driver, int(lag))
    s = (se[response].reindex(table.index).to_numpy(float) if response in se
         else np.full(len(y), np.nan))
    ok = np.flatnonzero(np.isfinite(y) & np.isfinite(x) & np.isfinite(s))
    if len(ok) == 0:
        return y[:0], x[:0], s[:0]
    span = slice(ok[0], ok[-1] + 1)
    return y[span], x[span], s[span]


def fit_row(table: pd.DataFrame, se: pd.DataFrame, response: str, driver: str, lag: int) -> dict:
    """The state-space columns of one hypothesis (``ss_status`` says when and why it was skipped)."""
    if response not in se or not (se[response] > 0).any():
        return {"ss_status": "skipped: the response has no se or cv"}
    y, x, s = hypothesis_series(table, se, response, driver, lag)
    n = int(np.sum(np.isfinite(y) & np.isfinite(x) & np.isfinite(s)))
    if n < MIN_OBSERVED:
        return {"ss_n": n, "ss_status": f"skipped: {n} years with response, se and driver (needs {MIN_OBSERVED})"}
    try:
        fit = known_error_regression(y, x, s)
    except (ValueError, np.linalg.LinAlgError) as exc:
        return {"ss_n": n, "ss_status": f"failed: {exc}"}
    return {"ss_slope": float(fit.beta[1]), "ss_slope_se": float(fit.beta_se[1]), "ss_phi": fit.phi,
            "ss_process_var": fit.process_var, "ss_obs_share": fit.obs_share, "ss_n": fit.n,
            "ss_status": "ok" if fit.converged else "ok: the optimiser stopped short of convergence"}


def add_state_space(ev: pd.DataFrame, table: pd.DataFrame, se: pd.DataFrame, settings: dict) -> pd.DataFrame:
    """``ev`` with the state-space columns filled for the hypotheses graded weak or better when
    ``settings["state_space"]`` is true (else returned unchanged); ``se``: the responses'
    standard errors on the table's axis and scale (:func:`lagsieve.prep.align.se_table`)."""
    if not settings.get("state_space"):
        return ev
    out = ev.copy()
    for c in STATE_SPACE_COLUMNS:
        out[c] = "" if c == "ss_status" else np.nan
    chosen = out["grade"].isin(STATE_SPACE_GRADES) & out["lag"].notna()
    with threadpool_limits(limits=1):  # 1 x 1 state: BLAS threads bring nothing, only contention
        for i in out.index[chosen]:
            r = out.loc[i]
            for key, value in fit_row(table, se, r["response"], r["driver"], int(r["lag"])).items():
                out.at[i, key] = value
    return out
