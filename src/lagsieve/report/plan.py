"""Which figures the report draws: the study-wide figures (evidence map, coverage, driver
collinearity) and, per leading hypothesis, its panels, with the tables exported beside them."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from lagsieve.evidence.grading import driver_correlations
from lagsieve.evidence.vocabulary import COLLINEAR_R
from lagsieve.io.names import pair_slug
from lagsieve.prep.align import lagged_pair
from lagsieve.report import figures as fg
from lagsieve.report.context import Context, gam_fit, gam_rows, is_missing, num, p_text, text, top_rows

BASELINE_NAMES = ("climatology", "persistence", "trend")


@dataclass
class Plan:
    """Figure jobs to draw, per top hypothesis its panels (``panels[key]``: row, names and notes),
    and the tables exported beside the figures."""

    jobs: list[fg.FigureJob] = field(default_factory=list)
    panels: dict[str, dict] = field(default_factory=dict)
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)


# ----------------------------------------------------------------------------- study-wide figures
def _plan_map(ctx: Context, plan: Plan) -> None:
    rids, dids = ctx.study.response_ids, ctx.study.driver_ids
    grades = np.full((len(rids), len(dids)), None, dtype=object)
    lags = np.full((len(rids), len(dids)), np.nan)
    for row in ctx.evidence.to_dict("records"):
        if row["response"] in rids and row["driver"] in dids:
            i, j = rids.index(row["response"]), dids.index(row["driver"])
            grades[i, j] = row.get("grade")
            lags[i, j] = np.nan if is_missing(row.get("lag")) else float(row["lag"])
    plan.jobs.append(fg.FigureJob("evidence_map", "evidence_grid", dict(
        grades=grades, lags=lags, row_labels=[ctx.label(r) for r in rids],
        col_labels=[ctx.label(d) for d in dids], invented=ctx.invented)))
    plan.tables["evidence_map"] = pd.DataFrame(grades, index=pd.Index(rids, name="response"), columns=dids)


def _filled_years(ctx: Context, series: list[str], years: np.ndarray) -> np.ndarray:
    filled = np.zeros((len(series), len(years)), dtype=bool)
    if ctx.annual is not None and "filled" in ctx.annual:
        fl = ctx.annual[ctx.annual["filled"].astype(str).str.lower().isin(["true", "1", "1.0"])]
        pos = {y: k for k, y in enumerate(years)}
        for s, y in zip(fl["series"], fl["year"]):
            if s in series and int(y) in pos:
                filled[series.index(s), pos[int(y)]] = True
    return filled


def _coverage_rows(series, rids, years, observed, filled) -> list[dict]:
    rows = []
    for k, s in enumerate(series):
        obs_years = years[observed[k]]
        inner = [int(y) for y in years[~observed[k]] if len(obs_years) and obs_years[0] < y < obs_years[-1]]
        rows.append({"series": s, "role": "response" if s in rids else "driver",
                     "first_year": int(obs_years[0]) if len(obs_years) else None,
                     "last_year": int(obs_years[-1]) if len(obs_years) else None,
                     "years_observed": int(observed[k].sum()),
                     "years_filled": int(filled[k].sum()),
                     "missing_inside": " ".join(map(str, inner))})
    return rows


def _plan_coverage(ctx: Context, plan: Plan) -> None:
    rids = ctx.study.response_ids
    series = [s for s in rids + ctx.study.driver_ids if s in ctx.table.columns]
    years = ctx.table.index.to_numpy()
    observed = np.stack([~np.isnan(ctx.table[s].to_numpy(float)) for s in series])
    filled = _filled_years(ctx, series, years)
    plan.jobs.append(fg.FigureJob("coverage", "coverage", dict(
        series=series, labels=[ctx.label(s) for s in series],
        roles=["response" if s in rids else "driver" for s in series],
        years=years, observed=observed, filled=filled, invented=ctx.invented)))
    plan.tables["coverage"] = pd.DataFrame(_coverage_rows(series, rids, years, observed, filled))


def _plan_collinearity(ctx: Context, plan: Plan) -> None:
    drv = [d for d in ctx.study.driver_ids if d in ctx.table.columns]
    if len(drv) < 2:
        return
    corr = driver_correlations(ctx.table, drv)
    plan.jobs.append(fg.FigureJob("driver_correlation", "driver_correlation", dict(
        corr=corr.to_numpy(float), labels=[ctx.label(d) for d in drv], threshold=COLLINEAR_R,
        invented=ctx.invented)))
    plan.tables["driver_correlations"] = corr.rename_axis("driver").reset_index()


# ----------------------------------------------------------------------------- per hypothesis
def _pick_gam_row(ctx: Context, rid, did, lag: int) -> dict | None:
    rows = gam_rows(ctx, rid, did)
    if not len(rows):
        return None
    same = rows[rows["lag"] == lag]
    return (same if len(same) else rows.sort_values("p_smooth", na_position="last")).iloc[0].to_dict()


def _pair_panels(ctx, key, row, gam_row, gfit, jobs, info) -> None:
    rid, did, lag = row["response"], row["driver"], int(row["lag"])
    pair = lagged_pair(ctx.table, rid, did, lag)
    if pair.n < 3:
        return
    jobs.append(fg.FigureJob(f"{key}__overlay", "overlay", dict(
        years=pair.years, y=pair.y, x=pair.x, lag=lag, response=ctx.label(rid),
        driver=ctx.label(did), invented=ctx.invented)))
    smooth = gfit if (gfit is not None and int(gam_row["lag"]) == lag) else None
    jobs.append(fg.FigureJob(f"{key}__scatter", "scatter", dict(
        x=pair.x, y=pair.y, lag=lag, response=ctx.axis(rid), driver=ctx.axis(did),
        smooth=None if smooth is None else {"grid": smooth["grid"], "fit": smooth["fit"],
                                            "edf": smooth["edf"], "trend": smooth["trend"]},
        invented=ctx.invented)))
    info["names"] += [f"{key}__overlay", f"{key}__scatter"]
    info["scatter_smooth"] = smooth is not None
    info["smooth_trend"] = bool(smooth and smooth["trend"])


def _lag_panel(ctx, key, row, jobs, info) -> None:
    sc = ctx.screen
    rid, did = row["response"], row["driver"]
    prof = sc[(sc["response"] == rid) & (sc["driver"] == did) & (sc["model"] == "linear")].sort_values("lag") \
        if len(sc) else sc
    if not (len(prof) >= 1 and prof["r"].notna().any()):
        return
    rc = fg.r_critical(prof["n_eff"].to_numpy(float))
    jobs.append(fg.FigureJob(f"{key}__lags", "lag_profile", dict(
        lags=prof["lag"].to_numpy(float), r=prof["r"].to_numpy(float), r_crit=rc, chosen=int(row["lag"]),
        r_detrended=prof["r_detrended"].to_numpy(float) if "r_detrended" in prof else None,
        invented=ctx.invented)))
    info["names"].append(f"{key}__lags")
    info["lag_table"] = prof.assign(r_crit=rc)


def _forecast_panel(ctx, key, row, jobs, info) -> None:
    rid, did = row["response"], row["driver"]
    fc = ctx.forecasts
    fc = fc[(fc["response"] == rid) & (fc["driver"] == did)].sort_values("year") if len(fc) else fc
    hardest = text(row.get("oos_hardest"))
    if not (len(fc) and hardest and f"model_{hardest}" in fc):
        return
    bases = {b: fc[f"baseline_{b}"].to_numpy(float) for b in BASELINE_NAMES if f"baseline_{b}" in fc}
    jobs.append(fg.FigureJob(f"{key}__forecasts", "forecasts", dict(
        years=fc["year"].to_numpy(), observed=fc["observed"].to_numpy(float), baselines=bases,
        model=fc[f"model_{hardest}"].to_numpy(float), hardest=hardest, response=ctx.axis(rid),
        driver=ctx.label(did), invented=ctx.invented)))
    info["names"].append(f"{key}__forecasts")
    info["forecast_n"] = len(fc)


def _null_panel(ctx, key, row, jobs, info) -> None:
    nl = ctx.nulls
    nl = nl[(nl["response"] == row["response"]) & (nl["driver"] == row["driver"])] if len(nl) else nl
    panels = []
    for test, pcol, title in (("in-sample", "p_surrogate", "In sample"),
                              ("out-of-sample", "oos_p_surrogate", "Out of sample")):
        part = nl[nl["test"] == test] if len(nl) else nl
        if len(part) and part["value"].notna().any():
            stat = text(part["statistic"].iloc[0]) if "statistic" in part else test
            panels.append({"values": part["value"].to_numpy(float),
                           "observed": float(part["observed"].iloc[0]), "label": stat,
                           "p": None if is_missing(row.get(pcol)) else float(row[pcol]), "title": title})
    if panels:
        jobs.append(fg.FigureJob(f"{key}__nulls", "null_distributions", dict(panels=panels, invented=ctx.invented)))
        info["names"].append(f"{key}__nulls")
        info["null_n"] = max(len(p["values"]) for p in panels)


def _gam_panel(ctx, key, row, gam_row, gfit, jobs, info) -> None:
    if gfit is None:
        return
    gl = int(gam_row["lag"])
    line = (f"lag {gl}: edf {num(gam_row.get('edf'), '{:.1f}')}, deviance explained "
            f"{num(gam_row.get('deviance_explained'), '{:.0%}')}, p(smooth) {p_text(gam_row.get('p_smooth'))}")
    jobs.append(fg.FigureJob(f"{key}__gam", "gam_effect", dict(
        grid=gfit["grid"], curve=gfit["curve"], lower=gfit["lo"], upper=gfit["hi"],
        x_obs=gfit["pair"].x, driver=ctx.axis(row["driver"]) + ("" if gl == 0 else f", {gl}-year lead"),
        response=ctx.label(row["response"]), stats_line=line, invented=ctx.invented)))
    info["names"].append(f"{key}__gam")
    info["gam_row"] = gam_row


def _plan_hypothesis(ctx: Context, row: dict, plan: Plan) -> None:
    rid, did, lag = row["response"], row["driver"], int(row["lag"])
    key = pair_slug(rid, did)
    info = {"row": row, "names": []}
    gam_row = _pick_gam_row(ctx, rid, did, lag)
    gfit = gam_fit(ctx, rid, did, int(gam_row["lag"])) if gam_row is not None else None
    _pair_panels(ctx, key, row, gam_row, gfit, plan.jobs, info)
    _lag_panel(ctx, key, row, plan.jobs, info)
    _forecast_panel(ctx, key, row, plan.jobs, info)
    _null_panel(ctx, key, row, plan.jobs, info)
    _gam_panel(ctx, key, row, gam_row, gfit, plan.jobs, info)
    plan.panels[key] = info


def plan_figures(ctx: Context) -> Plan:
    """Figure jobs of the study plus, per top hypothesis, which panels exist and their notes."""
    plan = Plan()
    _plan_map(ctx, plan)
    _plan_coverage(ctx, plan)
    _plan_collinearity(ctx, plan)
    for row in top_rows(ctx):
        _plan_hypothesis(ctx, row, plan)
    return plan
