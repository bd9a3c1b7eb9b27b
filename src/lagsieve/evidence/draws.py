"""Assessment draws of a response (response key ``draws``): is a grade the same whichever
draw of the response is taken?

For every hypothesis of a response with draws, and for each of ``screen.draws`` draws (chosen
reproducibly from the seed: :func:`lagsieve.stats.draws.pick_draws`), the statistics that the
response enters are computed again with the draw in place of the response, and the
hypothesis is graded again by the study's rules (:func:`lagsieve.evidence.grading.grade_row`):

* in sample: the best-lag directed r of every draw in one batched call (the lag chosen
  within every draw), judged against the hypothesis's own surrogate null of the screen
  (``nulls.csv``: the surrogates are not drawn again); with the spline screened too, the
  spline's surrogate p is held at the response's and the min-p combination's price (the
  screen's p over the smaller of its two p-values) is kept; r, the naive and adjusted p and
  the HAC slope at the hypothesis's lag (one batched call over the draws);
* the q-value: Benjamini-Hochberg over the study with the other hypotheses' p-values fixed;
* out of sample: the rolling origin of the screen (:func:`lagsieve.stats.backtest.rolling_origin`,
  lag, baseline and form chosen at every origin) for the real driver on every draw, the skill
  against every baseline and its surrogate p against the hypothesis's out-of-sample null; all
  draws in one batch (:func:`lagsieve.stats.draws.draw_skills`), or draw by draw when the fits
  are weighted (each draw's inverse-variance weights are its own).

Held fixed at the response's values: the detrended and differenced correlations, the trend
tests, the effective sample size, leave-one-out, the re-test on the latest years, the break
test, collinearity and a cap by a rival or a collinear partner (a draw is never graded above
a capped grade). The columns: ``draw_n`` (draws used), ``draw_grade_share`` (share of them in
which the hypothesis earns its grade), ``draw_slope`` and ``draw_slope_se`` (the slope at the
hypothesis's lag combined across the draws by Rubin's rules, Rubin 1987), ``draw_between_share``
(the share of that variance from the draws disagreeing) and ``draw_fragile`` (the grade holds
in fewer than ``FRAGILE_SHARE`` of the draws).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats as _sps

from lagsieve.evidence.grading import flags_for, grade_row
from lagsieve.evidence.vocabulary import GRADE_ORDER
from lagsieve.prep.align import apply_transform, forecast_frame, inverse_variance_weights, shift_batch
from lagsieve.stats import correlation as st
from lagsieve.stats.backtest import BASELINES, rolling_origin
from lagsieve.stats.draws import best_lag_stats, draw_skills, draw_slopes, pick_draws, rubin
from lagsieve.stats.surrogates import monte_carlo_p

DRAW_COLUMNS = ["draw_n", "draw_grade_share", "draw_slope", "draw_slope_se", "draw_between_share", "draw_fragile"]
#: A grade that holds in fewer than this share of the draws depends on the draw taken (our own
#: rule, no published source: four draws in five).
FRAGILE_SHARE = 0.8


def draw_matrix(draws: pd.DataFrame, table: pd.DataFrame, transform: str, n_wanted: int, seed: int,
                response_id: str) -> np.ndarray:
    """(D, n_years) the chosen draws on the table's year axis, transformed as the response is."""
    labels = pick_draws(draws["draw"].to_numpy(), n_wanted, seed, response_id)
    w = draws[draws["draw"].isin(labels)].pivot(index="draw", columns="year", values="value")
    return apply_transform(w.reindex(columns=table.index).to_numpy(float), transform)


def _null(nulls: pd.DataFrame, response: str, driver: str, test: str) -> np.ndarray:
    """The screen's null sample of one hypothesis (its response and driver) and test."""
    n = nulls[(nulls["response"] == response) & (nulls["driver"] == driver) & (nulls["test"] == test)]
    return n["value"].to_numpy(float)


def _in_sample(row: dict, table: pd.DataFrame, Y: np.ndarray, lags: list[int], null: np.ndarray) -> dict:
    """Per draw (arrays (D,)): r, slope and its se at the hypothesis's lag, the surrogate p."""
    x = table[row["driver"]].to_numpy(float)[None, :]
    x_lags = np.concatenate([shift_batch(x, k) for k in lags])
    r, best = best_lag_stats(x_lags, Y, row.get("expected_sign", "any"))
    li = lags.index(int(row["lag"]))
    ok = ~(np.isnan(x_lags[li]) | np.isnan(Y).any(0))
    slope, se = draw_slopes(x_lags[li, ok], Y[:, ok])
    p = monte_carlo_p(best, null)
    p_lin, p_gam = row.get("p_surrogate_linear"), row.get("p_surrogate_gam")
    if p_gam is not None and np.isfinite(p_gam) and np.isfinite(p_lin):  # spline screened: its p held fixed
        price = row["p_surrogate"] / min(p_lin, p_gam)
        p = np.minimum(1.0, np.minimum(p, p_gam) * price)
    return {"r": r[:, li], "slope": slope, "slope_se": se, "p_surrogate": p, "n": int(ok.sum())}


def _out_of_sample(row: dict, table: pd.DataFrame, Y: np.ndarray, lags: list[int], screen: dict,
                   se: np.ndarray | None, null: np.ndarray) -> dict:
    """Per draw: skill against every baseline and the surrogate p of the skill (rolling origin)."""
    rid, did = row["response"], row["driver"]
    ff = forecast_frame(table, rid, did, lags)
    initial = int(row["oos_initial"])
    x = table[did].to_numpy(float)[None, :]
    X = np.stack([shift_batch(x, k)[:, ff.rows] for k in lags], axis=1)  # (1, L, T)
    models = tuple(m for m in ("linear", "gam") if m in screen["models"])
    if screen.get("weights") == "inverse-variance" and se is not None:  # each draw weighs its years its own way
        skills = {b: [] for b in BASELINES}
        for y_all in Y:
            y, ylag = y_all[ff.rows], y_all[ff.rows - 1]
            w = inverse_variance_weights(se[ff.rows], n_ref=initial, y=y)
            ro = rolling_origin(y, ylag, ff.years, X, np.asarray(lags), initial, models=models, weights=w)
            for b, s in ro.skill.items():
                skills[b].append(float(s[0]))
    else:  # unweighted: every draw in one batch
        skills = draw_skills(Y[:, ff.rows], Y[:, ff.rows - 1], ff.years, X[0], lags, initial, models)
    out = {f"oos_skill_{b}": np.asarray(v, float) for b, v in skills.items()}
    out["oos_skill"] = np.min(np.stack(list(out.values())), axis=0)
    out["oos_p_surrogate"] = monte_carlo_p(out["oos_skill"], null)
    return out


def _capped_at(row: dict, screen: dict) -> str | None:
    """The grade a cap (rival, collinear partner) set, when the rules alone give a better one."""
    flags = [f for f in str(row.get("flags") or "").split(";") if f]
    rules = grade_row(row, flags, screen["alpha"], screen["fdr"], screen["min_overlap"])
    return row["grade"] if GRADE_ORDER[rules] < GRADE_ORDER[row["grade"]] else None


def draw_qvalues(study_p: np.ndarray, index: int, p_draws: np.ndarray) -> np.ndarray:
    """(D,) the Benjamini-Hochberg q-value of hypothesis ``index`` with its p in each draw and
    every other p of the study fixed: :func:`lagsieve.stats.multiplicity.bh_qvalues` of each
    draw's p-values, all draws in one call of scipy's ``false_discovery_control`` along rows."""
    p_draws = np.asarray(p_draws, float)
    ok = ~np.isnan(study_p)
    ok[index] = True
    P = np.tile(study_p[ok], (len(p_draws), 1))
    at = int(np.sum(ok[:index]))
    P[:, at] = p_draws
    q = np.full(len(p_draws), np.nan)
    real = ~np.isnan(p_draws)
    if real.any():
        q[real] = _sps.false_discovery_control(P[real], axis=-1, method="bh")[:, at]
    return q


def draw_grades(row: dict, per_draw: dict, study_p: np.ndarray, index: int, screen: dict) -> list[str]:
    """The grade of the hypothesis in every draw: its row with the per-draw values in place."""
    alpha, fdr = screen["alpha"], screen["fdr"]
    cap = _capped_at(row, screen)
    per = dict(per_draw, p_naive=st.correlation_p(per_draw["r"], row["n"]),
               p_adjusted=st.correlation_p(per_draw["r"], row["n_eff"]),
               q_value=draw_qvalues(study_p, index, per_draw["p_surrogate"]))
    grades = []
    for d in range(len(per_draw["r"])):
        new = dict(row, **{k: v[d] for k, v in per.items() if isinstance(v, np.ndarray)})
        g = grade_row(new, flags_for(new, alpha, fdr), alpha, fdr, screen["min_overlap"])
        if cap is not None and GRADE_ORDER[g] < GRADE_ORDER[cap]:
            g = cap
        grades.append(g)
    return grades


def judge_hypothesis(row: dict, index: int, study_p: np.ndarray, table: pd.DataFrame, Y: np.ndarray,
                     lags: list[int], nulls: pd.DataFrame, screen: dict, se: np.ndarray | None) -> dict:
    """The draw columns of one hypothesis (empty when it has no lag or no forecasts)."""
    if pd.isna(row.get("lag")) or not str(row.get("status", "")).startswith("ok"):
        return {}
    per = _in_sample(row, table, Y, lags, _null(nulls, row["response"], row["driver"], "in-sample"))
    pooled = rubin(per["slope"], per["slope_se"] ** 2)
    out = {"draw_n": len(Y), "draw_slope": float(pooled.estimate), "draw_slope_se": float(pooled.se),
           "draw_between_share": float(pooled.between_share)}
    if pd.isna(row.get("oos_skill")) or pd.isna(row.get("oos_initial")):
        return out
    per.update(_out_of_sample(row, table, Y, lags, screen, se, _null(nulls, row["response"], row["driver"], "out-of-sample")))
    per.pop("n")
    grades = draw_grades(row, per, study_p, index, screen)
    share = float(np.mean([g == row["grade"] for g in grades]))
    return dict(out, draw_grade_share=share, draw_fragile=bool(share < FRAGILE_SHARE))


def add_draws(ev: pd.DataFrame, table: pd.DataFrame, draws: dict[str, np.ndarray], nulls: pd.DataFrame,
              lags: dict[str, list[int]], screen: dict, se: pd.DataFrame | None = None) -> pd.DataFrame:
    """``ev`` with ``DRAW_COLUMNS``: every hypothesis of a response in ``draws`` (response id ->
    (D, n_years) on the table's axis, :func:`draw_matrix`) judged draw by draw; ``nulls`` the
    screen's null statistics of those responses, ``lags`` the lags of every driver."""
    ev = ev.copy()
    for c in DRAW_COLUMNS:
        ev[c] = np.nan
    ev["draw_fragile"] = ev["draw_fragile"].astype(object)
    study_p = ev["p_surrogate"].to_numpy(float)
    for i, row in enumerate(ev.to_dict("records")):
        Y = draws.get(row["response"])
        if Y is None:
            continue
        rid = row["response"]
        s = None if se is None or rid not in se else se[rid].reindex(table.index).to_numpy(float)
        got = judge_hypothesis(row, i, study_p, table, Y, lags[row["driver"]], nulls, screen, s)
        for k, v in got.items():
            ev.at[ev.index[i], k] = v
    return ev
