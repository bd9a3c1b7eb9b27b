"""Haul-aware indices per year x season x age group, and the season adjustment.

Design-based estimation with the haul (``set``) as the cluster, batched over every cell at
once (``np.bincount`` over fish, hauls, strata and cells):

* Cell mean: the ratio (fish-weighted) mean of the hauls of the cell, ``sum y / n``; with
  strata, the stratified mean ``sum_h W_h ybar_h`` with area weights ``W_h = A_h / sum A``
  over the strata sampled in the cell (Cochran 1977, Sampling Techniques, 3rd ed., ch. 5
  and the ratio estimator of cluster samples, ch. 9.2 and 6; recalled from memory).
* Its variance, hauls as primary units: ``var(ybar_h) = G/(G-1) sum_g (t_g - m_g ybar_h)^2
  / n_h^2`` (t_g the haul's total, m_g its fish, G its hauls), summed as ``sum W_h^2 var_h``.
  Without strata this is exactly the cluster-robust (CR1) variance of an intercept-only OLS
  fit with the haul as cluster (statsmodels ``cov_type="cluster"``; the tests check it).
  A stratum with a single haul gives no variance of its own; such a cell falls back to the
  unstratified variance (collapsed strata).
* The intraclass correlation rho of the cell by the one-way ANOVA estimator, unbalanced
  form: ``(MSB - MSW) / (MSB + (m0 - 1) MSW)``, ``m0 = (n - sum m_g^2 / n) / (G - 1)``
  (Donner 1986, Int. Stat. Rev. 54:67-82; recalled from memory); the design effect
  ``1 + (m - 1) rho`` with m the mean haul size (Kish 1965, Survey Sampling), rho taken as 0
  when the estimate is negative; the effective number of fish ``n / deff``.

Season adjustment (per age group): the cell means of log Kn follow ``year + season``, fitted
by weighted least squares with weights 1/se^2 over all years; the adjusted index of a year
is its year effect plus the mean of the season effects (the condition of a standard year
with every season), so a change in which months were sampled does not move it. As the fit
is linear in the cell means, it is an operator ``H`` (years x cells); it is applied to the
poor-condition shares and their bootstrap replicates too. The variance is ``H V H'`` times
the residual dispersion ``max(1, chi2 / df)``, which widens the interval when the season
cycle changes between years.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = ["CELL_KEYS", "CellStats", "Design", "SeasonFit", "build_design", "cell_means", "combine_strata", "psu_totals",
           "cell_icc", "season_fits", "season_operator"]

CELL_KEYS = ["group", "season", "year"]


@dataclass(frozen=True)
class Design:
    """The sampling structure: fish -> haul-in-cell (psu) -> stratum-in-cell -> cell, sorted
    so that the psus of a stratum and the strata of a cell are contiguous."""

    cells: pd.DataFrame         # one row per cell: group, season, year
    fish_psu: np.ndarray        # (n_fish,) psu of every fish
    psu_stratum: np.ndarray     # (n_psu,) stratum of every psu (non-decreasing)
    psu_cell: np.ndarray        # (n_psu,) cell of every psu (non-decreasing)
    psu_size: np.ndarray        # (n_psu,) fish per psu
    stratum_cell: np.ndarray    # (n_strata,) cell of every stratum (non-decreasing)
    stratum_weight: np.ndarray  # (n_strata,) W_h, summing to 1 within a cell

    @property
    def n_cells(self) -> int:
        return len(self.cells)


def build_design(fish: pd.DataFrame) -> Design:
    """The design of fish with columns group, season, year, haul, stratum, stratum_area."""
    keys = fish[CELL_KEYS + ["stratum", "haul"]]
    cell = keys.groupby(CELL_KEYS, sort=True).ngroup().to_numpy()
    stratum = keys.groupby(CELL_KEYS + ["stratum"], sort=True).ngroup().to_numpy()
    psu = keys.groupby(CELL_KEYS + ["stratum", "haul"], sort=True).ngroup().to_numpy()
    n_psu, n_str = psu.max() + 1, stratum.max() + 1
    psu_stratum = np.zeros(n_psu, np.int64)
    psu_stratum[psu] = stratum
    psu_cell = np.zeros(n_psu, np.int64)
    psu_cell[psu] = cell
    stratum_cell = np.zeros(n_str, np.int64)
    stratum_cell[stratum] = cell
    area = np.ones(n_str)
    area[stratum] = np.nan_to_num(fish["stratum_area"].to_numpy(float), nan=1.0)
    weight = area / np.bincount(stratum_cell, area)[stratum_cell]
    cells = keys.drop_duplicates(CELL_KEYS).sort_values(CELL_KEYS)[CELL_KEYS]
    return Design(cells=cells.reset_index(drop=True), fish_psu=psu, psu_stratum=psu_stratum,
                  psu_cell=psu_cell, psu_size=np.bincount(psu).astype(float),
                  stratum_cell=stratum_cell, stratum_weight=weight)


def _sums(index: np.ndarray, values: np.ndarray, n: int) -> np.ndarray:
    """Sums of the rows of ``values`` (n_items,) or (n_items, K) by ``index``."""
    if values.ndim == 1:
        return np.bincount(index, values, minlength=n)
    return np.column_stack([np.bincount(index, v, minlength=n) for v in values.T])


def _ratio_var(groups: np.ndarray, totals: np.ndarray, sizes: np.ndarray, n_groups: int
               ) -> tuple[np.ndarray, np.ndarray]:
    """Ratio mean and its with-replacement cluster variance per group of psus."""
    col = (slice(None),) + (None,) * (totals.ndim - 1)
    n = np.bincount(groups, sizes, minlength=n_groups)
    mean = _sums(groups, totals, n_groups) / n[col]
    resid = totals - sizes[col] * mean[groups]
    count = np.bincount(groups, minlength=n_groups).astype(float)
    with np.errstate(divide="ignore", invalid="ignore"):
        factor = np.where(count > 1, count / (count - 1), np.nan)
        var = factor[col] * _sums(groups, resid**2, n_groups) / (n**2)[col]
    return mean, var


def psu_totals(design: Design, y: np.ndarray) -> np.ndarray:
    """Totals of ``y`` (n_fish,) or (n_fish, K) per psu."""
    return _sums(design.fish_psu, y, len(design.psu_size))


def combine_strata(design: Design, stratum_means: np.ndarray) -> np.ndarray:
    """Cell means ``sum_h W_h ybar_h`` from stratum means (n_strata, ...)."""
    col = (slice(None),) + (None,) * (stratum_means.ndim - 1)
    return _sums(design.stratum_cell, design.stratum_weight[col] * stratum_means,
                 design.n_cells)


def cell_means(design: Design, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Design-based cell means of ``y`` and their variances (haul as cluster, strata with
    area weights; collapsed to the unstratified variance where a stratum has one haul)."""
    totals = psu_totals(design, y)
    n_str = len(design.stratum_weight)
    mean_h, var_h = _ratio_var(design.psu_stratum, totals, design.psu_size, n_str)
    col = (slice(None),) + (None,) * (totals.ndim - 1)
    mean = combine_strata(design, mean_h)
    var = _sums(design.stratum_cell, design.stratum_weight[col] ** 2 * var_h, design.n_cells)
    _, var_flat = _ratio_var(design.psu_cell, totals, design.psu_size, design.n_cells)
    return mean, np.where(np.isfinite(var), var, var_flat)


@dataclass(frozen=True)
class CellStats:
    """Per cell: fish, hauls, intraclass correlation, design effect, effective fish."""

    n_fish: np.ndarray
    n_sets: np.ndarray
    rho: np.ndarray
    design_effect: np.ndarray
    n_effective: np.ndarray


def cell_icc(design: Design, y: np.ndarray) -> CellStats:
    """One-way ANOVA intraclass correlation of ``y`` (n_fish,) between the hauls of each cell,
    the Kish design effect and the effective number of fish."""
    nc, m = design.n_cells, design.psu_size
    t = psu_totals(design, y)
    n = np.bincount(design.psu_cell, m, minlength=nc)
    g = np.bincount(design.psu_cell, minlength=nc).astype(float)
    mean = np.bincount(design.psu_cell, t, minlength=nc) / n
    ssb = np.bincount(design.psu_cell, m * (t / m - mean[design.psu_cell]) ** 2, minlength=nc)
    fish_cell = design.psu_cell[design.fish_psu]
    ssw = np.bincount(fish_cell, y**2, minlength=nc) - np.bincount(design.psu_cell, t**2 / m,
                                                                     minlength=nc)
    with np.errstate(divide="ignore", invalid="ignore"):
        msb, msw = ssb / (g - 1), np.maximum(ssw, 0) / (n - g)
        m0 = (n - np.bincount(design.psu_cell, m**2, minlength=nc) / n) / (g - 1)
        rho = np.where((g > 1) & (n > g), (msb - msw) / (msb + (m0 - 1) * msw), np.nan)
    rho = np.where((g == n) & (n > 1), 0.0, rho)  # every fish its own haul: no haul effect
    deff = 1 + (n / g - 1) * np.clip(rho, 0, None)
    return CellStats(n_fish=n.astype(np.int64), n_sets=g.astype(np.int64), rho=rho,
                     design_effect=deff, n_effective=n / deff)


@dataclass(frozen=True)
class SeasonFit:
    """The season adjustment of one age group: ``adjusted = H @ cell values`` over the cells
    ``cells`` (positions in the design's cell table), one row per year of ``years``."""

    years: np.ndarray
    cells: np.ndarray          # cell positions used (finite, positive variance)
    H: np.ndarray              # (n_years, n_cells_used)
    cov: np.ndarray            # (n_years, n_years) covariance of the adjusted index
    season_effect: dict        # season -> effect relative to the mean season
    identified: bool           # False when seasons and years are not connected


def season_operator(years: np.ndarray, seasons: np.ndarray, y: np.ndarray, var: np.ndarray
                    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, dict, bool]:
    """WLS fit of ``y = year + season`` with weights ``1/var`` over the cells of one age
    group. Returns (year labels, H, covariance of H @ y, season effects, identified)."""
    year_labels, yi = np.unique(years, return_inverse=True)
    season_labels, si = np.unique(seasons, return_inverse=True)
    ny, ns = len(year_labels), len(season_labels)
    X = np.zeros((len(y), ny + ns - 1))
    X[np.arange(len(y)), yi] = 1.0
    X[si > 0, ny + si[si > 0] - 1] = 1.0
    w = 1.0 / var
    xtwx = X.T @ (X * w[:, None])
    identified = np.linalg.matrix_rank(xtwx) == X.shape[1]
    inv = np.linalg.pinv(xtwx)
    L = np.zeros((ny, X.shape[1]))
    L[:, :ny] = np.eye(ny)
    L[:, ny:] = 1.0 / ns  # + mean season effect (the first season's effect is 0)
    H = L @ inv @ (X * w[:, None]).T
    beta = inv @ (X.T @ (w * y))
    df = len(y) - X.shape[1]
    chi2 = float(np.sum(w * (y - X @ beta) ** 2))
    dispersion = max(1.0, chi2 / df) if df > 0 else 1.0
    gamma = np.concatenate([[0.0], beta[ny:]])
    effects = dict(zip(season_labels.tolist(), (gamma - gamma.mean()).tolist()))
    return year_labels, H, dispersion * (L @ inv @ L.T), effects, bool(identified)


def season_fits(design: Design, mean: np.ndarray, var: np.ndarray) -> dict[str, SeasonFit]:
    """The season adjustment of every age group (cells with a finite, positive variance)."""
    fits = {}
    cells = design.cells
    usable = np.isfinite(mean) & np.isfinite(var) & (var > 0)
    for group, part in cells.groupby("group", sort=False):
        idx = part.index.to_numpy()[usable[part.index.to_numpy()]]
        if len(idx) == 0:
            continue
        years, H, cov, effects, ok = season_operator(
            cells.year.to_numpy()[idx], cells.season.to_numpy()[idx], mean[idx], var[idx])
        fits[group] = SeasonFit(years=years, cells=idx, H=H, cov=cov, season_effect=effects,
                                identified=ok)
    return fits
