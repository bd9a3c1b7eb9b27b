"""The forecast ledger: every year, write down what the supported hypotheses predict for the
next year, and score those predictions when the year arrives.

A hypothesis graded ``strong`` or ``moderate`` claims that its driver helps to forecast the
response. The ledger holds it to that claim on years it has not seen. At every run, for each
such hypothesis, the *candidate* model (the hardest baseline of ``evidence.csv``, column
``oos_hardest``, plus the driver at its selected lag, column ``lag``) is fitted by ordinary
least squares on every observed year and forecasts the first response year not yet observed,
T + 1. The three baselines (climatology, persistence, trend) are fitted on the same years and
forecast the same year, so that the candidate can later be compared with what one would have
forecast without the driver. A forecast needs the driver in year T + 1 - lag, so it can be made
when lag >= 1, or when the driver has already been observed in T + 1.

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
``grades``            per run and hypothesis: grade, lag, hardest baseline, the statistics the
                      grade rules use, flags, and why no forecast was made (``note``)
``forecasts``         one row per forecast: hypothesis, lag, baseline, origin year T, target year,
                      driver year and value, forecast and interval, training-data hash, input
                      hashes, tool version, status (open, scored, superseded)
                      UNIQUE(study, response, driver, target_year, training_sha256)
``baseline_forecasts`` forecast_id, baseline, forecast and interval made at the same time
``scores``            forecast_id (unique), run_id, observed, error, inside
"""
from __future__ import annotations

import hashlib
import html
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

from .alignment import forecast_frame
from .config import Study, load_study
from .errors import InputErrors, InputProblem
from .validation import BASELINES, baseline_design

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


def _ols_forecast(W: np.ndarray, y: np.ndarray, w0: np.ndarray, level: float):
    """OLS fit of y on W; forecast at w0 with its two-sided prediction interval.

    Returns (forecast, lower, upper, residual sd). Columns other than the first (intercept)
    are centred by their training means first, which leaves the forecast unchanged and keeps
    the normal equations well conditioned (the year column is about 2000).
    """
    W = np.asarray(W, float).copy()
    w0 = np.asarray(w0, float).copy()
    mu = W[:, 1:].mean(axis=0)
    W[:, 1:] -= mu
    w0[1:] -= mu
    n, p = W.shape
    q, r = np.linalg.qr(W)
    beta = np.linalg.solve(r, q.T @ y)
    resid = y - W @ beta
    df = n - p
    s = float(np.sqrt(resid @ resid / df))
    lev = np.linalg.solve(r.T, w0)
    se = s * float(np.sqrt(1.0 + lev @ lev))
    fc = float(w0 @ beta)
    t = float(_st.t.ppf(0.5 + level / 2.0, df))
    return fc, fc - t * se, fc + t * se, s


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
                  lag: int, baseline: str, cells: list[tuple[str, int]]) -> str:
    """SHA-256 of everything a forecast is made from: the model (lag, baseline, transforms) and
    the raw annual values of its cells (a missing cell is written as null). ``raw`` is wide:
    years as index, one column per series, values before transforms."""
    vals = []
    for s, y in cells:
        v = raw[s].get(y, np.nan) if s in raw.columns else np.nan
        vals.append([s, int(y), None if pd.isna(v) else _fmt_value(v)])
    payload = {"response": response, "driver": driver, "lag": int(lag), "baseline": baseline,
               "transform": [transforms.get(response, "none"), transforms.get(driver, "none")],
               "cells": vals}
    return _h(json.dumps(payload, sort_keys=True, separators=(",", ":")))


def next_year_forecast(table: pd.DataFrame, raw: pd.DataFrame, transforms: dict[str, str],
                       response: str, driver: str, lag: int, baseline: str,
                       level: float = LEVEL) -> tuple[NextYearForecast | None, str]:
    """Forecast the first response year not yet observed with the candidate model.

    ``table`` is the wide transformed annual table (:func:`lagsieve.stages.load_table`), ``raw``
    the same before transforms. Returns (forecast, "") or (None, the reason no forecast can be
    made, in words).
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
    fcs = {}
    for b in BASELINES:
        Z = baseline_design(b, ylag, years)
        z0 = baseline_design(b, np.array([yT]), np.array([target]))[0]
        fcs[b] = _ols_forecast(Z, y, z0, level)[:3]
    Z = baseline_design(baseline, ylag, years)
    W = np.column_stack([Z, x])
    w0 = np.append(baseline_design(baseline, np.array([yT]), np.array([target]))[0], float(xv))
    fc, lo, hi, s = _ols_forecast(W, y, w0, level)
    cells = used_values(raw, response, driver, int(lag), years, T)
    sha = training_hash(raw, transforms, response, driver, int(lag), baseline, cells)
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
    cols = {"response": _str, "driver": _str, "grade": _str, "lag": _int, "oos_hardest": _str,
            "q_value": _num, "p_surrogate": _num, "oos_skill": _num, "oos_p_surrogate": _num,
            "retest_skill": _num, "flags": _str, "last_year": _int}
    out = pd.DataFrame({c: [f(v) for v in evidence[c]] if c in evidence else None for c, f in cols.items()})
    return out.rename(columns={"oos_hardest": "hardest"}).sort_values(["response", "driver"]).reset_index(drop=True)


def _wide_raw(annual: pd.DataFrame) -> pd.DataFrame:
    return annual.pivot(index="year", columns="series", values="value").astype(float)


def _input_hashes(study: Study) -> dict[str, str]:
    from .provenance import sha256_file

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

    Everything is computed first; the database is then written in one transaction. Returns the
    summary (also written to ``summary_path`` as JSON after the transaction has committed).
    """
    from .provenance import sha256_file, tool_version
    from .stages import load_table, write_json

    study = load_study(config_path)
    table = load_table(study, annual_csv)
    annual = pd.read_csv(annual_csv)
    raw = _wide_raw(annual)
    transforms = {s["id"]: s.get("transform", "none") for s in study.responses + study.drivers}
    evidence = pd.read_csv(evidence_csv)
    grades = grade_rows(evidence)
    fp = fingerprints(annual)
    data_sha = _digest_frame(fp[["series", "year", "value_sha"]])
    run_key = _h(data_sha + "|" + _digest_frame(grades))
    inputs_json = json.dumps(_input_hashes(study), sort_keys=True)
    version = tool_version()
    path = Path(ledger_path) if ledger_path else resolve_ledger_path(study, study_dir)

    made: list[NextYearForecast] = []
    notes = {}
    for g in grades.to_dict("records"):
        if g["grade"] not in GRADED:
            continue
        if g["lag"] is None or not g["hardest"]:
            notes[(g["response"], g["driver"])] = "no forecast: no selected lag or hardest baseline"
            continue
        f, why = next_year_forecast(table, raw, transforms, g["response"], g["driver"], g["lag"], g["hardest"])
        if f is None:
            notes[(g["response"], g["driver"])] = why
        else:
            f.grade = g["grade"]
            made.append(f)
    new_fp = dict(zip(zip(fp["series"], fp["year"].astype(int)), fp["value_sha"]))

    con = connect(path)
    try:
        summary = _write_run(con, study, run_key, data_sha, inputs_json, version, sha256_file(study.path),
                             fp, new_fp, grades, notes, made, table, raw, transforms,
                             now or time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()))
    finally:
        con.close()
    summary["ledger"] = str(path)
    if summary_path is not None:
        write_json(summary, summary_path)
    return summary


def _write_run(con, study, run_key, data_sha, inputs_json, version, config_sha, fp, new_fp, grades,
               notes, made, table, raw, transforms, now) -> dict:
    with transaction(con):
        _ensure_schema(con)
        last = con.execute("SELECT run_id, run_key FROM runs WHERE study = ? ORDER BY run_id DESC LIMIT 1",
                           (study.study,)).fetchone()
        if last is not None and last["run_key"] == run_key:
            return {"study": study.study, "status": "unchanged", "run_id": int(last["run_id"]),
                    "new": 0, "scored": 0, "superseded": 0}
        screen = {k: study.screen[k] for k in ("alpha", "fdr", "min_overlap", "surrogates", "seed") if k in study.screen}
        cur = con.execute(
            "INSERT INTO runs(study, run_key, created_utc, tool_version, config_sha256, inputs_sha256, data_sha256,"
            " screen_json) VALUES (?,?,?,?,?,?,?,?)",
            (study.study, run_key, now, version, config_sha, inputs_json, data_sha, json.dumps(screen, sort_keys=True)))
        run_id = int(cur.lastrowid)
        con.executemany("INSERT INTO series_years(run_id, series, year, value, value_sha) VALUES (?,?,?,?,?)",
                        [(run_id, s, int(y), float(v), h) for s, y, v, h in
                         zip(fp["series"], fp["year"], fp["value"], fp["value_sha"])])
        con.executemany(
            "INSERT INTO grades(run_id, response, driver, grade, lag, hardest, q_value, p_surrogate, oos_skill,"
            " oos_p_surrogate, retest_skill, flags, last_year, note) VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
            [(run_id, g["response"], g["driver"], g["grade"], g["lag"], g["hardest"] or None, g["q_value"],
              g["p_surrogate"], g["oos_skill"], g["oos_p_surrogate"], g["retest_skill"], g["flags"], g["last_year"],
              notes.get((g["response"], g["driver"]), "")) for g in grades.to_dict("records")])
        n_sup = _supersede_open(con, study.study, run_id, new_fp, table, raw, transforms)
        n_scored = _score_open(con, study.study, run_id, table)
        n_new = _insert_forecasts(con, study.study, run_id, made, inputs_json, version, transforms)
        con.execute("UPDATE runs SET n_new = ?, n_scored = ?, n_superseded = ? WHERE run_id = ?",
                    (n_new, n_scored, n_sup, run_id))
    return {"study": study.study, "status": "recorded", "run_id": run_id, "new": n_new, "scored": n_scored,
            "superseded": n_sup}


def _open_forecasts(con, study: str) -> list[sqlite3.Row]:
    return con.execute("SELECT * FROM forecasts WHERE study = ? AND status = 'open' ORDER BY forecast_id",
                       (study,)).fetchall()


def _supersede_open(con, study, run_id, new_fp, table, raw, transforms) -> int:
    """Mark superseded every open forecast whose training data changed since it was made."""
    n = 0
    for f in _open_forecasts(con, study):
        if f["response"] not in table.columns or f["driver"] not in table.columns:
            continue  # a series left the study: nothing to compare, the forecast can still be scored
        years, *_ = training_years(table, f["response"], f["driver"], f["lag"], f["origin_year"])
        cells = used_values(raw, f["response"], f["driver"], f["lag"], years, f["origin_year"])
        sha = training_hash(raw, transforms, f["response"], f["driver"], f["lag"], f["baseline"], cells)
        if sha == f["training_sha256"]:
            continue
        old = {(r["series"], int(r["year"])): r["value_sha"] for r in con.execute(
            "SELECT series, year, value_sha FROM series_years WHERE run_id = ? AND series IN (?, ?)",
            (f["run_id"], f["response"], f["driver"]))}
        why = (_diff_cells(old, new_fp, f["response"], f["origin_year"])
               + _diff_cells(old, new_fp, f["driver"], f["driver_year"]))
        reason = "training data changed: " + ("; ".join(why) if why else "transform or model settings")
        con.execute("UPDATE forecasts SET status = 'superseded', superseded_run = ?, superseded_reason = ? "
                    "WHERE forecast_id = ?", (run_id, reason, f["forecast_id"]))
        n += 1
    return n


def _score_open(con, study, run_id, table) -> int:
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
            "INSERT OR IGNORE INTO forecasts(run_id, study, response, driver, grade, lag, baseline, scale, origin_year,"
            " target_year, driver_year, driver_value, forecast, lower, upper, level, n_train, resid_sd,"
            " training_sha256, inputs_sha256, tool_version) VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
            (run_id, study, f.response, f.driver, f.grade, f.lag, f.baseline, transforms.get(f.response, "none"),
             f.origin_year, f.target_year, f.driver_year, f.driver_value, f.forecast, f.lower, f.upper, f.level,
             f.n_train, f.resid_sd, f.training_sha256, inputs_json, version))
        if cur.rowcount != 1:
            continue
        fid = int(cur.lastrowid)
        con.executemany("INSERT INTO baseline_forecasts(forecast_id, baseline, forecast, lower, upper) VALUES (?,?,?,?,?)",
                        [(fid, b, *v) for b, v in f.baselines.items()])
        n += 1
    return n
