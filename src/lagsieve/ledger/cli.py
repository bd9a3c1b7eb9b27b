"""`lagsieve ledger CONFIG [--out DIR]`: the forecast track record of a study (with the proper
scores), the scores by the grade each forecast had when made, and the values restated at the
latest run, printed."""
from __future__ import annotations

import sqlite3
import sys
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from lagsieve.io.config import load_study
from lagsieve.ledger.forecast import LEVEL
from lagsieve.ledger.store import has_schema, open_readonly, resolve_ledger_path, runs_frame
from lagsieve.ledger.track import revisions_at, scores_by_grade, track_record
from lagsieve.formats import number
from lagsieve.stats.backtest import BASELINES

EXIT_MISSING = 2  # no ledger, an unreadable one, or no run of the study: the user's next step is `lagsieve run`
SKILL_FORMAT = "{:+.2f}"


@dataclass
class Record:
    """What the command prints: the runs, the track record, the scores by grade when made and
    the values restated at the latest run."""

    runs: pd.DataFrame
    track: pd.DataFrame
    by_grade: pd.DataFrame
    revisions: pd.DataFrame


def _read_record(path: Path, study: str) -> Record:
    """The :class:`Record` of ``study``; raises sqlite3.DatabaseError for a file that is no ledger."""
    con = open_readonly(path)
    try:
        if not has_schema(con):
            raise sqlite3.DatabaseError("it holds no ledger tables")
        runs = runs_frame(con, study)
        latest = revisions_at(con, int(runs["run_id"].iloc[-1])) if len(runs) else pd.DataFrame()
        return Record(runs, track_record(con, study), scores_by_grade(con, study), latest)
    finally:
        con.close()


def by_grade_table(by_grade: pd.DataFrame) -> pd.DataFrame:
    """The scores by grade when made, as the command prints them."""
    return by_grade.assign(
        grade=by_grade["grade"].str.replace(" ", "-"),
        coverage=[number(v) or "-" for v in by_grade["coverage"]],
        **{c: [number(v) or "-" for v in by_grade[c]] for c in ("mae", "crps", "interval_score")},
        skill_own_baseline=[number(v, SKILL_FORMAT) or "-" for v in by_grade["skill_own_baseline"]])


def revision_lines(rev: pd.DataFrame) -> list[str]:
    """One line per series restated at the latest run: how many values, the median and the
    largest relative change, the largest change in standard errors."""
    out = []
    for name, g in rev.groupby("series", sort=True):
        rel = g["rel_change"].abs()
        line = (f"  {name}: {len(g)} value{'s' if len(g) != 1 else ''} restated, median change "
                f"{100 * rel.median():.2g}%, largest {100 * rel.max():.2g}%")
        if g["se_units"].notna().any():
            line += f" ({g['se_units'].max():.2g} se)"
        out.append(line)
    return out


def track_table(track: pd.DataFrame) -> pd.DataFrame:
    """The track record as the command prints it: one line per hypothesis, numbers as text.
    ``skill_own_baseline`` is the skill against the baseline each forecast was built on (the
    track record's ``skill_hardest``), ``skill_<b>`` against baseline b."""
    skill = lambda col: [number(v, SKILL_FORMAT) or "-" for v in track[col]]  # noqa: E731
    show = track.assign(
        hypothesis=track["response"] + " <- " + track["driver"],
        inside=[f"{i}/{s}" if s else "-" for i, s in zip(track["inside"], track["scored"])],
        **{c: [number(v) or "-" for v in track[c]] for c in ("mae", "crps", "interval_score")},
        skill_own_baseline=skill("skill_hardest"),
        **{f"skill_{b}": skill(f"skill_{b}") for b in BASELINES})
    cols = ["hypothesis", "made", "open", "scored", "superseded", "inside", "mae", "crps", "interval_score",
            "skill_own_baseline"] + \
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
        rec = _read_record(path, study.id)
    except sqlite3.DatabaseError as exc:
        print(f"{path}: not a readable forecast ledger ({exc}); move it aside and rerun the workflow", file=sys.stderr)
        return EXIT_MISSING
    runs, track = rec.runs, rec.track
    if runs.empty:
        print(f"{path}: no run of study '{study.id}' recorded yet; run `lagsieve run {config_path}` first",
              file=sys.stderr)
        return EXIT_MISSING
    last = runs.iloc[-1]
    nr = f"{len(runs)} run{'s' if len(runs) != 1 else ''}"
    print(f"forecast track record of study '{study.id}': {nr} recorded, latest {last['created_utc']} "
          f"(lagsieve {last['tool_version']}); {int(LEVEL * 100)}% prediction intervals; ledger {path}", file=stream)
    if track.empty:
        print("no forecast made yet (no hypothesis could be forecast: none has a selected lag of at least one year and a candidate baseline)", file=stream)
        return 0
    print(track_table(track).to_string(index=False), file=stream)
    if rec.by_grade["scored"].sum():
        print("scores by the grade each forecast had when made:", file=stream)
        print(by_grade_table(rec.by_grade).to_string(index=False), file=stream)
    if len(rec.revisions):
        print(f"values restated at the latest run ({len(rec.revisions)}):", file=stream)
        print("\n".join(revision_lines(rec.revisions)), file=stream)
    return 0
