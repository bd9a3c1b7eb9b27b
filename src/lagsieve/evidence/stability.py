"""Does a relationship hold over the whole record? The break test and moving-window
correlations of every hypothesis graded weak or better (or set aside for no forecast skill,
which a link that switched off earns), at its selected lag.

For each such hypothesis (``TESTED_GRADES``) with at least ``BREAK_MIN_YEARS`` overlapping
years: the sup-F test of a change in the slope of y_t = a + b x_{t-k} + e_t at an unknown year,
the intercept free to change at the same year (:func:`lagsieve.stats.breaks.slope_break_sup_f`,
Andrews 1993, 15% trimmed), and its p-value: the larger of two surrogate p-values, so that a
change is declared only when it stands out under both nulls of an unchanged slope (an
intersection-union rule, Berger 1982): (1) the screen's own surrogate drivers
(:func:`lagsieve.screen.hypothesis.driver_batch`: same seed, method and number, each tested at
the same lag in the same years against the response itself), which keep the driver's
autocorrelation; (2) as many IAAFT surrogates of the residuals of the real driver's whole-record
line (their own values, heavy tails included, and their autocorrelation; Schreiber & Schmitz
1996), each tested on the real driver in place of the response, in the manner of the residual
permutations of Freedman & Lane (1983), drawn from the study seed and the hypothesis. The F
statistic depends neither on a nor on b, so both are nulls of an unchanged slope that keep
autocorrelation, which the asymptotic distribution of the sup-F (independent errors) does not.
Alone, (1) was liberal under heavy-tailed noise and (2) with a strongly autocorrelated response
and driver (``bench/README.md``). Then the most likely break year (where the real driver's
F is largest) with Bai's (1997) 95% interval, and the slopes before and after with their
standard errors. The flag ``unstable`` is raised when the break p is at most alpha
(:func:`lagsieve.evidence.grading.unstable`).

Moving-window correlations (``WINDOW_YEARS`` consecutive overlapping years) with the pointwise
95% band of the screen's own surrogate drivers
(:func:`lagsieve.screen.hypothesis.driver_batch`) go to ``windows.csv`` (``WINDOW_COLUMNS``) for the report.

Calibration (``bench/calibration.py``): the false-positive rate of ``unstable`` on stationary
worlds with a real, unchanging effect, and its power on a planted switch, are in
``bench/README.md``.

Berger, R.L. (1982) Multiparameter hypothesis testing and acceptance sampling. Technometrics
    24:295-300 (from memory).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from lagsieve.evidence.grading import unstable
from lagsieve.evidence.vocabulary import FLAGS
from lagsieve.prep.align import shift_batch
from lagsieve.screen.hypothesis import driver_batch, driver_rng, surrogate_p
from lagsieve.stats.breaks import WINDOW_YEARS, break_fit, slope_break_residual_test, slope_break_sup_f, window_band

#: The grades whose relationship is tested for a change: weak or better, and no-forecast-skill,
#: the grade a link that switched off after the first training window earns (supported in
#: sample, no skill on the later years): the break test says when it stopped.
TESTED_GRADES = ("strong", "moderate", "weak", "no-forecast-skill")
BREAK_MIN_YEARS = 20  # fewer overlapping years: the test is skipped with a note (issue 21)

STABILITY_COLUMNS = ["break_p", "break_f", "break_year", "break_year_low", "break_year_high", "slope_before",
                     "slope_before_se", "slope_after", "slope_after_se", "break_note"]
WINDOW_COLUMNS = ["response", "driver", "lag", "first_year", "last_year", "r", "band_low", "band_high"]


def lagged_pair(table: pd.DataFrame, response: str, driver: str, lag: int, screen: dict):
    """(x batch (1 + B, n), y (n,), years (n,)) on the years where the response and the real
    driver at ``lag`` are both observed; the surrogates are the screen's own."""
    batch = driver_batch(table, driver, int(screen["surrogates"]), screen["surrogate_method"], screen["seed"],
                         screen.get("surrogate_keep_trend", True))
    xk = shift_batch(batch, int(lag))
    y = table[response].to_numpy(float)
    ok = ~(np.isnan(y) | np.isnan(xk[0]))
    return xk[:, ok], y[ok], table.index.to_numpy()[ok]


def break_entries(x: np.ndarray, y: np.ndarray, years: np.ndarray, rng: np.random.Generator) -> dict:
    """The break test's evidence entries of one hypothesis (``STABILITY_COLUMNS``): ``break_p``
    the larger of the surrogate drivers' p (``x[1:]`` against ``y``) and the residual surrogates'
    p (:func:`lagsieve.stats.breaks.slope_break_residual_test`), as the module says."""
    test = slope_break_residual_test(x[0], y, x.shape[0] - 1, rng)
    if np.isnan(test.stat[0]):
        return {"break_note": "break test undefined: the driver is constant on one side of every candidate year"}
    p_drivers = surrogate_p(slope_break_sup_f(x, y).stat)
    fit = break_fit(x[0], y, int(test.at[0]))
    return {"break_p": max(surrogate_p(test.stat), p_drivers), "break_f": float(test.stat[0]),
            "break_year": int(years[fit.at]), "break_year_low": int(years[fit.low]),
            "break_year_high": int(years[fit.high]), "slope_before": fit.slope_before,
            "slope_before_se": fit.slope_before_se, "slope_after": fit.slope_after,
            "slope_after_se": fit.slope_after_se}


def break_rng(screen: dict, key: dict) -> np.random.Generator:
    """The generator of one hypothesis's residual surrogates: from the study seed and the
    hypothesis (response, driver, lag), so results do not depend on the order of hypotheses."""
    return driver_rng(screen["seed"], f"break:{key['response']}:{key['driver']}:{key['lag']}")


def window_rows(x: np.ndarray, y: np.ndarray, years: np.ndarray, key: dict) -> pd.DataFrame:
    """Moving-window r of the real driver with its surrogate band, one row per window."""
    band = window_band(x, y, WINDOW_YEARS)
    return pd.DataFrame({**key, "first_year": years[band.start], "last_year": years[band.start + band.width - 1],
                         "r": band.r, "band_low": band.low, "band_high": band.high}, columns=WINDOW_COLUMNS)


def hypothesis_stability(table: pd.DataFrame, row: dict, screen: dict) -> tuple[dict, pd.DataFrame | None]:
    """Break entries and moving-window rows of one hypothesis row at its selected lag; with
    fewer than ``BREAK_MIN_YEARS`` overlapping years only a note."""
    x, y, years = lagged_pair(table, row["response"], row["driver"], int(row["lag"]), screen)
    if len(y) < BREAK_MIN_YEARS:
        return {"break_note": f"break test skipped: {len(y)} overlapping years, fewer than {BREAK_MIN_YEARS}"}, None
    key = {"response": row["response"], "driver": row["driver"], "lag": int(row["lag"])}
    return break_entries(x, y, years, break_rng(screen, key)), window_rows(x, y, years, key)


def _with_flag(flags: str, add: bool) -> str:
    """``flags`` (``;``-joined) with ``unstable`` added when ``add``, in the vocabulary's order."""
    f = [v for v in str(flags or "").split(";") if v and v != "nan"]
    if add and "unstable" not in f:
        f.append("unstable")
    order = {code: i for i, code in enumerate(FLAGS)}
    return ";".join(sorted(f, key=lambda v: order.get(v, len(order))))


def add_stability(ev: pd.DataFrame, table: pd.DataFrame, screen: dict) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Evidence with ``STABILITY_COLUMNS`` for every hypothesis of ``TESTED_GRADES`` (the
    others get empty entries) and the ``unstable`` flag where the break test finds a change;
    and the moving-window table (``WINDOW_COLUMNS``) of the tested hypotheses."""
    found, win = stability_entries(ev, table, screen)
    return with_stability(ev, found, screen), win


def stability_entries(ev: pd.DataFrame, table: pd.DataFrame, screen: dict) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The break test's ``STABILITY_COLUMNS`` for every row of ``ev`` (empty outside
    ``TESTED_GRADES``; a row's entries depend on its response, driver and lag alone, so a grade
    capped within ``TESTED_GRADES`` later keeps them) and the moving-window table."""
    entries, windows = [], []
    for row in ev.to_dict("records"):
        if row.get("grade") not in TESTED_GRADES or pd.isna(row.get("lag")):
            entries.append({})
            continue
        e, w = hypothesis_stability(table, row, screen)
        entries.append(e)
        if w is not None:
            windows.append(w)
    found = pd.DataFrame(entries, index=ev.index, columns=STABILITY_COLUMNS)
    win = pd.concat(windows, ignore_index=True) if windows else pd.DataFrame(columns=WINDOW_COLUMNS)
    return found, win


def with_stability(ev: pd.DataFrame, found: pd.DataFrame, screen: dict) -> pd.DataFrame:
    """``ev`` with the entries of :func:`stability_entries` and the ``unstable`` flag."""
    ev = ev.copy()
    for col in STABILITY_COLUMNS:
        ev[col] = found[col]
    ev["break_note"] = found["break_note"].astype(object)  # text, also when every entry is empty
    ev["flags"] = [_with_flag(f, unstable(r, screen["alpha"])) for f, r in zip(ev["flags"], ev.to_dict("records"))]
    return ev
