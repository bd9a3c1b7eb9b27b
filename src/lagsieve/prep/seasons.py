"""Seasons kept apart: the months of each season, a series' values per season, and lags in seasons.

A study's seasons (config ``seasons:``, else the condition section's ``seasons:``) are put in
the order of the year by their last month, and every season belongs to the year of its last
month, as ``aggregate`` windows do (:mod:`lagsieve.prep.annual`): winter ``[12, 1, 2]`` of 2001
holds December 2000. On the season axis the value of season ``i`` (of ``n``) in year ``t`` sits
at position ``t * n + i``; a driver "leads by j seasons" when the response at position ``p`` is
paired with the driver at ``p - j``, so a lag of 2 seasons pairs this spring with the autumn of
the previous year (with winter, spring, summer, autumn).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from lagsieve.errors import InputProblem, item_key
from lagsieve.prep.annual import to_annual

__all__ = ["Seasons", "coverage_problems", "season_frame", "season_axis", "season_lagged"]


@dataclass(frozen=True)
class Seasons:
    """The seasons of a study in the order of the year: names and their months."""

    names: tuple[str, ...]
    months: tuple[tuple[int, ...], ...]

    @classmethod
    def of(cls, mapping: dict) -> "Seasons":
        """From a ``{name: [months]}`` mapping, ordered by each season's last month."""
        items = sorted(((str(k), tuple(int(m) for m in v)) for k, v in mapping.items()), key=lambda kv: kv[1][-1])
        return cls(tuple(k for k, _ in items), tuple(v for _, v in items))

    @property
    def n(self) -> int:
        return len(self.names)

    def index(self, name: str) -> int:
        return self.names.index(name)

    def mid_month(self, name: str) -> float:
        """The middle of a season's months on the calendar (12, 1, 2 -> 1.0), for the harmonic
        baseline: the mean of the months counted on from the first one."""
        ms = np.array(self.months[self.index(name)], float)
        ms = ms[0] + np.mod(ms - ms[0], 12)
        return float(np.mod(np.mean(ms) - 1, 12) + 1)

    def covered(self) -> set[int]:
        return {m for ms in self.months for m in ms}


def coverage_problems(seasons: Seasons, months_present: dict[str, set[int]], file: str, key: str) -> list[InputProblem]:
    """One line per monthly series with months that no season holds (seasons that share a
    month are refused with the config, :func:`lagsieve.io.config.season_responses`)."""
    problems = []
    for sid, present in sorted(months_present.items()):
        missing = sorted(set(present) - seasons.covered())
        if missing:
            problems.append(InputProblem(
                what=f"the data have months {', '.join(map(str, missing))}, which no season holds "
                     f"(seasons: {', '.join(seasons.names)})",
                fix=f"add the months to a season under {key}, or drop those rows", file=file, key=key, series=sid))
    return problems


def season_frame(long: pd.DataFrame, series: str, seasons: Seasons, how: str = "mean") -> pd.DataFrame:
    """The monthly rows of ``series`` as one value per season and year (columns year, season,
    value): the mean (or ``how``) of the season's months, a year that lacks one of them
    dropped (the notes of :func:`lagsieve.prep.annual.to_annual`)."""
    rows = long[(long["series"] == series) & long["month"].notna()]
    parts = []
    for name, ms in zip(seasons.names, seasons.months):
        sub = rows[rows["month"].isin(ms)]
        if sub.empty:
            continue
        annual, _ = to_annual(sub, {series: {"aggregate": {"months": list(ms), "how": how}}})
        parts.append(pd.DataFrame({"year": annual["year"], "season": name, "value": annual["value"]}))
    if not parts:
        return pd.DataFrame({"year": pd.Series([], dtype="int64"), "season": [], "value": []})
    return pd.concat(parts, ignore_index=True)


def season_axis(frame: pd.DataFrame, seasons: Seasons) -> tuple[int, np.ndarray]:
    """A season frame on the season axis: (first position, values), every position from the
    first to the last observed one, NaN where a season has no value."""
    pos = frame["year"].to_numpy("int64") * seasons.n + np.array([seasons.index(s) for s in frame["season"]], "int64")
    first = int(pos.min())
    out = np.full(int(pos.max()) - first + 1, np.nan)
    out[pos - first] = frame["value"].to_numpy(float)
    return first, out


def season_lagged(batch: np.ndarray, first: int, years: np.ndarray, season: int, n: int,
                  lags: list[int]) -> np.ndarray:
    """A batch on the season axis ``(S, P)`` (position ``first`` at column 0) read for the
    response's season ``season`` of ``years``, at every lag in seasons: ``(S, L, len(years))``,
    entry ``[s, l, t]`` the value at position ``years[t] * n + season - lags[l]`` (NaN off the axis)."""
    S, P = batch.shape
    out = np.full((S, len(lags), len(years)), np.nan)
    for li, j in enumerate(lags):
        p = np.asarray(years, "int64") * n + season - int(j) - first
        ok = (p >= 0) & (p < P)
        out[:, li, ok] = batch[:, p[ok]]
    return out


def monthly_series(long: pd.DataFrame) -> dict[str, set[int]]:
    """The months present in every series with monthly rows."""
    rows = long[long["month"].notna()]
    return {sid: {int(m) for m in g["month"].unique()} for sid, g in rows.groupby("series")}


def study_season_problems(study, long: pd.DataFrame, present: set[str]) -> list[InputProblem]:
    """The seasonal screen's problems with the data, one line each: a by-season response whose
    season series no input or condition series holds and cannot be made from its monthly rows,
    and monthly rows (of a by-season response, or of a driver of a season response) in months
    that no season holds. ``present``: the series the inputs and the condition stage hold."""
    shown = str(study.path)
    monthly = monthly_series(long)
    problems, used, missing = [], {}, {}
    for r in study.responses:
        base = r.get("season_of")
        if not base:
            continue
        if r["id"] not in present and base not in monthly:
            missing.setdefault(base, r["id"])
        for sid in [base] + [d["id"] for d in study.drivers_for(r["id"])]:
            if sid in monthly:
                used[sid] = monthly[sid]
    for i, r in enumerate(study.responses):
        if r["id"] in missing:
            problems.append(InputProblem(
                what=f"by_season needs per-season series such as '{missing[r['id']]}', which no input holds, "
                     "or monthly rows of this response to make them from",
                fix=f"add the series '{r['id']}-<season>' (series, year, value) to an input, give '{r['id']}' a month "
                    "column (series, year, month, value), or remove by_season",
                file=shown, key=item_key("responses", i, r["id"], "by_season")))
    if not study.seasons:
        return problems
    key = "seasons" if study.raw.get("seasons") else "condition.seasons"
    return problems + coverage_problems(Seasons.of(study.seasons), used, shown, key)
