"""The forecast ledger's file: SQLite schema, opening (with the upgrade of older ledgers),
write transactions, and reading tables back as data frames.

Every year the ledger writes down what every hypothesis that can forecast predicts for the next year
(:mod:`lagsieve.ledger.forecast`) and scores those predictions when the year arrives
(:mod:`lagsieve.ledger.update`); :mod:`lagsieve.ledger.track` reads the record back.

Writes are single transactions (``BEGIN IMMEDIATE`` ... ``with con:``), so a run killed while
writing leaves the ledger as it was. Opening a ledger for writing (:func:`connect`) creates
its tables, or upgrades an older ledger's schema in one transaction of its own: a failed
upgrade leaves the file as it was.

Tables (SQLite, one file, several studies may share it)
-------------------------------------------------------
``meta``              key, value (``schema_version``, see ``SCHEMA_VERSION`` and ``MIGRATIONS``)
``runs``              one row per recorded run: study, run_key (hash of data fingerprint and
                      grades), created_utc, tool_version, config and input-file SHA-256, data
                      SHA-256, the screen settings (JSON), counts of new/scored/superseded
``series_years``      per run, series and year: the annual value and its hash (the data
                      fingerprint used to list added and restated years)
``grades``            per run and hypothesis: grade, model, lag, ``baseline`` (the baseline the
                      candidate used most often in the rolling-origin evaluation, evidence.csv's
                      ``oos_baseline``: the forecast is this baseline plus the driver), the
                      statistics the grade rules use, flags, and why no forecast was made (``note``)
``forecasts``         one row per forecast: hypothesis, grade, the form the screen preferred
                      (``screen_model``), lag, baseline, scale, origin year T, target year,
                      driver year and value, forecast and interval, training-data hash, input
                      hashes, tool version, status (open, scored, superseded)
                      UNIQUE(study, response, driver, target_year, training_sha256)
``baseline_forecasts`` forecast_id, baseline, forecast and interval made at the same time
``scores``            forecast_id (unique), run_id, observed, error, inside: the primary score,
                      against the first value published for the target year; never changed
``rescores``          forecast_id, run_id, observed, error, inside: the same forecast scored again
                      at a later run that restated its target year (secondary information)
``revisions``         per run: every earlier value that changed since the study's previous run
                      (series, year, old and new value, absolute and relative change, se and
                      the change in se units where the value has an se)

Since schema 3: ``series_years.se`` (the value's standard error), ``runs.ledger_json`` (the
restatement tolerance of the run), ``forecasts.settings_sha256`` (the training hash without its
cells: model and transforms). The schema version is kept in ``meta`` and mirrored in ``PRAGMA
user_version``; a ledger of a version this tool does not know (a newer lagsieve) is refused.
"""
from __future__ import annotations

import errno
import os
import shutil
import sqlite3
import tempfile
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from lagsieve.errors import fail, show
from lagsieve.io.config import Study
from lagsieve.io.lock import unusable_folder

DEFAULT_NAME = "ledger.sqlite"
SCHEMA_VERSION = "3"
REVISIONS_TABLE = """CREATE TABLE IF NOT EXISTS revisions (
    run_id      INTEGER NOT NULL REFERENCES runs(run_id),
    previous_run INTEGER NOT NULL REFERENCES runs(run_id),
    series      TEXT NOT NULL,
    year        INTEGER NOT NULL,
    old_value   REAL NOT NULL,
    new_value   REAL NOT NULL,
    abs_change  REAL NOT NULL,
    rel_change  REAL,
    se          REAL,
    se_units    REAL,
    PRIMARY KEY (run_id, series, year)
)"""
RESCORES_TABLE = """CREATE TABLE IF NOT EXISTS rescores (
    forecast_id INTEGER NOT NULL REFERENCES forecasts(forecast_id),
    run_id      INTEGER NOT NULL REFERENCES runs(run_id),
    observed    REAL NOT NULL,
    error       REAL NOT NULL,
    inside      INTEGER NOT NULL CHECK (inside IN (0, 1)),
    PRIMARY KEY (forecast_id, run_id)
)"""
# version -> (next version, its statements); applied in order by :func:`ensure_schema`
MIGRATIONS: dict[str, tuple[str, tuple[str, ...]]] = {
    # 1 -> 2: grades.hardest held the baseline the candidate used most often, not the hardest one
    "1": ("2", ("ALTER TABLE grades RENAME COLUMN hardest TO baseline",)),
    # 2 -> 3: restatements survive (revisions, se of every value, the tolerance of each run, the
    # settings a forecast was made with) and restated target years are scored again (rescores)
    "2": ("3", ("ALTER TABLE series_years ADD COLUMN se REAL",
                "ALTER TABLE runs ADD COLUMN ledger_json TEXT NOT NULL DEFAULT '{}'",
                "ALTER TABLE forecasts ADD COLUMN settings_sha256 TEXT",
                REVISIONS_TABLE, RESCORES_TABLE)),
}

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
    n_superseded  INTEGER NOT NULL DEFAULT 0,
    ledger_json   TEXT NOT NULL DEFAULT '{}'
);
CREATE INDEX IF NOT EXISTS runs_study ON runs(study, run_id);
CREATE TABLE IF NOT EXISTS series_years (
    run_id    INTEGER NOT NULL REFERENCES runs(run_id),
    series    TEXT NOT NULL,
    year      INTEGER NOT NULL,
    value     REAL NOT NULL,
    value_sha TEXT NOT NULL,
    se        REAL,
    PRIMARY KEY (run_id, series, year)
);
CREATE TABLE IF NOT EXISTS grades (
    run_id          INTEGER NOT NULL REFERENCES runs(run_id),
    response        TEXT NOT NULL,
    driver          TEXT NOT NULL,
    grade           TEXT NOT NULL,
    model           TEXT,
    lag             INTEGER,
    baseline        TEXT,
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
    settings_sha256   TEXT,
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
""" + REVISIONS_TABLE + ";\n" + RESCORES_TABLE + ";\n"


# ---------------------------------------------------------------- paths
def resolve_ledger_path(study: Study, study_dir: str | Path) -> Path:
    """Where the ledger of ``study`` lives: config key ``ledger.path`` (absolute, or relative to
    the study's output folder ``<out>/<study>``), default ``<out>/<study>/ledger.sqlite``."""
    p = Path(study.ledger_path) if study.ledger_path else Path(DEFAULT_NAME)
    return p if p.is_absolute() else Path(study_dir) / p


# ---------------------------------------------------------------- opening, transactions, schema
@contextmanager
def transaction(con: sqlite3.Connection):
    """One write transaction: ``BEGIN IMMEDIATE`` (takes the write lock at once), then ``with
    con:`` commits on success and rolls back on any exception, including KeyboardInterrupt.
    A process killed outright leaves SQLite's journal, which the next opening rolls back."""
    con.execute("BEGIN IMMEDIATE")
    with con:
        yield con


def has_schema(con: sqlite3.Connection) -> bool:
    """Whether the database holds the ledger's tables."""
    return con.execute("SELECT 1 FROM sqlite_master WHERE type='table' AND name='runs'").fetchone() is not None


def schema_version(con: sqlite3.Connection) -> str | None:
    """The ledger's schema version; None for a database without the ledger's tables."""
    if con.execute("SELECT 1 FROM sqlite_master WHERE type='table' AND name='meta'").fetchone() is None:
        return None
    row = con.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
    return None if row is None else str(row[0])


def _unknown_version(version: str, path: str) -> None:
    fail(f"the forecast ledger has schema version {version}, which this lagsieve (schema "
         f"{SCHEMA_VERSION}) does not know", "update lagsieve, or set ledger.path to another file",
         file=path)


def _upgrade(con: sqlite3.Connection, version: str) -> None:
    """Apply the migrations from ``version`` up to ``SCHEMA_VERSION`` (inside a transaction)."""
    while version != SCHEMA_VERSION:
        if version not in MIGRATIONS:
            _unknown_version(version, con.execute("PRAGMA database_list").fetchone()[2])
        version, statements = MIGRATIONS[version]
        for stmt in statements:
            con.execute(stmt)
        con.execute("UPDATE meta SET value = ? WHERE key = 'schema_version'", (version,))
        con.execute(f"PRAGMA user_version = {int(version)}")


def ensure_schema(con: sqlite3.Connection) -> None:
    """Create the ledger's tables in a new database, or bring an older ledger's schema up to
    ``SCHEMA_VERSION``; one transaction, so a failure leaves the file as it was."""
    with transaction(con):
        version = schema_version(con)
        if version is not None:
            _upgrade(con, version)
            return
        for stmt in SCHEMA.split(";"):
            if stmt.strip():
                con.execute(stmt)
        con.execute("INSERT INTO meta(key, value) VALUES ('schema_version', ?)", (SCHEMA_VERSION,))
        con.execute(f"PRAGMA user_version = {int(SCHEMA_VERSION)}")


def connect(path: str | Path) -> sqlite3.Connection:
    """Open (or create) a ledger for writing, its schema created or upgraded
    (:func:`ensure_schema`). Autocommit mode: every write goes through :func:`transaction`.
    A file that is not a sound ledger is refused first (:func:`check_ledger`), untouched."""
    check_ledger(path)
    Path(path).parent.mkdir(parents=True, exist_ok=True)
    con = sqlite3.connect(str(path), isolation_level=None, timeout=60)
    con.row_factory = sqlite3.Row
    con.execute("PRAGMA foreign_keys = ON")
    try:
        ensure_schema(con)
    except sqlite3.OperationalError as exc:
        con.close()
        if not str(getattr(exc, "sqlite_errorname", "")).startswith(UNWRITABLE):
            raise  # a fault of the program (a migration), not of the user's disk
        fail(f"the forecast ledger cannot be written ({show(str(exc), 80)})",
             "free some space or make the file writable, or set ledger.path to a new file; the "
             "ledger is kept as it was", file=show(str(path), 300))
    except BaseException:
        con.close()
        raise
    return con


def open_readonly(path: str | Path) -> sqlite3.Connection:
    """Open an existing ledger for reading only (never creates the file, never upgrades it: the
    readers below work on every schema version)."""
    con = sqlite3.connect(Path(path).resolve().as_uri() + "?mode=ro", uri=True)
    con.row_factory = sqlite3.Row
    return con


# ---------------------------------------------------------------- checking an existing ledger
SQLITE_HEADER = b"SQLite format 3\x00"
# SQLite's errors that mean the file cannot be written (a full disk, a read-only file or folder)
UNWRITABLE = ("SQLITE_FULL", "SQLITE_READONLY", "SQLITE_CANTOPEN", "SQLITE_IOERR", "SQLITE_PERM")


@dataclass(frozen=True)
class LedgerState:
    """What a read-only look at a ledger file found."""

    verdict: str           # SQLite's ``PRAGMA quick_check``, its first finding: "ok" when sound
    tables: int            # how many tables the database holds
    ledger: bool           # whether they are the ledger's (``runs`` or ``meta``)
    version: str | None    # the ledger's schema version


def _look(path: Path, writable: bool = False) -> LedgerState:
    """Check ``path`` with SQLite (read-only unless ``writable``: only ever for a scratch copy)."""
    uri = path.resolve().as_uri() + ("" if writable else "?mode=ro")
    con = sqlite3.connect(uri, uri=True, timeout=5)
    try:
        lines = str(con.execute("PRAGMA quick_check").fetchone()[0]).splitlines()
        verdict = next((ln for ln in lines if not ln.startswith("***")), lines[0])  # skip "*** in database main ***"
        tables = con.execute("SELECT count(*) FROM sqlite_master WHERE type='table'").fetchone()[0]
        return LedgerState(verdict, tables, has_schema(con) or schema_version(con) is not None,
                           schema_version(con))
    finally:
        con.close()


def inspect_ledger(path: str | Path) -> LedgerState:
    """:func:`_look` at a ledger without changing it. A ledger that a killed run left with a hot
    journal cannot be read read-only (SQLite would roll the journal back first): then a scratch
    copy of the file and its journal is rolled back and checked instead."""
    path = Path(path)
    try:
        return _look(path)
    except sqlite3.OperationalError as exc:
        if getattr(exc, "sqlite_errorname", "") != "SQLITE_READONLY_ROLLBACK":
            raise
    with tempfile.TemporaryDirectory(prefix="lagsieve-ledger-") as tmp:
        copy = Path(tmp) / path.name
        shutil.copyfile(path, copy)
        shutil.copyfile(f"{path}-journal", f"{copy}-journal")
        return _look(copy, writable=True)


def _place_problem(path: Path) -> tuple[str, str] | None:
    """Why ``path`` cannot hold a ledger file (a folder, a pipe, a path through a file, a folder
    or file that may not be written), or None; found without writing."""
    fix = "set ledger.path to a file name such as ledger.sqlite"
    code = unusable_folder(path.parent)
    if code in (errno.EEXIST, errno.ENOTDIR):
        return "a part of the forecast ledger's path is a file, not a folder", fix
    if code == errno.EACCES:
        return "the forecast ledger's folder may not be written by you", fix
    if path.is_dir():
        return "the forecast ledger's path is a folder, not a file", f"{fix}, or move the folder aside"
    if path.exists() and not path.is_file():
        return "the forecast ledger's path is not a regular file (a named pipe, device or socket)", fix
    if path.exists() and not os.access(path, os.R_OK | os.W_OK):
        return ("the forecast ledger may not be read and written by you",
                "make it writable (chmod u+rw), or set ledger.path to a new file")
    return None


def _content_problem(path: Path) -> tuple[str, str] | None:
    """Why the existing file ``path`` is not a sound ledger, or None (read only, never written)."""
    keep = f"move it aside (e.g. to {path.name}.damaged) and run again to start a new ledger, or set " \
           f"ledger.path to a new file; the old file is kept unchanged"
    with open(path, "rb") as fh:
        head = fh.read(len(SQLITE_HEADER))
    if not head:
        return None  # an empty file: SQLite makes it a new database
    if head != SQLITE_HEADER:
        return "the file is not an SQLite database, so not a forecast ledger", keep
    try:
        state = inspect_ledger(path)
    except sqlite3.OperationalError as exc:
        if getattr(exc, "sqlite_errorname", "") == "SQLITE_BUSY":
            return None  # a run is writing it: the lock on the results folder speaks to that
        return (f"the forecast ledger cannot be opened ({show(str(exc), 80)})",
                "check that the file is readable by you; the file is kept unchanged")
    except sqlite3.DatabaseError as exc:
        return f"the forecast ledger is damaged (SQLite: {show(str(exc), 80)})", keep
    if state.verdict != "ok":
        return f"the forecast ledger is damaged (SQLite's quick_check: {show(state.verdict, 80)})", keep
    if state.tables and not state.ledger:
        return ("the file is an SQLite database but not a forecast ledger (none of the ledger's tables)",
                "set ledger.path to a new file; this database is kept unchanged")
    if state.version is not None and state.version != SCHEMA_VERSION and state.version not in MIGRATIONS:
        _unknown_version(state.version, show(str(path), 300))
    return None


def check_ledger(path: str | Path) -> None:
    """Refuse, with one line (:class:`InputErrors`), a ledger path that cannot be used: a folder,
    a pipe, a path through a file, a file that is not an SQLite database, a damaged database
    (``PRAGMA quick_check`` on a read-only connection), a database that is not a ledger, or a
    ledger of an unknown schema. A missing file is fine (the run starts a new ledger). Nothing
    is written: the file's bytes and time stamps stay as they are."""
    path = Path(path)
    try:
        problem = _place_problem(path) or (path.exists() and _content_problem(path)) or None
    except OSError as exc:
        problem = (f"the forecast ledger cannot be read ({show(exc.strerror or type(exc).__name__, 80)})",
                   "check that the file is readable by you; the file is kept unchanged")
    if problem is not None:
        fail(*problem, file=show(str(path), 300))


# ---------------------------------------------------------------- reading tables
def query_frame(con: sqlite3.Connection, sql: str, args=()) -> pd.DataFrame:
    """The rows of a query as a data frame, with the query's column names."""
    cur = con.execute(sql, args)
    cols = [d[0] for d in cur.description]
    return pd.DataFrame([tuple(r) for r in cur.fetchall()], columns=cols)


def runs_frame(con: sqlite3.Connection, study: str) -> pd.DataFrame:
    """The recorded runs of ``study``, oldest first."""
    return query_frame(con, "SELECT * FROM runs WHERE study = ? ORDER BY run_id", (study,))


def forecasts_frame(con: sqlite3.Connection, study: str) -> pd.DataFrame:
    """One row per forecast with its score (if scored) and the baselines' forecasts and errors:
    ``fc_<b>`` and ``err_<b>`` per baseline b, and ``err_baseline``, the error of the baseline
    the forecast was built on (its column ``baseline``)."""
    f = query_frame(con, "SELECT f.*, s.run_id AS scored_run, s.observed, s.error, s.inside FROM forecasts f "
                         "LEFT JOIN scores s USING (forecast_id) WHERE f.study = ? ORDER BY f.forecast_id", (study,))
    b = query_frame(con, "SELECT b.forecast_id, b.baseline, b.forecast FROM baseline_forecasts b "
                         "JOIN forecasts f USING (forecast_id) WHERE f.study = ?", (study,))
    if f.empty:
        return f
    # imported here: stats.backtest brings scipy.special (0.3 s of CPU), which `lagsieve run`'s
    # check_ledger would pay before Snakemake starts; only the track record reads the baselines
    from lagsieve.stats.backtest import BASELINES

    for bl in BASELINES:
        m = b[b["baseline"] == bl].set_index("forecast_id")["forecast"]
        f[f"fc_{bl}"] = f["forecast_id"].map(m)
        f[f"err_{bl}"] = f["observed"] - f[f"fc_{bl}"]
    errors = {bl: f[f"err_{bl}"].tolist() for bl in BASELINES}  # by column, not row by row (iterrows)
    f["err_baseline"] = [errors[bl][i] for i, bl in enumerate(f["baseline"].tolist())]
    return f
