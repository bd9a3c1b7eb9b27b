"""The invented per-fish samples of the demo (issue 18): length, weight and age of Merrow hake
caught in survey hauls through the year. EVERYTHING HERE IS INVENTED.

Every year has one survey month in each season (drawn from the season's months; no winter
survey before ``CONDITION["winter_from"]``, so the sampled months shift between years), 10
hauls per survey and 18 fish per haul. The log weight of a fish is the length-weight line plus
a haul effect, a season effect (lowest in spring), a year effect of its age group and its own
noise (:func:`lagsieve.condition.simulate.simulate_fish`). The year effect of the two older
groups follows the forage fish biomass of the year before, linearly in log biomass; the
youngest group's follows nothing but noise. The draws come from their own generator (derived
from the demo's seed), so the other demo files do not change with these parameters.
"""
from __future__ import annotations

import zlib

import numpy as np
import pandas as pd

from lagsieve.condition.simulate import FishWorld, simulate_fish

__all__ = ["AGE_GROUPS", "CONDITION", "PREY_BETA", "SEASONS", "SEASON_EFFECT", "fish_samples"]

#: Age groups (inclusive ages) and seasons (months) of the demo's condition section.
AGE_GROUPS = {"young": (1, 2), "mid": (3, 4), "old": (5, 99)}
SEASONS = {"winter": (12, 1, 2), "spring": (3, 4, 5), "summer": (6, 7, 8), "autumn": (9, 10, 11)}
#: Season effects on log Kn (a spring low).
SEASON_EFFECT = {"winter": -0.02, "spring": -0.07, "summer": 0.03, "autumn": 0.06}
#: The planted prey effect: log Kn shift per unit of log forage biomass one year earlier.
PREY_BETA = {"young": 0.0, "mid": 0.05, "old": 0.08}
#: The rest of the truth: length-weight line, haul, fish and year SDs (log scale), design.
CONDITION = {"a": 0.0068, "b": 3.08, "sd_haul": 0.05, "sd_fish": 0.07, "sd_year": 0.012,
             "prey_lag": 1, "hauls_per_survey": 10, "fish_per_haul": 18, "max_age": 10,
             "winter_from": 1995, "threshold": 0.85}


def _months(rng: np.random.Generator, years: np.ndarray) -> dict[int, tuple[int, ...]]:
    """One survey month per season and year (no winter survey before ``winter_from``)."""
    out = {}
    for y in years:
        seasons = [s for s in SEASONS if s != "winter" or y >= CONDITION["winter_from"]]
        out[int(y)] = tuple(int(rng.choice(SEASONS[s])) for s in seasons)
    return out


def _group_effects(rng: np.random.Generator, years: np.ndarray, log_forage: pd.Series) -> dict:
    """Year effects of every age group: prey one year earlier (centred) plus noise."""
    lagged = log_forage.reindex(years - CONDITION["prey_lag"]).to_numpy()
    centred = lagged - np.mean(lagged)
    out = {}
    for group, (lo, hi) in AGE_GROUPS.items():
        shift = PREY_BETA[group] * centred + rng.normal(0, CONDITION["sd_year"], len(years))
        out[(lo, hi)] = dict(zip(years.tolist(), shift.tolist()))
    return out


def fish_samples(seed: int, years: np.ndarray, forage: pd.DataFrame) -> pd.DataFrame:
    """The per-fish sample file: ``year, month, set, length, weight, age`` (cm, g, years).
    ``forage``: the demo's annual drivers (``year``, ``forage_biomass``)."""
    rng = np.random.default_rng(np.random.SeedSequence([int(seed), zlib.crc32(b"demo fish")]))
    log_forage = pd.Series(np.log(forage["forage_biomass"].to_numpy(float)),
                           index=forage["year"].to_numpy())
    months_by_year = _months(rng, years)
    season_of = {m: s for s, months in SEASONS.items() for m in months}
    world = FishWorld(
        years=tuple(int(y) for y in years), months=months_by_year,
        hauls_per_month=CONDITION["hauls_per_survey"], fish_per_haul=CONDITION["fish_per_haul"],
        a=CONDITION["a"], b=CONDITION["b"], sd_haul=CONDITION["sd_haul"],
        sd_fish=CONDITION["sd_fish"], max_age=CONDITION["max_age"],
        season_effect={m: SEASON_EFFECT[season_of[m]] for m in range(1, 13)},
        age_year_effect=_group_effects(rng, years, log_forage))
    fish = simulate_fish(world, rng)
    haul_number = fish["haul"].str.split("/").str[1].astype(int)
    set_in_year = haul_number - haul_number.groupby(fish["year"]).transform("min") + 1
    return pd.DataFrame({"year": fish["year"].astype(int), "month": fish["month"].astype(int),
                         "set": set_in_year.astype(int), "length": fish["length"],
                         "weight": fish["weight"], "age": fish["age"].astype(int)})
