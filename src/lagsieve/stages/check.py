"""Stage `check`: a study's config, its inputs and its condition samples checked, every problem
one line (:func:`check_study`); used by `lagsieve check`, by the plan at parse time and by the
`align` stage."""
from __future__ import annotations

from pathlib import Path

import pandas as pd

from lagsieve.condition.lengthweight import fit_reference
from lagsieve.condition.samples import assign_groups, read_samples
from lagsieve.condition.series import input_frame
from lagsieve.condition.settings import ConditionSettings, check_condition, series_ids
from lagsieve.errors import InputErrors, InputProblem, InputWarning, item_key, raise_any, suggest
from lagsieve.io.config import YEAR_CONTROL, Study, load_study
from lagsieve.io.estimates import estimate_problems
from lagsieve.io.readers import read_inputs
from lagsieve.io.studyfiles import pattern_problems, sample_paths
from lagsieve.io.tables import UnusedSeries, empty_frame
from lagsieve.prep.annual import to_annual
from lagsieve.prep.budget import budget_problems
from lagsieve.prep.checks import (backtest_warnings, check_positive, series_warnings, state_space_warnings,
                                  unscreenable_responses)
from lagsieve.prep.seasons import study_season_problems
from lagsieve.stages.common import condition_table


def check_study(config_path: str | Path, condition: str | Path | list | None = None,
                sample_warnings: list[InputWarning] | None = None):
    """Load the config and every input; return (study, annual, notes, warnings).

    ``condition``: the study's condition.csv (stage `condition`); without it the condition
    section and its samples are checked, and the series it makes count as present, but their
    values (not yet computed) are not. ``sample_warnings``: the samples' warnings as the
    condition stage recorded them (stage `align`: the samples are not read again); None: the
    samples are read here. Raises :class:`InputErrors` with one problem per line
    for anything the user must fix, the config's, the inputs' and the samples' together.
    """
    study = load_study(config_path)
    raise_any(pattern_problems([str(p) for p in [study.path, *study.input_paths(), *sample_paths(study)]]))
    raise_any(budget_problems(study))  # a plan over the budget: refused before any input is read
    cond_ids, warnings, problems = (check_samples(study) if sample_warnings is None
                                    else recorded_samples(study, sample_warnings))
    series = set(study.response_ids) | set(study.driver_ids) | {c["id"] for c in study.control_series}
    wanted = series - cond_ids
    try:
        long, more = read_inputs(study.inputs, study.base_dir, wanted)  # other series: left out, noted
    except InputErrors as exc:
        problems, long, more = problems + list(exc.problems), empty_frame(), []
    raise_any(problems)
    warnings = list(more) + warnings
    unused = {n for w in warnings if isinstance(w, UnusedSeries) for n in w.names}
    present = set(long["series"].unique())
    raise_any(_absent_series(study, present | cond_ids, unused) + _condition_clashes(study, cond_ids, present | unused)
              + study_season_problems(study, long, present | cond_ids))
    table = condition_table(condition)
    if table is not None:
        long = pd.concat([long, input_frame(table, cond_ids & series)],
                         ignore_index=True)
    annual, notes = to_annual(long, study.series_options())
    _check_values(study, annual, long, cond_ids if table is None else set())
    raise_any(estimate_problems(study.responses, study.base_dir, annual))  # draws and vintages tables
    units = {s["id"]: s["unit"] for s in study.responses + study.drivers if s.get("unit")}
    warnings = warnings + list(series_warnings(annual, study.screen["min_overlap"], units))
    warnings += backtest_warnings(study, annual)
    warnings += state_space_warnings(study, annual, cond_ids if table is None else set())
    return study, annual, notes, warnings


def _check_values(study: Study, annual: pd.DataFrame, long: pd.DataFrame, unknown: set[str]) -> None:
    """Value checks of the annual table; those that need a series of ``unknown`` (condition
    series not computed yet) are left to the stage that has them."""
    problems: list[InputProblem] = []
    for s in study.responses + study.drivers:
        problems += check_positive(annual, s["id"], s.get("transform", "none"), long)
    raise_any(problems)
    if unknown:
        needs = {r: {r} | {d["id"] for d in study.drivers_for(r)} for r in study.response_ids}
        keep = lambda p: not (needs.get(p.series, set()) & unknown)  # noqa: E731
    else:
        keep = lambda p: True  # noqa: E731
    raise_any([p for p in unscreenable_responses(study, annual) if keep(p)])
    if study.screen.get("weights") == "inverse-variance":
        raise_any([p for p in _responses_without_se(study, annual) if keep(p)])


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


def recorded_samples(study: Study, warnings: list[InputWarning]) -> tuple[set[str], list, list[InputProblem]]:
    """:func:`check_samples` from the condition stage's record: the section checked again (cheap),
    the samples' ``warnings`` as that stage found them."""
    if study.condition is None:
        return set(), [], []
    try:
        settings = condition_settings(study)
    except InputErrors as exc:
        return set(), [], list(exc.problems)
    return set(series_ids(settings.age_groups, settings.seasons)), list(warnings), []


def _condition_clashes(study: Study, cond_ids: set[str], in_inputs: set[str]) -> list[InputProblem]:
    return [InputProblem(what="an input file holds a series with the id of a condition series",
                         fix="rename that series in its file or the age group / season that makes the id",
                         file=str(study.path), key="condition", series=sid)
            for sid in sorted(cond_ids & in_inputs)]


def _absent_series(study: Study, present: set[str], others: set[str] = frozenset()) -> list[InputProblem]:
    """A problem for every configured series that no input holds, naming the nearest id of the
    inputs (``others``: the series the study does not use)."""
    problems = []
    found = present | others
    for role, items in (("responses", study.responses), ("drivers", study.drivers), ("controls", study.controls)):
        for i, s in enumerate(items):
            if s["id"] not in present and (role != "controls" or s["id"] != YEAR_CONTROL) and not s.get("season_of"):
                problems.append(InputProblem(
                    what="no input file holds this series",
                    fix=f"check the id or add its file to inputs ({suggest(s['id'], found, 'series')})",
                    file=str(study.path), key=item_key(role, i, s["id"], "id"), series=s["id"]))
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
                file=str(study.path), key=item_key("responses", i, r["id"]), series=r["id"]))
    return problems
