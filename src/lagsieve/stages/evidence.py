"""Stages `align` (the study's inputs on one annual axis, :func:`run_align`) and `evidence`
(study-wide q-values, flags, grades, ranks, rivals and model sets, :func:`run_evidence`),
which share one job."""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
from threadpoolctl import threadpool_limits

from lagsieve.evidence.grading import finish_evidence, grade_hypotheses
from lagsieve.evidence.joint import JOINT_COLUMNS, JOINT_GROUP_COLUMNS, joint_qvalues, joint_table
from lagsieve.evidence.models import MODEL_COLUMNS, model_table
from lagsieve.evidence.rivals import CONDITIONAL_COLUMNS, cap_by_rivals, conditional_table
from lagsieve.evidence.seasons import read_paired, resummarize, season_view
from lagsieve.evidence.stability import WINDOW_COLUMNS, stability_entries, with_stability
from lagsieve.evidence.statespace import add_state_space
from lagsieve.errors import InputWarning
from lagsieve.io.config import YEAR_CONTROL, Study, load_study
from lagsieve.io.files import write_csv
from lagsieve.prep.align import se_table
from lagsieve.stages.aside import aside
from lagsieve.stages.check import check_study
from lagsieve.stages.common import EVIDENCE_COLUMNS, SCREEN_COLUMNS, load_table, ordered, response_dirs
from lagsieve.stages.estimates import add_estimates


def run_align(config_path: str | Path, out_annual: str | Path, out_notes: str | Path, condition=None) -> None:
    """Stage `align`: write the tidy annual table and the list of dropped or filled years
    (``condition``: the study's condition.csv, or a list of none or one path). The samples'
    warnings come from the condition stage's record (:func:`recorded_sample_warnings`)."""
    study, annual, notes, warnings = check_study(config_path, condition, recorded_sample_warnings(condition))
    role = ({c["id"]: "control" for c in study.control_series} | {i: "driver" for i in study.driver_ids}
            | {i: "response" for i in study.response_ids})
    annual = annual.assign(role=annual["series"].map(role)).sort_values(["series", "year"])
    notes_df = pd.DataFrame(notes, columns=["series", "year", "action", "reason"])
    warn_df = pd.DataFrame({"series": [w.series for w in warnings], "year": np.nan,
                            "action": "warning", "reason": [w.what for w in warnings]})
    write_csv(pd.concat([notes_df, warn_df], ignore_index=True), out_notes)
    write_csv(annual, out_annual)


def recorded_sample_warnings(condition) -> list[InputWarning] | None:
    """The warnings of the per-fish samples that the condition stage recorded in
    ``work/condition_fit.json`` beside ``condition`` (its condition.csv; the same job writes
    both), so that align need not read the samples again (about 0.25 s of CPU on the demo).
    None without condition.csv or without the record (one written by an earlier version):
    the samples are then read again."""
    paths = [condition] if isinstance(condition, (str, Path)) else list(condition or [])
    if not paths:
        return None
    try:
        record = json.loads((Path(paths[0]).parent / "work" / "condition_fit.json").read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if not isinstance(record, dict) or "sample_warnings" not in record:
        return None
    return [InputWarning(what=w["what"], file=w["file"], series=w["series"]) for w in record["sample_warnings"]]


def with_controls(study: Study, table: pd.DataFrame) -> pd.DataFrame:
    """The study table with the trend control's column (``year``) when a control asks for it."""
    if any(c["id"] == YEAR_CONTROL for c in study.controls):
        return table.assign(**{YEAR_CONTROL: table.index.to_numpy(float)})
    return table


def by_response(ev: pd.DataFrame, study: Study, make, columns: list[str]) -> pd.DataFrame:
    """``make(rows of one response, its controls)`` for every response of ``ev``, stacked: each
    response is tested given its own controls (``controls:``, :meth:`Study.controls_for`)."""
    parts = [make(grp, study.controls_for(rid)) for rid, grp in ev.groupby("response", sort=True)]
    parts = [p for p in parts if len(p)]
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=columns)


def run_evidence(config_path, annual_csv, work_dir, out_screen, out_evidence, threads: int = 1) -> None:
    """:func:`evidence_stage` with BLAS held to one thread: its products are small (a few MB at
    most), where a second BLAS thread costs more CPU than it saves; on the demo, with other jobs
    running, one expanding-window solve of the conditional tests took 16 ms of CPU on one thread
    against 48-55 ms on two. ``threads`` of 2 or more: two of its parts in a forked process."""
    with threadpool_limits(limits=1):
        evidence_stage(config_path, annual_csv, work_dir, out_screen, out_evidence, threads=threads)


def evidence_stage(config_path, annual_csv, work_dir, out_screen, out_evidence, threads: int = 1) -> None:
    """Stage `evidence`: study-wide q-values, flags, grades (strong and moderate capped when the
    strongest rival explains the same signal) and ranks; ``conditional.csv`` and ``models.csv``
    (the multi-driver model sets) and ``windows.csv`` (moving-window correlations of the
    hypotheses the break test of :mod:`lagsieve.evidence.stability` examined) beside
    evidence.csv; with ``screen.state_space`` the supported
    hypotheses refitted with the response's se as known observation error (``ss_*`` columns);
    ``joint.csv`` and ``joint_groups.csv`` (config ``joint``: the groups of a series screened
    together, :mod:`lagsieve.evidence.joint`; headers only without it), whose families enter
    the q-values. ``threads`` of 2 or more: the break test beside the conditional tests, and the
    state-space refits beside the draws and model sets, in a forked process (:mod:`.aside`;
    the same numbers: each part reads what the other does not write)."""
    study = load_study(config_path)
    table = load_table(study, annual_csv)
    dirs = response_dirs(work_dir, study)
    hyps = pd.concat([pd.read_csv(d / "hypotheses.csv") for d in dirs.values()], ignore_index=True)
    scr = pd.concat([pd.read_csv(d / "screen.csv") for d in dirs.values()], ignore_index=True)
    joint, joint_groups, families = joint_table(study, table)  # config `joint`: groups of a series together
    lags = {d["id"]: study.lags_for(d) for d in study.drivers}
    view = season_view(hyps, read_paired(dirs.values()), table, study.drivers, lags, study.responses + study.drivers)
    hyps, table = view.hypotheses, view.table  # monthly drivers of season responses at their lag in seasons
    graded = grade_hypotheses(hyps, table, study.screen, families)
    table, fork, started = with_controls(study, table), threads > 1, []
    try:
        # the break test reads a hypothesis's response, driver and lag, which the rivals' cap keeps
        started.append(aside(lambda: stability_entries(graded, table, study.screen), fork))
        cond = by_response(graded, study, lambda ev, c: conditional_table(ev, table, view.drivers, view.lags,
                                                                          study.screen, c), CONDITIONAL_COLUMNS)
        found, windows = started[-1].result()
        ev = with_stability(cap_by_rivals(graded, cond), found, study.screen)  # flag unstable
        ev = finish_evidence(ev, table, study.screen, view.series)
        ev, models = _refits_and_estimates(study, ev, table, dirs, annual_csv, fork, started)
    except BaseException:
        for job in started:
            job.cancel()
        raise
    ev = resummarize(view.restore(ev, {"lag": "driver"}), study.screen, view.series)  # driver ids, lags in seasons
    cond = view.restore(cond, {"driver_lag": "driver", "competitor_lag": "competitor", "partial_lag": "driver"})
    write_csv(ordered(scr, SCREEN_COLUMNS), out_screen)
    write_csv(ordered(ev, EVIDENCE_COLUMNS), out_evidence)
    write_csv(cond, Path(out_evidence).with_name("conditional.csv"))  # beside evidence.csv
    write_csv(ordered(view.restore(windows, {"lag": "driver"}), WINDOW_COLUMNS), Path(out_evidence).with_name("windows.csv"))
    write_csv(view.restore(models, {"lags": "drivers"}), Path(out_evidence).with_name("models.csv"))
    write_csv(ordered(joint_qvalues(joint, graded, families), JOINT_COLUMNS), Path(out_evidence).with_name("joint.csv"))
    write_csv(ordered(joint_groups, JOINT_GROUP_COLUMNS), Path(out_evidence).with_name("joint_groups.csv"))


def _refits_and_estimates(study: Study, ev, table, dirs, annual_csv, fork: bool, started: list):
    """The state-space refits (columns ``ss_*``, in a forked process when ``fork``) beside the
    draws, vintages (:func:`add_estimates`) and model sets, which do not read them; returns the
    evidence with all their columns and the model sets."""
    annual = pd.read_csv(annual_csv)
    se = se_table(annual, study.transforms())
    started.append(aside(lambda: add_state_space(ev, table, se, study.screen), fork))
    drawn = [dirs[r["id"]] / "nulls.csv" for r in study.responses if r.get("draws")]  # the draws' own nulls
    nulls = (pd.concat([pd.read_csv(f) for f in drawn], ignore_index=True) if drawn
             else pd.DataFrame(columns=["response", "driver", "test", "value"]))
    est = add_estimates(ev, study, table, annual, nulls, se)  # a response's draws and vintages
    models = by_response(est, study, lambda e, c: model_table(e, table, study.screen, c), MODEL_COLUMNS)
    refit = started[-1].result()
    ss_columns = [c for c in refit.columns if c not in ev.columns]  # in the order of a serial run:
    est_columns = [c for c in est.columns if c not in ev.columns]   # the refits' columns, then the draws'
    return pd.concat([est[list(ev.columns)], refit[ss_columns], est[est_columns]], axis=1), models
