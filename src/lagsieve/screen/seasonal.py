"""A season response's screen (config ``by_season``): its monthly drivers lagged in seasons, and
the harmonic baselines of its within-year series.

A monthly driver is made one value per season (:func:`lagsieve.prep.seasons.season_frame`) and
put on the season axis; its surrogates are drawn there, for the anomalies from each season's
mean (the seasonal cycle is kept: a constant within a season, it cannot correlate with one
season's response across years), from a generator keyed by the seed and the driver
(:func:`lagsieve.screen.hypothesis.driver_rng`). The driver and every surrogate are then read at
every lag in seasons, so the lag is chosen the same way for the real driver and each surrogate
and the surrogate p-values pay for it, as with lags in years.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from lagsieve.prep.align import apply_transform
from lagsieve.prep.seasons import Seasons, season_axis, season_frame, season_lagged
from lagsieve.screen.hypothesis import driver_rng
from lagsieve.stats.harmonic import harmonic_forecasts
from lagsieve.stats.surrogates import make_surrogates

__all__ = ["PAIRED_COLUMNS", "SeasonScreen", "paired_table", "season_screen", "seasonal_batch"]

#: The columns of a screen's ``paired.csv``: a monthly driver at every lag in seasons.
PAIRED_COLUMNS = ["response", "driver", "lag", "year", "value"]


@dataclass(frozen=True)
class SeasonScreen:
    """What the screen of one season response needs beyond the annual table."""

    season: str
    seasons: Seasons
    lags: tuple[int, ...]
    drivers: dict[str, pd.DataFrame] = field(default_factory=dict)  # monthly drivers: year, season, value
    baselines: dict[str, np.ndarray] = field(default_factory=dict)  # harmonic forecasts on the table's years

    def lagged_batch(self, driver_id: str, years: np.ndarray, screen: dict) -> np.ndarray:
        """(1 + B, L, n_years): the driver and its surrogates at every lag in seasons."""
        first, batch = seasonal_batch(self.drivers[driver_id], self.seasons, driver_id, screen)
        return season_lagged(batch, first, years, self.seasons.index(self.season), self.seasons.n, list(self.lags))


def paired_table(season: SeasonScreen, response_id: str, years: np.ndarray) -> pd.DataFrame:
    """Every monthly driver (the real one) at every lag in seasons on ``years``: the tidy rows
    (response, driver, lag, year, value) that the evidence stage pairs with the response."""
    parts = []
    for did, frame in season.drivers.items():
        first, x = season_axis(frame, season.seasons)
        xl = season_lagged(x[None, :], first, years, season.seasons.index(season.season), season.seasons.n,
                           list(season.lags))[0]
        for lag, values in zip(season.lags, xl):
            parts.append(pd.DataFrame({"response": response_id, "driver": did, "lag": lag, "year": years,
                                       "value": values}))
    return (pd.concat(parts, ignore_index=True)[PAIRED_COLUMNS] if parts
            else pd.DataFrame(columns=PAIRED_COLUMNS))


def seasonal_batch(frame: pd.DataFrame, seasons: Seasons, driver_id: str, screen: dict) -> tuple[int, np.ndarray]:
    """(first position, (1 + B, P) batch) of a driver's season values: row 0 the driver, then B
    surrogates of its anomalies from the season means with those means added back."""
    first, x = season_axis(frame, seasons)
    idx = (np.arange(len(x)) + first) % seasons.n
    means = np.array([np.nanmean(x[idx == i]) if np.any(np.isfinite(x[idx == i])) else 0.0
                      for i in range(seasons.n)])
    B = int(screen["surrogates"])
    out = np.full((B + 1, len(x)), np.nan)
    out[0] = x
    obs = np.flatnonzero(np.isfinite(x))
    if len(obs) >= 4 and B > 0:
        lo, hi = obs[0], obs[-1] + 1
        rng = driver_rng(screen["seed"], f"{driver_id}@seasons")
        anom = x[lo:hi] - means[idx[lo:hi]]
        out[1:, lo:hi] = make_surrogates(anom, B, rng, screen["surrogate_method"],
                                         screen.get("surrogate_keep_trend", True)) + means[idx[lo:hi]]
    return first, out


def _within_year(table: pd.DataFrame, base: str, seasons: Seasons) -> pd.DataFrame:
    """The season responses of ``base`` from the annual table as one frame (year, season, value)."""
    parts = [pd.DataFrame({"year": table.index.to_numpy(), "season": name, "value": table[f"{base}-{name}"].to_numpy(float)})
             for name in seasons.names if f"{base}-{name}" in table]
    frame = pd.concat(parts, ignore_index=True)
    return frame[np.isfinite(frame["value"].to_numpy(float))]


def harmonic_baselines(table: pd.DataFrame, study, response_id: str, seasons: Seasons, season: str) -> dict[str, np.ndarray]:
    """The harmonic baselines of a season response on the table's years, from the within-year
    series of its response (every season on one axis, each season at its middle month)."""
    base = study.season_of(response_id)
    frame = _within_year(table, base, seasons)
    if frame.empty:
        return {}
    first, y = season_axis(frame, seasons)
    months = np.array([seasons.mid_month(seasons.names[(p + first) % seasons.n]) for p in range(len(y))])
    i, years = seasons.index(season), table.index.to_numpy()
    targets = years * seasons.n + i - first
    ok = (targets >= 0) & (targets < len(y))
    out = {"harmonic": np.full(len(years), np.nan), "harmonic_persistence": np.full(len(years), np.nan)}
    fc = harmonic_forecasts(y, months, targets[ok]).as_dict()
    for name in out:
        out[name][ok] = fc[name]
    return out


def season_screen(study, response_id: str, long: pd.DataFrame, table: pd.DataFrame) -> SeasonScreen | None:
    """The season context of a season response (None for any other response): its monthly
    drivers' season values (transformed as configured) and its harmonic baselines."""
    r = next(r for r in study.responses if r["id"] == response_id)
    if not r.get("season_of"):
        return None
    seasons = Seasons.of(study.seasons)
    monthly = set(long.loc[long["month"].notna(), "series"])
    drivers = {}
    for d in study.drivers_for(response_id):
        if d["id"] in monthly:
            how = (d.get("aggregate") or {}).get("how", "mean")
            frame = season_frame(long, d["id"], seasons, how)
            drivers[d["id"]] = frame.assign(value=apply_transform(frame["value"].to_numpy(float), d.get("transform", "none")))
    return SeasonScreen(season=r["season"], seasons=seasons, lags=tuple(sorted(study.screen["season_lags"])),
                        drivers=drivers, baselines=harmonic_baselines(table, study, response_id, seasons, r["season"]))
