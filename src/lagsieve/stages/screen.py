"""Stage `screen`: one response against all its drivers (:func:`run_screen`)."""
from __future__ import annotations

from pathlib import Path

import pandas as pd
from threadpoolctl import threadpool_limits

from lagsieve.io.config import Study, load_study
from lagsieve.io.files import write_csv
from lagsieve.io.names import slug
from lagsieve.io.readers import read_inputs
from lagsieve.prep.align import annual_table, se_table
from lagsieve.prep.annual import to_annual
from lagsieve.screen.response import screen_response
from lagsieve.screen.seasonal import PAIRED_COLUMNS, paired_table, season_screen
from lagsieve.stages.common import SCREEN_COLUMNS, condition_table, ordered


def wanted_series(study: Study, response_id: str) -> set[str]:
    """A response, its drivers and, for a season response, the response it comes from and its
    other seasons (the within-year series of the harmonic baselines)."""
    wanted = {response_id} | {d["id"] for d in study.drivers_for(response_id)}
    base = study.season_of(response_id)
    if base:
        wanted |= {base} | {r["id"] for r in study.responses if r.get("season_of") == base}
    return wanted


def response_long(study: Study, response_id: str, files: list[str] | None = None,
                  condition=None) -> tuple[pd.DataFrame, set[str]]:
    """The tidy rows (months kept) of one response and its drivers and the series wanted."""
    specs = study.inputs
    if files is not None:
        keep = {str(Path(f).resolve()) for f in files}
        specs = [sp for sp, p in zip(study.inputs, study.input_paths()) if str(p.resolve()) in keep]
    wanted = wanted_series(study, response_id)
    table = condition_table(condition)
    from_condition = set(table["series"]) & wanted if table is not None else set()
    long, _ = read_inputs(specs, study.base_dir, wanted - from_condition)
    if table is not None:
        # imported here: only a response with a condition series needs the condition package
        from lagsieve.condition.series import input_frame

        long = pd.concat([long, input_frame(table, from_condition)], ignore_index=True)
    return long, wanted


def response_annual(study: Study, response_id: str, files: list[str] | None = None,
                    condition=None) -> pd.DataFrame:
    """The tidy annual data of one response and its drivers, read from ``files`` only (the
    inputs that hold them; default: every input) and from the study's condition.csv
    (``condition``, when one of them is a condition series), exactly as `align` reads them."""
    long, wanted = response_long(study, response_id, files, condition)
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
    season = None
    if study.season_of(response_id):  # a season response: monthly drivers lagged in seasons
        season = season_screen(study, response_id, response_long(study, response_id, files, condition)[0], table)
    workers = max(1, int(threads))
    with threadpool_limits(limits=1):  # many small systems: processes, not BLAS threads, pay off
        res = screen_response(table, study, response_id, se, workers=workers, season=season)
    out = Path(out_dir)
    write_csv(res.forecasts, out / "forecasts.csv")
    write_csv(res.nulls, out / "nulls.csv")
    write_csv(res.hypotheses, out / "hypotheses.csv")
    write_csv(ordered(res.screen, SCREEN_COLUMNS), out / "screen.csv")
    # the monthly drivers at their lags in seasons, for the evidence stage (a declared output of
    # every screen, so that Snakemake tracks it: empty, with its header, for an annual response)
    paired = (paired_table(season, response_id, table.index.to_numpy()) if season is not None
              else pd.DataFrame(columns=PAIRED_COLUMNS))
    write_csv(paired, out / "paired.csv")
