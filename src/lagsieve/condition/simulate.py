"""Invented per-fish samples with a known truth, for tests, benchmarks and the demo.

Fish are caught in hauls; every haul has a month and a random haul effect, every fish an age,
a length from a von Bertalanffy curve and a weight from ``log W = log a + b log L + effects``.
The truth is the haul SD, the fish SD, the season effects and any year effects given; the
intraclass correlation of log Kn within a haul is ``sd_haul^2 / (sd_haul^2 + sd_fish^2)``.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from lagsieve.condition.samples import SAMPLE_COLUMNS

__all__ = ["FishWorld", "simulate_fish"]


@dataclass(frozen=True)
class FishWorld:
    """The truth of an invented sample."""

    years: tuple[int, ...] = tuple(range(2000, 2010))
    months: dict = field(default_factory=lambda: {y: (2, 5, 8, 11) for y in range(2000, 2010)})
    hauls_per_month: int = 8
    fish_per_haul: int = 15
    a: float = 0.008
    b: float = 3.05
    sd_haul: float = 0.06
    sd_fish: float = 0.08
    season_effect: dict = field(default_factory=lambda: {m: 0.0 for m in range(1, 13)})
    year_effect: dict = field(default_factory=dict)   # year -> log Kn shift (all ages)
    # (first age, last age) -> {year: log Kn shift} for the fish of those ages only
    age_year_effect: dict = field(default_factory=dict)
    max_age: int = 10


def _lengths(rng: np.random.Generator, age: np.ndarray) -> np.ndarray:
    """Von Bertalanffy lengths (cm; L_inf 90, k 0.2, t0 -0.5) with 8% individual spread."""
    return 90.0 * (1 - np.exp(-0.2 * (age + 0.5))) * np.exp(rng.normal(0, 0.08, age.shape))


def simulate_fish(world: FishWorld, rng: np.random.Generator) -> pd.DataFrame:
    """A sample frame with the columns of :data:`samples.SAMPLE_COLUMNS`."""
    haul_year, haul_month = [], []
    for year in world.years:
        for month in world.months.get(year, ()):
            haul_year += [year] * world.hauls_per_month
            haul_month += [month] * world.hauls_per_month
    haul_year, haul_month = np.array(haul_year), np.array(haul_month)
    n_hauls = len(haul_year)
    haul = np.repeat(np.arange(n_hauls), world.fish_per_haul)
    n = len(haul)
    age = rng.integers(1, world.max_age + 1, n)
    length = _lengths(rng, age)
    effect = (rng.normal(0, world.sd_haul, n_hauls)[haul]
              + np.vectorize(world.season_effect.get)(haul_month)[haul]
              + np.array([world.year_effect.get(y, 0.0) for y in haul_year])[haul])
    for (lo, hi), shifts in world.age_year_effect.items():
        inside = (age >= lo) & (age <= hi)
        effect += inside * np.array([shifts.get(y, 0.0) for y in haul_year])[haul]
    log_w = np.log(world.a) + world.b * np.log(length) + effect + rng.normal(0, world.sd_fish, n)
    frame = pd.DataFrame({
        "file": "invented", "row": np.arange(2, n + 2), "year": haul_year[haul].astype(float),
        "month": haul_month[haul].astype(float),
        "haul": [f"{y}/{h}" for y, h in zip(haul_year[haul], haul)],
        "length": np.round(length, 1), "weight": np.round(np.exp(log_w), 1),
        "age": age.astype(float), "age_group": "", "weight_type": "", "stratum": "",
        "stratum_area": np.nan, "sex": ""})
    return frame[SAMPLE_COLUMNS]
