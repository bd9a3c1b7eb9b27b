"""Speed of the condition computation on 100,000 invented fish (issue 18: under 10 s).

The invented sample (``lagsieve.condition.simulate``): 30 years (1990-2019), hauls in four
months a year (Feb, May, Aug, Nov), 28 hauls a month of 30 fish (100,800 fish), a haul
effect (SD 0.06), a spring low, ages 1-10 in three age groups, and four strata with areas
(so the stratified estimator runs). It is written once as CSV into a scratch folder; every run
then reads it with the project's readers and computes everything the stage makes: the
reference fit and Kn, the cell indices with ICC and design effects, the season adjustment,
the poor-condition shares with 500 haul-bootstrap replicates over a grid of 5 thresholds.

Prints per-step times and the median total of ``--runs`` runs (default 3), and writes the
times to ``--out`` (default ``bench/out/``, not tracked). Not a test: no time is asserted.

    python bench/condition.py [--fish-per-haul 30] [--runs 3] [--out bench/out]
"""
from __future__ import annotations

import argparse
import statistics
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from lagsieve.condition.series import read_condition
from lagsieve.condition.settings import check_condition
from lagsieve.condition.simulate import FishWorld, simulate_fish

YEARS = tuple(range(1990, 2020))
SECTION = {"samples": ["fish.csv"], "reference_years": [1990, 2019],
           "age_groups": {"young": [1, 2], "mid": [3, 5], "old": [6, 99]},
           "seasons": {"winter": [12, 1, 2], "spring": [3, 4, 5], "summer": [6, 7, 8],
                       "autumn": [9, 10, 11]},
           "threshold": 0.85, "bootstrap": 500, "thresholds": [0.75, 0.8, 0.85, 0.9, 0.95]}


def invented_file(folder: Path, fish_per_haul: int) -> int:
    """Write the invented sample as ``folder/fish.csv``; return the number of fish."""
    world = FishWorld(years=YEARS, months={y: (2, 5, 8, 11) for y in YEARS},
                      hauls_per_month=28, fish_per_haul=fish_per_haul,
                      season_effect={2: -0.02, 5: -0.08, 8: 0.03, 11: 0.05})
    fish = simulate_fish(world, np.random.default_rng(2026))
    codes = pd.factorize(fish.haul)[0]
    stratum = np.array(["north", "east", "south", "west"])[codes % 4]
    areas = {"north": 1200.0, "east": 800.0, "south": 1500.0, "west": 500.0}
    out = pd.DataFrame({"year": fish.year.astype(int), "month": fish.month.astype(int),
                        "set": fish.haul.str.split("/").str[1], "length": fish.length,
                        "weight": fish.weight, "age": fish.age.astype(int),
                        "stratum": stratum, "stratum_area": [areas[s] for s in stratum]})
    out.to_csv(folder / "fish.csv", index=False)
    return len(out)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--fish-per-haul", type=int, default=30)
    parser.add_argument("--runs", type=int, default=3)
    parser.add_argument("--out", type=Path, default=Path("bench/out"))
    args = parser.parse_args()
    settings = check_condition(SECTION, "bench")
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        n = invented_file(Path(tmp), args.fish_per_haul)
        print(f"{n} invented fish, {settings.bootstrap} bootstrap replicates, "
              f"{len(settings.thresholds)} thresholds")
        for run in range(args.runs):
            t0 = time.perf_counter()
            result = read_condition(settings, tmp, seed=1, clock=time.perf_counter)
            total = time.perf_counter() - t0
            steps = ", ".join(f"{k} {v:.2f} s" for k, v in result.timings.items())
            print(f"run {run + 1}: total {total:.2f} s ({steps})")
            rows.append({"run": run + 1, "fish": n, "total_s": total, **{
                f"{k.replace(' ', '_')}_s": v for k, v in result.timings.items()}})
    times = pd.DataFrame(rows)
    medians = times.drop(columns=["run", "fish"]).median()
    print("median: " + ", ".join(f"{k} {v:.2f}" for k, v in medians.items()))
    print(f"rows in the table: {len(result.table)}; design effect median "
          f"{statistics.median(result.table.design_effect):.2f}")
    args.out.mkdir(parents=True, exist_ok=True)
    times.to_csv(args.out / "condition_times.csv", index=False)
    print(f"written: {args.out / 'condition_times.csv'}")


if __name__ == "__main__":
    main()
