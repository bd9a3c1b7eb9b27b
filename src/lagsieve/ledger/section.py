"""The report's section "Since the previous run", as plain data read from the forecast ledger.

:func:`ledger_section` returns a :class:`LedgerSection`: its state (no ledger yet, unreadable,
no run of the study, or read), the lead sentence and an ordered list of blocks (subheadings,
paragraphs and tables whose cells are plain text). The report renders it with a template
(``lagsieve/report/templates/ledger_section.html``); nothing here is markup.
"""
from __future__ import annotations

import json
import sqlite3
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from lagsieve.io.config import Study
from lagsieve.ledger.forecast import LEVEL
from lagsieve.ledger.store import has_schema, open_readonly, query_frame
from lagsieve.ledger.track import SinceLastRun, since_previous_run
from lagsieve.formats import number, year_spans
from lagsieve.ledger.update import grade_rows

MISSING, UNREADABLE, NO_RUN, READ = "missing", "unreadable", "no-run", "read"

FOOTNOTE = ("Every hypothesis that can forecast (a selected lag of at least one year) forecasts the next year "
            "with its candidate model (the baseline it used most often plus the driver at its selected lag) "
            "fitted on every observed year, with an {level}% prediction interval from its training residuals "
            "(the parameter part widened by the factor (1 + rho) / (1 - rho) of their lag-1 autocorrelation rho). "
            "A forecast is scored against the first value published for its year; later restatements of that "
            "value are scored too, as secondary information, and never replace the first score. Besides the "
            "absolute error, the proper scores of Gneiting & Raftery (2007): the CRPS of the Gaussian forecast "
            "(the normal with the forecast's interval) and the interval score of the {level}% interval (lower "
            "is better for both). Skill is 1 - SSE(candidate) / SSE(baseline) over the scored years, against "
            "the baseline forecasts made at the same time. A forecast whose training values were restated by "
            "more than the tolerance ({tolerance}) is superseded and never scored; smaller restatements are "
            "listed as revisions.")


@dataclass
class Block:
    """One piece of the section, in page order: ``kind`` is "heading", "text" or "table"."""

    kind: str
    text: str = ""
    header: list[str] = field(default_factory=list)
    rows: list[list[str]] = field(default_factory=list)
    numeric: list[bool] = field(default_factory=list)  # per column: quantities (set right), not years

    def __post_init__(self):
        if self.kind == "table" and not self.numeric:
            self.numeric = [bool(col) and "year" not in h and all(_is_number(c) for c in col if c)
                            for h, col in ((h, [str(r[i]) for r in self.rows]) for i, h in enumerate(self.header))]


@dataclass
class LedgerSection:
    """What the section says. ``state``: one of MISSING, UNREADABLE, NO_RUN, READ; ``error``: why
    an unreadable ledger cannot be read; ``mismatch``: the ledger's latest grades differ from this
    report's evidence (the ledger step has not recorded these results)."""

    state: str
    path: str
    study: str
    error: str = ""
    lead: str = ""
    mismatch: bool = False
    blocks: list[Block] = field(default_factory=list)
    footnote: str = ""


def study_id(study) -> str:
    return study.id if isinstance(study, Study) else str(study)


def _heading(text: str) -> Block:
    return Block("heading", text)


def _text(text: str) -> Block:
    return Block("text", text)


def _table(header: list[str], rows: list[list]) -> Block:
    return Block("table", header=list(header), rows=[[str(c) for c in r] for r in rows])


def _is_number(cell: str) -> bool:
    """A cell that reads as a number: a count, a value, a percentage or a ratio such as 3/4."""
    try:
        [float(part) for part in cell.rstrip("%").split("/")]
    except ValueError:
        return False
    return True


def _read(path: Path, sid: str) -> tuple[SinceLastRun, pd.DataFrame | None]:
    con = open_readonly(path)
    try:
        if not has_schema(con):
            raise sqlite3.DatabaseError("no ledger tables")
        s = since_previous_run(con, sid)
        latest = (query_frame(con, "SELECT response, driver, grade, lag FROM grades WHERE run_id = ?",
                         (int(s.run["run_id"]),)) if s.run else None)
    finally:
        con.close()
    return s, latest


def _lead(path: Path, s: SinceLastRun) -> str:
    r = s.run
    return (f"Ledger {path.name}: run {int(r['run_id'])} recorded {r['created_utc']} (lagsieve {r['tool_version']}), "
            + (f"compared with run {int(s.previous['run_id'])} recorded {s.previous['created_utc']}."
               if s.previous else "the first run of this study in the ledger: nothing to compare with yet."))


def _mismatch(evidence_df: pd.DataFrame | None, latest: pd.DataFrame | None) -> bool:
    if evidence_df is None or latest is None:
        return False
    mine = grade_rows(evidence_df)[["response", "driver", "grade", "lag"]]
    theirs = latest.sort_values(["response", "driver"]).reset_index(drop=True)
    same = (len(mine) == len(theirs)
            and mine["grade"].tolist() == theirs["grade"].tolist()
            and mine[["response", "driver"]].values.tolist() == theirs[["response", "driver"]].values.tolist())
    return not same


def _data_blocks(s: SinceLastRun) -> list[Block]:
    d = s.data
    if s.previous is None:
        return [_heading("Data"), _table(["series", "years recorded"],
                                         [[x.series, year_spans(x.added)] for x in d.itertuples()])]
    ch = [x for x in d.itertuples() if x.added or x.filled_in or x.restated or x.removed]
    if not ch:
        return [_heading("Data"), _text("No year was added or restated in any series.")]
    return [_heading("Data"), _table(
        ["series", "years added", "years filled in", "years restated", "years removed"],
        [[x.series, year_spans(x.added), year_spans(x.filled_in), year_spans(x.restated), year_spans(x.removed)]
         for x in ch])]


def _percent(v) -> str:
    return "" if pd.isna(v) else f"{100 * v:+.2g}%"


def _revision_blocks(s: SinceLastRun) -> list[Block]:
    """Per series, the values restated since the previous run and the largest change."""
    r = s.revisions
    if s.previous is None or r.empty:
        return []
    rows = []
    for name, g in r.groupby("series", sort=True):
        big = g.loc[g["abs_change"].abs().idxmax()]
        rows.append([name, year_spans(g["year"].astype(int).tolist()), len(g),
                     _percent(g["rel_change"].abs().median()),
                     f"{int(big['year'])}: {number(big['old_value'])} to {number(big['new_value'])} "
                     f"({_percent(big['rel_change'])})", number(g["se_units"].max(), "{:.2g}")])
    return [_heading("Values restated since the previous run"), _table(
        ["series", "years restated", "values", "median change", "largest change", "largest in se"], rows)]


def _grade_blocks(s: SinceLastRun) -> list[Block]:
    if s.previous is None:
        return []
    if not len(s.grade_changes):
        return [_heading("Grade changes"), _text("No hypothesis changed grade.")]
    return [_heading("Grade changes"), _table(
        ["response", "driver", "change", "reason"],
        [[g.response, g.driver, f"{g.before or '(none)'} -> {g.after or '(none)'}", g.reason]
         for g in s.grade_changes.itertuples()])]


def _scored_blocks(s: SinceLastRun) -> list[Block]:
    out = [_heading("Forecasts scored at this run")]
    if len(s.scored):
        out.append(_table(["response", "driver", "grade", "year", "forecast", "interval", "observed", "outcome",
                           "CRPS", "interval score", "own baseline", "baseline forecast"],
                          [[f.response, f.driver, f.grade, int(f.target_year), number(f.forecast),
                            f"{number(f.lower)} to {number(f.upper)}", number(f.observed),
                            "inside" if f.inside else "outside", number(f.crps), number(f.interval_score),
                            f.baseline, number(getattr(f, f"fc_{f.baseline}"))]
                           for f in s.scored.itertuples()]))
    else:
        out.append(_text("None: no forecast year has arrived since the previous run."))
    if len(s.superseded):
        out += [_heading("Forecasts superseded at this run (not scored)"),
                _table(["response", "driver", "year", "forecast", "reason"],
                       [[f.response, f.driver, int(f.target_year), number(f.forecast), f.superseded_reason]
                        for f in s.superseded.itertuples()])]
    return out


def _candidate_words(f) -> str:
    form = "penalised spline)" if f.screen_model == "gam" else "straight line)"
    return f"{f.baseline} + {f.driver} (lag {int(f.lag)}, " + form


def _made_blocks(s: SinceLastRun) -> list[Block]:
    out = [_heading("Forecasts made at this run")]
    if len(s.made):
        out.append(_table(["response", "driver", "grade", "year", "forecast", "interval", "candidate"],
                          [[f.response, f.driver, f.grade, int(f.target_year), number(f.forecast),
                            f"{number(f.lower)} to {number(f.upper)}", _candidate_words(f)]
                           for f in s.made.itertuples()]))
    else:
        out.append(_text("None."))
    if len(s.notes):
        out += [_text("Hypotheses graded strong or moderate without a forecast:"),
                _table(["response", "driver", "grade", "why no forecast"],
                       [[x.response, x.driver, x.grade, x.note] for x in s.notes.itertuples()])]
    return out


def _track_blocks(s: SinceLastRun) -> list[Block]:
    if not len(s.track):
        return [_heading("Track record"), _text("No forecast has been made yet.")]
    return [_heading("Track record"), _table(
        ["response", "driver", "made", "open", "scored", "superseded", "inside interval", "MAE", "CRPS",
         "interval score", "MAE vs latest release", "skill vs own baseline", "closer than own baseline", "latest"],
        [[t.response, t.driver, t.made, t.open, t.scored, t.superseded, f"{t.inside}/{t.scored}" if t.scored else "",
          number(t.mae), number(t.crps), number(t.interval_score), number(t.mae_latest) if t.rescored else "",
          number(t.skill_hardest, "{:+.2f}"), f"{t.beat_hardest}/{t.scored}" if t.scored else "",
          t.last] for t in s.track.itertuples()])]


def _by_grade_blocks(s: SinceLastRun) -> list[Block]:
    """The scores by the grade each forecast had when made, once a forecast has been scored."""
    g = s.by_grade
    if g.empty or not g["scored"].sum():
        return []
    return [_heading("Scores by grade when the forecast was made"),
            _text("The tool's own prospective test of its grades: forecasts of hypotheses graded strong should "
                  "score better, year after year, than those of the other grades (lower MAE, CRPS and interval "
                  "score; coverage near the nominal level)."),
            _table(["grade", "made", "scored", "coverage", "MAE", "CRPS", "interval score", "skill vs own baseline"],
                   [[r.grade, r.made, r.scored, _percent(r.coverage).lstrip("+"), number(r.mae), number(r.crps),
                     number(r.interval_score), number(r.skill_own_baseline, "{:+.2f}")] for r in g.itertuples()])]


def ledger_section(ledger_path: str | Path, study, evidence_df: pd.DataFrame | None = None) -> LedgerSection:
    """The section "Since the previous run" as data.

    ``ledger_path``: the ledger file (see :func:`lagsieve.ledger.store.resolve_ledger_path`, or the
    ``ledger`` entry of ``work/ledger_update.json``); ``study``: the study id or :class:`Study`;
    ``evidence_df``: this report's evidence.csv, used to say whether the ledger has recorded these
    results. Never raises for a missing or unreadable ledger: the state then says so.
    """
    sid, path = study_id(study), Path(ledger_path)
    if not path.is_file():
        return LedgerSection(MISSING, str(path), sid)
    try:
        s, latest = _read(path, sid)
    except sqlite3.DatabaseError as exc:
        return LedgerSection(UNREADABLE, str(path), sid, error=str(exc))
    if s.run is None:
        return LedgerSection(NO_RUN, str(path), sid)
    blocks = (_data_blocks(s) + _revision_blocks(s) + _grade_blocks(s) + _scored_blocks(s) + _made_blocks(s)
              + _by_grade_blocks(s) + _track_blocks(s))
    return LedgerSection(READ, str(path), sid, lead=_lead(path, s), mismatch=_mismatch(evidence_df, latest),
                         blocks=blocks, footnote=FOOTNOTE.format(level=int(LEVEL * 100),
                                                                 tolerance=_tolerance_words(s.run)))


def _tolerance_words(run: dict) -> str:
    """The restatement tolerance the latest run used, in words."""
    tol = json.loads(run.get("ledger_json") or "{}").get("restatement_tolerance")
    if not tol:
        return "a ledger written before tolerances: any restatement"
    return f"{tol['se']:g} standard errors, or {100 * tol['relative']:g}% of the value where it has no standard error"
