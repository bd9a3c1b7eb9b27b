"""`lagsieve ledger CONFIG [--out DIR]`: the forecast track record of a study, printed."""
from __future__ import annotations

import sqlite3
import sys
from pathlib import Path

import pandas as pd

from lagsieve.io.config import load_study
from lagsieve.ledger.forecast import LEVEL
from lagsieve.ledger.store import has_schema, open_readonly, resolve_ledger_path, runs_frame
from lagsieve.ledger.track import track_record
from lagsieve.formats import number
from lagsieve.stats.backtest import BASELINES

EXIT_MISSING = 2  # no ledger, an unreadable one, or no run of the study: the user's next step is `lagsieve run`
SKILL_FORMAT = "{:+.2f}"


def _read_record(path: Path, study: str) -> tuple[pd.DataFrame, pd.DataFrame]:
    """(runs, track record) of ``study``; raises sqlite3.DatabaseError for a file that is no ledger."""
    con = open_readonly(path)
    try:
        if not has_schema(con):
            raise sqlite3.DatabaseError("it holds no ledger tables")
        return runs_frame(con, study), track_record(con, study)
    finally:
        con.close()


def track_table(track: pd.DataFrame) -> pd.DataFrame:
    """The track record as the command prints it: one line per hypothesis, numbers as text.
    ``skill_own_baseline`` is the skill against the baseline each forecast was built on (the
    track record's ``skill_hardest``), ``skill_<b>`` against baseline b."""
    skill = lambda col: [number(v, SKILL_FORMAT) or "-" for v in track[col]]  # noqa: E731
    show = track.assign(
        hypothesis=track["response"] + " <- " + track["driver"],
        inside=[f"{i}/{s}" if s else "-" for i, s in zip(track["inside"], track["scored"])],
        mae=[number(v) or "-" for v in track["mae"]],
        skill_own_baseline=skill("skill_hardest"),
        **{f"skill_{b}": skill(f"skill_{b}") for b in BASELINES})
    cols = ["hypothesis", "made", "open", "scored", "superseded", "inside", "mae", "skill_own_baseline"] + \
           [f"skill_{b}" for b in BASELINES] + ["last"]
    return show[cols]


def print_track_record(config_path: str | Path, out: str | Path | None = None, stream=None) -> int:
    """Print the track record of the study of ``config_path``; 0, or 2 without a ledger (one
    line on stderr). ``out`` is the results folder (default ``results/`` beside the config)."""
    stream = stream or sys.stdout
    study = load_study(config_path)
    out_dir = Path(out) if out else study.path.parent / "results"
    path = resolve_ledger_path(study, out_dir / study.id)
    if not path.is_file():
        print(f"{path}: no forecast ledger for study '{study.id}' yet; run `lagsieve run {config_path}` "
              "first (or give the results folder with --out)", file=sys.stderr)
        return EXIT_MISSING
    try:
        runs, track = _read_record(path, study.id)
    except sqlite3.DatabaseError as exc:
        print(f"{path}: not a readable forecast ledger ({exc}); move it aside and rerun the workflow", file=sys.stderr)
        return EXIT_MISSING
    if runs.empty:
        print(f"{path}: no run of study '{study.id}' recorded yet; run `lagsieve run {config_path}` first",
              file=sys.stderr)
        return EXIT_MISSING
    last = runs.iloc[-1]
    nr = f"{len(runs)} run{'s' if len(runs) != 1 else ''}"
    print(f"forecast track record of study '{study.id}': {nr} recorded, latest {last['created_utc']} "
          f"(lagsieve {last['tool_version']}); {int(LEVEL * 100)}% prediction intervals; ledger {path}", file=stream)
    if track.empty:
        print("no forecast made yet (no hypothesis graded strong or moderate could be forecast)", file=stream)
        return 0
    print(track_table(track).to_string(index=False), file=stream)
    return 0
