"""Multi-driver model sets: for each response, every subset of its supported drivers fitted
together, compared by AICc and Akaike weights, scored out of sample, and the pairs' variance
partitioned (:mod:`lagsieve.stats.modelset`).

The candidates are the drivers graded weak or better (after the rival caps), each at its own
selected lag, at most ``MAX_CANDIDATES`` of them (the best ranked: the set is bounded, so a
response with many drivers costs at most 1 + 6 + 15 + 20 = 42 models), plus the study's
controls in every model. Every subset of up to two drivers is a model (three when the
response and all candidates share at least ``TRIPLE_YEARS`` years), the empty subset (the
controls alone) included as the reference. All models of a response are fitted on the same
years (those where the response, its previous year, every candidate and every control are
present), as an AICc comparison requires. One row per response x model (``MODEL_COLUMNS``,
written to ``models.csv``); a response with too few shared years or no candidate gets one
row whose ``status`` says why.
"""
from __future__ import annotations

from itertools import combinations

import numpy as np
import pandas as pd

from lagsieve.evidence.rivals import RIVAL_GRADES
from lagsieve.evidence.vocabulary import GRADE_ORDER
from lagsieve.screen.hypothesis import backtest_windows
from lagsieve.stats.conditional import shift_rows
from lagsieve.stats.modelset import akaike_weights, fit_ar1_regression, model_skill, variance_partition

MAX_CANDIDATES = 6   # drivers per model set (the best ranked): bounds the set at 42 models
MAX_DRIVERS = 2      # drivers per model ...
TRIPLE_YEARS = 40    # ... three when at least this many years are shared
MIN_MODEL_YEARS = 15  # shared years a model set needs (about five per coefficient of the largest pair model)
MIN_FORECASTS = 5    # rolling-origin forecasts needed for an out-of-sample skill

MODEL_COLUMNS = ["response", "model", "drivers", "lags", "controls", "n_drivers", "n", "first_year", "last_year",
                 "coefficients", "coefficient_ses", "ar1", "log_likelihood", "k", "aicc", "delta_aicc", "weight",
                 "oos_skill", "oos_n", "unique_first", "unique_second", "shared", "residual", "status"]


def _joined(values, fmt="{}") -> str:
    return ";".join(fmt.format(v) for v in values)


def candidates(grp: pd.DataFrame) -> pd.DataFrame:
    """The drivers of one response that enter its model set: graded weak or better with a
    selected lag, best grade first (then rank), at most ``MAX_CANDIDATES``."""
    c = grp[grp["grade"].isin(RIVAL_GRADES) & grp["lag"].notna()].copy()
    c["_g"] = c["grade"].map(GRADE_ORDER)
    sort = ["_g", "rank"] if "rank" in c else ["_g"]
    return c.sort_values(sort + ["driver"], kind="mergesort").head(MAX_CANDIDATES).drop(columns="_g")


def subsets(drivers: list[str], n_years: int) -> list[tuple[str, ...]]:
    """Every subset of up to two drivers (three with ``TRIPLE_YEARS`` shared years), the empty one first."""
    top = MAX_DRIVERS + (1 if n_years >= TRIPLE_YEARS else 0)
    return [s for k in range(0, min(top, len(drivers)) + 1) for s in combinations(drivers, k)]


def _skipped(rid: str, reason: str) -> pd.DataFrame:
    return pd.DataFrame([{"response": rid, "model": "", "status": f"skipped: {reason}"}], columns=MODEL_COLUMNS)


def shared_years(table: pd.DataFrame, rid: str, series: dict[str, int]) -> tuple[np.ndarray, dict]:
    """(rows, columns): the rows of ``table`` where the response, its previous year and every
    series (id -> lag) are present, and every series shifted to pair with the response."""
    y = table[rid].to_numpy(float)
    cols = {s: shift_rows(table[s].to_numpy(float), lag) for s, lag in series.items()}
    ok = ~(np.isnan(y) | np.isnan(shift_rows(y, 1)))
    for v in cols.values():
        ok &= ~np.isnan(v)
    return np.flatnonzero(ok), cols


def fit_models(rid: str, y: np.ndarray, cols: dict, sets: list[tuple[str, ...]], controls: list[str],
               lag_of: dict) -> list[dict]:
    """One row per model: the AR(1)-error regression of ``y`` on an intercept, the controls and
    the drivers of the model (columns of ``cols`` on the shared years)."""
    n = len(y)
    rows = []
    for i, s in enumerate(sets):  # at most 42 small fits (one per hypothesis set, not a batch statistic)
        X = np.column_stack([np.ones(n)] + [cols[c] for c in controls] + [cols[d] for d in s])
        fit = fit_ar1_regression(y, X)
        nd = len(s)
        rows.append({"response": rid, "model": "+".join(s) if s else "(controls only)" if controls else "(none)",
                     "drivers": _joined(s), "lags": _joined(lag_of[d] for d in s), "controls": _joined(controls),
                     "n_drivers": nd, "n": n,
                     "coefficients": _joined(fit.beta[len(fit.beta) - nd:], "{:.6g}"),
                     "coefficient_ses": _joined(fit.se[len(fit.se) - nd:], "{:.6g}"),
                     "ar1": fit.phi, "log_likelihood": fit.loglik, "k": fit.k, "aicc": fit.aicc, "status": "ok"})
    return rows


def partitions(rows: list[dict], y: np.ndarray, cols: dict, controls: list[str]) -> None:
    """The variance partition of every two-driver model, in its own row (first, second driver)."""
    C = np.column_stack([cols[c] for c in controls]) if controls else None
    for r in rows:
        if r["n_drivers"] == 2:
            a, b = r["drivers"].split(";")
            vp = variance_partition(y, cols[a], cols[b], C)
            r.update(unique_first=vp["unique_a"], unique_second=vp["unique_b"], shared=vp["shared"],
                     residual=vp["residual"])


def skills(rows: list[dict], y: np.ndarray, ylag: np.ndarray, year: np.ndarray, cols: dict, controls: list[str],
           screen: dict) -> None:
    """Rolling-origin skill of every model against the hardest baseline (the models with the
    same number of drivers in one batch); nothing with fewer than ``MIN_FORECASTS`` forecasts."""
    initial, _ = backtest_windows(len(y), screen.get("validation", {}))
    if len(y) - initial < MIN_FORECASTS:
        return
    for k in sorted({r["n_drivers"] for r in rows}):
        group = [r for r in rows if r["n_drivers"] == k]
        names = [controls + (r["drivers"].split(";") if k else []) for r in group]
        X = np.array([[cols[c] for c in ns] for ns in names], float).reshape(len(group), -1, len(y))
        for r, s in zip(group, model_skill(y, ylag, year, X.transpose(0, 2, 1), initial)):
            r.update(oos_skill=float(s), oos_n=len(y) - initial)


def response_models(ev_rows: pd.DataFrame, table: pd.DataFrame, rid: str, screen: dict,
                    controls: dict[str, int]) -> pd.DataFrame:
    """The model set of one response (``MODEL_COLUMNS``), best AICc first."""
    cand = candidates(ev_rows)
    if cand.empty:
        return _skipped(rid, "no driver graded weak or better")
    lag_of = {d: int(lag) for d, lag in zip(cand["driver"], cand["lag"])}
    idx, cols = shared_years(table, rid, {**lag_of, **controls})
    if len(idx) < MIN_MODEL_YEARS:
        return _skipped(rid, f"only {len(idx)} years shared by the response and its drivers "
                             f"({MIN_MODEL_YEARS} needed)")
    cols = {s: v[idx] for s, v in cols.items()}
    y = table[rid].to_numpy(float)[idx]
    rows = fit_models(rid, y, cols, subsets(list(lag_of), len(idx)), list(controls), lag_of)
    partitions(rows, y, cols, list(controls))
    skills(rows, y, shift_rows(table[rid].to_numpy(float), 1)[idx], table.index.to_numpy(float)[idx], cols,
           list(controls), screen)
    years = table.index.to_numpy()[idx]
    out = pd.DataFrame(rows, columns=MODEL_COLUMNS).assign(first_year=int(years[0]), last_year=int(years[-1]))
    out["delta_aicc"], out["weight"] = akaike_weights(out["aicc"].to_numpy(float))
    return out.sort_values(["delta_aicc", "n_drivers"], kind="mergesort").reset_index(drop=True)


def model_table(ev: pd.DataFrame, table: pd.DataFrame, screen: dict,
                controls: dict[str, int] | None = None) -> pd.DataFrame:
    """The model sets of every response (``models.csv``); ``controls``: series id -> lag with
    the response, in every model."""
    parts = [response_models(grp, table, rid, screen, dict(controls or {}))
             for rid, grp in ev.groupby("response", sort=True)]
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=MODEL_COLUMNS)
