"""The forecast ledger: every year, write down what the supported hypotheses predict for the
next year, and score those predictions when the year arrives.

A hypothesis graded ``strong`` or ``moderate`` claims that its driver helps to forecast the
response. The ledger holds it to that claim on years it has not seen. At every run, for each
such hypothesis, the *candidate* model (the baseline of ``evidence.csv``'s candidate, column
``oos_baseline``, plus the driver at its selected lag, column ``lag``) is fitted by ordinary
least squares on every observed year and forecasts the first response year not yet observed,
T + 1. The three baselines (climatology, persistence, trend) are fitted on the same years and
forecast the same year, so that the candidate can later be compared with what one would have
forecast without the driver. A forecast needs the driver in year T + 1 - lag, so it can be made
when lag >= 1, or when the driver has already been observed in T + 1; otherwise the reason is
recorded with the grade. The candidate takes the form the screen chose (a straight line, or a
penalised spline of the driver when the screen's model is ``gam``), and with ``screen.weights: inverse-variance`` every fit is weighted by
1/se^2 as in the screen. Values are on the model's scale (the response's transform).

Prediction interval (``LEVEL`` = 80 %, two-sided): the classical OLS prediction interval from
the candidate's training residuals, forecast +- t(0.90; n - p) * s * sqrt(1 + w0' (W'W)^-1 w0),
with s^2 = RSS / (n - p). It ignores the uncertainty of the lag choice and assumes independent
residuals, so it is expected to be too narrow for autocorrelated series; its coverage on the
scored years is what the track record reports.

On a later run in which year T + 1 has arrived, each open forecast is scored: error = observed
- forecast, whether the observation fell inside the interval, and the squared error of the
candidate against each baseline's forecast made at the same time. A forecast whose training
data were restated since (any value it was made from changed, was removed or was filled in)
is marked ``superseded`` with the restated years as the reason, and is never scored.

Writes are single transactions (``BEGIN IMMEDIATE`` ... ``with con:``), so a run killed while
writing leaves the ledger as it was. A run whose data fingerprint and evidence grades equal
those of the latest recorded run adds nothing.

Tables (SQLite, one file, several studies may share it)
-------------------------------------------------------
``meta``              key, value (schema version)
``runs``              one row per recorded run: study, run_key (hash of data fingerprint and
                      grades), created_utc, tool_version, config and input-file SHA-256, data
                      SHA-256, the screen settings (JSON), counts of new/scored/superseded
``series_years``      per run, series and year: the annual value and its hash (the data
                      fingerprint used to list added and restated years)
``grades``            per run and hypothesis: grade, model, lag, hardest baseline, the
                      statistics the grade rules use, flags, and why no forecast was made (``note``)
``forecasts``         one row per forecast: hypothesis, grade, the form the screen preferred
                      (``screen_model``), lag, baseline, scale, origin year T, target year,
                      driver year and value, forecast and interval, training-data hash, input
                      hashes, tool version, status (open, scored, superseded)
                      UNIQUE(study, response, driver, target_year, training_sha256)
``baseline_forecasts`` forecast_id, baseline, forecast and interval made at the same time
``scores``            forecast_id (unique), run_id, observed, error, inside
"""
from __future__ import annotations

import hashlib
import json
import math
import sqlite3
import sys
import time
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import stats as _st

from lagsieve.prep.align import forecast_frame
from lagsieve.io.config import Study, load_study
from lagsieve.stats.backtest import BASELINES, baseline_design

SCHEMA_VERSION = "1"
LEVEL = 0.80
GRADED = ("strong", "moderate")
DEFAULT_NAME = "ledger.sqlite"
EXIT_MISSING = 2

SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (
    key   TEXT PRIMARY KEY,
    value TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS runs (
    run_id        INTEGER PRIMARY KEY AUTOINCREMENT,
    study         TEXT NOT NULL,
    run_key       TEXT NOT NULL,
    created_utc   TEXT NOT NULL,
    tool_version  TEXT NOT NULL,
    config_sha256 TEXT NOT NULL,
    inputs_sha256 TEXT NOT NULL,
    data_sha256   TEXT NOT NULL,
    screen_json   TEXT NOT NULL,
    n_new         INTEGER NOT NULL DEFAULT 0,
    n_scored      INTEGER NOT NULL DEFAULT 0,
    n_superseded  INTEGER NOT NULL DEFAULT 0
);
CREATE INDEX IF NOT EXISTS runs_study ON runs(study, run_id);
CREATE TABLE IF NOT EXISTS series_years (
    run_id    INTEGER NOT NULL REFERENCES runs(run_id),
    series    TEXT NOT NULL,
    year      INTEGER NOT NULL,
    value     REAL NOT NULL,
    value_sha TEXT NOT NULL,
    PRIMARY KEY (run_id, series, year)
);
CREATE TABLE IF NOT EXISTS grades (
    run_id          INTEGER NOT NULL REFERENCES runs(run_id),
    response        TEXT NOT NULL,
    driver          TEXT NOT NULL,
    grade           TEXT NOT NULL,
    model           TEXT,
    lag             INTEGER,
    hardest         TEXT,
    q_value         REAL,
    p_surrogate     REAL,
    oos_skill       REAL,
    oos_p_surrogate REAL,
    retest_skill    REAL,
    flags           TEXT NOT NULL DEFAULT '',
    last_year       INTEGER,
    note            TEXT NOT NULL DEFAULT '',
    PRIMARY KEY (run_id, response, driver)
);
CREATE TABLE IF NOT EXISTS forecasts (
    forecast_id       INTEGER PRIMARY KEY AUTOINCREMENT,
    run_id            INTEGER NOT NULL REFERENCES runs(run_id),
    study             TEXT NOT NULL,
    response          TEXT NOT NULL,
    driver            TEXT NOT NULL,
    grade             TEXT NOT NULL,
    screen_model      TEXT NOT NULL DEFAULT 'linear',
    lag               INTEGER NOT NULL,
    baseline          TEXT NOT NULL,
    scale             TEXT NOT NULL,
    origin_year       INTEGER NOT NULL,
    target_year       INTEGER NOT NULL,
    driver_year       INTEGER NOT NULL,
    driver_value      REAL NOT NULL,
    forecast          REAL NOT NULL,
    lower             REAL NOT NULL,
    upper             REAL NOT NULL,
    level             REAL NOT NULL,
    n_train           INTEGER NOT NULL,
    resid_sd          REAL NOT NULL,
    training_sha256   TEXT NOT NULL,
    inputs_sha256     TEXT NOT NULL,
    tool_version      TEXT NOT NULL,
    status            TEXT NOT NULL DEFAULT 'open' CHECK (status IN ('open', 'scored', 'superseded')),
    superseded_run    INTEGER REFERENCES runs(run_id),
    superseded_reason TEXT,
    UNIQUE (study, response, driver, target_year, training_sha256)
);
CREATE TABLE IF NOT EXISTS baseline_forecasts (
    forecast_id INTEGER NOT NULL REFERENCES forecasts(forecast_id),
    baseline    TEXT NOT NULL,
    forecast    REAL NOT NULL,
    lower       REAL NOT NULL,
    upper       REAL NOT NULL,
    PRIMARY KEY (forecast_id, baseline)
);
CREATE TABLE IF NOT EXISTS scores (
    forecast_id INTEGER PRIMARY KEY REFERENCES forecasts(forecast_id),
    run_id      INTEGER NOT NULL REFERENCES runs(run_id),
    observed    REAL NOT NULL,
    error       REAL NOT NULL,
    inside      INTEGER NOT NULL CHECK (inside IN (0, 1))
);
"""


# ---------------------------------------------------------------- paths
def resolve_ledger_path(study: Study, study_dir: str | Path) -> Path:
    """Where the ledger of ``study`` lives: config key ``ledger.path`` (absolute, or relative to
    the study's output folder ``<out>/<study>``), default ``<out>/<study>/ledger.sqlite``."""
    p = Path(study.ledger_path) if study.ledger_path else Path(DEFAULT_NAME)
    return p if p.is_absolute() else Path(study_dir) / p


# ---------------------------------------------------------------- hashing
def _h(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _fmt_value(v: float) -> str:
    """Canonical text of a value: the shortest repr that round-trips (stable across platforms)."""
    return repr(float(v))


def fingerprints(annual: pd.DataFrame) -> pd.DataFrame:
    """Per series and year: the annual value (before transforms) and a hash of it.

    ``annual`` is the tidy output of the `align` stage (columns series, year, value).
    """
    fp = annual[["series", "year", "value"]].dropna(subset=["value"]).copy()
    fp["year"] = fp["year"].astype(int)
    fp["value"] = fp["value"].astype(float)
    fp["value_sha"] = [_h(f"{s}|{y}|{_fmt_value(v)}")[:16] for s, y, v in zip(fp["series"], fp["year"], fp["value"])]
    return fp.sort_values(["series", "year"]).reset_index(drop=True)


def _digest_frame(df: pd.DataFrame) -> str:
    return _h(df.to_csv(index=False, lineterminator="\n", float_format="%.10g"))


# ---------------------------------------------------------------- the forecast
@dataclass
class NextYearForecast:
    """The one-step-ahead forecast of one hypothesis, with the baselines' forecasts."""

    response: str
    driver: str
    lag: int
    baseline: str  # the hardest baseline: the candidate is this baseline plus the driver
    origin_year: int  # T, the last observed response year
    target_year: int  # T + 1
    driver_year: int  # T + 1 - lag
    driver_value: float  # transformed, as in the model
    forecast: float
    lower: float
    upper: float
    level: float
    n_train: int
    resid_sd: float
    training_sha256: str
    baselines: dict[str, tuple[float, float, float]] = field(default_factory=dict)  # b -> (fc, lo, hi)
    grade: str = ""  # the hypothesis' grade when the forecast was made
    screen_model: str = "linear"  # the form the screen chose; the forecast uses the same form


def _ols_forecast(W: np.ndarray, y: np.ndarray, w0: np.ndarray, level: float, weights: np.ndarray | None = None):
    """Least-squares fit of y on W; forecast at w0 with its two-sided prediction interval.

    Returns (forecast, lower, upper, residual sd). With ``weights`` (mean 1) the fit is
    weighted least squares and the new year gets weight 1, the mean precision of the training
    years (its standard error is not known yet). Columns other than the first (intercept) are
    centred first, which leaves the forecast unchanged and keeps the normal equations well
    conditioned (the year column is about 2000).
    """
    W = np.asarray(W, float).copy()
    w0 = np.asarray(w0, float).copy()
    sw = np.ones(len(y)) if weights is None else np.sqrt(np.asarray(weights, float))
    mu = W[:, 1:].mean(axis=0)
    W[:, 1:] -= mu
    w0[1:] -= mu
    Ws, ys = W * sw[:, None], np.asarray(y, float) * sw
    n, p = Ws.shape
    q, r = np.linalg.qr(Ws)
    beta = np.linalg.solve(r, q.T @ ys)
    resid = ys - Ws @ beta
    df = n - p
    s = float(np.sqrt(resid @ resid / df))
    lev = np.linalg.solve(r.T, w0)
    se = s * float(np.sqrt(1.0 + lev @ lev))
    fc = float(w0 @ beta)
    t = float(_st.t.ppf(0.5 + level / 2.0, df))
    return fc, fc - t * se, fc + t * se, s


def _gam_forecast(x, y, Z, x0: float, z0, level: float, weights=None):
    """Baseline + penalised spline of the driver, forecast at (x0, z0) with an approximate
    prediction interval; returns (forecast, lower, upper, residual sd)."""
    from lagsieve.stats.splines import fit_pspline, predict_pspline

    other = Z[:, 1:]
    trend = other[:, 0] if other.shape[1] else None
    fit = fit_pspline(x, y, trend=trend, weights=weights)
    fc = float(predict_pspline(fit, np.array([x0]), None if trend is None else np.array([z0[1]]))[0])
    n, edf = float(fit.n_used), float(fit.edf)
    df = max(n - edf, 1.0)
    s = float(np.sqrt(fit.rss / df))
    half = float(_st.t.ppf(0.5 + level / 2.0, df)) * s * float(np.sqrt(1.0 + edf / n))
    return fc, fc - half, fc + half, s


def training_years(table: pd.DataFrame, response: str, driver: str, lag: int, origin_year: int):
    """Rows of the candidate's fit up to ``origin_year``: years where the response, the response
    one year earlier and the driver at ``lag`` are all observed."""
    ff = forecast_frame(table, response, driver, [lag])
    keep = ff.years <= origin_year
    return ff.years[keep], ff.y[keep], ff.ylag[keep], ff.rows[keep]


def used_values(raw: pd.DataFrame, response: str, driver: str, lag: int, fit_years: np.ndarray,
                origin_year: int) -> list[tuple[str, int]]:
    """The (series, year) cells a forecast is made from: the response in every fitted year and
    the year before it (persistence) and in T; the driver at every fitted year minus lag, and
    in T + 1 - lag."""
    ry = set(int(y) for y in fit_years) | set(int(y) - 1 for y in fit_years) | {int(origin_year)}
    dy = set(int(y) - lag for y in fit_years) | {int(origin_year) + 1 - lag}
    return sorted([(response, y) for y in ry] + [(driver, y) for y in dy])


def training_hash(raw: pd.DataFrame, transforms: dict[str, str], response: str, driver: str,
                  lag: int, baseline: str, cells: list[tuple[str, int]], raw_se: pd.DataFrame | None = None) -> str:
    """SHA-256 of everything a forecast is made from: the model (lag, baseline, transforms) and
    the raw annual values of its cells (a missing cell is written as null). ``raw`` is wide:
    years as index, one column per series, values before transforms. With ``raw_se`` (weighted
    fits) the response's standard errors in its cells are part of it too."""
    def cell(frame, s, y):
        v = frame[s].get(y, np.nan) if s in frame.columns else np.nan
        return None if pd.isna(v) else _fmt_value(v)

    vals = [[s, int(y), cell(raw, s, y)] for s, y in cells]
    payload = {"response": response, "driver": driver, "lag": int(lag), "baseline": baseline,
               "transform": [transforms.get(response, "none"), transforms.get(driver, "none")],
               "cells": vals}
    if raw_se is not None:
        payload["se"] = [[s, int(y), cell(raw_se, s, y)] for s, y in cells if s == response]
    return _h(json.dumps(payload, sort_keys=True, separators=(",", ":")))


def next_year_forecast(table: pd.DataFrame, raw: pd.DataFrame, transforms: dict[str, str],
                       response: str, driver: str, lag: int, baseline: str,
                       level: float = LEVEL, se: pd.DataFrame | None = None,
                       raw_se: pd.DataFrame | None = None, model: str = "linear"
                       ) -> tuple[NextYearForecast | None, str]:
    """Forecast the first response year not yet observed with the candidate model.

    ``table`` is the wide transformed annual table (:func:`lagsieve.pipeline.load_table`), ``raw``
    the same before transforms. With ``se`` (standard errors on the transformed scale, as
    :func:`lagsieve.prep.align.se_table`; given when ``screen.weights`` is inverse-variance)
    every fit is weighted by 1/se^2, as in the screen; ``raw_se`` (before transforms) then
    enters the training hash. Returns (forecast, "") or (None, the reason no forecast can be
    made, in words).

    With ``model='gam'`` (the form the screen chose) the candidate is the baseline plus a
    penalised spline of the driver (:func:`lagsieve.stats.splines.fit_pspline`, the baseline's
    non-intercept term entering as an unpenalised linear term, smoothing by GCV), and its
    interval is the approximate t_{n - edf} interval with variance sigma^2 (1 + edf / n)
    (average leverage in place of the exact leverage of the new point).
    """
    y_all = table[response]
    observed = y_all.dropna()
    if observed.empty:
        return None, "no forecast: the response has no observed year"
    T = int(observed.index.max())
    target, dyear = T + 1, T + 1 - int(lag)
    xv = table[driver].get(dyear, np.nan) if driver in table.columns else np.nan
    if pd.isna(xv):
        return None, (f"no forecast: lag {int(lag)} needs {driver} in {dyear}, not yet observed")
    years, y, ylag, rows = training_years(table, response, driver, int(lag), T)
    x = table[driver].shift(int(lag)).to_numpy(dtype=float)[rows]
    p_c = baseline_design(baseline, np.zeros(1), np.zeros(1)).shape[1] + 1
    if len(y) - p_c < 3:
        return None, f"no forecast: {len(y)} usable years are too few for the candidate model"
    yT = float(y_all.loc[T])
    wts = None
    if se is not None:
        from lagsieve.prep.align import inverse_variance_weights

        wts = inverse_variance_weights(se[response].to_numpy(dtype=float)[rows])
    fcs = {}
    try:
        for b in BASELINES:
            Z = baseline_design(b, ylag, years)
            z0 = baseline_design(b, np.array([yT]), np.array([target]))[0]
            fcs[b] = _ols_forecast(Z, y, z0, level, wts)[:3]
        Z = baseline_design(baseline, ylag, years)
        z0 = baseline_design(baseline, np.array([yT]), np.array([target]))[0]
        if model == "gam" and len(y) >= 12:
            fc, lo, hi, s = _gam_forecast(x, y, Z, float(xv), z0, level, wts)
        else:
            W = np.column_stack([Z, x])
            w0 = np.append(z0, float(xv))
            fc, lo, hi, s = _ols_forecast(W, y, w0, level, wts)
    except (np.linalg.LinAlgError, ValueError) as exc:
        return None, f"no forecast: the least-squares fit failed ({exc})"
    if not np.all(np.isfinite([fc, lo, hi, s] + [v for t in fcs.values() for v in t])):
        return None, "no forecast: the fit gave a non-finite forecast or interval (a constant driver?)"
    cells = used_values(raw, response, driver, int(lag), years, T)
    sha = training_hash(raw, transforms, response, driver, int(lag), baseline, cells,
                        raw_se if se is not None else None)
    return NextYearForecast(response=response, driver=driver, lag=int(lag), baseline=baseline, origin_year=T,
                            target_year=target, driver_year=dyear, driver_value=float(xv), forecast=fc,
                            lower=lo, upper=hi, level=level, n_train=int(len(y)), resid_sd=s,
                            training_sha256=sha, baselines=fcs), ""


# ---------------------------------------------------------------- database
def connect(path: str | Path) -> sqlite3.Connection:
    """Open (or create) a ledger. Autocommit mode: every write goes through :func:`transaction`."""
    Path(path).parent.mkdir(parents=True, exist_ok=True)
    con = sqlite3.connect(str(path), isolation_level=None, timeout=60)
    con.row_factory = sqlite3.Row
    con.execute("PRAGMA foreign_keys = ON")
    return con


@contextmanager
def transaction(con: sqlite3.Connection):
    """One write transaction: ``BEGIN IMMEDIATE`` (takes the write lock at once), then ``with
    con:`` commits on success and rolls back on any exception, including KeyboardInterrupt.
    A process killed outright leaves SQLite's journal, which the next opening rolls back."""
    con.execute("BEGIN IMMEDIATE")
    with con:
        yield con


def _ensure_schema(con: sqlite3.Connection) -> None:
    for stmt in SCHEMA.split(";"):
        if stmt.strip():
            con.execute(stmt)
    row = con.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
    if row is None:
        con.execute("INSERT INTO meta(key, value) VALUES ('schema_version', ?)", (SCHEMA_VERSION,))
    elif row[0] != SCHEMA_VERSION:
        raise RuntimeError(f"ledger schema version {row[0]} is not {SCHEMA_VERSION}")


def _has_schema(con: sqlite3.Connection) -> bool:
    return con.execute("SELECT 1 FROM sqlite_master WHERE type='table' AND name='runs'").fetchone() is not None


# ---------------------------------------------------------------- one ledger update
def _num(v):
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return None if math.isnan(f) else f


def _int(v):
    f = _num(v)
    return None if f is None else int(f)


def _str(v) -> str:
    return "" if v is None or (isinstance(v, float) and math.isnan(v)) else str(v)


def grade_rows(evidence: pd.DataFrame) -> pd.DataFrame:
    """The per-hypothesis part of evidence.csv that the ledger keeps (and whose change makes a
    new run)."""
    cols = {"response": _str, "driver": _str, "grade": _str, "model": _str, "lag": _int, "oos_hardest": _str,
            "q_value": _num, "p_surrogate": _num, "oos_skill": _num, "oos_p_surrogate": _num,
            "retest_skill": _num, "flags": _str, "last_year": _int}
    out = pd.DataFrame({c: [f(v) for v in (evidence[c] if c in evidence else [None] * len(evidence))]
                        for c, f in cols.items()})
    if "oos_baseline" in evidence.columns:  # the baseline the candidate is built on
        out["oos_hardest"] = [_str(v) for v in evidence["oos_baseline"]]
    return out.rename(columns={"oos_hardest": "hardest"}).sort_values(["response", "driver"]).reset_index(drop=True)


@dataclass
class StudyData:
    """The data of one run as the ledger needs them."""

    table: pd.DataFrame  # wide, transformed (the screen's table)
    raw: pd.DataFrame  # wide, before transforms (hashed)
    transforms: dict[str, str]
    se: pd.DataFrame | None = None  # transformed-scale standard errors, only for weighted fits
    raw_se: pd.DataFrame | None = None

    @classmethod
    def load(cls, study: Study, annual_csv: str | Path) -> "StudyData":
        from lagsieve.pipeline import load_table

        annual = pd.read_csv(annual_csv)
        transforms = study.transforms()
        raw = annual.pivot(index="year", columns="series", values="value").astype(float)
        se = raw_se = None
        if study.screen.get("weights") == "inverse-variance":
            from lagsieve.prep.align import se_table

            se = se_table(annual, transforms)
            raw_se = annual.pivot(index="year", columns="series", values="se").astype(float)
        return cls(load_table(study, annual_csv), raw, transforms, se, raw_se)

    def forecast(self, response, driver, lag, baseline, level=LEVEL, model="linear"):
        return next_year_forecast(self.table, self.raw, self.transforms, response, driver, lag, baseline,
                                  level, self.se, self.raw_se, model)

    def training_sha(self, response, driver, lag, baseline, origin_year) -> str:
        """The training hash a forecast made at ``origin_year`` would have on these data."""
        years, *_ = training_years(self.table, response, driver, lag, origin_year)
        cells = used_values(self.raw, response, driver, lag, years, origin_year)
        return training_hash(self.raw, self.transforms, response, driver, lag, baseline, cells,
                             self.raw_se if self.se is not None else None)


def _input_hashes(study: Study) -> dict[str, str]:
    from lagsieve.io.files import sha256_file

    out = {}
    for spec in study.inputs:
        p = Path(spec["path"])
        p = p if p.is_absolute() else study.base_dir / p
        out[spec["path"]] = sha256_file(p) if p.is_file() else "missing"
    return out


def _diff_cells(old: dict[tuple[str, int], str], new: dict[tuple[str, int], str], series: str,
                last_year: int) -> list[str]:
    """Words for the cells of ``series`` up to ``last_year`` that differ between two fingerprints."""
    yrs = sorted({y for s, y in list(old) + list(new) if s == series and y <= last_year})
    out = []
    for y in yrs:
        a, b = old.get((series, y)), new.get((series, y))
        if a == b:
            continue
        what = "restated" if a and b else "filled in" if b else "removed"
        out.append(f"{series} {y} {what}")
    return out


def update_ledger(config_path: str | Path, annual_csv: str | Path, evidence_csv: str | Path,
                  study_dir: str | Path, summary_path: str | Path | None = None,
                  ledger_path: str | Path | None = None, now: str | None = None) -> dict:
    """Stage `ledger`: record this run's forecasts, score and supersede earlier ones.

    ``study_dir`` is ``<out>/<study>`` (where a relative ``ledger.path`` is resolved);
    ``ledger_path`` overrides the config. Everything is computed first; the database is then
    written in one transaction. Returns the summary, also written to ``summary_path`` as JSON
    after the transaction has committed: study, status (``recorded`` or ``unchanged``), run_id,
    the numbers of forecasts new, scored and superseded, and the ledger's path.
    """
    from lagsieve.io.files import sha256_file
    from lagsieve.io.provenance import tool_version
    from lagsieve.io.files import write_json

    study = load_study(config_path)
    data = StudyData.load(study, annual_csv)
    evidence = pd.read_csv(evidence_csv)
    grades = grade_rows(evidence)
    fp = fingerprints(pd.read_csv(annual_csv))
    data_sha = _digest_frame(fp[["series", "year", "value_sha"]])
    run_key = _h(data_sha + "|" + _digest_frame(grades))
    path = Path(ledger_path) if ledger_path else resolve_ledger_path(study, study_dir)

    made: list[NextYearForecast] = []
    notes = {}
    for g in grades.to_dict("records"):
        if g["grade"] not in GRADED:
            continue
        if g["lag"] is None or not g["hardest"]:
            notes[(g["response"], g["driver"])] = "no forecast: no selected lag or hardest baseline"
            continue
        f, why = data.forecast(g["response"], g["driver"], g["lag"], g["hardest"], model=g["model"] or "linear")
        if f is None:
            notes[(g["response"], g["driver"])] = why
        else:
            f.grade, f.screen_model = g["grade"], g["model"] or "linear"
            made.append(f)
    run = {"study": study.study, "run_key": run_key, "data_sha256": data_sha,
           "inputs_sha256": json.dumps(_input_hashes(study), sort_keys=True), "tool_version": tool_version(),
           "config_sha256": sha256_file(study.path),
           "created_utc": now or time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
           "screen_json": json.dumps({k: study.screen[k] for k in ("alpha", "fdr", "min_overlap", "surrogates",
                                                                    "seed", "weights") if k in study.screen},
                                     sort_keys=True)}
    con = connect(path)
    try:
        summary = write_run(con, run, fp, grades, notes, made, data)
    finally:
        con.close()
    summary["ledger"] = str(path)
    if summary_path is not None:
        write_json(summary, summary_path)
    return summary


def write_run(con: sqlite3.Connection, run: dict, fp: pd.DataFrame, grades: pd.DataFrame, notes: dict,
              made: list[NextYearForecast], data: StudyData) -> dict:
    """Write one run in one transaction; nothing when its run_key equals the latest run's."""
    study = run["study"]
    with transaction(con):
        _ensure_schema(con)
        last = con.execute("SELECT run_id, run_key FROM runs WHERE study = ? ORDER BY run_id DESC LIMIT 1",
                           (study,)).fetchone()
        if last is not None and last["run_key"] == run["run_key"]:
            return {"study": study, "status": "unchanged", "run_id": int(last["run_id"]),
                    "new": 0, "scored": 0, "superseded": 0}
        cols = ["study", "run_key", "created_utc", "tool_version", "config_sha256", "inputs_sha256", "data_sha256",
                "screen_json"]
        cur = con.execute(f"INSERT INTO runs({', '.join(cols)}) VALUES ({', '.join('?' * len(cols))})",
                          [run[c] for c in cols])
        run_id = int(cur.lastrowid)
        con.executemany("INSERT INTO series_years(run_id, series, year, value, value_sha) VALUES (?,?,?,?,?)",
                        [(run_id, s, int(y), float(v), h) for s, y, v, h in
                         zip(fp["series"], fp["year"], fp["value"], fp["value_sha"])])
        con.executemany(
            "INSERT INTO grades(run_id, response, driver, grade, model, lag, hardest, q_value, p_surrogate, oos_skill,"
            " oos_p_surrogate, retest_skill, flags, last_year, note) VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
            [(run_id, g["response"], g["driver"], g["grade"], g["model"] or None, g["lag"], g["hardest"] or None,
              g["q_value"], g["p_surrogate"], g["oos_skill"], g["oos_p_surrogate"], g["retest_skill"], g["flags"],
              g["last_year"], notes.get((g["response"], g["driver"]), "")) for g in grades.to_dict("records")])
        new_fp = dict(zip(zip(fp["series"], fp["year"].astype(int)), fp["value_sha"]))
        n_sup = _supersede_open(con, study, run_id, new_fp, data)
        n_scored = _score_open(con, study, run_id, data.table)
        n_new = _insert_forecasts(con, study, run_id, made, run["inputs_sha256"], run["tool_version"],
                                  data.transforms)
        con.execute("UPDATE runs SET n_new = ?, n_scored = ?, n_superseded = ? WHERE run_id = ?",
                    (n_new, n_scored, n_sup, run_id))
    return {"study": study, "status": "recorded", "run_id": run_id, "new": n_new, "scored": n_scored,
            "superseded": n_sup}


def _open_forecasts(con, study: str) -> list[sqlite3.Row]:
    return con.execute("SELECT * FROM forecasts WHERE study = ? AND status = 'open' ORDER BY forecast_id",
                       (study,)).fetchall()


def _supersede_open(con, study: str, run_id: int, new_fp: dict, data: StudyData) -> int:
    """Mark superseded every open forecast whose training data changed since it was made."""
    n = 0
    for f in _open_forecasts(con, study):
        if f["response"] not in data.table.columns or f["driver"] not in data.table.columns:
            continue  # a series left the study: nothing to compare, the forecast can still be scored
        sha = data.training_sha(f["response"], f["driver"], f["lag"], f["baseline"], f["origin_year"])
        if sha == f["training_sha256"]:
            continue
        old = {(r["series"], int(r["year"])): r["value_sha"] for r in con.execute(
            "SELECT series, year, value_sha FROM series_years WHERE run_id = ? AND series IN (?, ?)",
            (f["run_id"], f["response"], f["driver"]))}
        why = (_diff_cells(old, new_fp, f["response"], f["origin_year"])
               + _diff_cells(old, new_fp, f["driver"], f["driver_year"]))
        reason = "training data changed: " + ("; ".join(why) if why else "transform, weights or model settings")
        con.execute("UPDATE forecasts SET status = 'superseded', superseded_run = ?, superseded_reason = ? "
                    "WHERE forecast_id = ?", (run_id, reason, f["forecast_id"]))
        n += 1
    return n


def _score_open(con, study: str, run_id: int, table: pd.DataFrame) -> int:
    """Score every open forecast whose target year has now been observed."""
    n = 0
    for f in _open_forecasts(con, study):
        if f["response"] not in table.columns:
            continue
        obs = table[f["response"]].get(f["target_year"], np.nan)
        if pd.isna(obs):
            continue
        obs = float(obs)
        inside = int(f["lower"] <= obs <= f["upper"])
        con.execute("INSERT INTO scores(forecast_id, run_id, observed, error, inside) VALUES (?,?,?,?,?)",
                    (f["forecast_id"], run_id, obs, obs - f["forecast"], inside))
        con.execute("UPDATE forecasts SET status = 'scored' WHERE forecast_id = ?", (f["forecast_id"],))
        n += 1
    return n


def _insert_forecasts(con, study, run_id, made, inputs_json, version, transforms) -> int:
    """Insert this run's forecasts; one already made from the same training data is kept as it was."""
    n = 0
    for f in made:
        cur = con.execute(
            "INSERT OR IGNORE INTO forecasts(run_id, study, response, driver, grade, screen_model, lag, baseline, scale,"
            " origin_year, target_year, driver_year, driver_value, forecast, lower, upper, level, n_train, resid_sd,"
            " training_sha256, inputs_sha256, tool_version) VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
            (run_id, study, f.response, f.driver, f.grade, f.screen_model, f.lag, f.baseline,
             transforms.get(f.response, "none"),
             f.origin_year, f.target_year, f.driver_year, f.driver_value, f.forecast, f.lower, f.upper, f.level,
             f.n_train, f.resid_sd, f.training_sha256, inputs_json, version))
        if cur.rowcount != 1:
            continue
        fid = int(cur.lastrowid)
        con.executemany("INSERT INTO baseline_forecasts(forecast_id, baseline, forecast, lower, upper) VALUES (?,?,?,?,?)",
                        [(fid, b, *v) for b, v in f.baselines.items()])
        n += 1
    return n


# ---------------------------------------------------------------- reading the ledger
def open_readonly(path: str | Path) -> sqlite3.Connection:
    """Open an existing ledger for reading only (never creates the file)."""
    con = sqlite3.connect(Path(path).resolve().as_uri() + "?mode=ro", uri=True)
    con.row_factory = sqlite3.Row
    return con


def _frame(con, sql: str, args=()) -> pd.DataFrame:
    cur = con.execute(sql, args)
    cols = [d[0] for d in cur.description]
    return pd.DataFrame([tuple(r) for r in cur.fetchall()], columns=cols)


def runs_frame(con, study: str) -> pd.DataFrame:
    return _frame(con, "SELECT * FROM runs WHERE study = ? ORDER BY run_id", (study,))


def forecasts_frame(con, study: str) -> pd.DataFrame:
    """One row per forecast with its score (if scored) and the baselines' forecasts and errors."""
    f = _frame(con, "SELECT f.*, s.run_id AS scored_run, s.observed, s.error, s.inside FROM forecasts f "
                    "LEFT JOIN scores s USING (forecast_id) WHERE f.study = ? ORDER BY f.forecast_id", (study,))
    b = _frame(con, "SELECT b.forecast_id, b.baseline, b.forecast FROM baseline_forecasts b "
                    "JOIN forecasts f USING (forecast_id) WHERE f.study = ?", (study,))
    if f.empty:
        return f
    for bl in BASELINES:
        m = b[b["baseline"] == bl].set_index("forecast_id")["forecast"]
        f[f"fc_{bl}"] = f["forecast_id"].map(m)
        f[f"err_{bl}"] = f["observed"] - f[f"fc_{bl}"]
    f["err_hardest"] = [r[f"err_{r['baseline']}"] for _, r in f.iterrows()]
    return f


def _skill(e_model: pd.Series, e_base: pd.Series) -> float:
    ok = e_model.notna() & e_base.notna()
    den = float((e_base[ok] ** 2).sum())
    return float(1.0 - (e_model[ok] ** 2).sum() / den) if ok.any() and den > 0 else float("nan")


TRACK_COLUMNS = ["response", "driver", "made", "open", "scored", "superseded", "inside", "coverage", "mae",
                 "skill_hardest", "beat_hardest"] + [f"skill_{b}" for b in BASELINES] + ["last"]


def track_record(con, study: str) -> pd.DataFrame:
    """Per hypothesis: forecasts made, open, scored, superseded; on the scored ones, how many fell
    inside their interval (coverage), mean absolute error, and skill 1 - SSE(candidate) / SSE(b)
    against the baselines' forecasts made at the same time (``skill_hardest``: against the
    baseline the candidate was built on; ``beat_hardest``: forecasts with the smaller squared
    error). Superseded forecasts are counted but never scored."""
    f = forecasts_frame(con, study)
    if f.empty:
        return pd.DataFrame(columns=TRACK_COLUMNS)
    rows = []
    for (r, d), g in f.groupby(["response", "driver"], sort=True):
        sc = g[g["status"] == "scored"]
        last = g.iloc[-1]
        lastw = (f"{int(last['target_year'])}: {last['forecast']:.3f} [{last['lower']:.3f}, {last['upper']:.3f}] "
                 f"{last['status']}")
        if last["status"] == "scored":
            lastw += f" (observed {last['observed']:.3f}, {'inside' if last['inside'] else 'outside'})"
        row = {"response": r, "driver": d, "made": len(g), "open": int((g["status"] == "open").sum()),
               "scored": len(sc), "superseded": int((g["status"] == "superseded").sum()),
               "inside": int(sc["inside"].sum()) if len(sc) else 0,
               "coverage": float(sc["inside"].mean()) if len(sc) else float("nan"),
               "mae": float(sc["error"].abs().mean()) if len(sc) else float("nan"),
               "skill_hardest": _skill(sc["error"], sc["err_hardest"]),
               "beat_hardest": int((sc["error"] ** 2 < sc["err_hardest"] ** 2).sum()),
               "last": lastw}
        for b in BASELINES:
            row[f"skill_{b}"] = _skill(sc["error"], sc[f"err_{b}"])
        rows.append(row)
    return pd.DataFrame(rows, columns=TRACK_COLUMNS)


def _years_text(years) -> str:
    """1990, 1991, 1992, 1995 -> '1990-1992, 1995'."""
    ys = sorted(int(y) for y in years)
    out, i = [], 0
    while i < len(ys):
        j = i
        while j + 1 < len(ys) and ys[j + 1] == ys[j] + 1:
            j += 1
        out.append(str(ys[i]) if i == j else f"{ys[i]}-{ys[j]}")
        i = j + 1
    return ", ".join(out)


def data_changes(con, run_id: int, prev_id: int | None) -> pd.DataFrame:
    """Per series: years added (after the previous last year, or filled into the past), restated
    (value changed) and removed between two recorded runs."""
    cur = _frame(con, "SELECT series, year, value_sha FROM series_years WHERE run_id = ?", (run_id,))
    prev = (_frame(con, "SELECT series, year, value_sha FROM series_years WHERE run_id = ?", (prev_id,))
            if prev_id is not None else cur.iloc[0:0])
    rows = []
    for s in sorted(set(cur["series"]) | set(prev["series"])):
        a = dict(zip(prev.loc[prev.series == s, "year"], prev.loc[prev.series == s, "value_sha"]))
        b = dict(zip(cur.loc[cur.series == s, "year"], cur.loc[cur.series == s, "value_sha"]))
        last_prev = max(a) if a else None
        new = [y for y in b if y not in a]
        rows.append({"series": s,
                     "added": [y for y in new if last_prev is None or y > last_prev],
                     "filled_in": [y for y in new if last_prev is not None and y <= last_prev],
                     "restated": [y for y in b if y in a and a[y] != b[y]],
                     "removed": [y for y in a if y not in b]})
    return pd.DataFrame(rows, columns=["series", "added", "filled_in", "restated", "removed"])


def _crossing(name: str, a, b, thr: float, lower_is_better: bool) -> tuple[int, str] | None:
    if a is None or b is None or (isinstance(a, float) and math.isnan(a)) or (isinstance(b, float) and math.isnan(b)):
        return None
    if abs(b - a) < 1e-9:
        return None
    verb = "rose" if b > a else "fell"
    crossed = (a <= thr) != (b <= thr) if lower_is_better else (a > thr) != (b > thr)
    if crossed:
        return 2, f"{name} {verb} from {a:.2f} to {b:.2f} (threshold {thr:g})"
    if abs(b - a) >= 0.05:
        return 1, f"{name} {verb} from {a:.2f} to {b:.2f}"
    return None


def _grade_reason(prev: dict, cur: dict, screen: dict, scored: pd.DataFrame, superseded: pd.DataFrame) -> str:
    parts = []
    for _, f in scored.iterrows():
        hit = bool(f["inside"])
        b = f["baseline"]
        better = f["error"] ** 2 < f[f"err_{b}"] ** 2
        parts.append(f"the {int(f['target_year'])} forecast {'hit' if hit else 'missed'} "
                     f"(observed {f['observed']:.3f}, {int(round(100 * f['level']))}% interval "
                     f"{f['lower']:.3f} to {f['upper']:.3f}; {'closer than' if better else 'further off than'} "
                     f"the {b} baseline)")
    for _, f in superseded.iterrows():
        parts.append(f"the {int(f['target_year'])} forecast was superseded ({f['superseded_reason']})")
    alpha, fdr = float(screen.get("alpha", 0.05)), float(screen.get("fdr", 0.10))
    cands = [
        _crossing("re-test skill", prev.get("retest_skill"), cur.get("retest_skill"), 0.0, False),
        _crossing("out-of-sample skill", prev.get("oos_skill"), cur.get("oos_skill"), 0.0, False),
        _crossing("q-value", prev.get("q_value"), cur.get("q_value"), fdr, True),
        _crossing("surrogate p", prev.get("p_surrogate"), cur.get("p_surrogate"), alpha, True),
    ]
    a, b = prev.get("oos_p_surrogate"), cur.get("oos_p_surrogate")
    for thr in (0.05, 0.10, 0.20):
        c = _crossing("surrogate p of skill", a, b, thr, True)
        if c and c[0] == 2:
            cands.append(c)
            break
    else:
        cands.append(_crossing("surrogate p of skill", a, b, 0.05, True))
    cands = [c for c in cands if c]
    top = [t for i, t in cands if i == 2] or [t for i, t in cands if i == 1]
    parts += top
    fa = set(filter(None, str(prev.get("flags") or "").split(";")))
    fb = set(filter(None, str(cur.get("flags") or "").split(";")))
    parts += [f"new flag {x}" for x in sorted(fb - fa)] + [f"flag {x} cleared" for x in sorted(fa - fb)]
    if prev.get("lag") != cur.get("lag"):
        parts.append(f"selected lag {prev.get('lag')} -> {cur.get('lag')}")
    return "; ".join(parts) if parts else "the statistics moved only slightly (see evidence.csv)"


@dataclass
class SinceLastRun:
    """What changed between the latest recorded run of a study and the run before it."""

    run: dict | None
    previous: dict | None
    data: pd.DataFrame
    grade_changes: pd.DataFrame  # response, driver, before, after, reason
    scored: pd.DataFrame  # forecasts scored at this run
    superseded: pd.DataFrame  # forecasts superseded at this run
    made: pd.DataFrame  # forecasts made at this run
    notes: pd.DataFrame  # strong/moderate hypotheses without a forecast, and why
    track: pd.DataFrame
    n_runs: int = 0


def since_previous_run(con, study: str, run_id: int | None = None) -> SinceLastRun:
    """Changes recorded at run ``run_id`` (default: the latest) against the run before it."""
    runs = runs_frame(con, study)
    empty = pd.DataFrame()
    if runs.empty:
        return SinceLastRun(None, None, empty, empty, empty, empty, empty, empty, empty, 0)
    if run_id is None:
        run_id = int(runs["run_id"].iloc[-1])
    cur_run = runs[runs.run_id == run_id].iloc[0].to_dict()
    earlier = runs[runs.run_id < run_id]
    prev_run = earlier.iloc[-1].to_dict() if len(earlier) else None
    prev_id = int(prev_run["run_id"]) if prev_run else None
    g_cur = _frame(con, "SELECT * FROM grades WHERE run_id = ?", (run_id,))
    g_prev = _frame(con, "SELECT * FROM grades WHERE run_id = ?", (prev_id,)) if prev_id else g_cur.iloc[0:0]
    f = forecasts_frame(con, study)
    if f.empty:
        f = pd.DataFrame(columns=["response", "driver", "run_id", "scored_run", "superseded_run", "status"])
    scored = f[f["scored_run"] == run_id]
    superseded = f[f["superseded_run"] == run_id]
    made = f[f["run_id"] == run_id]
    screen = json.loads(cur_run["screen_json"])
    changes = []
    if prev_id is not None:
        a = {(r["response"], r["driver"]): r for r in g_prev.to_dict("records")}
        b = {(r["response"], r["driver"]): r for r in g_cur.to_dict("records")}
        for key in sorted(set(a) | set(b)):
            pa, pb = a.get(key), b.get(key)
            if pa and pb and pa["grade"] == pb["grade"]:
                continue
            sel = lambda df: df[(df["response"] == key[0]) & (df["driver"] == key[1])]
            if pa is None:
                reason = "new hypothesis in this run"
            elif pb is None:
                reason = "no longer screened"
            else:
                reason = _grade_reason(pa, pb, screen, sel(scored), sel(superseded))
            changes.append({"response": key[0], "driver": key[1], "before": pa["grade"] if pa else "",
                            "after": pb["grade"] if pb else "", "reason": reason})
    notes = g_cur[(g_cur["note"] != "")][["response", "driver", "grade", "note"]] if len(g_cur) else empty
    return SinceLastRun(cur_run, prev_run, data_changes(con, run_id, prev_id),
                        pd.DataFrame(changes, columns=["response", "driver", "before", "after", "reason"]),
                        scored, superseded, made, notes, track_record(con, study), len(runs))


# ---------------------------------------------------------------- number text
def _n(v, fmt="{:.3f}") -> str:
    """A number as text; empty for a missing value (the track record's cells)."""
    if v is None or (isinstance(v, float) and math.isnan(v)):
        return ""
    return fmt.format(float(v))


# ---------------------------------------------------------------- command line
def print_track_record(config_path: str | Path, out: str | Path | None = None, stream=None) -> int:
    """`lagsieve ledger CONFIG [--out DIR]`: print the track record; 0, or 2 without a ledger."""
    stream = stream or sys.stdout
    study = load_study(config_path)
    out_dir = Path(out) if out else study.path.parent / "results"
    path = resolve_ledger_path(study, out_dir / study.study)
    if not path.is_file():
        print(f"{path}: no forecast ledger for study '{study.study}' yet; run `lagsieve run {config_path}` "
              "first (or give the results folder with --out)", file=sys.stderr)
        return EXIT_MISSING
    try:
        con = open_readonly(path)
        try:
            if not _has_schema(con):
                raise sqlite3.DatabaseError("it holds no ledger tables")
            runs = runs_frame(con, study.study)
            track = track_record(con, study.study)
        finally:
            con.close()
    except sqlite3.DatabaseError as exc:
        print(f"{path}: not a readable forecast ledger ({exc}); move it aside and rerun the workflow", file=sys.stderr)
        return EXIT_MISSING
    if runs.empty:
        print(f"{path}: no run of study '{study.study}' recorded yet; run `lagsieve run {config_path}` first",
              file=sys.stderr)
        return EXIT_MISSING
    last = runs.iloc[-1]
    nr = f"{len(runs)} run{'s' if len(runs) != 1 else ''}"
    print(f"forecast track record of study '{study.study}': {nr} recorded, latest {last['created_utc']} "
          f"(lagsieve {last['tool_version']}); {int(LEVEL * 100)}% prediction intervals; ledger {path}", file=stream)
    if track.empty:
        print("no forecast made yet (no hypothesis graded strong or moderate could be forecast)", file=stream)
        return 0
    show = track.assign(
        hypothesis=track["response"] + " <- " + track["driver"],
        inside=[f"{i}/{s}" if s else "-" for i, s in zip(track["inside"], track["scored"])],
        mae=[_n(v) or "-" for v in track["mae"]],
        skill_hardest=[_n(v, "{:+.2f}") or "-" for v in track["skill_hardest"]],
        **{f"skill_{b}": [_n(v, "{:+.2f}") or "-" for v in track[f"skill_{b}"]] for b in BASELINES})
    cols = ["hypothesis", "made", "open", "scored", "superseded", "inside", "mae", "skill_hardest"] + \
           [f"skill_{b}" for b in BASELINES] + ["last"]
    print(show[cols].to_string(index=False), file=stream)
    return 0
