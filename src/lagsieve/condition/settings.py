"""The ``condition:`` section of a study's config, checked into :class:`ConditionSettings`.

Keys (names fixed by issue 18)::

    condition:
      samples: [fish.csv]            # one row per fish (paths or {path, sheet, decimal, delimiter})
      reference_years: [1990, 2020]  # first and last year (inclusive) of the length-weight reference
      age_groups: {young: [1, 2], mid: [3, 5], old: [6, 99]}  # inclusive age ranges
      seasons: {winter: [12, 1, 2], spring: [3, 4, 5], summer: [6, 7, 8], autumn: [9, 10, 11]}
      threshold: 0.85                # Kn below which a fish counts as in poor condition
      bootstrap: 500                 # haul-level bootstrap replicates (poor-condition share)
      thresholds: [0.75, 0.8, 0.85, 0.9, 0.95]   # the sensitivity grid

Defaults belong to the config schema; this module only checks a filled section and reports
every problem as one line naming the config file and the key.
"""
from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import Any, Mapping

from lagsieve.errors import InputErrors, InputProblem, show

__all__ = ["ConditionSettings", "KEYS", "NAME", "check_condition", "series_ids"]

KEYS = ("samples", "reference_years", "age_groups", "seasons", "threshold", "bootstrap",
        "thresholds")
# an age group or season name: one part of a series id (src/lagsieve/io/names.py SAFE_ID)
NAME = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.]*\Z")
THRESHOLD_RANGE = (0.0, 2.0)  # open interval: a Kn threshold of 0 or 2 and beyond is no threshold


@dataclass(frozen=True)
class ConditionSettings:
    """The checked ``condition:`` section."""

    samples: tuple[Any, ...]
    reference_years: tuple[int, int]
    age_groups: dict[str, tuple[int, int]]
    seasons: dict[str, tuple[int, ...]]
    threshold: float
    bootstrap: int
    thresholds: tuple[float, ...]

    def month_season(self) -> dict[int, str]:
        return {m: name for name, months in self.seasons.items() for m in months}


def _whole(x: Any) -> bool:
    return (isinstance(x, int) and not isinstance(x, bool)) or (
        isinstance(x, float) and math.isfinite(x) and x.is_integer())


def _number(x: Any) -> bool:
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


class _Problems:
    def __init__(self, file: str | None):
        self.file, self.items = file, []

    def add(self, key: str, what: str, fix: str) -> None:
        self.items.append(InputProblem(what=what, fix=fix, file=self.file,
                                       key=f"condition.{key}"))


def _check_years(value: Any, out: _Problems) -> tuple[int, int] | None:
    if (not isinstance(value, (list, tuple)) or len(value) != 2
            or not all(_whole(v) for v in value)):
        out.add("reference_years", f"'{show(value)}' is not two whole years",
                "write the first and last year of the reference, e.g. [1990, 2020]")
        return None
    first, last = int(value[0]), int(value[1])
    if first > last:
        out.add("reference_years", f"the first year {first} is after the last year {last}",
                "write [first, last], e.g. [1990, 2020]")
        return None
    return first, last


def _check_age_groups(value: Any, out: _Problems) -> dict[str, tuple[int, int]]:
    fix = "write inclusive age ranges, e.g. {young: [1, 2], mid: [3, 5], old: [6, 99]}"
    if not isinstance(value, Mapping) or not value:
        out.add("age_groups", f"'{show(value)}' is not a mapping of names to age ranges", fix)
        return {}
    groups: dict[str, tuple[int, int]] = {}
    for name, rng in value.items():
        key = f"age_groups.{show(name)}"
        if not isinstance(name, str) or not NAME.match(name):
            out.add(key, f"the name '{show(name)}' cannot be part of a series id",
                    "use letters, digits, '_' and '.', starting with a letter or digit")
        elif (not isinstance(rng, (list, tuple)) or len(rng) != 2
              or not all(_whole(v) and v >= 0 for v in rng)):
            out.add(key, f"'{show(rng)}' is not an age range [first, last]", fix)
        elif rng[0] > rng[1]:
            out.add(key, f"the range [{rng[0]}, {rng[1]}] is empty (first age after last)",
                    "write [first, last] with first <= last")
        else:
            groups[name] = (int(rng[0]), int(rng[1]))
    ordered = sorted(groups.items(), key=lambda kv: kv[1])
    for (a, (lo_a, hi_a)), (b, (lo_b, _hi_b)) in zip(ordered, ordered[1:]):
        if lo_b <= hi_a:
            out.add(f"age_groups.{b}", f"ages {lo_b}-{min(hi_a, _hi_b)} are also in age group "
                    f"'{a}' [{lo_a}, {hi_a}]", "make the age ranges not overlap")
    return groups


def _check_seasons(value: Any, out: _Problems) -> dict[str, tuple[int, ...]]:
    fix = "write month lists, e.g. {winter: [12, 1, 2], spring: [3, 4, 5]}"
    if not isinstance(value, Mapping) or not value:
        out.add("seasons", f"'{show(value)}' is not a mapping of names to month lists", fix)
        return {}
    seasons: dict[str, tuple[int, ...]] = {}
    owner: dict[int, str] = {}
    for name, months in value.items():
        key = f"seasons.{show(name)}"
        if not isinstance(name, str) or not NAME.match(name):
            out.add(key, f"the name '{show(name)}' cannot be part of a series id",
                    "use letters, digits, '_' and '.', starting with a letter or digit")
            continue
        if (not isinstance(months, (list, tuple)) or not months
                or not all(_whole(m) and 1 <= m <= 12 for m in months)):
            out.add(key, f"'{show(months)}' is not a list of months 1-12", fix)
            continue
        for m in (int(m) for m in months):
            if m in owner:
                out.add(key, f"month {m} is also in season '{owner[m]}'",
                        "put every month in one season at most")
            owner[m] = name
        seasons[name] = tuple(int(m) for m in months)
    return seasons


def _check_thresholds(section: Mapping[str, Any], out: _Problems) -> tuple[float, tuple]:
    lo, hi = THRESHOLD_RANGE
    threshold = section["threshold"]
    fix = f"give a relative condition between {lo:g} and {hi:g} (exclusive), e.g. 0.85"
    if not _number(threshold) or not lo < threshold < hi:
        out.add("threshold", f"'{show(threshold)}' is not a number in ({lo:g}, {hi:g})", fix)
    grid = section["thresholds"]
    if (not isinstance(grid, (list, tuple)) or not grid
            or not all(_number(t) and lo < t < hi for t in grid)):
        out.add("thresholds", f"'{show(grid)}' is not a list of numbers in ({lo:g}, {hi:g})",
                "give the sensitivity grid, e.g. [0.75, 0.8, 0.85, 0.9, 0.95]")
        grid = ()
    return threshold, tuple(sorted({float(t) for t in grid}))


def series_ids(age_groups, seasons) -> list[str]:
    """Every series id the section makes: ``kn:<group>``, ``kn:<group>-<season>``,
    ``below:<group>``, ``below:<group>-<season>``."""
    ids = []
    for kind in ("kn", "below"):
        for g in age_groups:
            ids.append(f"{kind}:{g}")
            ids.extend(f"{kind}:{g}-{s}" for s in seasons)
    return ids


def _check_ids(groups, seasons, out: _Problems) -> None:
    ids = series_ids(groups, seasons)
    seen: set[str] = set()
    for sid in ids:
        if sid.casefold() in seen:
            out.add("age_groups", f"two age group and season names make the same series id "
                    f"'{sid}' (or ids that differ only in case)", "rename one of them")
        seen.add(sid.casefold())


def check_condition(section: Any, file: str | None = None) -> ConditionSettings:
    """Check a filled ``condition:`` section; every problem is one line naming ``file`` and
    the key. Raises :class:`InputErrors`."""
    out = _Problems(file)
    if not isinstance(section, Mapping):
        out.add("", f"'{show(section)}' is not a mapping", "write the condition keys under it")
        raise InputErrors(out.items)
    for key in KEYS:
        if key not in section:
            out.add(key, "the key is missing", f"add {key} to the condition section")
    for key in section:
        if key not in KEYS:
            out.add(str(key), "unknown key", f"use only {', '.join(KEYS)}")
    if out.items:
        raise InputErrors(out.items)
    samples = section["samples"]
    if isinstance(samples, (str, Mapping)):
        samples = [samples]
    if not isinstance(samples, (list, tuple)) or not samples:
        out.add("samples", "no sample files are listed", "list the per-fish files, e.g. [fish.csv]")
    years = _check_years(section["reference_years"], out)
    groups = _check_age_groups(section["age_groups"], out)
    seasons = _check_seasons(section["seasons"], out)
    threshold, grid = _check_thresholds(section, out)
    boot = section["bootstrap"]
    if not _whole(boot) or not 50 <= boot <= 100_000:
        out.add("bootstrap", f"'{show(boot)}' is not a whole number of replicates 50-100000",
                "give e.g. 500")
    _check_ids(groups, seasons, out)
    if out.items:
        raise InputErrors(out.items)
    return ConditionSettings(samples=tuple(samples), reference_years=years, age_groups=groups,
                             seasons=seasons, threshold=float(threshold), bootstrap=int(boot),
                             thresholds=grid)
