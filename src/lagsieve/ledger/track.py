"""Reading the ledger back: the track record of every hypothesis (with the proper scores of
:mod:`lagsieve.ledger.scores`), the same scores by the grade each forecast had when it was made,
the values restated at a run, and what changed since the previous run (data, grades and why
they changed, forecasts scored, superseded and made). The readers work on every schema version
(a table a version lacks reads as empty)."""
from __future__ import annotations

import json
import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from lagsieve.ledger.scores import crps_normal, gaussian_sd, interval_score
from lagsieve.ledger.store import forecasts_frame, query_frame, runs_frame
from lagsieve.stats.backtest import BASELINES

TRACK_COLUMNS = ["response", "driver", "made", "open", "scored", "superseded", "inside", "coverage", "mae",
                 "crps", "interval_score", "rescored", "mae_latest",
                 "skill_hardest", "beat_hardest"] + [f"skill_{b}" for b in BASELINES] + ["last"]
GRADE_GROUPS = ("strong", "moderate", "other grades")  # how the scores are compared by grade
BY_GRADE_COLUMNS = ["grade", "made", "scored", "coverage", "mae", "crps", "interval_score", "skill_own_baseline"]
REVISION_COLUMNS = ["series", "year", "old_value", "new_value", "abs_change", "rel_change", "se", "se_units"]
GRADE_CHANGE_COLUMNS = ["response", "driver", "before", "after", "reason"]
SKILL_CUTS = (0.05, 0.10, 0.20)  # the surrogate p of skill: the grade rules' cuts, most telling first
SUPPORTED = ("strong", "moderate")  # the grades whose missing forecast the report explains
NOTABLE_MOVE = 0.05  # a statistic that moved this much is named even without crossing a threshold


# ---------------------------------------------------------------- track record
def _skill(e_model: pd.Series, e_base: pd.Series) -> float:
    ok = e_model.notna() & e_base.notna()
    den = float((e_base[ok] ** 2).sum())
    return float(1.0 - (e_model[ok] ** 2).sum() / den) if ok.any() and den > 0 else float("nan")


def _latest_words(last: pd.Series) -> str:
    """The latest forecast of a hypothesis in words: year, forecast, interval, status, outcome."""
    words = (f"{int(last['target_year'])}: {last['forecast']:.3f} [{last['lower']:.3f}, {last['upper']:.3f}] "
             f"{last['status']}")
    if last["status"] == "scored":
        words += f" (observed {last['observed']:.3f}, {'inside' if last['inside'] else 'outside'})"
    return words


def _mean(v: pd.Series) -> float:
    return float(v.mean()) if len(v) else float("nan")


def with_scores(f: pd.DataFrame) -> pd.DataFrame:
    """The forecasts with their proper scores against the first published value (nan until
    scored): ``crps`` of the Gaussian forecast (the normal with the forecast's interval,
    :func:`lagsieve.ledger.scores.gaussian_sd`) and ``interval_score`` of its interval."""
    f = f.copy()
    sd = gaussian_sd(f["lower"], f["upper"], f["level"].to_numpy(float))
    f["crps"] = crps_normal(f["forecast"], sd, f["observed"].astype(float))
    f["interval_score"] = interval_score(f["lower"], f["upper"], f["observed"].astype(float),
                                         f["level"].to_numpy(float))
    return f


def _latest_observed(con, study: str) -> pd.Series:
    """forecast_id -> the target year's value at its latest restatement (rescores; schema >= 3)."""
    if con.execute("SELECT 1 FROM sqlite_master WHERE type='table' AND name='rescores'").fetchone() is None:
        return pd.Series(dtype=float)
    r = query_frame(con, "SELECT r.forecast_id, r.observed FROM rescores r JOIN forecasts f USING (forecast_id) "
                         "WHERE f.study = ? ORDER BY r.run_id", (study,))
    return r.groupby("forecast_id")["observed"].last() if len(r) else pd.Series(dtype=float)


def scored_frame(con, study: str) -> pd.DataFrame:
    """:func:`lagsieve.ledger.store.forecasts_frame` with the proper scores (:func:`with_scores`),
    ``rescored`` (whether a later run restated the target year) and ``error_latest`` (the error
    against the latest restatement, else against the first published value)."""
    f = forecasts_frame(con, study)
    if f.empty:
        return f
    f = with_scores(f)
    latest = f["forecast_id"].map(_latest_observed(con, study)).astype(float)
    f["rescored"] = latest.notna()
    f["error_latest"] = np.where(latest.notna(), latest, f["observed"].astype(float)) - f["forecast"]
    return f


def _track_row(response: str, driver: str, g: pd.DataFrame) -> dict:
    sc = g[g["status"] == "scored"]
    if sc.empty:  # nothing scored yet (every forecast of a study's first runs): the same row, built faster
        return _unscored_row(response, driver, g)
    return _scored_row(response, driver, g, sc)


def _scored_row(response: str, driver: str, g: pd.DataFrame, sc: pd.DataFrame) -> dict:
    """The track record of one hypothesis: its forecasts ``g``, the scored ones ``sc``."""
    row = {"response": response, "driver": driver, "made": len(g), "open": int((g["status"] == "open").sum()),
           "scored": len(sc), "superseded": int((g["status"] == "superseded").sum()),
           "inside": int(sc["inside"].sum()) if len(sc) else 0,
           "coverage": _mean(sc["inside"]), "mae": _mean(sc["error"].abs()),
           "crps": _mean(sc["crps"]), "interval_score": _mean(sc["interval_score"]),
           "rescored": int(sc["rescored"].sum()), "mae_latest": _mean(sc["error_latest"].abs()),
           "skill_hardest": _skill(sc["error"], sc["err_baseline"]),
           "beat_hardest": int((sc["error"] ** 2 < sc["err_baseline"] ** 2).sum()),
           "last": _latest_words(g.iloc[-1])}
    for b in BASELINES:
        row[f"skill_{b}"] = _skill(sc["error"], sc[f"err_{b}"])
    return row


def _unscored_row(response: str, driver: str, g: pd.DataFrame) -> dict:
    """:func:`_track_row` of a hypothesis with no scored forecast: counts 0, every score missing."""
    status = g["status"].tolist()
    row = {"response": response, "driver": driver, "made": len(g), "open": status.count("open"), "scored": 0,
           "superseded": status.count("superseded"), "inside": 0, "rescored": 0, "beat_hardest": 0,
           "last": _latest_words(g.iloc[-1])}
    return {c: row.get(c, float("nan")) for c in TRACK_COLUMNS}


def track_record(con, study: str, scored: pd.DataFrame | None = None) -> pd.DataFrame:
    """Per hypothesis: forecasts made, open, scored, superseded; on the scored ones, how many fell
    inside their interval (coverage), mean absolute error, and skill 1 - SSE(candidate) / SSE(b)
    against the baselines' forecasts made at the same time. ``skill_hardest`` and
    ``beat_hardest`` (names kept for the report) are against the baseline the candidate was built
    on (the forecast's ``baseline``): its skill, and the forecasts with the smaller squared error.
    Superseded forecasts are counted but never scored. ``scored``: the study's
    :func:`scored_frame` when the caller has it already (else read here)."""
    f = scored_frame(con, study) if scored is None else scored
    if f.empty:
        return pd.DataFrame(columns=TRACK_COLUMNS)
    rows = [_track_row(r, d, g) for (r, d), g in f.groupby(["response", "driver"], sort=True)]
    return pd.DataFrame(rows, columns=TRACK_COLUMNS)


def scores_by_grade(con, study: str, scored: pd.DataFrame | None = None) -> pd.DataFrame:
    """The scores of every scored forecast grouped by the grade its hypothesis had when the
    forecast was made (strong, moderate, every other grade): the ledger's prospective test of the
    grades. Per group: forecasts made and scored, coverage, mean absolute error, mean CRPS,
    mean interval score and the skill 1 - SSE / SSE(own baseline). ``scored``: as in
    :func:`track_record`."""
    f = scored_frame(con, study) if scored is None else scored
    if f.empty:
        return pd.DataFrame(columns=BY_GRADE_COLUMNS)
    group = f["grade"].where(f["grade"].isin(GRADE_GROUPS[:2]), GRADE_GROUPS[2])
    rows = []
    for name in GRADE_GROUPS:
        g = f[group == name]
        sc = g[g["status"] == "scored"]
        if g.empty:
            continue
        if sc.empty:  # the same row as below, without its work on no rows: every score missing
            rows.append({"grade": name, "made": len(g), "scored": 0} | dict.fromkeys(BY_GRADE_COLUMNS[3:], np.nan))
            continue
        rows.append({"grade": name, "made": len(g), "scored": len(sc), "coverage": _mean(sc["inside"]),
                     "mae": _mean(sc["error"].abs()), "crps": _mean(sc["crps"]),
                     "interval_score": _mean(sc["interval_score"]),
                     "skill_own_baseline": _skill(sc["error"], sc["err_baseline"])})
    return pd.DataFrame(rows, columns=BY_GRADE_COLUMNS)


def revisions_at(con, run_id: int) -> pd.DataFrame:
    """The values restated at run ``run_id`` against the study's previous run (schema >= 3)."""
    if con.execute("SELECT 1 FROM sqlite_master WHERE type='table' AND name='revisions'").fetchone() is None:
        return pd.DataFrame(columns=REVISION_COLUMNS)
    return query_frame(con, f"SELECT {', '.join(REVISION_COLUMNS)} FROM revisions WHERE run_id = ? "
                            "ORDER BY series, year", (run_id,))


# ---------------------------------------------------------------- data changes
def data_changes(con, run_id: int, prev_id: int | None) -> pd.DataFrame:
    """Per series: years added (after the previous last year, or filled into the past), restated
    (value changed) and removed between two recorded runs."""
    sql = "SELECT series, year, value_sha FROM series_years WHERE run_id = ?"
    cur = query_frame(con, sql, (run_id,))
    prev = query_frame(con, sql, (prev_id,)) if prev_id is not None else cur.iloc[0:0]
    before, after = _years_by_series(prev), _years_by_series(cur)
    rows = []
    for s in sorted(set(after) | set(before)):
        a, b = before.get(s, {}), after.get(s, {})
        last_prev = max(a) if a else None
        new = [y for y in b if y not in a]
        rows.append({"series": s,
                     "added": [y for y in new if last_prev is None or y > last_prev],
                     "filled_in": [y for y in new if last_prev is not None and y <= last_prev],
                     "restated": [y for y in b if y in a and a[y] != b[y]],
                     "removed": [y for y in a if y not in b]})
    return pd.DataFrame(rows, columns=["series", "added", "filled_in", "restated", "removed"])


def _years_by_series(frame: pd.DataFrame) -> dict[str, dict]:
    """series -> {year: value_sha}, in the frame's row order (a repeated year: its last value)."""
    out: dict[str, dict] = {}
    for s, y, v in zip(frame["series"].tolist(), frame["year"].tolist(), frame["value_sha"].tolist()):
        out.setdefault(s, {})[y] = v
    return out


# ---------------------------------------------------------------- why a grade changed
def _missing(v) -> bool:
    return v is None or (isinstance(v, float) and math.isnan(v))


def _crossing(name: str, a, b, thr: float, lower_is_better: bool) -> tuple[int, str] | None:
    """(2, words) when a statistic crossed its threshold, (1, words) when it moved notably."""
    if _missing(a) or _missing(b) or abs(b - a) < 1e-9:
        return None
    verb = "rose" if b > a else "fell"
    crossed = (a <= thr) != (b <= thr) if lower_is_better else (a > thr) != (b > thr)
    if crossed:
        return 2, f"{name} {verb} from {a:.2f} to {b:.2f} (threshold {thr:g})"
    if abs(b - a) >= NOTABLE_MOVE:
        return 1, f"{name} {verb} from {a:.2f} to {b:.2f}"
    return None


def _outcome_words(scored: pd.DataFrame, superseded: pd.DataFrame) -> list[str]:
    """The forecasts of one hypothesis scored or superseded at this run, in words."""
    parts = []
    for _, f in scored.iterrows():
        b = f["baseline"]
        better = f["error"] ** 2 < f[f"err_{b}"] ** 2
        parts.append(f"the {int(f['target_year'])} forecast {'hit' if f['inside'] else 'missed'} "
                     f"(observed {f['observed']:.3f}, {int(round(100 * f['level']))}% interval "
                     f"{f['lower']:.3f} to {f['upper']:.3f}; {'closer than' if better else 'further off than'} "
                     f"the {b} baseline)")
    for _, f in superseded.iterrows():
        parts.append(f"the {int(f['target_year'])} forecast was superseded ({f['superseded_reason']})")
    return parts


def _statistic_words(prev: dict, cur: dict, screen: dict) -> list[str]:
    """The statistics that crossed a grade rule's threshold (else those that moved notably)."""
    alpha, fdr = float(screen.get("alpha", 0.05)), float(screen.get("fdr", 0.10))
    cands = [
        _crossing("re-test skill", prev.get("retest_skill"), cur.get("retest_skill"), 0.0, False),
        _crossing("out-of-sample skill", prev.get("oos_skill"), cur.get("oos_skill"), 0.0, False),
        _crossing("q-value", prev.get("q_value"), cur.get("q_value"), fdr, True),
        _crossing("surrogate p", prev.get("p_surrogate"), cur.get("p_surrogate"), alpha, True),
    ]
    a, b = prev.get("oos_p_surrogate"), cur.get("oos_p_surrogate")
    for thr in SKILL_CUTS:
        c = _crossing("surrogate p of skill", a, b, thr, True)
        if c and c[0] == 2:
            cands.append(c)
            break
    else:
        cands.append(_crossing("surrogate p of skill", a, b, SKILL_CUTS[0], True))
    cands = [c for c in cands if c]
    return [t for i, t in cands if i == 2] or [t for i, t in cands if i == 1]


def _grade_reason(prev: dict, cur: dict, screen: dict, scored: pd.DataFrame, superseded: pd.DataFrame) -> str:
    parts = _outcome_words(scored, superseded) + _statistic_words(prev, cur, screen)
    fa = set(filter(None, str(prev.get("flags") or "").split(";")))
    fb = set(filter(None, str(cur.get("flags") or "").split(";")))
    parts += [f"new flag {x}" for x in sorted(fb - fa)] + [f"flag {x} cleared" for x in sorted(fa - fb)]
    if prev.get("lag") != cur.get("lag"):
        parts.append(f"selected lag {prev.get('lag')} -> {cur.get('lag')}")
    return "; ".join(parts) if parts else "the statistics moved only slightly (see evidence.csv)"


def grade_changes(g_prev: pd.DataFrame, g_cur: pd.DataFrame, screen: dict, scored: pd.DataFrame,
                  superseded: pd.DataFrame) -> pd.DataFrame:
    """The hypotheses whose grade differs between two runs' grades, with the reason in words."""
    a = {(r["response"], r["driver"]): r for r in g_prev.to_dict("records")}
    b = {(r["response"], r["driver"]): r for r in g_cur.to_dict("records")}
    changes = []
    for key in sorted(set(a) | set(b)):
        pa, pb = a.get(key), b.get(key)
        if pa and pb and pa["grade"] == pb["grade"]:
            continue
        if pa is None:
            reason = "new hypothesis in this run"
        elif pb is None:
            reason = "no longer screened"
        else:
            mine = lambda df: df[(df["response"] == key[0]) & (df["driver"] == key[1])]  # noqa: E731
            reason = _grade_reason(pa, pb, screen, mine(scored), mine(superseded))
        changes.append({"response": key[0], "driver": key[1], "before": pa["grade"] if pa else "",
                        "after": pb["grade"] if pb else "", "reason": reason})
    return pd.DataFrame(changes, columns=GRADE_CHANGE_COLUMNS)


# ---------------------------------------------------------------- since the previous run
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
    revisions: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(columns=REVISION_COLUMNS))
    by_grade: pd.DataFrame = field(default_factory=lambda: pd.DataFrame(columns=BY_GRADE_COLUMNS))


def _grades(con, run_id: int) -> pd.DataFrame:
    return query_frame(con, "SELECT * FROM grades WHERE run_id = ?", (run_id,))


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
    g_cur = _grades(con, run_id)
    every = scored_frame(con, study)  # read once: the track record and the scores by grade use it too
    f = every if not every.empty else pd.DataFrame(
        columns=["response", "driver", "run_id", "scored_run", "superseded_run", "status"])
    scored, superseded = f[f["scored_run"] == run_id], f[f["superseded_run"] == run_id]
    changes = (grade_changes(_grades(con, prev_id), g_cur, json.loads(cur_run["screen_json"]), scored, superseded)
               if prev_id is not None else pd.DataFrame(columns=GRADE_CHANGE_COLUMNS))
    graded = g_cur[(g_cur["note"] != "") & g_cur["grade"].isin(SUPPORTED)] if len(g_cur) else empty
    notes = graded[["response", "driver", "grade", "note"]] if len(graded) else empty
    return SinceLastRun(cur_run, prev_run, data_changes(con, run_id, prev_id), changes, scored, superseded,
                        f[f["run_id"] == run_id], notes, track_record(con, study, every), len(runs),
                        revisions_at(con, run_id), scores_by_grade(con, study, every))
