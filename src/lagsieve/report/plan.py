"""Which figures the report draws: the study-wide figures (evidence map, coverage, driver
collinearity) and, per leading hypothesis, its panels, with the tables exported beside them.

Large studies get summary forms instead of figures that grow with the number of drivers (a
500-driver heatmap at 0.5 inch per driver and 300 dpi needed 15 GB): beyond the caps below, the
evidence map shows the best-ranked drivers, the coverage figure the responses and the least
covered drivers, the collinearity heatmap the most correlated drivers (with the pairs above the
threshold as a list), and the panels the leading hypotheses of each response up to a total.
``Plan.shortened`` records each summary form with its counts; the page says so in words
(templates overview.html, data.html, hypotheses.html) and the CSV exports stay complete, in long
form where the full table would be one column per driver."""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from lagsieve.evidence.grading import driver_correlations
from lagsieve.evidence.vocabulary import COLLINEAR_R
from lagsieve.io.names import pair_slug
from lagsieve.prep.align import lagged_pair
from lagsieve.report import figures as fg
from lagsieve.report.context import Context, gam_fit, gam_rows, top_rows
from lagsieve.formats import is_missing, number, p_text, text
from lagsieve.stats.backtest import BASELINES
from lagsieve.stats.harmonic import HARMONIC_BASELINES

BASELINE_NAMES = BASELINES

# Caps of the report's study-wide figures and lists. Each is chosen so that the full form of the
# figure stays inside figures.MAX_FIGURE_INCHES (16 x 16 inches, 4800 x 4800 px at 300 dpi: about
# 90 MB of raster) with its text still legible; the demo (3 responses, 12 drivers) is below every cap.
MAP_MAX_DRIVERS = 14          # evidence map: 0.95 in per driver column + 2.6 in <= 16 in
MAP_MAX_RESPONSES = 22        # evidence map: 0.62 in per response row + 1.9 in <= 16 in
COVERAGE_MAX_SERIES = 48      # coverage: 0.3 in per series + 1.25 in <= 16 in
HEATMAP_MAX_DRIVERS = 25      # collinearity heatmap: 0.5 in per driver + 3.6 in <= 16 in
PAIR_LIST_MAX = 100           # collinear pairs listed on the page (all of them in driver_correlations.csv)
PANEL_MAX_HYPOTHESES = 60     # leading hypotheses with panels (6 figures each), over all responses
#: The grades whose leading hypotheses get panels: a set-aside leading hypothesis keeps its heading,
#: words, numbers and lag table (``<key>__lags.csv``) on the page, without figures. On the demo
#: this drew 72 panels instead of 108 (the drawing is about 0.1-0.2 s of CPU per panel).
PANEL_GRADES = ("strong", "moderate", "weak")


@dataclass
class Plan:
    """Figure jobs to draw, per top hypothesis its panels (``panels[key]``: row, names and notes),
    and the tables exported beside the figures."""

    jobs: list[fg.FigureJob] = field(default_factory=list)
    panels: dict[str, dict] = field(default_factory=dict)
    tables: dict[str, pd.DataFrame] = field(default_factory=dict)
    shortened: dict[str, dict] = field(default_factory=dict)  # figure -> counts of its summary form


def _best_drivers(ctx: Context, dids: list[str], k: int) -> list[str]:
    """The ``k`` drivers with the best rank in any response, in the study's order."""
    ev = ctx.evidence[ctx.evidence["driver"].isin(dids)] if len(ctx.evidence) else ctx.evidence
    best = ev.groupby("driver")["rank"].min() if len(ev) else pd.Series(dtype=float)
    order = sorted(dids, key=lambda d: (best.get(d, np.inf), dids.index(d)))
    keep = set(order[:k])
    return [d for d in dids if d in keep]


# ----------------------------------------------------------------------------- study-wide figures
def _plan_map(ctx: Context, plan: Plan) -> None:
    all_r, all_d = ctx.study.response_ids, ctx.study.driver_ids
    rids, dids = all_r[:MAP_MAX_RESPONSES], _best_drivers(ctx, all_d, MAP_MAX_DRIVERS)
    if len(rids) < len(all_r) or len(dids) < len(all_d):
        plan.shortened["evidence_map"] = {"responses": len(rids), "all_responses": len(all_r),
                                          "drivers": len(dids), "all_drivers": len(all_d)}
    grades = np.full((len(rids), len(dids)), None, dtype=object)
    lags = np.full((len(rids), len(dids)), np.nan)
    for row in ctx.rows:  # the evidence rows as dicts, made once per report (Context.rows)
        if row["response"] in rids and row["driver"] in dids:
            i, j = rids.index(row["response"]), dids.index(row["driver"])
            grades[i, j] = row.get("grade")
            lags[i, j] = np.nan if is_missing(row.get("lag")) else float(row["lag"])
    plan.jobs.append(fg.FigureJob("evidence_map", "evidence_grid", dict(
        grades=grades, lags=lags, row_labels=[ctx.label(r) for r in rids],
        col_labels=[ctx.label(d) for d in dids], invented=ctx.invented)))
    plan.tables["evidence_map"] = _map_table(ctx, grades, rids, dids, "evidence_map" in plan.shortened)


def _map_table(ctx: Context, grades: np.ndarray, rids: list[str], dids: list[str], long: bool) -> pd.DataFrame:
    """The evidence map as exported: responses x drivers (one column per driver) for a map drawn
    in full, else long form (response, driver, grade, lag) with every hypothesis of the study."""
    if not long:
        return pd.DataFrame(grades, index=pd.Index(rids, name="response"), columns=dids)
    cols = ["response", "driver", "grade", "lag"]
    ev = ctx.evidence
    return (ev[[c for c in cols if c in ev]].sort_values(["response", "driver"]).set_index("response")
            if len(ev) else pd.DataFrame(columns=cols).set_index("response"))


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


def _least_covered(series: list[str], observed: np.ndarray, filled: np.ndarray, rids: list[str]) -> list[int]:
    """Rows of the coverage figure for a large study: the responses first (up to the cap), then
    the drivers with the fewest observed years (most filled years breaking ties), in study order."""
    resp = [k for k, s in enumerate(series) if s in rids][:COVERAGE_MAX_SERIES]
    drv = [k for k, s in enumerate(series) if s not in rids]
    drv.sort(key=lambda k: (int(observed[k].sum()), -int(filled[k].sum()), k))
    return sorted(resp + drv[:COVERAGE_MAX_SERIES - len(resp)])


def _plan_coverage(ctx: Context, plan: Plan) -> None:
    rids = ctx.study.response_ids
    series = [s for s in rids + ctx.study.driver_ids if s in ctx.table.columns]
    years = ctx.table.index.to_numpy()
    observed = np.stack([~np.isnan(ctx.table[s].to_numpy(float)) for s in series])
    filled = _filled_years(ctx, series, years)
    plan.tables["coverage"] = pd.DataFrame(_coverage_rows(series, rids, years, observed, filled))
    if len(series) > COVERAGE_MAX_SERIES:
        keep = _least_covered(series, observed, filled, rids)
        plan.shortened["coverage"] = {"series": len(keep), "all_series": len(series)}
        series, observed, filled = [series[k] for k in keep], observed[keep], filled[keep]
    plan.jobs.append(fg.FigureJob("coverage", "coverage", dict(
        series=series, labels=[ctx.label(s) for s in series],
        roles=["response" if s in rids else "driver" for s in series],
        years=years, observed=observed, filled=filled, invented=ctx.invented)))


def _plan_collinearity(ctx: Context, plan: Plan) -> None:
    drv = [d for d in ctx.study.driver_ids if d in ctx.table.columns]
    if len(drv) < 2:
        return
    corr = driver_correlations(ctx.table, drv)
    if len(drv) > HEATMAP_MAX_DRIVERS:
        pairs = collinear_pairs(corr)
        plan.tables["driver_correlations"] = pairs
        over = pairs[pairs["r"].abs() > COLLINEAR_R]
        listed = [(ctx.label(a), ctx.label(b), float(r)) for a, b, r in over.head(PAIR_LIST_MAX).itertuples(index=False)]
        plan.shortened["driver_correlation"] = {"drivers": HEATMAP_MAX_DRIVERS, "all_drivers": len(drv),
                                                "pairs_over": len(over), "listed": listed}
        shown = _most_correlated(corr, HEATMAP_MAX_DRIVERS)
        corr = corr.loc[shown, shown]
    else:
        plan.tables["driver_correlations"] = corr.rename_axis("driver").reset_index()
    plan.jobs.append(fg.FigureJob("driver_correlation", "driver_correlation", dict(
        corr=corr.to_numpy(float), labels=[ctx.label(d) for d in corr.index], threshold=COLLINEAR_R,
        invented=ctx.invented)))


def collinear_pairs(corr: pd.DataFrame) -> pd.DataFrame:
    """Every pair of drivers once (driver, other, r), strongest |r| first (NaN last): the long form
    of the correlation matrix, three columns whatever the number of drivers."""
    names = list(corr.index)
    i, j = np.triu_indices(len(names), k=1)
    r = corr.to_numpy(float)[i, j]
    order = np.lexsort((j, i, -np.nan_to_num(np.abs(r), nan=-1.0)))
    return pd.DataFrame({"driver": np.asarray(names, dtype=object)[i[order]],
                         "other": np.asarray(names, dtype=object)[j[order]], "r": r[order]})


def _most_correlated(corr: pd.DataFrame, k: int) -> list[str]:
    """The ``k`` drivers with the largest |r| to any other driver, in the study's order."""
    a = np.nan_to_num(np.abs(corr.to_numpy(float)), nan=-1.0)  # a pair without r counts as none
    np.fill_diagonal(a, -1.0)
    strongest = a.max(axis=1)
    keep = set(np.argsort(-strongest, kind="stable")[:k].tolist())
    return [d for n, d in enumerate(corr.index) if n in keep]


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


def _lag_table(ctx, row) -> pd.DataFrame | None:
    """The screen's linear rows of a hypothesis at every lag, with the critical r of each
    (``r_crit``); None when no lag has an r."""
    sc = ctx.screen
    rid, did = row["response"], row["driver"]
    prof = sc[(sc["response"] == rid) & (sc["driver"] == did) & (sc["model"] == "linear")].sort_values("lag") \
        if len(sc) else sc
    if not (len(prof) >= 1 and prof["r"].notna().any()):
        return None
    return prof.assign(r_crit=fg.r_critical(prof["n_eff"].to_numpy(float)))


def _lag_panel(ctx, key, row, jobs, info) -> None:
    prof = _lag_table(ctx, row)
    if prof is None:
        return
    jobs.append(fg.FigureJob(f"{key}__lags", "lag_profile", dict(
        lags=prof["lag"].to_numpy(float), r=prof["r"].to_numpy(float), r_crit=prof["r_crit"].to_numpy(float),
        chosen=int(row["lag"]), r_detrended=prof["r_detrended"].to_numpy(float) if "r_detrended" in prof else None,
        invented=ctx.invented)))
    info["names"].append(f"{key}__lags")
    info["lag_table"] = prof


def _forecast_panel(ctx, key, row, jobs, info) -> None:
    rid, did = row["response"], row["driver"]
    fc = ctx.forecasts
    fc = fc[(fc["response"] == rid) & (fc["driver"] == did)].sort_values("year") if len(fc) else fc
    hardest = text(row.get("oos_hardest"))
    if not (len(fc) and hardest):
        return
    model, on = _forecast_model(fc, hardest)
    if model is None:
        return
    names = [*BASELINE_NAMES, *(b for b in HARMONIC_BASELINES if f"baseline_{b}" in fc)]
    bases = {b: fc[f"baseline_{b}"].to_numpy(float) for b in names if f"baseline_{b}" in fc}
    jobs.append(fg.FigureJob(f"{key}__forecasts", "forecasts", dict(
        years=fc["year"].to_numpy(), observed=fc["observed"].to_numpy(float), baselines=bases,
        model=model, hardest=on, response=ctx.axis(rid), driver=ctx.label(did), invented=ctx.invented)))
    info["names"].append(f"{key}__forecasts")
    info["forecast_n"] = len(fc)


def _forecast_model(fc: pd.DataFrame, hardest: str) -> tuple:
    """(forecasts of the baseline + driver, the baseline's name) drawn in a forecast panel: the
    hardest baseline plus the driver; where the hardest is a harmonic baseline of a season
    response (no model is built on it), the candidate chosen in each window and its baseline."""
    if f"model_{hardest}" in fc:
        return fc[f"model_{hardest}"].to_numpy(float), hardest
    if "candidate" not in fc:
        return None, hardest
    on = fc["candidate_baseline"].dropna().astype(str)
    return fc["candidate"].to_numpy(float), (on.mode().iloc[0] if len(on) else "baseline")


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


def gam_stats_line(lag: int, gam_row: dict, gfit: dict) -> str:
    """The spline panel's line: what the driver's curve explains beyond the year term (when the
    spline has one, what the year alone explains beside it), its edf and p."""
    added = number(gfit["added"], "{:.0%}")
    if gfit["trend"]:
        year = number(gfit["explained"] - gfit["added"], "{:.0%}")
        words = f"curve adds {added} of the variation to the year term's {year}"
    else:
        words = f"curve explains {added} of the variation"
    return f"lag {lag}: {words}; edf {number(gam_row.get('edf'), '{:.1f}')}, p(smooth) {p_text(gam_row.get('p_smooth'))}"


def _gam_panel(ctx, key, row, gam_row, gfit, jobs, info) -> None:
    if gfit is None:
        return
    gl = int(gam_row["lag"])
    line = gam_stats_line(gl, gam_row, gfit)
    jobs.append(fg.FigureJob(f"{key}__gam", "gam_effect", dict(
        grid=gfit["grid"], curve=gfit["curve"], lower=gfit["lo"], upper=gfit["hi"],
        x_obs=gfit["pair"].x, driver=ctx.axis(row["driver"]) + ("" if gl == 0 else f", {gl}-year lead"),
        response=ctx.label(row["response"]), stats_line=line, invented=ctx.invented)))
    info["names"].append(f"{key}__gam")
    info["gam_row"] = gam_row


def _plan_hypothesis(ctx: Context, row: dict, plan: Plan) -> None:
    rid, did, lag = row["response"], row["driver"], int(row["lag"])
    key = pair_slug(rid, did)
    info = {"row": row, "names": [], "set_aside": row.get("grade") not in PANEL_GRADES}
    plan.panels[key] = info
    # a monthly driver lagged in seasons (by_season) has no column at that lag in the annual table:
    # its panels of the driver against the response are left out, its forecasts and nulls drawn
    in_seasons = row.get("lag_unit") == "season"
    gam_row = None if in_seasons else _pick_gam_row(ctx, rid, did, lag)
    if info["set_aside"]:  # words, numbers and its lag table on the page; no figures
        info["gam_row"] = gam_row
        lag_table = None if in_seasons else _lag_table(ctx, row)
        if lag_table is not None:
            info["lag_table"] = lag_table
        return
    gfit = gam_fit(ctx, rid, did, int(gam_row["lag"])) if gam_row is not None else None
    if not in_seasons:
        _pair_panels(ctx, key, row, gam_row, gfit, plan.jobs, info)
        _lag_panel(ctx, key, row, plan.jobs, info)
    _forecast_panel(ctx, key, row, plan.jobs, info)
    _null_panel(ctx, key, row, plan.jobs, info)
    _gam_panel(ctx, key, row, gam_row, gfit, plan.jobs, info)


def plan_figures(ctx: Context) -> Plan:
    """Figure jobs of the study plus, per top hypothesis, which panels exist and their notes."""
    plan = Plan()
    _plan_map(ctx, plan)
    _plan_coverage(ctx, plan)
    _plan_collinearity(ctx, plan)
    for row in _panel_rows(ctx, plan):
        _plan_hypothesis(ctx, row, plan)
    return plan


def _panel_rows(ctx: Context, plan: Plan) -> list[dict]:
    """The top hypotheses of every response (``report.top``), fewer per response when all of them
    together would exceed ``PANEL_MAX_HYPOTHESES``."""
    rows = top_rows(ctx)
    n_resp = max(1, len(ctx.study.response_ids))
    if len(rows) <= PANEL_MAX_HYPOTHESES:
        return rows
    per = max(1, PANEL_MAX_HYPOTHESES // n_resp)
    seen: dict[str, int] = {}
    kept = []
    for row in rows:
        seen[row["response"]] = seen.get(row["response"], 0) + 1
        if seen[row["response"]] <= per and len(kept) < PANEL_MAX_HYPOTHESES:
            kept.append(row)
    plan.shortened["hypotheses"] = {"per_response": per, "top": int(ctx.study.report.get("top", 3)),
                                    "shown": len(kept), "all": len(rows)}
    return kept
