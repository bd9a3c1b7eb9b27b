"""Stage `ledger`: record this run's forecasts, score the earlier forecasts whose year has
arrived, record the values restated since the previous run, and supersede the forecasts whose
training data were restated beyond the tolerance.

At every run, every hypothesis that can forecast (a selected lag, lag >= 1 or its driver
already observed in the target year, and a candidate baseline) forecasts the first year not
yet observed (:mod:`lagsieve.ledger.forecast`), whatever its grade; the grade it had is kept
with the forecast, so that the track record can compare grades prospectively. On a later run
in which that year has arrived, each open forecast is scored against that first published
value (table ``scores``: error, inside the interval; the proper scores are computed from
them, :mod:`lagsieve.ledger.scores`); the primary score never changes. Later runs that
restate the target year score the forecast again (table ``rescores``), as secondary
information.

Restatements (:mod:`lagsieve.ledger.revisions`): every earlier value that changed since the
study's previous run is written to table ``revisions``. An open forecast whose training data
changed stays open when every restated training value moved within
``ledger.restatement_tolerance``; it is superseded (never scored) when one moved beyond it
(the reason names the series, year, size of the change and the tolerance), when a training
year was filled in or removed, or when the model settings changed (transforms, weights). A
newer forecast of the same hypothesis and year replaces an open older one (one forecast per
hypothesis and year is scored: the latest made before the year arrived). A run whose data
fingerprint and evidence grades equal those of the latest recorded run adds nothing.
Everything is computed first; the database is then written in one transaction
(:func:`lagsieve.ledger.store.transaction`).
"""
from __future__ import annotations

import json
import math
import sqlite3
import time
from pathlib import Path

import numpy as np
import pandas as pd

from lagsieve.io.config import Study, load_study
from lagsieve.io.files import sha256_file, sha256_text, write_json
from lagsieve.io.provenance import tool_version
from lagsieve.ledger.fingerprint import digest_frame, fingerprints
from lagsieve.ledger.forecast import NextYearForecast
from lagsieve.ledger.revisions import Tolerance, beyond, beyond_words, cell_changes, tolerance_of
from lagsieve.ledger.store import connect, resolve_ledger_path, transaction
from lagsieve.ledger.study_data import StudyData

SCREEN_KEYS = ("alpha", "fdr", "min_overlap", "surrogates", "seed", "weights")  # recorded with every run
# the run key hashes the grade rows under their schema-1 column names, so that a ledger
# upgraded from schema 1 recognises a rerun on unchanged data and evidence
RUN_KEY_NAMES = {"baseline": "hardest"}


# ---------------------------------------------------------------- what the ledger keeps of evidence.csv
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


# evidence.csv column -> (ledger column, reader); in the order of the table ``grades``
GRADE_COLUMNS = {"response": ("response", _str), "driver": ("driver", _str), "grade": ("grade", _str),
                 "model": ("model", _str), "lag": ("lag", _int), "oos_baseline": ("baseline", _str),
                 "q_value": ("q_value", _num), "p_surrogate": ("p_surrogate", _num),
                 "oos_skill": ("oos_skill", _num), "oos_p_surrogate": ("oos_p_surrogate", _num),
                 "retest_skill": ("retest_skill", _num), "flags": ("flags", _str), "last_year": ("last_year", _int)}


def grade_rows(evidence: pd.DataFrame) -> pd.DataFrame:
    """The per-hypothesis part of evidence.csv that the ledger keeps (and whose change makes a
    new run), sorted by response and driver. Column ``baseline`` is evidence's ``oos_baseline``,
    the baseline the candidate used most often: the forecast is this baseline plus the driver.
    A lag in seasons (a monthly driver of a season response) is kept out: the ledger forecasts
    from the annual table, in which the driver has no value per season."""
    if "lag_unit" in evidence and "lag" in evidence:  # a lag in seasons (by_season): no lag in years
        evidence = evidence.assign(lag=evidence["lag"].where(evidence["lag_unit"] != "season"))
    out = pd.DataFrame({name: [read(v) for v in (evidence[c] if c in evidence else [None] * len(evidence))]
                        for c, (name, read) in GRADE_COLUMNS.items()})
    return out.sort_values(["response", "driver"]).reset_index(drop=True)


def run_key(data_sha: str, grades: pd.DataFrame) -> str:
    """The identity of a run: its data fingerprint and its grade rows."""
    return sha256_text(data_sha + "|" + digest_frame(grades.rename(columns=RUN_KEY_NAMES)))


def input_hashes(study: Study) -> dict[str, str]:
    """SHA-256 of every input file of ``study`` (``missing`` for a file not found), by its
    path as written in the config."""
    return {spec["path"]: sha256_file(p) if p.is_file() else "missing"
            for spec, p in zip(study.inputs, study.input_paths())}


# ---------------------------------------------------------------- one update
def forecasts_of(grades: pd.DataFrame, data: StudyData) -> tuple[list[NextYearForecast], dict]:
    """The next-year forecasts of every hypothesis that can forecast (whatever its grade), and
    why the others got none ((response, driver) -> words)."""
    made, notes = [], {}
    for g in grades.to_dict("records"):
        key, model = (g["response"], g["driver"]), g["model"] or "linear"
        if g["lag"] is None or pd.isna(g["lag"]) or not g["baseline"]:  # NaN: a column with a missing lag
            notes[key] = "no forecast: no selected lag or candidate baseline"
            continue
        f, why = data.forecast(g["response"], g["driver"], g["lag"], g["baseline"], model=model)
        if f is None:
            notes[key] = why
        else:
            f.grade, f.screen_model = g["grade"], model
            made.append(f)
    return made, notes


def _run_row(study: Study, key: str, data_sha: str, now: str | None) -> dict:
    """The row of table ``runs`` for this run (its counts are filled in by :func:`write_run`)."""
    tol = tolerance_of(study.raw)
    return {"study": study.id, "run_key": key, "data_sha256": data_sha,
            "ledger_json": json.dumps({"restatement_tolerance": {"se": tol.se, "relative": tol.relative}}),
            "inputs_sha256": json.dumps(input_hashes(study), sort_keys=True), "tool_version": tool_version(),
            "config_sha256": sha256_file(study.path),
            "created_utc": now or time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
            "screen_json": json.dumps({k: study.screen[k] for k in SCREEN_KEYS if k in study.screen},
                                      sort_keys=True)}


def update_ledger(config_path: str | Path, annual_csv: str | Path, evidence_csv: str | Path,
                  study_dir: str | Path, summary_path: str | Path | None = None,
                  ledger_path: str | Path | None = None, now: str | None = None) -> dict:
    """Stage `ledger`: record this run's forecasts, score and supersede earlier ones.

    ``study_dir`` is ``<out>/<study>`` (where a relative ``ledger.path`` is resolved);
    ``ledger_path`` overrides the config. Everything is computed first; the database is then
    written in one transaction. Returns the summary, also written to ``summary_path`` as JSON
    after the transaction has committed: study, status (``recorded`` or ``unchanged``), run_id,
    the numbers of forecasts new, scored and superseded, of values restated since the previous
    run (``revised``), and the ledger's path.
    """
    study = load_study(config_path)
    data = StudyData.load(study, annual_csv)
    grades = grade_rows(pd.read_csv(evidence_csv))
    fp = fingerprints(pd.read_csv(annual_csv))
    data_sha = digest_frame(fp[["series", "year", "value_sha"]])
    made, notes = forecasts_of(grades, data)
    run = _run_row(study, run_key(data_sha, grades), data_sha, now)
    path = Path(ledger_path) if ledger_path else resolve_ledger_path(study, study_dir)
    con = connect(path)
    try:
        summary = write_run(con, run, fp, grades, notes, made, data, tolerance_of(study.raw))
    finally:
        con.close()
    summary["ledger"] = str(path)
    if summary_path is not None:
        write_json(summary, summary_path)
    return summary


# ---------------------------------------------------------------- writing one run
def _insert_run(con, run: dict, fp: pd.DataFrame, grades: pd.DataFrame, notes: dict) -> int:
    """Insert the run, its data fingerprint and its grades; returns the new run_id."""
    cols = ["study", "run_key", "created_utc", "tool_version", "config_sha256", "inputs_sha256", "data_sha256",
            "screen_json", "ledger_json"]
    cur = con.execute(f"INSERT INTO runs({', '.join(cols)}) VALUES ({', '.join('?' * len(cols))})",
                      [run.get(c, "{}") for c in cols])
    run_id = int(cur.lastrowid)
    se = fp["se"] if "se" in fp else pd.Series(np.nan, index=fp.index)
    con.executemany("INSERT INTO series_years(run_id, series, year, value, value_sha, se) VALUES (?,?,?,?,?,?)",
                    [(run_id, s, int(y), float(v), h, None if pd.isna(e) else float(e)) for s, y, v, h, e in
                     zip(fp["series"], fp["year"], fp["value"], fp["value_sha"], se)])
    con.executemany(
        "INSERT INTO grades(run_id, response, driver, grade, model, lag, baseline, q_value, p_surrogate, oos_skill,"
        " oos_p_surrogate, retest_skill, flags, last_year, note) VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
        [(run_id, g["response"], g["driver"], g["grade"], g["model"] or None, g["lag"], g["baseline"] or None,
          g["q_value"], g["p_surrogate"], g["oos_skill"], g["oos_p_surrogate"], g["retest_skill"], g["flags"],
          g["last_year"], notes.get((g["response"], g["driver"]), "")) for g in grades.to_dict("records")])
    return run_id


def write_run(con: sqlite3.Connection, run: dict, fp: pd.DataFrame, grades: pd.DataFrame, notes: dict,
              made: list[NextYearForecast], data: StudyData, tol: Tolerance) -> dict:
    """Write one run in one transaction; nothing when its run_key equals the latest run's.
    ``con`` comes from :func:`lagsieve.ledger.store.connect` (its schema is current); ``tol``
    is the study's restatement tolerance."""
    study = run["study"]
    with transaction(con):
        last = con.execute("SELECT run_id, run_key FROM runs WHERE study = ? ORDER BY run_id DESC LIMIT 1",
                           (study,)).fetchone()
        if last is not None and last["run_key"] == run["run_key"]:
            return {"study": study, "status": "unchanged", "run_id": int(last["run_id"]),
                    "new": 0, "scored": 0, "superseded": 0, "revised": 0}
        run_id = _insert_run(con, run, fp, grades, notes)
        n_rev = _insert_revisions(con, run_id, None if last is None else int(last["run_id"]), fp)
        n_sup = _supersede_open(con, study, run_id, fp, data, tol)
        n_scored = _score_open(con, study, run_id, data.table)
        _rescore(con, study, run_id, data.table)
        n_new, n_replaced = _insert_forecasts(con, study, run_id, made, run["inputs_sha256"], run["tool_version"],
                                              data)
        n_sup += n_replaced
        con.execute("UPDATE runs SET n_new = ?, n_scored = ?, n_superseded = ? WHERE run_id = ?",
                    (n_new, n_scored, n_sup, run_id))
    return {"study": study, "status": "recorded", "run_id": run_id, "new": n_new, "scored": n_scored,
            "superseded": n_sup, "revised": n_rev}


def _stored_cells(con, run_id: int) -> pd.DataFrame:
    """A recorded run's values: series, year, value, se."""
    rows = con.execute("SELECT series, year, value, se FROM series_years WHERE run_id = ?", (run_id,)).fetchall()
    return pd.DataFrame([tuple(r) for r in rows], columns=["series", "year", "value", "se"]).astype(
        {"value": float, "se": float})


def _insert_revisions(con, run_id: int, prev_id: int | None, fp: pd.DataFrame) -> int:
    """Write every value restated since the study's previous run (table ``revisions``)."""
    if prev_id is None:
        return 0
    ch = cell_changes(_stored_cells(con, prev_id), fp)
    nan_none = lambda v: None if pd.isna(v) else float(v)  # noqa: E731
    con.executemany("INSERT INTO revisions(run_id, previous_run, series, year, old_value, new_value, abs_change,"
                    " rel_change, se, se_units) VALUES (?,?,?,?,?,?,?,?,?,?)",
                    [(run_id, prev_id, c.series, int(c.year), float(c.old_value), float(c.new_value),
                      float(c.abs_change), nan_none(c.rel_change), nan_none(c.se), nan_none(c.se_units))
                     for c in ch.itertuples()])
    return len(ch)


def _open_forecasts(con, study: str) -> list[sqlite3.Row]:
    return con.execute("SELECT * FROM forecasts WHERE study = ? AND status = 'open' ORDER BY forecast_id",
                       (study,)).fetchall()


def _diff_cells(old: dict[tuple[str, int], str], new: dict[tuple[str, int], str], series: str,
                last_year: int) -> list[str]:
    """Words for the cells of ``series`` up to ``last_year`` filled in or removed between two
    fingerprints (restated cells are measured by :func:`_restated_beyond`)."""
    yrs = sorted({y for s, y in list(old) + list(new) if s == series and y <= last_year})
    return [f"{series} {y} {'filled in' if new.get((series, y)) else 'removed'}" for y in yrs
            if (old.get((series, y)) is None) != (new.get((series, y)) is None)]


def _training_cells(cells: pd.DataFrame, f) -> pd.DataFrame:
    """The cells a forecast's training data can hold: its response up to the origin year, its
    driver up to the driver year."""
    return cells[((cells["series"] == f["response"]) & (cells["year"] <= f["origin_year"]))
                 | ((cells["series"] == f["driver"]) & (cells["year"] <= f["driver_year"]))]


def _why_superseded(con, f, fp: pd.DataFrame, data: StudyData, tol: Tolerance) -> str | None:
    """Why an open forecast whose training hash changed is superseded, or None when every
    change of its training values is a restatement within the tolerance."""
    old = _training_cells(_stored_cells(con, f["run_id"]), f)
    new = _training_cells(fp, f)
    key = lambda df: dict(zip(zip(df["series"], df["year"].astype(int)), df["value"].astype(str)))  # noqa: E731
    a, b = key(old), key(new)
    gaps = _diff_cells(a, b, f["response"], f["origin_year"]) + _diff_cells(a, b, f["driver"], f["driver_year"])
    if gaps:
        return "training data changed: " + "; ".join(gaps)
    settings = data.settings_sha(f["response"], f["driver"], f["lag"], f["baseline"])
    changes = cell_changes(old, new)
    if f["settings_sha256"] is not None and settings != f["settings_sha256"]:
        return "model settings changed (transform or weights of the fit)"
    if changes.empty:
        return None if f["settings_sha256"] is not None else "training data changed: transform, weights or model settings"
    if beyond(changes, tol).any():
        return "training data restated beyond the tolerance: " + beyond_words(changes, tol)
    return None


def _supersede_open(con, study: str, run_id: int, fp: pd.DataFrame, data: StudyData, tol: Tolerance) -> int:
    """Mark superseded every open forecast whose training data changed beyond the tolerance
    since it was made (:func:`_why_superseded`); the others stay open and are scored."""
    n = 0
    for f in _open_forecasts(con, study):
        if f["response"] not in data.table.columns or f["driver"] not in data.table.columns:
            continue  # a series left the study: nothing to compare, the forecast can still be scored
        sha = data.training_sha(f["response"], f["driver"], f["lag"], f["baseline"], f["origin_year"])
        if sha == f["training_sha256"]:
            continue
        reason = _why_superseded(con, f, fp, data, tol)
        if reason is None:
            continue
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


def _rescore(con, study: str, run_id: int, table: pd.DataFrame) -> int:
    """Score again every scored forecast whose target year this run restates (table
    ``rescores``; the primary score stays as it was)."""
    rows = con.execute(
        "SELECT f.forecast_id, f.response, f.target_year, f.forecast, f.lower, f.upper, "
        "COALESCE((SELECT r.observed FROM rescores r WHERE r.forecast_id = f.forecast_id "
        "ORDER BY r.run_id DESC LIMIT 1), s.observed) AS latest "
        "FROM forecasts f JOIN scores s USING (forecast_id) WHERE f.study = ? AND s.run_id < ?",
        (study, run_id)).fetchall()
    n = 0
    for f in rows:
        obs = table[f["response"]].get(f["target_year"], np.nan) if f["response"] in table.columns else np.nan
        if pd.isna(obs) or float(obs) == f["latest"]:
            continue
        obs = float(obs)
        con.execute("INSERT INTO rescores(forecast_id, run_id, observed, error, inside) VALUES (?,?,?,?,?)",
                    (f["forecast_id"], run_id, obs, obs - f["forecast"], int(f["lower"] <= obs <= f["upper"])))
        n += 1
    return n


def _replace_older(con, run_id: int, fid: int, f: NextYearForecast, study: str) -> int:
    """Supersede the open forecasts of the same hypothesis and year made before ``fid``."""
    cur = con.execute(
        "UPDATE forecasts SET status = 'superseded', superseded_run = ?, superseded_reason = ? "
        "WHERE study = ? AND response = ? AND driver = ? AND target_year = ? AND status = 'open' AND forecast_id < ?",
        (run_id, f"replaced by the forecast of the same year made at run {run_id}", study, f.response, f.driver,
         f.target_year, fid))
    return int(cur.rowcount)


def _insert_forecasts(con, study: str, run_id: int, made: list[NextYearForecast], inputs_json: str,
                      version: str, data: StudyData) -> tuple[int, int]:
    """Insert this run's forecasts (one already made from the same training data is kept as it
    was) and supersede the older open forecasts they replace; returns (new, replaced)."""
    n = replaced = 0
    for f in made:
        cur = con.execute(
            "INSERT OR IGNORE INTO forecasts(run_id, study, response, driver, grade, screen_model, lag, baseline, scale,"
            " origin_year, target_year, driver_year, driver_value, forecast, lower, upper, level, n_train, resid_sd,"
            " training_sha256, inputs_sha256, tool_version, settings_sha256)"
            " VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?,?)",
            (run_id, study, f.response, f.driver, f.grade, f.screen_model, f.lag, f.baseline,
             data.transforms.get(f.response, "none"),
             f.origin_year, f.target_year, f.driver_year, f.driver_value, f.forecast, f.lower, f.upper, f.level,
             f.n_train, f.resid_sd, f.training_sha256, inputs_json, version,
             data.settings_sha(f.response, f.driver, f.lag, f.baseline)))
        if cur.rowcount != 1:
            continue
        fid = int(cur.lastrowid)
        con.executemany("INSERT INTO baseline_forecasts(forecast_id, baseline, forecast, lower, upper) VALUES (?,?,?,?,?)",
                        [(fid, b, *v) for b, v in f.baselines.items()])
        replaced += _replace_older(con, run_id, fid, f, study)
        n += 1
    return n, replaced
