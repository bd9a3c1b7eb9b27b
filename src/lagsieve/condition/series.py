"""The condition series as one long table, from per-fish samples.

``condition_series`` runs the whole computation on checked fish; ``read_condition`` reads the
sample files first. The long table (:data:`OUTPUT_COLUMNS`) has one row per series x year:

* ``kn:<age_group>-<season>``: the geometric mean relative condition exp(mean log Kn) of the
  cell, its se by the delta method (value x se of the mean log Kn);
* ``kn:<age_group>``: the season-adjusted annual index, exp(year effect + mean season effect);
* ``below:<age_group>-<season>`` and ``below:<age_group>``: the share of fish with Kn below
  the threshold, per cell and season-adjusted, se from the haul-level bootstrap.

``n_fish`` and ``n_sets`` count fish and hauls (summed over the seasons of a year for the
annual rows); ``design_effect`` is Kish's 1 + (m - 1) rho of the cell (for annual rows the
fish-weighted mean over the year's cells where it is defined); ``rho`` is the intraclass correlation of the cell
(log Kn for ``kn``, the below-threshold indicator for ``below``); ``n_effective`` is
n_fish / design_effect.
"""
from __future__ import annotations

import zlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from lagsieve.condition.index import build_design, cell_icc, cell_means, season_fits
from lagsieve.condition.lengthweight import LengthWeight, fit_reference, log_kn
from lagsieve.condition.poor import bootstrap_shares
from lagsieve.condition.samples import assign_groups, read_samples
from lagsieve.condition.settings import ConditionSettings
from lagsieve.errors import InputWarning
from lagsieve.io.tables import FRAME_COLUMNS

__all__ = ["ConditionResult", "OUTPUT_COLUMNS", "SENSITIVITY_COLUMNS", "condition_rng",
           "condition_series", "input_frame", "read_condition"]

OUTPUT_COLUMNS = ["series", "year", "value", "se", "n_fish", "n_sets", "design_effect", "rho",
                  "n_effective", "kind", "age_group", "season"]
SENSITIVITY_COLUMNS = ["series", "threshold", "year", "value", "se"]


@dataclass(frozen=True)
class ConditionResult:
    """Everything the condition stage makes (the report draws from it)."""

    table: pd.DataFrame          # OUTPUT_COLUMNS
    sensitivity: pd.DataFrame    # SENSITIVITY_COLUMNS
    reference: LengthWeight
    fish: pd.DataFrame           # the fish used, with group, season, log_kn
    season_effects: pd.DataFrame  # age_group, season, effect (log Kn, mean season = 0)
    warnings: list[InputWarning]
    timings: dict[str, float]
    #: the warnings of the samples and the reference fit alone, those the input check gives
    #: (:func:`lagsieve.stages.check.check_samples`): the align stage takes them from here
    sample_warnings: list[InputWarning] = field(default_factory=list)


def condition_rng(seed: int) -> np.random.Generator:
    """The bootstrap's generator: the study's seed and a stable tag of this stage."""
    return np.random.default_rng(np.random.SeedSequence([int(seed), zlib.crc32(b"condition")]))


def _cell_rows(design, kind: str, value, se, stats) -> pd.DataFrame:
    cells = design.cells
    return pd.DataFrame({
        "series": kind + ":" + cells.group + "-" + cells.season, "year": cells.year,
        "value": value, "se": se, "n_fish": stats.n_fish, "n_sets": stats.n_sets,
        "design_effect": stats.design_effect, "rho": stats.rho,
        "n_effective": stats.n_effective, "kind": kind, "age_group": cells.group,
        "season": cells.season})


def _annual_rows(design, fits, kind: str, value, se, stats) -> list[pd.DataFrame]:
    """Season-adjusted rows of every age group: ``value`` and ``se`` map a fit to arrays."""
    out = []
    for group, fit in fits.items():
        cells = design.cells.iloc[fit.cells]
        n, deff = stats.n_fish[fit.cells], stats.design_effect[fit.cells]
        defined = np.isfinite(deff)
        sums = pd.DataFrame({"year": cells.year.to_numpy(), "n": n, "g": stats.n_sets[fit.cells],
                             "nd": np.where(defined, n * deff, 0.0),
                             "nn": np.where(defined, n, 0)}).groupby("year").sum()
        sums = sums.loc[fit.years]
        with np.errstate(divide="ignore", invalid="ignore"):  # no cell with a defined deff
            deff_year = np.where(sums.nn > 0, sums.nd / sums.nn, np.nan)
        v, s = (value(fit), se(fit)) if fit.identified else (np.nan, np.nan)
        out.append(pd.DataFrame({
            "series": f"{kind}:{group}", "year": fit.years, "value": v, "se": s,
            "n_fish": sums.n.to_numpy(), "n_sets": sums.g.to_numpy(),
            "design_effect": deff_year, "rho": np.nan,
            "n_effective": sums.n.to_numpy() / deff_year, "kind": kind, "age_group": group,
            "season": ""}))
    return out


def _kn_rows(design, mean, var, stats, fits) -> pd.DataFrame:
    value = np.exp(mean)
    rows = [_cell_rows(design, "kn", value, value * np.sqrt(var), stats)]
    rows += _annual_rows(design, fits, "kn",
                         lambda f: np.exp(f.H @ mean[f.cells]),
                         lambda f: np.exp(f.H @ mean[f.cells]) * np.sqrt(np.diag(f.cov)),
                         stats)
    return pd.concat(rows, ignore_index=True)


def _share_rows(design, boot, k: int, stats, fits) -> pd.DataFrame:
    """Rows of the ``below`` series at the ``k``-th threshold of the bootstrap."""
    reps = boot.replicates[:, :, k]
    rows = [_cell_rows(design, "below", boot.value[:, k], np.std(reps, axis=0, ddof=1),
                       stats)]
    rows += _annual_rows(design, fits, "below",
                         lambda f: f.H @ boot.value[f.cells, k],
                         lambda f: np.std(reps[:, f.cells] @ f.H.T, axis=0, ddof=1), stats)
    return pd.concat(rows, ignore_index=True)


def _sensitivity(design, boot, stats, fits) -> pd.DataFrame:
    """The ``below`` series at every threshold of the grid (series, threshold, year, value,
    se); ``stats`` only fills columns this table leaves out."""
    parts = []
    for k, threshold in enumerate(boot.thresholds):
        rows = _share_rows(design, boot, k, stats, fits)
        parts.append(rows[["series", "year", "value", "se"]].assign(threshold=threshold))
    return pd.concat(parts, ignore_index=True)[SENSITIVITY_COLUMNS].astype({"year": "int64"})


def _effects(fits) -> pd.DataFrame:
    rows = [(g, s, e) for g, fit in fits.items() for s, e in fit.season_effect.items()]
    return pd.DataFrame(rows, columns=["age_group", "season", "effect"])


def _unidentified(fits, file: str | None) -> list[InputWarning]:
    return [InputWarning(
        what=f"age group '{g}': the seasons sampled do not overlap across years, so the "
             "season effect cannot be separated from the year effect; its season-adjusted "
             "series are left empty (sample more seasons in common years)", file=file)
        for g, fit in fits.items() if not fit.identified]


def condition_series(fish: pd.DataFrame, settings: ConditionSettings, seed: int,
                     file: str | None = None, clock=None) -> ConditionResult:
    """The whole condition computation on fish read by :func:`samples.read_samples`:
    groups and seasons, the reference fit, Kn, cell indices, the season adjustment, the
    poor-condition shares with their bootstrap, the threshold sensitivity. ``file`` names the
    config in messages; ``clock`` (e.g. ``time.perf_counter``) records step times."""
    clock = clock or (lambda: 0.0)
    timings: dict[str, float] = {}
    t0 = clock()
    fish, warnings = assign_groups(fish, settings)
    reference, warns = fit_reference(fish, settings.reference_years, file)
    warnings += warns
    fish = fish.assign(log_kn=log_kn(fish, reference))
    t1 = clock()
    timings["reference"] = t1 - t0
    design = build_design(fish)
    y = fish["log_kn"].to_numpy()
    mean, var = cell_means(design, y)
    stats = cell_icc(design, y)
    fits = season_fits(design, mean, var)
    kn = _kn_rows(design, mean, var, stats, fits)
    t2 = clock()
    timings["kn index"] = t2 - t1
    grid = np.unique(np.r_[settings.thresholds, settings.threshold])
    boot = bootstrap_shares(design, np.exp(y), grid, settings.bootstrap, condition_rng(seed))
    k = int(np.flatnonzero(grid == settings.threshold)[0])
    below_stats = cell_icc(design, (np.exp(y) < settings.threshold).astype(float))
    below = _share_rows(design, boot, k, below_stats, fits)
    sensitivity = _sensitivity(design, boot, below_stats, fits)
    timings["below share"] = clock() - t2
    table = pd.concat([kn, below], ignore_index=True)[OUTPUT_COLUMNS]
    table = table.astype({"year": "int64", "n_fish": "int64", "n_sets": "int64"})
    return ConditionResult(table=table, sensitivity=sensitivity, reference=reference,
                           fish=fish, season_effects=_effects(fits),
                           warnings=warnings + _unidentified(fits, file), timings=timings,
                           sample_warnings=list(warnings))


def read_condition(settings: ConditionSettings, base_dir: str | Path, seed: int,
                   file: str | None = None, clock=None) -> ConditionResult:
    """Read the sample files of ``settings`` (relative to ``base_dir``) and compute the
    condition series; raises :class:`lagsieve.errors.InputErrors` with every problem."""
    clock = clock or (lambda: 0.0)
    t0 = clock()
    fish, warnings = read_samples(settings.samples, base_dir)
    t1 = clock()
    result = condition_series(fish, settings, seed, file, clock)
    timings = {"read": t1 - t0, **result.timings}
    return ConditionResult(**{**result.__dict__, "warnings": warnings + result.warnings,
                              "sample_warnings": warnings + result.sample_warnings, "timings": timings})


def input_frame(table: pd.DataFrame, wanted) -> pd.DataFrame:
    """The rows of the ``wanted`` series of a condition table (condition.csv) as the tidy input
    frame of :mod:`lagsieve.io.tables` (``FRAME_COLUMNS``): value and se enter the annual
    table like those of any input series; ``file`` is ``condition.csv``, ``row`` its row."""
    rows = table[table["series"].isin(set(wanted))]
    return pd.DataFrame({
        "series": rows["series"].astype(str), "year": rows["year"].astype("int64"),
        "month": pd.Series(pd.NA, index=rows.index, dtype="Int64"),
        "value": rows["value"].astype(float), "se": rows["se"].astype(float), "unit": "",
        "file": "condition.csv", "row": (rows.index.to_numpy() + 2).astype("int64")},
        index=rows.index)[FRAME_COLUMNS].reset_index(drop=True)
