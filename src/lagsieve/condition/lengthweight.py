"""The length-weight reference and relative condition.

The reference is the log-log regression ``log W = log a + b log L`` (Le Cren 1951,
J. Anim. Ecol. 20:201-219), fitted once on the fish of the reference years and kept for
every year, so that the index does not move when the reference would be refitted. Relative
condition is ``Kn = W / (a L^b)``; the indices work with ``log Kn``, the residual of the
fish from the reference line.

Robustness to gross outliers (a weight typed with a decimal slip, a gutted fish among whole
ones) comes from a Huber M-estimate (Huber 1964, Ann. Math. Stat. 35:73-101) computed by
iteratively reweighted least squares, with the scale re-estimated at every step as the
normalised median absolute residual (MAD / 0.6745) and the tuning constant 1.345, which keeps
95% efficiency when the errors are normal (Holland & Welsch 1977). This is the estimator of
statsmodels' ``RLM(..., M=HuberT())`` with its default MAD scale, against which the tests
check it. Why Huber rather than trimming at k robust SDs: it needs no cut-off choice beyond
the standard constant, never drops a fish outright, and its weights are continuous, so a
fish near the edge cannot flip the fit. Points with high leverage in length are not
down-weighted by Huber weights; in a length-weight sample lengths are measured on a board
and rarely wrong by much on the log scale.

Plausibility (Froese 2006, J. Appl. Ichthyol. 22:241-253): b of fish usually lies in
2.5-3.5. A unit mistake does not move b on the log-log scale (it shifts log a), so units are
checked separately by Fulton's K = 100 W / L^3 at the median fish (W in g, L in cm; near 1 for
most fish, common practice without a single source): far below 0.1 means lengths in mm or
weights in kg, far above 10 lengths in m or weights in mg.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from lagsieve.errors import InputErrors, InputProblem, InputWarning

__all__ = ["B_RANGE", "HUBER_T", "LengthWeight", "fit_reference", "huber_line", "log_kn"]

HUBER_T = 1.345
B_RANGE = (2.5, 3.5)
FULTON_RANGE = (0.1, 10.0)
MIN_REFERENCE_FISH = 10
_MAD = 0.6744897501960817  # the normal quantile at 0.75: MAD / 0.6745 estimates the SD


@dataclass(frozen=True)
class LengthWeight:
    """The reference: W = a L^b (L in cm, W in g) with the fit's details."""

    a: float
    b: float
    se_b: float
    log_a: float
    scale: float             # robust residual SD on the natural-log scale
    n_fish: int
    downweighted: int        # fish with Huber weight below 1
    years: tuple[int, int]


def _wls(x: np.ndarray, y: np.ndarray, w: np.ndarray) -> np.ndarray:
    X = np.column_stack([np.ones_like(x), x]) * np.sqrt(w)[:, None]
    return np.linalg.lstsq(X, y * np.sqrt(w), rcond=None)[0]


def huber_line(x: np.ndarray, y: np.ndarray, t: float = HUBER_T, tol: float = 1e-12,
               max_iter: int = 200) -> tuple[np.ndarray, np.ndarray, float]:
    """Huber M-estimate of ``y = c0 + c1 x`` by IRLS from the OLS start, the scale updated to
    MAD/0.6745 of the residuals at every step. Returns (coefficients, weights, scale)."""
    coef = _wls(x, y, np.ones_like(x))
    w = np.ones_like(x)
    scale = np.median(np.abs(y - coef[0] - coef[1] * x)) / _MAD
    for _ in range(max_iter):
        if scale == 0:
            break
        u = np.abs(y - coef[0] - coef[1] * x) / scale
        w = np.where(u <= t, 1.0, t / np.maximum(u, 1e-300))
        new = _wls(x, y, w)
        scale = np.median(np.abs(y - new[0] - new[1] * x)) / _MAD
        done = np.max(np.abs(new - coef)) < tol * (1 + np.max(np.abs(coef)))
        coef = new
        if done:
            break
    return coef, w, float(scale)


def _huber_se_b(x: np.ndarray, resid: np.ndarray, scale: float, t: float) -> float:
    """Huber's (1981) H1 sandwich-type standard error of the slope, as statsmodels' RLM
    reports by default (cov='H1')."""
    u = resid / scale
    psi = np.clip(u, -t, t)
    dpsi = (np.abs(u) <= t).astype(float)
    n, p = len(x), 2
    m = dpsi.mean()
    k = 1 + (p / n) * dpsi.var() / m**2
    X = np.column_stack([np.ones_like(x), x])
    cov = k**2 * (np.sum(psi**2) / (n - p)) / m**2 * np.linalg.inv(X.T @ X) * scale**2
    return float(np.sqrt(cov[1, 1]))


def fit_reference(fish: pd.DataFrame, years: tuple[int, int], file: str | None = None
                  ) -> tuple[LengthWeight, list[InputWarning]]:
    """Fit the reference on the fish of ``years`` (inclusive); warn when b is outside
    2.5-3.5 or Fulton's K says the units are wrong. Raises :class:`InputErrors` when the
    reference period holds fewer than 10 fish."""
    ref = fish[(fish["year"] >= years[0]) & (fish["year"] <= years[1])]
    if len(ref) < MIN_REFERENCE_FISH:
        have = f"{fish['year'].min():.0f}-{fish['year'].max():.0f}" if len(fish) else "none"
        raise InputErrors([InputProblem(
            what=f"the reference years {years[0]}-{years[1]} hold {len(ref)} fish "
                 f"(fewer than {MIN_REFERENCE_FISH}; the samples cover {have})",
            fix="set reference_years to years with samples", file=file,
            key="condition.reference_years")])
    x, y = np.log(ref["length"].to_numpy(float)), np.log(ref["weight"].to_numpy(float))
    coef, w, scale = huber_line(x, y)
    se_b = _huber_se_b(x, y - coef[0] - coef[1] * x, scale, HUBER_T)
    lw = LengthWeight(a=float(np.exp(coef[0])), b=float(coef[1]), se_b=se_b,
                      log_a=float(coef[0]), scale=scale, n_fish=len(ref),
                      downweighted=int(np.sum(w < 1)), years=tuple(years))
    fulton = 100 * np.median(ref["weight"].to_numpy(float) / ref["length"].to_numpy(float) ** 3)
    return lw, _plausibility(lw, float(fulton), file)


def _plausibility(lw: LengthWeight, fulton: float, file: str | None) -> list[InputWarning]:
    warnings = []
    if not B_RANGE[0] <= lw.b <= B_RANGE[1]:
        cause = ("length and weight look swapped (b near 1/3)" if 0.2 < lw.b < 0.5 else
                 "check for lengths or weights in mixed units, whole and gutted weights "
                 "mixed, or too narrow a range of lengths in the reference years")
        warnings.append(InputWarning(
            what=f"the length-weight exponent b = {lw.b:.2f} is outside the usual "
                 f"{B_RANGE[0]}-{B_RANGE[1]} for fish (Froese 2006); {cause}", file=file))
    if fulton < FULTON_RANGE[0]:
        warnings.append(InputWarning(
            what=f"Fulton's K of the median fish is {fulton:.3g}, far below 1: lengths look "
                 "like mm (write the header 'length (mm)') or weights like kg "
                 "('weight (kg)')", file=file))
    elif fulton > FULTON_RANGE[1]:
        warnings.append(InputWarning(
            what=f"Fulton's K of the median fish is {fulton:.3g}, far above 1: lengths look "
                 "like m ('length (m)') or weights like mg ('weight (mg)')", file=file))
    return warnings


def log_kn(fish: pd.DataFrame, lw: LengthWeight) -> np.ndarray:
    """log Kn = log W - log a - b log L of every fish (Le Cren 1951)."""
    return (np.log(fish["weight"].to_numpy(float)) - lw.log_a
            - lw.b * np.log(fish["length"].to_numpy(float)))
