"""The pipeline's stages as plain functions: each reads files, calls the modules, and writes
its outputs atomically (temporary name, then rename). The Snakemake scripts are one call each.
"""
from __future__ import annotations

import importlib.metadata as md
import os
import sys
import time
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import yaml
from threadpoolctl import threadpool_limits

from lagsieve.condition.lengthweight import fit_reference
from lagsieve.condition.samples import assign_groups, read_samples
from lagsieve.condition.series import input_frame, read_condition
from lagsieve.condition.settings import ConditionSettings, check_condition, series_ids
from lagsieve.errors import InputErrors, InputProblem, report_problems, suggest
from lagsieve.evidence.grading import finish_evidence, grade_hypotheses
from lagsieve.evidence.models import model_table
from lagsieve.evidence.rivals import cap_by_rivals, conditional_table
from lagsieve.io.config import Study, load_study
from lagsieve.io.names import slug
from lagsieve.io.files import sha256_file, write_csv, write_json, write_text
from lagsieve.io.provenance import package_versions, tool_version
from lagsieve.io.readers import read_inputs
from lagsieve.io.tables import UnusedSeries, empty_frame
from lagsieve.ledger.section import ledger_section
from lagsieve.ledger.update import input_hashes
from lagsieve.ledger.store import resolve_ledger_path
from lagsieve.prep.align import annual_table, se_table
from lagsieve.prep.annual import to_annual
from lagsieve.prep.budget import budget_problems
from lagsieve.prep.checks import backtest_warnings, check_positive, series_warnings, unscreenable_responses
from lagsieve.screen.response import screen_response

SCREEN_COLUMNS = ["response", "driver", "lag", "model", "n", "first_year", "last_year", "r", "p_naive",
                  "n_eff", "p_adjusted", "r_detrended", "p_detrended", "r_diff", "p_differenced",
                  "trend_p_response", "trend_p_driver", "driver_trend_r2", "slope", "slope_se",
                  "p_surrogate_lag", "edf", "deviance_explained", "p_smooth", "shape", "status"]
EVIDENCE_COLUMNS = ["response", "driver", "category", "expected_sign", "lag", "model", "n", "first_year",
                    "last_year", "r", "p_naive", "n_eff", "p_adjusted", "r_detrended", "p_detrended", "r_diff",
                    "p_differenced", "trend_p_response", "trend_p_driver", "driver_trend_r2",
                    "slope", "slope_se", "slope_ci_low", "slope_ci_high", "r_ci_low", "r_ci_high",
                    "effect", "effect_ci_low", "effect_ci_high", "effect_basis", "effect_unit",
                    "effect_largest_allowed",
                    "p_surrogate", "p_surrogate_lag", "q_value", "oos_skill",
                    "oos_skill_climatology", "oos_skill_persistence", "oos_skill_trend", "oos_skill_trend_ar1",
                    "oos_n", "oos_p", "oos_test",
                    "oos_p_surrogate", "oos_hardest", "oos_lag", "oos_lag_share", "retest_skill", "retest_years",
                    "retest_model", "gam_gain", "edf", "shape", "grade", "flags", "rank", "collinear_with",
                    "rival", "rival_added_skill", "summary", "status"]


# ---------------------------------------------------------------- job logs
@contextmanager
def logged(smk):
    """Send a Snakemake job's warnings and errors to its ``log:`` file (when it has one)."""
    import contextlib
    import logging
    import traceback
    import warnings

    logs = list(getattr(smk, "log", []) or [])
    if not logs:
        yield
        return
    Path(logs[0]).parent.mkdir(parents=True, exist_ok=True)
    with open(logs[0], "w", encoding="utf-8") as fh, contextlib.redirect_stderr(fh):
        logging.basicConfig(stream=fh, level=logging.INFO, force=True)
        warnings.simplefilter("default")
        try:
            yield
        except BaseException:
            traceback.print_exc(file=fh)
            fh.flush()
            sys.__stderr__.write(f"lagsieve: job failed; see {logs[0]}\n")
            raise


def ordered(df: pd.DataFrame, columns: list[str]) -> pd.DataFrame:
    """Contract columns first (created empty when their stage has not produced them)."""
    out = df.copy()
    for c in columns:
        if c not in out.columns:
            out[c] = np.nan
    return out[columns + [c for c in out.columns if c not in columns]]


# ---------------------------------------------------------------- plan (what the Snakefile needs at parse time)
@dataclass(frozen=True)
class PlannedStudy:
    study: Study
    config_path: str
    input_paths: list[str]
    response_inputs: dict[str, list[str]]  # response slug -> files holding it or its drivers
    sample_paths: list[str] = ()           # the condition stage's per-fish files
    condition_responses: frozenset = frozenset()  # response slugs that need condition.csv

    @property
    def response_slugs(self) -> list[str]:
        return [slug(r) for r in self.study.response_ids]

    @property
    def condition(self) -> dict | None:
        """The study's ``condition:`` section (defaults filled), None without one."""
        return self.study.condition


def study_configs(config: dict, default: str = "config/config.yaml") -> list[str]:
    """Config paths from Snakemake's config: ``studies`` (a list), or ``study_config``: one
    path, taken whole when it names a file (a folder ``hake, 2024/`` keeps its comma), else
    several separated by commas; without either, the default demo config."""
    if config.get("studies"):
        items = config["studies"]
        return [str(p) for p in (items if isinstance(items, list) else str(items).split(","))]
    value = str(config.get("study_config", default))
    if Path(value).is_file():
        return [value]
    return [p for p in value.split(",") if p]


def write_run_config(study_config: str | Path, out: str | Path, path: str | Path) -> Path:
    """Write the workflow's config for one study to ``path`` (a YAML file that `lagsieve run`
    hands to Snakemake with ``--configfile``) and return ``path``.

    Values given with ``--config key=value`` are cut at commas (``study_config``), stripped of
    quotes and read as YAML (``a: b`` becomes a mapping, `` #x`` a comment); in a YAML file the
    paths come back exactly, whatever the folders are called (commas, spaces, colons, unicode).
    """
    text = yaml.safe_dump({"studies": [str(study_config)], "out": str(out)}, allow_unicode=True,
                          default_style='"', width=float("inf"))
    write_text(text, path)
    return Path(path)


FULL_CHECK_LIMIT = 50


def _response_inputs(st: Study, annual, inputs: list[str]) -> dict[str, list[str]]:
    """For every response, the input files that hold it or one of its drivers, so that a
    screen job depends on exactly those files. Without the checked table (large batches),
    every response depends on every input."""
    if annual is None or "file" not in annual:
        return {slug(r): list(inputs) for r in st.response_ids}
    shown = [spec["path"] for spec in st.inputs]
    by_series: dict[str, set[str]] = {}
    for sid, f in zip(annual["series"], annual["file"]):
        by_series.setdefault(sid, set()).add(str(f))
    out = {}
    for r in st.response_ids:
        wanted = {r} | {d["id"] for d in st.drivers_for(r)}
        files = set().union(*(by_series.get(w, set()) for w in wanted))
        out[slug(r)] = [full for full, written in zip(inputs, shown) if written in files] or list(inputs)
    return out


def plan_studies(config: dict, check: bool = True) -> dict[str, PlannedStudy]:
    """Load every study config; a user's mistake prints one line per problem and exits 2.

    Up to ``FULL_CHECK_LIMIT`` studies (or with ``check_inputs=true`` in Snakemake's
    config) every input file is checked too, before any job starts, so a bad input never
    leaves a partial result; larger batches check the configs only and leave the inputs to
    each study's jobs (``lagsieve check`` checks a study on its own).
    """
    planned: dict[str, PlannedStudy] = {}
    paths = study_configs(config)
    full = check and str(config.get("check_inputs", len(paths) <= FULL_CHECK_LIMIT)).lower() in ("true", "1", "yes")
    try:
        for path in paths:
            annual = None
            if full:
                st, annual, _, _ = check_study(path)
            else:
                st = load_study(path)
            if st.id in planned:
                print(f"{path}: key 'study': id '{st.id}' is used by two configs; give each study its own id",
                      file=sys.stderr)
                sys.exit(2)
            inputs = [str(p) for p in st.input_paths()]
            samples = [str(p) for p in sample_paths(st)]
            _raise_any(pattern_problems([str(st.path), *inputs, *samples, str(config.get("out", ""))]))
            planned[st.id] = PlannedStudy(st, str(st.path), inputs, _response_inputs(st, annual, inputs),
                                          samples, _condition_responses(st))
    except InputErrors as exc:
        sys.exit(report_problems(exc))
    return planned


def pattern_problems(paths: list[str]) -> list[InputProblem]:
    """Paths the workflow engine would misread: it takes '{...}' in any file name it tracks for
    a placeholder and has no escape for a literal brace."""
    bad = [p for p in dict.fromkeys(paths) if "{" in p or "}" in p]
    if not bad:
        return []
    more = f" (so do {len(bad) - 1} more paths of the study)" if len(bad) > 1 else ""
    return [InputProblem(what=f"the path holds '{{' or '}}'{more}, which the workflow engine reads as a placeholder",
                         fix="rename the folder or file without braces (or move the study)", file=bad[0])]


# ---------------------------------------------------------------- check and align
def check_study(config_path: str | Path, condition: str | Path | list | None = None):
    """Load the config and every input; return (study, annual, notes, warnings).

    ``condition``: the study's condition.csv (stage `condition`); without it the condition
    section and its samples are checked, and the series it makes count as present, but their
    values (not yet computed) are not. Raises :class:`InputErrors` with one problem per line
    for anything the user must fix, the config's, the inputs' and the samples' together.
    """
    study = load_study(config_path)
    _raise_any(pattern_problems([str(p) for p in [study.path, *study.input_paths(), *sample_paths(study)]]))
    _raise_any(budget_problems(study))  # a plan over the budget: refused before any input is read
    cond_ids, warnings, problems = check_samples(study)
    wanted = (set(study.response_ids) | set(study.driver_ids)) - cond_ids
    try:
        long, more = read_inputs(study.inputs, study.base_dir, wanted)  # other series: left out, noted
    except InputErrors as exc:
        problems, long, more = problems + list(exc.problems), empty_frame(), []
    _raise_any(problems)
    warnings = list(more) + warnings
    unused = {n for w in warnings if isinstance(w, UnusedSeries) for n in w.names}
    present = set(long["series"].unique())
    _raise_any(_absent_series(study, present | cond_ids, unused) + _condition_clashes(study, cond_ids, present | unused))
    table = _condition_table(condition)
    if table is not None:
        long = pd.concat([long, input_frame(table, cond_ids & set(study.response_ids + study.driver_ids))],
                         ignore_index=True)
    annual, notes = to_annual(long, study.series_options())
    _check_values(study, annual, long, cond_ids if table is None else set())
    units = {s["id"]: s["unit"] for s in study.responses + study.drivers if s.get("unit")}
    warnings = warnings + list(series_warnings(annual, study.screen["min_overlap"], units))
    warnings += backtest_warnings(study, annual)
    return study, annual, notes, warnings


def _check_values(study: Study, annual: pd.DataFrame, long: pd.DataFrame, unknown: set[str]) -> None:
    """Value checks of the annual table; those that need a series of ``unknown`` (condition
    series not computed yet) are left to the stage that has them."""
    problems: list[InputProblem] = []
    for s in study.responses + study.drivers:
        problems += check_positive(annual, s["id"], s.get("transform", "none"), long)
    _raise_any(problems)
    if unknown:
        needs = {r: {r} | {d["id"] for d in study.drivers_for(r)} for r in study.response_ids}
        keep = lambda p: not (needs.get(p.series, set()) & unknown)  # noqa: E731
    else:
        keep = lambda p: True  # noqa: E731
    _raise_any([p for p in unscreenable_responses(study, annual) if keep(p)])
    if study.screen.get("weights") == "inverse-variance":
        _raise_any([p for p in _responses_without_se(study, annual) if keep(p)])


# ---------------------------------------------------------------- condition
def sample_paths(study: Study) -> list[Path]:
    """The condition stage's per-fish files, resolved against the config's folder."""
    if study.condition is None:
        return []
    specs = study.condition.get("samples") or []
    specs = [specs] if isinstance(specs, (str, dict)) else specs
    return [study.base_dir / (sp["path"] if isinstance(sp, dict) else str(sp)) for sp in specs
            if isinstance(sp, (str, dict)) and (not isinstance(sp, dict) or isinstance(sp.get("path"), str))]


def condition_settings(study: Study) -> ConditionSettings | None:
    """The checked ``condition:`` section, None without one (raises :class:`InputErrors`)."""
    return None if study.condition is None else check_condition(study.condition, str(study.path))


def check_samples(study: Study) -> tuple[set[str], list, list[InputProblem]]:
    """Check the condition section, read its samples and fit the reference (cheap: no index, no
    bootstrap). Returns (the series ids it makes, warnings, problems)."""
    if study.condition is None:
        return set(), [], []
    try:
        settings = condition_settings(study)
        fish, warnings = read_samples(settings.samples, study.base_dir)
        fish, more = assign_groups(fish, settings)
        _, fit = fit_reference(fish, settings.reference_years, str(study.path))
    except InputErrors as exc:
        return set(), [], list(exc.problems)
    return set(series_ids(settings.age_groups, settings.seasons)), warnings + more + fit, []


def _condition_clashes(study: Study, cond_ids: set[str], in_inputs: set[str]) -> list[InputProblem]:
    return [InputProblem(what="an input file holds a series with the id of a condition series",
                         fix="rename that series in its file or the age group / season that makes the id",
                         file=str(study.path), key="condition", series=sid)
            for sid in sorted(cond_ids & in_inputs)]


def _condition_responses(study: Study) -> frozenset:
    """Slugs of the responses whose screen reads condition.csv (it or a driver is a condition series)."""
    if study.condition is None:
        return frozenset()
    ids = set(series_ids(study.condition.get("age_groups") or {}, study.condition.get("seasons") or {}))
    return frozenset(slug(r) for r in study.response_ids
                     if ({r} | {d["id"] for d in study.drivers_for(r)}) & ids)


def _condition_table(condition) -> pd.DataFrame | None:
    """condition.csv as a frame; ``condition`` is its path, or a list of none or one path (as the
    workflow gives an optional input)."""
    if isinstance(condition, (list, tuple)):  # a Snakemake input list is a list
        condition = next(iter(condition), None)
    return None if condition is None else pd.read_csv(condition, keep_default_na=False, na_values=[""])


def run_condition(config_path, out_table, out_sensitivity, out_fish, out_fit) -> None:
    """Stage `condition`: the condition series (condition.csv), the threshold sensitivity, and for
    the report the fish with their log Kn and the reference fit with the season effects."""
    study = load_study(config_path)
    settings = condition_settings(study)
    res = read_condition(settings, study.base_dir, study.screen["seed"], str(study.path), time.perf_counter)
    write_csv(res.table, out_table)
    write_csv(res.sensitivity, out_sensitivity)
    fish = res.fish[["year", "month", "group", "season", "length", "weight", "log_kn"]].rename(columns={"group": "age_group"})
    write_csv(fish, out_fish)
    write_json({"reference": dict(vars(res.reference)), "season_effects": res.season_effects.to_dict("records"),
                "settings": {"threshold": settings.threshold, "thresholds": list(settings.thresholds),
                             "bootstrap": settings.bootstrap, "age_groups": {k: list(v) for k, v in settings.age_groups.items()},
                             "seasons": {k: list(v) for k, v in settings.seasons.items()}},
                "warnings": [w.line() for w in res.warnings], "timings": res.timings}, out_fit)


def _raise_any(problems: list[InputProblem]) -> None:
    if problems:
        raise InputErrors(problems)


def _absent_series(study: Study, present: set[str], others: set[str] = frozenset()) -> list[InputProblem]:
    """A problem for every configured series that no input holds, naming the nearest id of the
    inputs (``others``: the series the study does not use)."""
    problems = []
    found = present | others
    for role, items in (("responses", study.responses), ("drivers", study.drivers)):
        for i, s in enumerate(items):
            if s["id"] not in present:
                problems.append(InputProblem(
                    what="no input file holds this series",
                    fix=f"check the id or add its file to inputs ({suggest(s['id'], found, 'series')})",
                    file=str(study.path), key=f"{role}.{i}.id", series=s["id"]))
    return problems


def _responses_without_se(study: Study, annual: pd.DataFrame) -> list[InputProblem]:
    """Inverse-variance weights need a positive se in every year of every response."""
    problems = []
    for i, r in enumerate(study.responses):
        rows = annual[annual["series"] == r["id"]]
        bad = rows[~(rows["se"] > 0)] if "se" in rows else rows
        if len(bad):
            problems.append(InputProblem(
                what=f"screen.weights is inverse-variance but {len(bad)} year(s) have no positive se "
                     f"(first: {int(bad['year'].iloc[0])})",
                fix="add an se or cv column for this response, or set screen.weights: none",
                file=str(study.path), key=f"responses.{i}", series=r["id"]))
    return problems


def run_align(config_path: str | Path, out_annual: str | Path, out_notes: str | Path, condition=None) -> None:
    """Stage `align`: write the tidy annual table and the list of dropped or filled years
    (``condition``: the study's condition.csv, or a list of none or one path)."""
    study, annual, notes, warnings = check_study(config_path, condition)
    role = {i: "response" for i in study.response_ids} | {i: "driver" for i in study.driver_ids}
    annual = annual.assign(role=annual["series"].map(role)).sort_values(["series", "year"])
    notes_df = pd.DataFrame(notes, columns=["series", "year", "action", "reason"])
    warn_df = pd.DataFrame({"series": [w.series for w in warnings], "year": np.nan,
                            "action": "warning", "reason": [w.what for w in warnings]})
    write_csv(pd.concat([notes_df, warn_df], ignore_index=True), out_notes)
    write_csv(annual, out_annual)


def load_table(study: Study, annual_csv: str | Path) -> pd.DataFrame:
    """The wide, transformed annual table of a study from the `align` output."""
    annual = pd.read_csv(annual_csv)
    transforms = study.transforms()
    return annual_table(annual, transforms)


# ---------------------------------------------------------------- screen
def response_annual(study: Study, response_id: str, files: list[str] | None = None,
                    condition=None) -> pd.DataFrame:
    """The tidy annual data of one response and its drivers, read from ``files`` only (the
    inputs that hold them; default: every input) and from the study's condition.csv
    (``condition``, when one of them is a condition series), exactly as `align` reads them."""
    specs = study.inputs
    if files is not None:
        keep = {str(Path(f).resolve()) for f in files}
        specs = [sp for sp, p in zip(study.inputs, study.input_paths()) if str(p.resolve()) in keep]
    wanted = {response_id} | {d["id"] for d in study.drivers_for(response_id)}
    table = _condition_table(condition)
    from_condition = set(table["series"]) & wanted if table is not None else set()
    long, _ = read_inputs(specs, study.base_dir, wanted - from_condition)
    if table is not None:
        long = pd.concat([long, input_frame(table, from_condition)], ignore_index=True)
    options = {k: v for k, v in study.series_options().items() if k in wanted}
    annual, _ = to_annual(long, options)
    return annual


def run_screen(config_path, annual_csv, response_id: str, out_dir, threads: int = 1,
               files: list[str] | None = None, condition=None) -> None:
    """Stage `screen` for one response: screen rows, hypothesis rows, forecasts, nulls.

    With ``annual_csv`` the aligned study table is used; otherwise (the workflow) the
    response's own input ``files`` are read, so that its job depends on those files only, and
    the study's condition.csv (``condition``) when a series of the response comes from it.
    """
    study = load_study(config_path)
    by_slug = {slug(r): r for r in study.response_ids}
    response_id = by_slug.get(response_id, response_id)
    annual = (pd.read_csv(annual_csv) if annual_csv is not None
              else response_annual(study, response_id, files, condition))
    transforms = study.transforms()
    table = annual_table(annual, transforms)
    se = se_table(annual, transforms) if study.screen.get("weights") == "inverse-variance" else None
    workers = max(1, int(threads))
    with threadpool_limits(limits=1):  # many small systems: processes, not BLAS threads, pay off
        res = screen_response(table, study, response_id, se, workers=workers)
    out = Path(out_dir)
    write_csv(res.forecasts, out / "forecasts.csv")
    write_csv(res.nulls, out / "nulls.csv")
    write_csv(res.hypotheses, out / "hypotheses.csv")
    write_csv(ordered(res.screen, SCREEN_COLUMNS), out / "screen.csv")


def response_dirs(work: str | Path, study: Study) -> dict[str, Path]:
    return {rid: Path(work) / "responses" / slug(rid) for rid in study.response_ids}


# ---------------------------------------------------------------- evidence
def run_evidence(config_path, annual_csv, work_dir, out_screen, out_evidence) -> None:
    """Stage `evidence`: study-wide q-values, flags, grades (strong and moderate capped when the
    strongest rival explains the same signal) and ranks; ``conditional.csv`` and ``models.csv``
    (the multi-driver model sets) beside evidence.csv."""
    study = load_study(config_path)
    table = load_table(study, annual_csv)
    dirs = response_dirs(work_dir, study)
    hyps = pd.concat([pd.read_csv(d / "hypotheses.csv") for d in dirs.values()], ignore_index=True)
    scr = pd.concat([pd.read_csv(d / "screen.csv") for d in dirs.values()], ignore_index=True)
    graded = grade_hypotheses(hyps, table, study.screen)
    lags = {d["id"]: study.lags_for(d) for d in study.drivers}
    cond = conditional_table(graded, table, study.drivers, lags, study.screen)
    ev = finish_evidence(cap_by_rivals(graded, cond), table, study.screen, study.responses + study.drivers)
    write_csv(ordered(scr, SCREEN_COLUMNS), out_screen)
    write_csv(ordered(ev, EVIDENCE_COLUMNS), out_evidence)
    write_csv(cond, Path(out_evidence).with_name("conditional.csv"))  # beside evidence.csv
    write_csv(model_table(ev, table, study.screen), Path(out_evidence).with_name("models.csv"))


# ---------------------------------------------------------------- report
def _iso(t: float) -> str:
    return time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(t))


def docx_wanted(study: Study) -> bool:
    """``report.docx`` of the config (default true, from the schema)."""
    return bool(study.report.get("docx", True))


def pdf_wanted(study: Study) -> bool:
    """``report.pdf`` of the config; when the key is absent, a PDF is made."""
    value = (study.raw.get("report") or {}).get("pdf")
    return True if value is None else bool(value)


def _response_tables(dirs: dict, name: str) -> pd.DataFrame:
    """One of the screen's per-response tables (forecasts.csv, nulls.csv), all responses stacked."""
    parts = [pd.read_csv(d / name) for d in dirs.values() if (d / name).is_file() and (d / name).stat().st_size > 1]
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(
        columns=["response", "driver", "year", "test", "value", "observed"])


def _report_provenance(study: Study, annual_csv, dirs: dict, t0: float) -> dict:
    """What provenance.json records before the report is drawn: config, inputs, versions, times."""
    inputs = input_hashes(study)
    screened = [(d / "screen.csv").stat().st_mtime for d in dirs.values() if (d / "screen.csv").is_file()]
    prov = {
        "study": study.id,
        "config_path": str(study.path),
        "config_sha256": sha256_file(study.path),
        "config": study.raw,
        "inputs_sha256": inputs,
        "seed": study.screen["seed"],
        "tool_version": tool_version(),
        "versions": package_versions(),
        "inputs_prepared": _iso(Path(annual_csv).stat().st_mtime),
        "screened": _iso(max(screened)) if screened else None,
        "started": _iso(t0),
    }
    for name in ("pillow", "weasyprint"):  # the report's own libraries
        try:
            prov["versions"].setdefault(name, md.version(name))
        except md.PackageNotFoundError:
            prov["versions"].setdefault(name, "not installed")
    return prov


def run_report(config_path, annual_csv, notes_csv, work_dir, screen_csv, evidence_csv,
               out_report, out_provenance, figures_dir, started: float | None = None,
               out_pdf=None, threads: int | None = None, condition=None) -> None:
    """Stage `report`: figures and tables under ``figures_dir``, the self-contained HTML
    report, its PDF copy (``out_pdf``, default ``report.pdf`` beside the report, unless the
    config sets ``report.pdf: false``), the editable annex ``report.docx`` beside it (unless
    ``report.docx: false``) and provenance.json.

    ``threads``: worker processes for drawing the figures (default: up to 4 CPUs).
    ``condition``: the condition stage's outputs (paths), shown in a section of their own.
    """
    # Imported here, not at the top: the report modules (matplotlib, the figure code) add 1.5-2 s
    # to the import of this module (python -X importtime, 2-core machine), which every other stage
    # and the Snakefile (plan_studies) would otherwise pay.
    from lagsieve.report.figures import FigureRenderer
    from lagsieve.report.html import build_report  # matplotlib: see above
    from lagsieve.report.pdf import write_report_pdf  # matplotlib: see above
    from lagsieve.report.condition import read_outputs  # matplotlib (figures): see above
    from lagsieve.report.rivals import read_outputs as read_rivals  # matplotlib (figures): see above

    t0 = time.time() if started is None else started
    study = load_study(config_path)
    table = load_table(study, annual_csv)
    annual = pd.read_csv(annual_csv)
    dirs = response_dirs(work_dir, study)
    forecasts, nulls = _response_tables(dirs, "forecasts.csv"), _response_tables(dirs, "nulls.csv")
    evidence = pd.read_csv(evidence_csv, keep_default_na=True)
    screen = pd.read_csv(screen_csv)
    notes = pd.read_csv(notes_csv)
    prov = _report_provenance(study, annual_csv, dirs, t0)
    workers = threads if threads else min(4, os.cpu_count() or 1)
    pdf_path = Path(out_pdf) if out_pdf else Path(out_report).with_name("report.pdf")
    docx_path = Path(out_report).with_name("report.docx")
    if docx_path.is_file():  # written again below when wanted; a copy left by an earlier run would be stale
        docx_path.unlink()
    with FigureRenderer(figures_dir, workers) as renderer:
        since = ledger_section(resolve_ledger_path(study, Path(out_report).parent), study, evidence)
        html, figs = build_report(study, table, screen, evidence, forecasts, nulls, notes, prov, figures_dir,
                                  annual=annual, renderer=renderer, since=since,
                                  docx_path=docx_path if study.report["docx"] else None,
                                  condition=read_outputs(condition), rivals=read_rivals(evidence_csv))
        write_text(html, out_report)
        renderer.write_svgs()  # the SVG copies are written by the workers while the PDF is made
        if pdf_wanted(study):
            prov["pdf"] = write_report_pdf(html, pdf_path, study, evidence, figs)
        else:
            prov["pdf"] = None
            if out_pdf is None and pdf_path.is_file():  # a copy left by an earlier run would be stale
                pdf_path.unlink()
    prov["report_finished"] = _iso(time.time())
    write_json(prov, out_provenance)
