"""The poor-condition share: the proportion of fish with Kn below a threshold.

The share of a cell is the design-based mean of the indicator ``Kn < threshold`` (the ratio
or stratified mean of :mod:`lagsieve.condition.index`). Its standard error comes from a
haul-level (cluster) bootstrap: hauls are resampled with replacement within each stratum of
each cell, ``G - 1`` of the ``G`` hauls (the rescaling bootstrap of Rao & Wu 1988, JASA
83:231-241, with m = n - 1, for which no rescaling of the replicates is needed; recalled from
memory). All cells, strata and replicates are drawn at once as one index array
``(replicates, hauls)`` and summed with ``np.add.reduceat``; every threshold of the grid uses
the same draws, so the sensitivity table is consistent across thresholds. The season-adjusted
share of a year applies the age group's season operator (:func:`index.season_fits`) to the
cell shares and to every replicate.

A cell with a single haul has no between-haul variation to resample: its standard error is
left missing. A stratum with one haul inside a stratified cell adds no variance (stated in
the methods text as a limitation).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from lagsieve.condition.index import Design, combine_strata, psu_totals

__all__ = ["ShareBoot", "bootstrap_shares", "draw_hauls"]


@dataclass(frozen=True)
class ShareBoot:
    """Shares per cell and threshold, and their bootstrap replicates."""

    thresholds: np.ndarray   # (T,)
    value: np.ndarray        # (n_cells, T)
    replicates: np.ndarray   # (B, n_cells, T)


def draw_hauls(design: Design, replicates: int, rng: np.random.Generator
               ) -> tuple[np.ndarray, np.ndarray]:
    """Resampled psu positions ``(B, n_psu)`` within each stratum, and the mask ``(n_psu,)``
    that keeps G - 1 of the G draws of a stratum (all of them when G = 1)."""
    n_psu = len(design.psu_size)
    count = np.bincount(design.psu_stratum)
    start = np.concatenate([[0], np.cumsum(count)[:-1]])
    g = count[design.psu_stratum]
    first = start[design.psu_stratum]
    u = rng.random((replicates, n_psu))
    idx = first + np.minimum((u * g).astype(np.int64), g - 1)
    last = np.zeros(n_psu, bool)
    last[start + count - 1] = True
    keep = ~(last & (g > 1))
    return idx, keep.astype(float)


def _replicate_means(design: Design, totals: np.ndarray, idx: np.ndarray, keep: np.ndarray
                     ) -> np.ndarray:
    """Cell means ``(B, n_cells)`` of one psu total vector over the drawn hauls."""
    starts = np.flatnonzero(np.r_[True, np.diff(design.psu_stratum) != 0])
    t = np.add.reduceat(totals[idx] * keep, starts, axis=1)
    m = np.add.reduceat(design.psu_size[idx] * keep, starts, axis=1)
    cell_starts = np.flatnonzero(np.r_[True, np.diff(design.stratum_cell) != 0])
    return np.add.reduceat(design.stratum_weight * (t / m), cell_starts, axis=1)


def bootstrap_shares(design: Design, kn: np.ndarray, thresholds: np.ndarray,
                     replicates: int, rng: np.random.Generator) -> ShareBoot:
    """Shares of fish with ``kn < threshold`` per cell for every threshold, with
    ``replicates`` haul-level bootstrap replicates drawn from ``rng``."""
    thresholds = np.asarray(thresholds, float)
    below = (kn[:, None] < thresholds[None, :]).astype(float)
    totals = psu_totals(design, below)
    n_str = len(design.stratum_weight)
    size_h = np.bincount(design.psu_stratum, design.psu_size, minlength=n_str)
    mean_h = np.column_stack([np.bincount(design.psu_stratum, totals[:, k], minlength=n_str)
                              for k in range(len(thresholds))]) / size_h[:, None]
    value = combine_strata(design, mean_h)
    idx, keep = draw_hauls(design, replicates, rng)
    reps = np.stack([_replicate_means(design, totals[:, k], idx, keep)
                     for k in range(len(thresholds))], axis=-1)
    single = np.bincount(design.psu_cell, minlength=design.n_cells) < 2
    reps[:, single, :] = np.nan
    return ShareBoot(thresholds=thresholds, value=value, replicates=reps)
