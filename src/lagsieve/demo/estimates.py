"""The INVENTED demo's response as an estimate: draws of one age group's M and three earlier
vintages of it, made from the written M and its standard errors.

Both come from random streams of their own (keyed on the demo's seed and a name), so the rest
of the demo, and the screen's results on it, are the same with or without them.

* draws: ``N_DRAWS`` whole series, each the written M plus an error with the written se of
  every year, AR(1) across years with ``DRAW_PHI`` (an assessment's errors in neighbouring
  years are alike), rounded as M is written;
* vintages: the three assessments before the one in the inputs (vintages last - 2, last - 1
  and last, each publishing the years before its own). Each restates the history: its values
  are the written M times 1 + ``RETRO_BIAS`` exp(-(terminal year - year) / ``RETRO_DECAY``) plus
  a small noise, so the terminal years of earlier assessments were too high by a few percent
  and the restatement fades into the past (a retrospective pattern; Mohn's rho about
  +``RETRO_BIAS``).
"""
from __future__ import annotations

import hashlib

import numpy as np
import pandas as pd

DRAWS_GROUP = "age5plus"
N_DRAWS = 100  # as many as screen.draws uses by default; a larger table costs check more time
DRAW_PHI = 0.6
N_VINTAGES = 3
RETRO_BIAS = 0.06
RETRO_DECAY = 2.0
RESTATE_SD = 0.005  # relative noise of a restated value


def _rng(seed: int, name: str) -> np.random.Generator:
    tag = int.from_bytes(hashlib.sha256(f"demo-estimates:{name}".encode()).digest()[:8], "little")
    return np.random.default_rng(np.random.SeedSequence([int(seed), tag]))


def _group(mortality: pd.DataFrame, group: str) -> pd.DataFrame:
    return mortality[mortality["group"] == group].sort_values("year")


def draws_table(mortality: pd.DataFrame, seed: int, group: str = DRAWS_GROUP) -> pd.DataFrame:
    """``draw, year, value``: N_DRAWS draws of M of ``group`` (see the module docstring)."""
    g = _group(mortality, group)
    value, se = g["value"].to_numpy(float), g["se"].to_numpy(float)
    rng = _rng(seed, f"draws:{group}")
    z = rng.standard_normal((N_DRAWS, len(value)))
    e = np.empty_like(z)
    e[:, 0] = z[:, 0]
    for t in range(1, len(value)):  # unit-variance AR(1) across years
        e[:, t] = DRAW_PHI * e[:, t - 1] + np.sqrt(1 - DRAW_PHI**2) * z[:, t]
    draws = np.maximum(np.round(value[None, :] + se[None, :] * e, 4), 0.0001)
    return pd.DataFrame({"draw": np.repeat(np.arange(1, N_DRAWS + 1), len(value)),
                         "year": np.tile(g["year"].to_numpy(int), N_DRAWS), "value": draws.ravel()})


def vintages_table(mortality: pd.DataFrame, seed: int, group: str = DRAWS_GROUP) -> pd.DataFrame:
    """``vintage, year, value``: the N_VINTAGES assessments before the latest (see the module
    docstring)."""
    g = _group(mortality, group)
    years, value = g["year"].to_numpy(int), g["value"].to_numpy(float)
    last = int(years.max())
    rng = _rng(seed, f"vintages:{group}")
    rows = []
    for vintage in range(last - N_VINTAGES + 1, last + 1):
        keep = years < vintage
        y, v = years[keep], value[keep]
        restated = v * (1 + RETRO_BIAS * np.exp(-(y.max() - y) / RETRO_DECAY)
                        + RESTATE_SD * rng.standard_normal(len(v)))
        rows.append(pd.DataFrame({"vintage": vintage, "year": y, "value": np.round(restated, 4)}))
    return pd.concat(rows, ignore_index=True)
