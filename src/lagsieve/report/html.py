"""The evidence report: one self-contained HTML file per study (figures embedded as data URIs,
inline CSS and script, nothing fetched), figure and table exports, and a PDF copy.

Layout of the page, top to bottom: heading and cautions; summary in plain words per response;
the study-wide evidence map; the ranked evidence table (sortable, filterable) with the grade
and flag legends; panels for the leading hypotheses of each response; data coverage and
driver collinearity; a methods text generated from the run with its references; provenance.

Every user string (ids, labels, titles, file names) passes through :func:`html.escape`, and
the page carries a Content-Security-Policy that forbids any network request and allows only
the page's own script and style (by hash), so even a mistake in escaping could not run a
script or fetch anything.
"""
from __future__ import annotations

import base64
import hashlib
import html
import json
import logging
import textwrap
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from lagsieve.report import figures as fg
from lagsieve.prep.align import lagged_pair
from lagsieve.io.config import slug
from lagsieve.evidence.vocabulary import FLAGS, GRADE_RULES, GRADES

# ----------------------------------------------------------------------------- fixed text
CAUTIONS = [
    ("Association is not cause.", "A driver that tracks the response may share a cause with it, "
     "or stand in for another series that was not screened."),
    ("A screening generates hypotheses.", "It ranks candidate drivers for closer study; it does not "
     "test mechanisms, and a driver set aside here is not shown to be unimportant."),
    ("Results inform, and do not replace, review.", "They are material for the assessment body's own "
     "review and are used only under the local management rules."),
]

GRADE_WORDS = {  # one-line meaning for the summary and the cell tooltips
    "strong": "supported in sample, against surrogates and out of sample",
    "moderate": "supported, short of the strong rule",
    "weak": "some support, not enough to carry forward",
    "none": "no support after adjustment",
    "spurious-trend": "shares a trend only",
    "insufficient-data": "too few years to judge",
}

SUPPORTED = ("strong", "moderate")

REF = {
    "pyper": "Pyper, B.J. & Peterman, R.M. (1998) Comparison of methods to account for autocorrelation in "
             "correlation analyses of fish data. Can. J. Fish. Aquat. Sci. 55:2127-2140.",
    "granger": "Granger, C.W.J. & Newbold, P. (1974) Spurious regressions in econometrics. "
               "J. Econometrics 2:111-120.",
    "newey": "Newey, W.K. & West, K.D. (1987) A simple, positive semi-definite, heteroskedasticity and "
             "autocorrelation consistent covariance matrix. Econometrica 55:703-708.",
    "ebisuzaki": "Ebisuzaki, W. (1997) A method to estimate the statistical significance of a correlation "
                 "when the data are serially correlated. J. Climate 10:2147-2153.",
    "theiler": "Theiler, J., Eubank, S., Longtin, A., Galdrikian, B. & Farmer, J.D. (1992) Testing for "
               "nonlinearity in time series: the method of surrogate data. Physica D 58:77-94.",
    "buhlmann": "B\u00fchlmann, P. (1997) Sieve bootstrap for time series. Bernoulli 3:123-148.",
    "tashman": "Tashman, L.J. (2000) Out-of-sample tests of forecasting accuracy: an analysis and review. "
               "Int. J. Forecasting 16:437-450.",
    "bergmeir": "Bergmeir, C., Hyndman, R.J. & Koo, B. (2018) A note on the validity of cross-validation for "
                "evaluating autoregressive time series prediction. Comput. Stat. Data Anal. 120:70-83.",
    "dm": "Diebold, F.X. & Mariano, R.S. (1995) Comparing predictive accuracy. J. Bus. Econ. Stat. 13:253-263.",
    "hln": "Harvey, D., Leybourne, S. & Newbold, P. (1997) Testing the equality of prediction mean squared "
           "errors. Int. J. Forecasting 13:281-291.",
    "bh": "Benjamini, Y. & Hochberg, Y. (1995) Controlling the false discovery rate: a practical and powerful "
          "approach to multiple testing. J. R. Stat. Soc. B 57:289-300.",
    "dormann": "Dormann, C.F. et al. (2013) Collinearity: a review of methods to deal with it and a simulation "
               "study evaluating their performance. Ecography 36:27-46.",
    "eilers": "Eilers, P.H.C. & Marx, B.D. (1996) Flexible smoothing with B-splines and penalties. "
              "Statistical Science 11:89-121.",
    "craven": "Craven, P. & Wahba, G. (1979) Smoothing noisy data with spline functions. "
              "Numerische Mathematik 31:377-403.",
    "wood": "Wood, S.N. (2017) Generalized Additive Models: An Introduction with R, 2nd ed. "
            "Chapman & Hall/CRC, Boca Raton.",
}

e = html.escape


# ----------------------------------------------------------------------------- small helpers
def _na(v) -> bool:
    if v is None:
        return True
    try:
        return bool(pd.isna(v))
    except (TypeError, ValueError):
        return False


def _num(v, fmt: str = "{:.3f}") -> str:
    if _na(v):
        return ""
    try:
        return fmt.format(float(v))
    except (TypeError, ValueError):
        return e(str(v))


def _p(v) -> str:
    """A p- or q-value for reading: three decimals, '< 0.001' below that."""
    if _na(v):
        return ""
    v = float(v)
    return "< 0.001" if v < 0.001 else f"{v:.3f}"


def _str(v) -> str:
    return "" if _na(v) else str(v)


def _flag_list(v) -> list[str]:
    return [c for c in _str(v).split(";") if c]


def _lead(lag) -> str:
    if _na(lag):
        return "no lag chosen"
    lag = int(lag)
    return "same year" if lag == 0 else f"{lag}-year lead"


GRADE_CLASS = {g: f"g-{i}" for i, g in enumerate(fg.GRADE_STYLE)}


def grade_badge(g) -> str:
    g = _str(g) or "unknown"
    cls = GRADE_CLASS.get(g, "g-x")
    rule = GRADE_RULES.get(g, "")
    return f'<span class="grade {cls}" title="{e(rule)}">{e(g)}</span>'


def flag_chips(v) -> str:
    return "".join(f'<span class="flag" title="{e(FLAGS.get(c, c))}">{e(c)}</span>' for c in _flag_list(v))


def _img(figs: dict, name: str, alt: str, caption: str) -> str:
    if name not in figs:
        return ""
    b64, (w, h) = figs[name]
    return (f'<figure class="fig"><img alt="{e(alt)}" width="{w}" height="{h}" '
            f'src="data:image/png;base64,{b64}"><figcaption>{caption}</figcaption></figure>')


# ----------------------------------------------------------------------------- plain words
def set_aside_reason(row: dict) -> str:
    """A few words on why a hypothesis is not carried forward."""
    g, flags = _str(row.get("grade")), _flag_list(row.get("flags"))
    if g == "spurious-trend":
        return "shares a trend only; nothing left after detrending or against trend-keeping surrogates"
    if g == "insufficient-data":
        return "computation failed" if "failed" in flags else "too few overlapping years to judge"
    if g == "none":
        words = "no support after adjustment"
        if "sign-unexpected" in flags:
            words += "; sign opposite to the one stated beforehand"
        return words
    if g == "weak":
        sk = row.get("oos_skill")
        if "failed-retest" in flags:
            return "weak: no skill when re-tested on the latest years"
        if not _na(sk) and float(sk) <= 0:
            return "weak: no out-of-sample skill over the hardest baseline"
        if "lag-selected" in flags:
            return "weak: significant only at the chosen lag"
        if "sign-unexpected" in flags:
            return "weak: sign opposite to the one stated beforehand"
        return "weak: short of the moderate rule"
    return GRADE_WORDS.get(g, g)


def summary_line(row: dict) -> str:
    s = _str(row.get("summary"))
    if s:
        return s
    r = row.get("r")
    direction = "" if _na(r) else (", positive" if float(r) > 0 else ", negative")
    return f"{_lead(row.get('lag'))}{direction}: {_str(row.get('grade'))}"


# ----------------------------------------------------------------------------- context
@dataclass
class Context:
    study: object
    table: pd.DataFrame
    screen: pd.DataFrame
    evidence: pd.DataFrame
    forecasts: pd.DataFrame
    nulls: pd.DataFrame
    notes: pd.DataFrame
    annual: pd.DataFrame | None
    provenance: dict
    labels: dict = field(default_factory=dict)
    units: dict = field(default_factory=dict)
    invented: bool = False

    def label(self, sid) -> str:
        return self.labels.get(sid, str(sid))

    def axis(self, sid) -> str:
        u = self.units.get(sid)
        return f"{self.label(sid)} ({u})" if u else self.label(sid)


def _top_rows(ctx: Context) -> list[dict]:
    top_n = int(ctx.study.report.get("top", 3))
    out = []
    for rid in ctx.study.response_ids:
        sub = ctx.evidence[(ctx.evidence["response"] == rid) & ctx.evidence["lag"].notna()]
        out += sub.sort_values("rank").head(top_n).to_dict("records")
    return out


def _gam_rows(ctx: Context, rid, did) -> pd.DataFrame:
    sc = ctx.screen
    if not len(sc) or "model" not in sc:
        return sc.iloc[0:0]
    g = sc[(sc["response"] == rid) & (sc["driver"] == did) & (sc["model"] == "gam")]
    if "edf" in g:
        g = g[g["edf"].notna()]
    if "status" in g:
        g = g[g["status"].astype(str).str.startswith("ok") | g["status"].isna()]
    return g


def _gam_fit(ctx: Context, rid, did, lag: int):
    """Refit the penalised spline of one pair for the figures (same settings as the screen:
    GCV smoothness, default basis, optional year term); None when it cannot be fitted."""
    from lagsieve.stats.splines import fit_pspline, partial_effect

    pair = lagged_pair(ctx.table, rid, did, lag)
    if pair.n < 8 or np.ptp(pair.x) <= 0:
        return None
    trend = pair.years.astype(float) if ctx.study.screen.get("gam_trend") else None
    try:
        fit = fit_pspline(pair.x, pair.y, trend=trend)
        grid = np.linspace(np.min(pair.x), np.max(pair.x), 80)
        pe = partial_effect(fit, grid)
    except (ValueError, np.linalg.LinAlgError):
        return None
    lo, hi = pe.band(1.96)
    return {"pair": pair, "grid": grid, "curve": pe.curve, "lo": lo, "hi": hi,
            "fit": float(fit.intercept) + pe.curve, "edf": float(fit.edf), "trend": trend is not None}


# ----------------------------------------------------------------------------- figure plan
def plan_figures(ctx: Context) -> tuple[list[fg.FigureJob], dict, dict]:
    """Figure jobs of the study plus, per top hypothesis, which panels exist and their notes."""
    st, ev, inv = ctx.study, ctx.evidence, ctx.invented
    jobs: list[fg.FigureJob] = []
    tables: dict[str, pd.DataFrame] = {}

    # evidence map: responses x drivers
    rids, dids = st.response_ids, st.driver_ids
    grades = np.full((len(rids), len(dids)), None, dtype=object)
    lags = np.full((len(rids), len(dids)), np.nan)
    for row in ev.to_dict("records"):
        if row["response"] in rids and row["driver"] in dids:
            i, j = rids.index(row["response"]), dids.index(row["driver"])
            grades[i, j] = row.get("grade")
            lags[i, j] = np.nan if _na(row.get("lag")) else float(row["lag"])
    jobs.append(fg.FigureJob("evidence_map", "evidence_grid", dict(
        grades=grades, lags=lags, row_labels=[ctx.label(r) for r in rids],
        col_labels=[ctx.label(d) for d in dids], invented=inv)))
    tables["evidence_map"] = pd.DataFrame(grades, index=pd.Index(rids, name="response"), columns=dids)

    # coverage
    series = [s for s in rids + dids if s in ctx.table.columns]
    years = ctx.table.index.to_numpy()
    observed = np.stack([~np.isnan(ctx.table[s].to_numpy(float)) for s in series])
    filled = np.zeros_like(observed)
    if ctx.annual is not None and "filled" in ctx.annual:
        fl = ctx.annual[ctx.annual["filled"].astype(str).str.lower().isin(["true", "1", "1.0"])]
        pos = {y: k for k, y in enumerate(years)}
        for s, y in zip(fl["series"], fl["year"]):
            if s in series and int(y) in pos:
                filled[series.index(s), pos[int(y)]] = True
    jobs.append(fg.FigureJob("coverage", "coverage", dict(
        series=series, labels=[ctx.label(s) for s in series],
        roles=["response" if s in rids else "driver" for s in series],
        years=years, observed=observed, filled=filled, invented=inv)))
    cov_rows = []
    for k, s in enumerate(series):
        obs_years = years[observed[k]]
        inner = [int(y) for y in years[~observed[k]] if len(obs_years) and obs_years[0] < y < obs_years[-1]]
        cov_rows.append({"series": s, "role": "response" if s in rids else "driver",
                         "first_year": int(obs_years[0]) if len(obs_years) else None,
                         "last_year": int(obs_years[-1]) if len(obs_years) else None,
                         "years_observed": int(observed[k].sum()),
                         "years_filled": int(filled[k].sum()),
                         "missing_inside": " ".join(map(str, inner))})
    tables["coverage"] = pd.DataFrame(cov_rows)

    # driver collinearity
    from lagsieve.evidence.grading import COLLINEAR_R, driver_correlations

    drv = [d for d in dids if d in ctx.table.columns]
    if len(drv) >= 2:
        corr = driver_correlations(ctx.table, drv)
        jobs.append(fg.FigureJob("driver_correlation", "driver_correlation", dict(
            corr=corr.to_numpy(float), labels=[ctx.label(d) for d in drv], threshold=COLLINEAR_R,
            invented=inv)))
        tables["driver_correlations"] = corr.rename_axis("driver").reset_index()

    # per hypothesis
    panels: dict[str, dict] = {}
    for row in _top_rows(ctx):
        rid, did, lag = row["response"], row["driver"], int(row["lag"])
        key = f"{slug(rid)}__{slug(did)}"
        info = {"row": row, "names": []}
        pair = lagged_pair(ctx.table, rid, did, lag)
        gam_rows = _gam_rows(ctx, rid, did)
        gam_row = None
        if len(gam_rows):
            same = gam_rows[gam_rows["lag"] == lag]
            gam_row = (same if len(same) else gam_rows.sort_values("p_smooth", na_position="last")).iloc[0].to_dict()
        gfit = _gam_fit(ctx, rid, did, int(gam_row["lag"])) if gam_row is not None else None
        if pair.n >= 3:
            jobs.append(fg.FigureJob(f"{key}__overlay", "overlay", dict(
                years=pair.years, y=pair.y, x=pair.x, lag=lag, response=ctx.label(rid),
                driver=ctx.label(did), invented=inv)))
            smooth = gfit if (gfit is not None and int(gam_row["lag"]) == lag) else None
            jobs.append(fg.FigureJob(f"{key}__scatter", "scatter", dict(
                x=pair.x, y=pair.y, lag=lag, response=ctx.axis(rid), driver=ctx.axis(did),
                smooth=None if smooth is None else {"grid": smooth["grid"], "fit": smooth["fit"],
                                                    "edf": smooth["edf"], "trend": smooth["trend"]},
                invented=inv)))
            info["names"] += [f"{key}__overlay", f"{key}__scatter"]
            info["scatter_smooth"] = smooth is not None
            info["smooth_trend"] = bool(smooth and smooth["trend"])
        sc = ctx.screen
        prof = sc[(sc["response"] == rid) & (sc["driver"] == did) & (sc["model"] == "linear")].sort_values("lag") \
            if len(sc) else sc
        if len(prof) >= 1 and prof["r"].notna().any():
            rc = fg.r_critical(prof["n_eff"].to_numpy(float))
            jobs.append(fg.FigureJob(f"{key}__lags", "lag_profile", dict(
                lags=prof["lag"].to_numpy(float), r=prof["r"].to_numpy(float), r_crit=rc, chosen=lag,
                r_detrended=prof["r_detrended"].to_numpy(float) if "r_detrended" in prof else None,
                invented=inv)))
            info["names"].append(f"{key}__lags")
            info["lag_table"] = prof.assign(r_crit=rc)
        fc = ctx.forecasts
        fc = fc[(fc["response"] == rid) & (fc["driver"] == did)].sort_values("year") if len(fc) else fc
        hardest = _str(row.get("oos_hardest"))
        if len(fc) and hardest and f"model_{hardest}" in fc:
            bases = {b: fc[f"baseline_{b}"].to_numpy(float) for b in ("climatology", "persistence", "trend")
                     if f"baseline_{b}" in fc}
            jobs.append(fg.FigureJob(f"{key}__forecasts", "forecasts", dict(
                years=fc["year"].to_numpy(), observed=fc["observed"].to_numpy(float), baselines=bases,
                model=fc[f"model_{hardest}"].to_numpy(float), hardest=hardest, response=ctx.axis(rid),
                driver=ctx.label(did), invented=inv)))
            info["names"].append(f"{key}__forecasts")
            info["forecast_n"] = len(fc)
        nl = ctx.nulls
        nl = nl[(nl["response"] == rid) & (nl["driver"] == did)] if len(nl) else nl
        null_panels = []
        for test, pcol, title in (("in-sample", "p_surrogate", "In sample"),
                                  ("out-of-sample", "oos_p_surrogate", "Out of sample")):
            part = nl[nl["test"] == test] if len(nl) else nl
            if len(part) and part["value"].notna().any():
                stat = _str(part["statistic"].iloc[0]) if "statistic" in part else test
                null_panels.append({"values": part["value"].to_numpy(float),
                                    "observed": float(part["observed"].iloc[0]), "label": stat,
                                    "p": None if _na(row.get(pcol)) else float(row[pcol]), "title": title})
        if null_panels:
            jobs.append(fg.FigureJob(f"{key}__nulls", "null_distributions", dict(panels=null_panels, invented=inv)))
            info["names"].append(f"{key}__nulls")
            info["null_n"] = max(len(p["values"]) for p in null_panels)
        if gfit is not None:
            gl = int(gam_row["lag"])
            line = (f"lag {gl}: edf {_num(gam_row.get('edf'), '{:.1f}')}, deviance explained "
                    f"{_num(gam_row.get('deviance_explained'), '{:.0%}')}, p(smooth) {_p(gam_row.get('p_smooth'))}")
            jobs.append(fg.FigureJob(f"{key}__gam", "gam_effect", dict(
                grid=gfit["grid"], curve=gfit["curve"], lower=gfit["lo"], upper=gfit["hi"],
                x_obs=gfit["pair"].x, driver=ctx.axis(did) + ("" if gl == 0 else f", {gl}-year lead"),
                response=ctx.label(rid), stats_line=line, invented=inv)))
            info["names"].append(f"{key}__gam")
            info["gam_row"] = gam_row
        panels[key] = info
    return jobs, panels, tables


# ----------------------------------------------------------------------------- sections
def _header(ctx: Context) -> str:
    st, prov = ctx.study, ctx.provenance
    title = st.raw.get("title") or st.study
    kicker = "Driver screening report" + (" \u00b7 invented demonstration data" if ctx.invented else "")
    out = [f'<header class="top"><p class="kicker">{e(kicker)}</p>',
           f"<h1>{e(title)}</h1>",
           f'<p class="meta">study <code>{e(st.study)}</code> \u00b7 lagsieve {e(str(prov.get("tool_version", "")))}'
           f' \u00b7 report made {e(str(prov.get("finished", prov.get("started", ""))))}</p>']
    if st.raw.get("description"):
        out.append(f'<p class="lede">{e(st.raw["description"])}</p>')
    if ctx.invented:
        out.append('<div class="banner invented" role="note"><strong>Invented data.</strong> Every number in this '
                   'study was made up to demonstrate the tool; no real stock, place, survey or assessment is '
                   'described, and nothing here should be cited as a finding.</div>')
    out.append('<div class="banner caution" role="note"><strong>Read with care.</strong><ul>'
               + "".join(f"<li><b>{e(a)}</b> {e(b)}</li>" for a, b in CAUTIONS) + "</ul></div></header>")
    return "\n".join(out)


def _nav() -> str:
    items = [("summary", "Summary"), ("overview", "Evidence map"), ("table", "Ranked evidence"),
             ("hypotheses", "Leading hypotheses"), ("data", "Data"), ("methods", "Methods"),
             ("provenance", "Provenance")]
    return ('<nav class="toc noprint" aria-label="sections">'
            + "".join(f'<a href="#{a}">{e(b)}</a>' for a, b in items) + "</nav>")


def _summary(ctx: Context) -> str:
    ev = ctx.evidence
    counts = ev["grade"].value_counts() if len(ev) else pd.Series(dtype=int)
    chips = "".join(f'<span class="count">{grade_badge(g)} <b>{int(counts.get(g, 0))}</b></span>'
                    for g in GRADES if counts.get(g, 0))
    years = ctx.table.index
    out = ['<section id="summary"><h2>Summary</h2>',
           f'<p class="glance">{len(ctx.study.response_ids)} responses \u00d7 {len(ctx.study.driver_ids)} drivers, '
           f'{len(ev)} hypotheses, years {int(years.min())}\u2013{int(years.max())}. Grades: {chips}</p>']
    for rid in ctx.study.response_ids:
        sub = ev[ev["response"] == rid].sort_values("rank")
        out.append(f'<div class="resp"><h3>{e(ctx.label(rid))} <code>{e(rid)}</code></h3>')
        top = sub[sub["grade"].isin(SUPPORTED)]
        if len(top):
            out.append('<p class="sub">Supported hypotheses</p><ul class="lead">')
            for row in top.to_dict("records"):
                extra = ""
                partners = [p for p in _str(row.get("collinear_with")).split(";") if p]
                if partners:
                    extra = (f' <span class="note">Moves with {e(", ".join(ctx.label(p) for p in partners))}'
                             f' (|r| &gt; 0.7): the data cannot tell them apart.</span>')
                out.append(f"<li>{grade_badge(row['grade'])} <b>{e(ctx.label(row['driver']))}</b>, "
                           f"{e(summary_line(row))}.{extra}</li>")
            out.append("</ul>")
        else:
            out.append('<p class="none">No driver reaches moderate or strong evidence for this response.</p>')
        aside = sub[~sub["grade"].isin(SUPPORTED)]
        if len(aside):
            groups: dict[str, list[str]] = {}
            for row in aside.to_dict("records"):
                groups.setdefault(set_aside_reason(row), []).append(
                    f'<span class="who" title="{e(summary_line(row))}">{e(ctx.label(row["driver"]))} '
                    f'<span class="muted">({e(_lead(row.get("lag")))})</span></span>')
            out.append('<p class="sub">Set aside</p><ul class="aside">')
            for reason, who in groups.items():
                out.append(f"<li><b>{e(reason[:1].upper() + reason[1:])}:</b> {', '.join(who)}</li>")
            out.append("</ul>")
        out.append("</div>")
    out.append("</section>")
    return "\n".join(out)


def _overview(ctx: Context, figs: dict) -> str:
    cap = ("Grade of every response \u00d7 driver hypothesis, at its chosen lag. The colour repeats the words in "
           "each cell; \u201cnot tried\u201d marks drivers configured for other responses only.")
    return (f'<section id="overview"><h2>Evidence map</h2>'
            f'{_img(figs, "evidence_map", "grades of every response and driver", e(cap))}</section>')


TABLE_COLS = [  # key, heading, tooltip, kind, format
    ("response", "Response", "response series id", "text", None),
    ("rank", "Rank", "rank within the response (1 = best supported)", "num", "{:.0f}"),
    ("driver", "Driver", "driver label and id", "text", None),
    ("lag", "Lag", "driver lead in years at the chosen lag", "num", "{:.0f}"),
    ("n", "n", "overlapping years at the chosen lag", "num", "{:.0f}"),
    ("r", "r", "Pearson r at the chosen lag", "num", "{:+.2f}"),
    ("n_eff", "n eff", "effective sample size allowing for autocorrelation", "num", "{:.1f}"),
    ("p_adjusted", "p adj", "p-value of r with the effective sample size", "p", None),
    ("p_surrogate", "p surr", "surrogate p-value, best lag chosen inside every surrogate", "p", None),
    ("q_value", "q", "Benjamini-Hochberg q-value over all hypotheses of the study", "p", None),
    ("oos_skill", "Skill", "out-of-sample skill over the hardest baseline (named below the value): "
     "1 - MSE(model)/MSE(baseline)", "num", "{:+.2f}"),
    ("oos_n", "Fcst", "number of out-of-sample forecasts", "num", "{:.0f}"),
    ("oos_p_surrogate", "p skill", "surrogate p-value of the out-of-sample skill", "p", None),
    ("retest_skill", "Re-test", "skill on the latest years, fitted before them", "num", "{:+.2f}"),
    ("grade", "Grade", "grade by the rules listed below the table", "grade", None),
    ("flags", "Flags", "cautions; hover a code for its meaning", "flags", None),
]


def _evidence_table(ctx: Context) -> str:
    ev = ctx.evidence
    head = []
    for key, name, tip, kind, _ in TABLE_COLS:
        t = "num" if kind in ("num", "p") else "text"
        head.append(f'<th scope="col" data-key="{e(key)}" data-type="{t}" title="{e(tip)}">'
                    f'<button type="button">{e(name)}</button></th>')
    body = []
    order = {g: i for i, g in enumerate(fg.GRADE_STYLE)}
    for row in ev.to_dict("records"):
        cells = []
        for key, _, _, kind, fmt in TABLE_COLS:
            v = row.get(key)
            if key == "driver":
                cat = _str(row.get("category"))
                cells.append(f'<td data-v="{e(ctx.label(v))}">{e(ctx.label(v))}<br><code>{e(_str(v))}</code>'
                             + (f' <span class="cat">{e(cat)}</span>' if cat else "") + "</td>")
            elif key == "oos_skill":
                vs = _str(row.get("oos_hardest"))
                cells.append(f'<td data-v="{_num(v, "{:.6g}")}">{_num(v, fmt)}'
                             + (f'<br><span class="cat">vs {e(vs)}</span>' if vs else "") + "</td>")
            elif key == "response":
                cells.append(f'<td data-v="{e(_str(v))}"><code>{e(_str(v))}</code></td>')
            elif kind == "grade":
                cells.append(f'<td data-v="{order.get(_str(v), 9)}">{grade_badge(v)}</td>')
            elif kind == "flags":
                cells.append(f'<td data-v="{e(_str(v))}">{flag_chips(v)}</td>')
            elif kind == "p":
                cells.append(f'<td data-v="{_num(v, "{:.6g}")}">{_p(v)}</td>')
            elif kind == "num":
                cells.append(f'<td data-v="{_num(v, "{:.6g}")}">{_num(v, fmt)}</td>')
            else:
                cells.append(f'<td data-v="{e(_str(v))}">{e(_str(v))}</td>')
        body.append(f'<tr data-response="{e(_str(row.get("response")))}" data-grade="{e(_str(row.get("grade")))}">'
                    + "".join(cells) + "</tr>")
    cols = "".join(f'<col class="c-{key.replace("_", "-")}">' for key, *_ in TABLE_COLS)
    resp_opts = "".join(f'<option value="{e(r)}">{e(ctx.label(r))}</option>' for r in ctx.study.response_ids)
    grade_opts = "".join(f'<option value="{e(g)}">{e(g)}</option>' for g in GRADES)
    controls = (f'<div class="controls noprint" role="search">'
                f'<label>Search <input id="f-text" type="search" placeholder="driver, flag, baseline\u2026"></label>'
                f'<label>Response <select id="f-response"><option value="">all</option>{resp_opts}</select></label>'
                f'<label>Grade <select id="f-grade"><option value="">all</option>{grade_opts}</select></label>'
                f'<span id="f-count" class="muted" aria-live="polite">{len(ev)} of {len(ev)} rows shown</span>'
                f'<span class="muted">Click a column heading to sort; click again to reverse.</span></div>')
    grades = "".join(f"<dt>{grade_badge(g)}</dt><dd>{e(t)}</dd>" for g, t in GRADE_RULES.items())
    flags = "".join(f'<dt><span class="flag">{e(c)}</span></dt><dd>{e(t)}</dd>' for c, t in FLAGS.items())
    return (f'<section id="table" class="wide"><h2>Ranked evidence</h2>'
            f'<p>One row per hypothesis (response \u00d7 driver) at its chosen lag, ranked within each response. '
            f'A copy is in <code>figures/evidence_table.csv</code>.</p>{controls}'
            f'<div class="scroll"><table id="evidence-table" class="evidence"><colgroup>{cols}</colgroup>'
            f'<thead><tr>{"".join(head)}</tr></thead>'
            f'<tbody>{"".join(body)}</tbody></table></div>'
            f'<div class="legends"><div><h3>Grades</h3><dl class="legend">{grades}</dl></div>'
            f'<div><h3>Flags</h3><dl class="legend">{flags}</dl></div></div></section>')


def _key_numbers(row: dict) -> str:
    items = [("r", _num(row.get("r"), "{:+.2f}")), ("n / n eff", f'{_num(row.get("n"), "{:.0f}")} / '
                                                              f'{_num(row.get("n_eff"), "{:.1f}")}'),
             ("p adj", _p(row.get("p_adjusted"))), ("p surr", _p(row.get("p_surrogate"))),
             ("q", _p(row.get("q_value"))), ("r detrended", _num(row.get("r_detrended"), "{:+.2f}"))]
    for b in ("climatology", "persistence", "trend"):
        items.append((f"skill vs {b}", _num(row.get(f"oos_skill_{b}"), "{:+.2f}")))
    items += [("DM p", _p(row.get("oos_p"))), ("p skill (surr)", _p(row.get("oos_p_surrogate"))),
              ("re-test", f'{_num(row.get("retest_skill"), "{:+.2f}")} {e(_str(row.get("retest_years")))}')]
    return '<dl class="numbers">' + "".join(f"<div><dt>{e(k)}</dt><dd>{v}</dd></div>" for k, v in items if v.strip()) + "</dl>"


def _hypotheses(ctx: Context, figs: dict, panels: dict) -> str:
    out = ['<section id="hypotheses"><h2>Leading hypotheses</h2>',
           f'<p>The {int(ctx.study.report.get("top", 3))} best-ranked hypotheses of each response, whatever their '
           f'grade: supported ones to examine, set-aside ones to show why.</p>']
    current = None
    for key, info in panels.items():
        row = info["row"]
        rid, did, lag = row["response"], row["driver"], int(row["lag"])
        if rid != current:
            out.append(f'<h3 class="resp-head">{e(ctx.label(rid))} <code>{e(rid)}</code></h3>')
            current = rid
        lead = _lead(lag)
        caps = {
            "overlay": f"Both series standardised; the driver is shifted by its lag ({e(lead)}), so each point pairs "
                       f"the response with the driver value the screen paired it with.",
            "scatter": "Response against the lagged driver with the least-squares line"
                       + ((" and the penalised-spline fit" + (" (year term held at its mean)" if info.get("smooth_trend")
                                                             else "") + ".") if info.get("scatter_smooth") else "."),
            "lags": "Pearson r at each lag tried (dark bar: chosen lag; diamonds: r after detrending both series). "
                    "Inside the grey band |r| is below the critical value at p = 0.05 for that lag's effective "
                    "sample size (r<sub>crit</sub> = t/\u221a(df + t\u00b2), df = n<sub>eff</sub> \u2212 2).",
            "forecasts": f"{info.get('forecast_n', '')} one-step forecasts, each made from earlier years only: "
                         f"observed, the three baselines and the {e(_str(row.get('oos_hardest')))} baseline plus "
                         f"the driver.",
            "nulls": f"The statistic over {info.get('null_n', '')} surrogate drivers (same autocorrelation"
                     f"{', same linear trend' if ctx.study.screen.get('surrogate_keep_trend', True) else ''}, "
                     f"no link to the response) and the real driver's value.",
            "gam": "Partial effect of the driver in the penalised spline, with its pointwise 95% band; ticks along "
                   "the bottom are the observed driver values. Refitted for the figure with the screen's settings"
                   + ("; net of the linear year term" if ctx.study.screen.get("gam_trend") else "")
                   + ("; unweighted" if ctx.study.screen.get("weights", "none") != "none" else "") + ".",
        }
        alts = {"overlay": "standardised overlay", "scatter": "scatter with fit", "lags": "lag profile of r",
                "forecasts": "out-of-sample forecasts", "nulls": "surrogate null distribution",
                "gam": "GAM partial effect"}
        imgs = "".join(_img(figs, n, f"{alts[n.rsplit('__', 1)[1]]}: {ctx.label(rid)} and {ctx.label(did)}",
                            caps[n.rsplit("__", 1)[1]]) for n in info["names"])
        shape = ""
        if info.get("gam_row") is not None and _str(info["gam_row"].get("shape")):
            shape = f' Spline shape: <b>{e(_str(info["gam_row"]["shape"]))}</b>.'
        out.append(f'<article class="hyp" id="h-{e(key)}"><h4>{e(ctx.label(did))} <span class="arrow">\u2192</span> '
                   f'{e(ctx.label(rid))} <span class="muted">rank {int(row["rank"])}, {e(lead)}</span> '
                   f'{grade_badge(row.get("grade"))}</h4>'
                   f'<p>{e(summary_line(row))}.{shape} {flag_chips(row.get("flags"))}</p>'
                   f'{_key_numbers(row)}<div class="grid">{imgs}</div></article>')
    if not panels:
        out.append("<p>No hypothesis had a chosen lag to show.</p>")
    out.append("</section>")
    return "\n".join(out)


def _data(ctx: Context, figs: dict, tables: dict) -> str:
    out = ['<section id="data"><h2>Data</h2>']
    out.append(_img(figs, "coverage", "data coverage by series and year",
                    "Years with data in every series after alignment: each bar is a run of observed years, so a "
                    "break is a gap; crosses mark missing years inside a series, hatching marks filled years."))
    notes = ctx.notes
    if len(notes):
        changed = notes[notes["action"] != "warning"]
        warns = notes[notes["action"] == "warning"]
        if len(changed):
            out.append('<h3>Years missing, dropped or filled</h3><ul class="compact">' + "".join(
                f"<li><code>{e(_str(r['series']))}</code> {'' if _na(r['year']) else int(r['year'])}: "
                f"{e(_str(r['action']))} ({e(_str(r['reason']))})</li>" for r in changed.to_dict("records")) + "</ul>")
        if len(warns):
            out.append('<h3>Warnings from the input check</h3><ul class="compact">' + "".join(
                f"<li><code>{e(_str(r['series']))}</code>: {e(_str(r['reason']))}</li>"
                for r in warns.to_dict("records")) + "</ul>")
    if "driver_correlation" in figs:
        from lagsieve.evidence.vocabulary import COLLINEAR_R

        out.append('<h3>Collinearity of the drivers</h3>')
        out.append(_img(figs, "driver_correlation", "driver-driver correlation heatmap",
                        f"Pearson r between drivers in the same year (transformed as screened). Outlined, starred "
                        f"cells exceed |r| = {COLLINEAR_R:g} (Dormann et al. 2013): evidence for one such driver "
                        f"cannot be separated from the other."))
    out.append("</section>")
    return "\n".join(out)


# ----------------------------------------------------------------------------- methods
def _range_words(lags) -> str:
    lags = sorted(int(v) for v in lags)
    if len(lags) > 2 and lags == list(range(lags[0], lags[-1] + 1)):
        return f"{lags[0]}\u2013{lags[-1]}"
    return ", ".join(map(str, lags))


def methods_paragraphs(ctx: Context) -> tuple[list[str], list[str]]:
    """The methods text of this run (plain text paragraphs) and the reference keys it cites."""
    st, sc, ev = ctx.study, ctx.study.screen, ctx.evidence
    refs = ["pyper", "granger", "newey"]
    years = ctx.table.index
    transforms = {}
    for s in st.responses + st.drivers:
        t = s.get("transform", "none")
        if t != "none":
            transforms.setdefault(t, []).append(s["id"])
    tr = "; ".join(f"{'natural log' if t == 'log' else 'log(1 + x)'} for {', '.join(v)}" for t, v in transforms.items())
    agg = [f"{s['id']} ({s['aggregate'].get('how', 'mean')} of months {_range_words(s['aggregate']['months'])})"
           for s in st.responses + st.drivers if s.get("aggregate")]
    filled = [s["id"] for s in st.responses + st.drivers if s.get("fill") == "linear"]
    p1 = (f"The screening covered {len(st.responses)} response series and {len(st.drivers)} candidate drivers on one "
          f"annual axis, {int(years.min())}\u2013{int(years.max())}.")
    if agg:
        p1 += f" Sub-annual series were reduced to one value per year: {'; '.join(agg)}."
    if tr:
        p1 += f" Transforms before screening: {tr}."
    p1 += (" Short gaps were filled by linear interpolation for " + ", ".join(filled) + "; all other missing years "
           "were left missing." if filled else " Missing years were left missing.")
    p1 += " Each response-driver pair used only the years in which both were observed."
    own = [f"{d['id']} {_range_words(d['lags'])}" for d in st.drivers if d.get("lags")]
    p2 = (f"Each response was paired with each of its candidate drivers at driver leads of "
          f"{_range_words(sc['lags'])} years (the driver in year t \u2212 k against the response in year t)"
          + (f"; drivers with their own lags: {'; '.join(own)}" if own else "")
          + f". At least {sc['min_overlap']} overlapping years were required. For every pair and lag we computed "
          f"Pearson's r and its naive p-value; the effective sample size of Pyper & Peterman (1998) and the p-value "
          f"with it; r after removing a linear trend from both series and r of first differences, which guard "
          f"against the spurious correlation of trending series (Granger & Newbold 1974); and the least-squares "
          f"slope with a Newey & West (1987) standard error.")
    gam_present = len(ctx.screen) and "model" in ctx.screen and (ctx.screen["model"] == "gam").any()
    if "gam" in sc.get("models", []):
        p2 += (" A penalised regression spline was also fitted at each lag (cubic B-splines with a second-order "
               "difference penalty, Eilers & Marx 1996; smoothness chosen by generalised cross-validation, Craven & "
               "Wahba 1979" + ("; with an unpenalised linear year term" if sc.get("gam_trend") else "")
               + "), reporting its effective degrees of freedom, deviance explained and an approximate test of the "
               "smooth (Wood 2017).")
        if not gam_present:
            p2 += " (No spline results were found in this run's screen table, so no spline panels are shown.)"
        refs += ["eilers", "craven", "wood"]
    method = sc.get("surrogate_method", "phase")
    if method == "phase":
        how = ("phase randomisation of the Fourier transform (Ebisuzaki 1997; Theiler et al. 1992), which keeps "
               "the periodogram and so the autocorrelation of the driver")
        refs += ["ebisuzaki", "theiler"]
    else:
        how = ("an AR-sieve bootstrap (B\u00fchlmann 1997): an autoregression with order chosen by AIC, driven by "
               "resampled residuals, which keeps the driver's autocorrelation")
        refs += ["buhlmann"]
    p3 = (f"Significance against chance was judged with {int(sc['surrogates'])} surrogate series per driver, made by "
          f"{how} while breaking any link with the response. ")
    if sc.get("surrogate_keep_trend", True):
        p3 += ("Surrogates were drawn for the residuals of each driver's least-squares linear trend and the trend "
               "was added back, so every surrogate shares the real driver's linear trend and a driver beats its "
               "surrogates only through what it carries beyond that trend. ")
    else:
        p3 += "The driver's linear trend was not preserved in the surrogates (surrogate_keep_trend: false). "
    p3 += ("Gaps were interpolated only to draw surrogates and masked again before any statistic. The best lag was "
           "chosen inside every surrogate exactly as for the real driver, so the surrogate p-value pays for the "
           "choice among lags; the statistic was directed by the sign stated before the screening (r for an "
           "expected positive effect, \u2212r for negative, |r| otherwise) and p = (1 + number of surrogates at "
           "least as extreme) / (surrogates + 1).")
    val = sc.get("validation", {}) or {}
    init = val.get("initial_years")
    if init is None and "oos_initial" in ev and ev["oos_initial"].notna().any():
        init_words = (f"{int(ev['oos_initial'].median())} training years (median over hypotheses; default "
                      f"rule max(10, 0.4 n))")
    else:
        init_words = f"{init} training years" if init else "max(10, 0.4 n) training years"
    hold = val.get("holdout_years")
    ry = ev["retest_years"].dropna().astype(str) if "retest_years" in ev else pd.Series(dtype=str)
    ry_words = f" ({ry.mode().iloc[0]} for most hypotheses)" if len(ry) else ""
    p4 = (f"Out-of-sample skill came from rolling-origin one-step-ahead forecasts with an expanding window (Tashman "
          f"2000; Bergmeir et al. 2018): the first forecast followed {init_words}, and at every origin the lag and "
          f"all coefficients were re-estimated from the training years alone. Each candidate was a baseline plus the "
          f"driver, against three baselines: climatology (the mean), persistence (an AR(1) of the response) and a "
          f"linear trend in year. Skill is 1 \u2212 MSE(candidate)/MSE(baseline), reported against the hardest "
          f"baseline (lowest skill); its significance by the Diebold & Mariano (1995) test with the small-sample "
          f"correction of Harvey et al. (1997), and against the same surrogate drivers. The latest "
          f"{hold if hold else 'max(3, 0.15 n)'} years{ry_words} were re-tested with the model fitted only on the "
          f"years before them.")
    refs += ["tashman", "bergmeir", "dm", "hln"]
    p5 = (f"q-values were computed over all {len(ev)} hypotheses of the study by Benjamini & Hochberg (1995) from "
          f"the surrogate p-values, at a false discovery rate of {sc['fdr']:g}; the significance level elsewhere was "
          f"alpha = {sc['alpha']:g}. Drivers correlated with another driver at |r| > 0.7 were flagged as collinear "
          f"(Dormann et al. 2013). Every hypothesis was graded by fixed rules, stated with the evidence table, and "
          f"flagged with the cautions that apply."
          + (" Observations were weighted by their inverse variance." if sc.get("weights") == "inverse-variance" else "")
          + f" Random seed {sc['seed']}: the same inputs, configuration and seed reproduce every number.")
    refs += ["bh", "dormann"]
    return [p1, p2, p3, p4, p5], refs


def _series_table(ctx: Context, tables: dict) -> str:
    cov = tables.get("coverage")
    cov = cov.set_index("series") if cov is not None and len(cov) else None
    rows = []
    for role, items in (("response", ctx.study.responses), ("driver", ctx.study.drivers)):
        for s in items:
            yrs = ""
            if cov is not None and s["id"] in cov.index:
                c = cov.loc[s["id"]]
                yrs = f"{_str(c['first_year'])}\u2013{_str(c['last_year'])} ({_str(c['years_observed'])})"
            agg = s.get("aggregate")
            agg_w = f"{agg.get('how', 'mean')} of months {_range_words(agg['months'])}" if agg else ""
            rows.append("<tr>" + "".join(f"<td>{x}</td>" for x in (
                f"<code>{e(s['id'])}</code>", e(s.get("label", "")),
                e(f"response ({s.get('kind', 'other')})") if role == "response" else e(f"driver ({s.get('category', 'other')})"),
                e(s.get("unit", "")),
                e(s.get("transform", "none")), e(agg_w),
                "" if role == "response" else e(_range_words(s.get("lags") or ctx.study.screen["lags"])),
                e(s.get("expected_sign", "")) if role == "driver" else "", e(yrs))) + "</tr>")
    head = "".join(f"<th>{h}</th>" for h in ("id", "label", "role (kind or category)", "unit", "transform",
                                             "annual value", "lags",
                                             "expected sign", "years (n)"))
    return f'<div class="scroll"><table class="plain"><thead><tr>{head}</tr></thead><tbody>{"".join(rows)}</tbody></table></div>'


def _methods(ctx: Context, tables: dict) -> str:
    paras, refs = methods_paragraphs(ctx)
    seen, ordered = set(), []
    for k in refs:
        if k not in seen:
            seen.add(k)
            ordered.append(REF[k])
    ordered.sort()
    body = "".join(f"<p>{e(p)}</p>" for p in paras)
    reflist = "".join(f"<li>{e(r)}</li>" for r in ordered)
    return (f'<section id="methods"><h2>Methods</h2>'
            f'<p class="noprint"><button type="button" id="copy-methods">Copy methods text</button> '
            f'<span class="muted">Generated from this run\u2019s settings; paste into an annex as it stands.</span></p>'
            f'<div id="methods-text" class="methods">{body}<h3>References</h3><ol class="refs">{reflist}</ol></div>'
            f'<h3>Series screened</h3>{_series_table(ctx, tables)}</section>')


# ----------------------------------------------------------------------------- provenance
def _provenance(ctx: Context) -> str:
    prov = ctx.provenance
    rows = [("study", prov.get("study")), ("tool", f"lagsieve {prov.get('tool_version')}"),
            ("config", prov.get("config_path")), ("config SHA-256", prov.get("config_sha256")),
            ("seed", prov.get("seed"))]
    for k, label in (("inputs_prepared", "align stage output written"), ("screened", "last screen output written"),
                     ("started", "report stage started"), ("finished", "report written")):
        if prov.get(k):
            rows.append((label, prov[k]))
    kv = "".join(f"<tr><th scope='row'>{e(str(k))}</th><td><code>{e(str(v))}</code></td></tr>" for k, v in rows)
    inp = "".join(f"<tr><td><code>{e(str(k))}</code></td><td><code class='hash'>{e(str(v))}</code></td></tr>"
                  for k, v in prov.get("inputs_sha256", {}).items())
    ver = "".join(f"<tr><td>{e(str(k))}</td><td><code>{e(str(v))}</code></td></tr>"
                  for k, v in prov.get("versions", {}).items())
    cfg = e(json.dumps(prov.get("config", {}), indent=1, default=str, ensure_ascii=False))
    settings = e(json.dumps(ctx.study.screen, indent=1, default=str, ensure_ascii=False))
    return (f'<section id="provenance"><h2>Provenance</h2>'
            f'<div class="cols"><div><h3>Run</h3><table class="plain kv"><tbody>{kv}</tbody></table>'
            f'<h3>Inputs</h3><table class="plain"><thead><tr><th>file</th><th>SHA-256</th></tr></thead>'
            f'<tbody>{inp}</tbody></table></div>'
            f'<div><h3>Versions</h3><table class="plain"><tbody>{ver}</tbody></table></div></div>'
            f'<details><summary>Configuration as given</summary><pre>{cfg}</pre></details>'
            f'<details><summary>Screen settings as run (defaults filled)</summary><pre>{settings}</pre></details>'
            f'</section>')


def _footer(ctx: Context) -> str:
    inv = " Invented demonstration data." if ctx.invented else ""
    return (f'<footer><p><b>Association is not cause.</b> This screening generates hypotheses; its results inform, '
            f'and do not replace, the assessment body\u2019s review and the local management rules.{inv}</p>'
            f'<p class="muted">lagsieve {e(str(ctx.provenance.get("tool_version", "")))} \u00b7 study '
            f'<code>{e(ctx.study.study)}</code></p></footer>')


# ----------------------------------------------------------------------------- style and script
def _css() -> str:
    grade_css = "".join(
        f".{GRADE_CLASS[g]}{{background:{fill};color:{text};"
        + ("border:1px dashed #8a8a8a;" if g == "insufficient-data" else "border:1px solid rgba(0,0,0,.18);") + "}"
        for g, (fill, text, _) in fg.GRADE_STYLE.items())
    return """
:root{--ink:#1e2a33;--muted:#5d6872;--line:#d8dde2;--accent:#0b3c68;--soft:#f3f5f7;--warm:#fff4e8}
*{box-sizing:border-box}
html{scroll-padding-top:3rem}
body{font-family:"Source Sans 3","Segoe UI",system-ui,-apple-system,sans-serif;color:var(--ink);background:#fff;
 line-height:1.5;margin:0;font-size:15px}
main{max-width:1180px;margin:0 auto;padding:0 1.4rem 2rem}
h1{font-size:1.75rem;line-height:1.2;margin:.2rem 0 .3rem}
h2{font-size:1.3rem;margin:2.2rem 0 .7rem;padding:.15rem 0 .15rem .6rem;border-left:5px solid var(--accent)}
h3{font-size:1.05rem;margin:1.2rem 0 .4rem}
h4{font-size:1rem;margin:0 0 .3rem}
code{font-family:ui-monospace,"DejaVu Sans Mono",Menlo,monospace;font-size:.82em;color:#33404a}
.kicker{text-transform:uppercase;letter-spacing:.08em;font-size:.75rem;color:var(--muted);margin:1.2rem 0 0}
.meta,.muted{color:var(--muted);font-size:.85rem}
.lede{max-width:60rem}
.banner{padding:.6rem 1rem;border-radius:.35rem;margin:.6rem 0}
.banner ul{margin:.3rem 0 0;padding-left:1.2rem}
.invented{background:#fdecec;border:2px solid #a3261b}
.caution{background:var(--warm);border-left:5px solid #c4561b}
.toc{position:sticky;top:0;z-index:5;background:rgba(255,255,255,.96);border-bottom:1px solid var(--line);
 display:flex;flex-wrap:wrap;gap:.2rem 1rem;padding:.45rem 1.4rem;font-size:.88rem}
.toc a{color:var(--accent);text-decoration:none}.toc a:hover{text-decoration:underline}
.glance{background:var(--soft);padding:.5rem .8rem;border-radius:.35rem}
.count{margin-right:.7rem;white-space:nowrap}
.resp{border-top:1px solid var(--line);padding:.2rem 0 .4rem}
.resp h3{margin-top:.7rem}
.sub{margin:.4rem 0 .1rem;font-weight:600;font-size:.85rem;text-transform:uppercase;letter-spacing:.05em;color:var(--muted)}
ul.lead li{margin:.25rem 0}ul.aside{font-size:.92rem}ul.aside li{margin:.12rem 0}
.note{color:#7a3b10}
.who{white-space:nowrap}
.cat{color:var(--muted);font-size:.88em}
table.evidence td:nth-child(3){min-width:10.5rem}
table.evidence td:last-child{min-width:12rem}
.none{font-style:italic}
.grade{display:inline-block;padding:0 .45em;border-radius:.3em;font-weight:600;font-size:.85em;white-space:nowrap;
 line-height:1.45}
.g-x{background:#fff;color:#000;border:1px solid #000}
.flag{display:inline-block;font-family:ui-monospace,"DejaVu Sans Mono",monospace;font-size:.8em;background:#f4efe6;
 border:1px solid #d9ccb6;border-radius:.25em;padding:0 .3em;margin:0 .15em .1em 0;white-space:nowrap;cursor:help}
.controls{display:flex;flex-wrap:wrap;gap:.5rem 1.1rem;align-items:center;margin:.5rem 0;font-size:.88rem}
.controls input,.controls select{font:inherit;padding:.15rem .3rem;border:1px solid #9aa5ae;border-radius:.25rem}
.scroll{overflow-x:auto;border:1px solid var(--line);border-radius:.35rem}
table{border-collapse:collapse;width:100%}
table.evidence{font-size:.8rem}
table.evidence th,table.evidence td{padding:.3rem .4rem;border-bottom:1px solid #e7eaed;text-align:left;vertical-align:top}
table.evidence td:nth-child(n+4):nth-child(-n+14){text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
table.evidence th:nth-child(n+4):nth-child(-n+14){text-align:right}
table.evidence thead th{position:sticky;top:0;background:#e9eef3;z-index:1}
table.evidence th button{border:0;background:none;padding:0;margin:0;font:inherit;color:inherit;cursor:pointer;
 font-weight:600;white-space:nowrap;text-align:inherit}
table.evidence th button:focus-visible{outline:2px solid var(--accent)}
table.evidence th[aria-sort=ascending] button::after{content:" \\25B2";font-size:.7em}
table.evidence th[aria-sort=descending] button::after{content:" \\25BC";font-size:.7em}
table.evidence tbody tr:nth-child(even){background:#fafbfc}
table.evidence tbody tr:hover{background:#eef4fa}
table.plain{font-size:.82rem}table.plain th,table.plain td{padding:.25rem .45rem;border-bottom:1px solid #e7eaed;text-align:left;vertical-align:top}
table.kv th{width:14rem;font-weight:600}
.hash{word-break:break-all}
.legends{display:grid;grid-template-columns:1fr 1fr;gap:0 2rem}
dl.legend{display:grid;grid-template-columns:max-content 1fr;gap:.3rem .8rem;font-size:.85rem;margin:0}
dl.legend dd{margin:0}
.hyp{border:1px solid var(--line);border-radius:.45rem;padding:.8rem 1rem;margin:.8rem 0 1.2rem}
.hyp .arrow{color:var(--muted)}
.resp-head{margin-top:1.6rem}
dl.numbers{display:flex;flex-wrap:wrap;gap:.3rem .5rem;margin:.4rem 0 .6rem;font-size:.8rem}
dl.numbers div{background:var(--soft);border-radius:.3rem;padding:.1rem .45rem}
dl.numbers dt{display:inline;color:var(--muted)}dl.numbers dt::after{content:" "}
dl.numbers dd{display:inline;margin:0;font-weight:600;font-variant-numeric:tabular-nums}
.grid{display:grid;grid-template-columns:repeat(auto-fill,minmax(400px,1fr));gap:.8rem 1rem;align-items:start}
figure.fig{margin:0}
figure.fig img{display:block;max-width:100%;height:auto;margin:0 auto}
figure.fig figcaption{font-size:.8rem;color:var(--muted);margin-top:.2rem}
#overview figure.fig img,#data figure.fig img{margin:0}
.cols{display:grid;grid-template-columns:3fr 2fr;gap:1.5rem}
.methods{max-width:62rem}
.methods p{margin:.5rem 0}
ol.refs{font-size:.85rem;padding-left:1.4rem}
ul.compact{font-size:.85rem;columns:2;column-gap:2rem}
details{margin:.6rem 0}summary{cursor:pointer;font-weight:600}
pre{background:var(--soft);padding:.6rem;border-radius:.3rem;font-size:.75rem;overflow-x:auto;max-height:30rem}
button#copy-methods{font:inherit;font-size:.85rem;padding:.2rem .7rem;border:1px solid var(--accent);
 background:#fff;color:var(--accent);border-radius:.3rem;cursor:pointer}
footer{border-top:2px solid var(--line);margin-top:2.5rem;padding-top:.6rem;font-size:.88rem}
@media (max-width:760px){.legends,.cols{grid-template-columns:1fr}.grid{grid-template-columns:1fr}ul.compact{columns:1}}
@page{size:A4;margin:14mm 12mm 16mm}
@page wide{size:A4 landscape;margin:12mm}
@media print{
 body{font-size:9.5pt;line-height:1.35}
 main{max-width:none;padding:0}
 .noprint,.toc{display:none!important}
 h2{break-after:avoid;page-break-after:avoid;margin-top:1.2rem}
 h3,h4{break-after:avoid;page-break-after:avoid}
 #table{page:wide}
 table.evidence{font-size:7pt;table-layout:fixed}
 table.evidence col{width:4.7%}
 table.evidence col.c-response{width:6%}table.evidence col.c-rank{width:3.6%}table.evidence col.c-driver{width:14%}
 table.evidence col.c-lag,table.evidence col.c-n{width:3.4%}table.evidence col.c-oos-skill{width:5.4%}
 table.evidence col.c-grade{width:8.6%}table.evidence col.c-flags{width:15%}
 table.evidence th button{display:inline;appearance:none;-webkit-appearance:none}
 dl.numbers{font-size:7.5pt}
 .hyp>p,dl.numbers{break-after:avoid;page-break-after:avoid}
 table.evidence td:nth-child(3),table.evidence td:last-child{min-width:0}
 table.evidence thead th{position:static}
 table.evidence tr{break-inside:avoid;page-break-inside:avoid}
 tr[hidden]{display:table-row!important}
 .scroll{overflow:visible;border:none}
 .hyp{break-inside:auto;border:none;border-top:1px solid #999;border-radius:0;padding:.4rem 0}
 .hyp h4{break-after:avoid}
 .grid{display:block}
 .grid figure.fig{display:inline-block;width:49.5%;vertical-align:top;margin:0 0 .3rem}
 .legends,.cols{display:block}
 dl.legend{display:block}dl.legend dt{float:left;clear:left;width:9.5em}dl.legend dd{margin:0 0 .25rem 10em}
 dl.numbers{display:block}dl.numbers div{display:inline-block;margin:0 .3rem .2rem 0}
 figure.fig{break-inside:avoid;page-break-inside:avoid}
 figure.fig figcaption{font-size:7.5pt}
 details{display:block}details>summary{list-style:none}
 pre{max-height:none;white-space:pre-wrap;font-size:6pt;columns:2;column-gap:1.2rem}
 table.plain{font-size:7.5pt}
 a{color:inherit;text-decoration:none}
 .grade,.flag,.invented,.caution,.glance,dl.numbers div{-webkit-print-color-adjust:exact;print-color-adjust:exact}
}
""" + grade_css


SCRIPT = r"""
(function () {
  'use strict';
  var table = document.getElementById('evidence-table');
  if (table) {
    var tbody = table.tBodies[0];
    var heads = Array.prototype.slice.call(table.tHead.rows[0].cells);
    var cellKey = function (row, i) {
      var c = row.cells[i];
      var v = c.getAttribute('data-v');
      return v === null ? c.textContent.trim() : v;
    };
    heads.forEach(function (th, i) {
      var button = th.querySelector('button');
      if (!button) { return; }
      button.addEventListener('click', function () {
        var dir = th.getAttribute('aria-sort') === 'ascending' ? 'descending' : 'ascending';
        heads.forEach(function (h) { h.removeAttribute('aria-sort'); });
        th.setAttribute('aria-sort', dir);
        var numeric = th.getAttribute('data-type') === 'num';
        var rows = Array.prototype.slice.call(tbody.rows);
        rows.sort(function (a, b) {
          var x = cellKey(a, i), y = cellKey(b, i);
          if (x === '' || y === '') { return (x === '') - (y === ''); }
          var d = numeric ? parseFloat(x) - parseFloat(y) : x.localeCompare(y);
          return dir === 'ascending' ? d : -d;
        });
        rows.forEach(function (r) { tbody.appendChild(r); });
      });
    });
    var text = document.getElementById('f-text');
    var resp = document.getElementById('f-response');
    var grade = document.getElementById('f-grade');
    var count = document.getElementById('f-count');
    var apply = function () {
      var q = text.value.trim().toLowerCase(), shown = 0, all = tbody.rows.length;
      Array.prototype.forEach.call(tbody.rows, function (r) {
        var ok = (!q || r.textContent.toLowerCase().indexOf(q) >= 0) &&
                 (!resp.value || r.getAttribute('data-response') === resp.value) &&
                 (!grade.value || r.getAttribute('data-grade') === grade.value);
        r.hidden = !ok;
        if (ok) { shown += 1; }
      });
      count.textContent = shown + ' of ' + all + ' rows shown';
    };
    if (text && resp && grade && count) {
      text.addEventListener('input', apply);
      resp.addEventListener('change', apply);
      grade.addEventListener('change', apply);
    }
  }
  var copy = document.getElementById('copy-methods');
  var methods = document.getElementById('methods-text');
  if (copy && methods) {
    var select = function () {
      var range = document.createRange();
      range.selectNodeContents(methods);
      var sel = window.getSelection();
      sel.removeAllRanges();
      sel.addRange(range);
      copy.textContent = 'Selected: press Ctrl+C to copy';
    };
    copy.addEventListener('click', function () {
      if (navigator.clipboard && window.isSecureContext) {
        navigator.clipboard.writeText(methods.innerText).then(function () {
          copy.textContent = 'Copied';
        }, select);
      } else {
        select();
      }
    });
  }
}());
"""


def _csp_hash(text: str) -> str:
    return "'sha256-" + base64.b64encode(hashlib.sha256(text.encode("utf-8")).digest()).decode("ascii") + "'"


def _page(ctx: Context, body: str) -> str:
    css = _css()
    csp = (f"default-src 'none'; img-src data:; style-src {_csp_hash(css)}; script-src {_csp_hash(SCRIPT)}; "
           f"base-uri 'none'; form-action 'none'")
    inv = " (invented data)" if ctx.invented else ""
    return ("<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
            f'<meta http-equiv="Content-Security-Policy" content="{e(csp)}">'
            '<meta name="viewport" content="width=device-width, initial-scale=1">'
            f'<meta name="generator" content="lagsieve {e(str(ctx.provenance.get("tool_version", "")))}">'
            f"<title>Driver screening: {e(ctx.study.study)}{e(inv)}</title><style>{css}</style></head>"
            f"<body>{_nav()}<main>{body}</main><script>{SCRIPT}</script></body></html>\n")


# ----------------------------------------------------------------------------- build
def _write_tables(ctx: Context, tables: dict, panels: dict, jobs: list, figures_dir: Path) -> None:
    from lagsieve.io.files import write_csv

    write_csv(ctx.evidence, figures_dir / "evidence_table.csv")
    rows = []
    for row in ctx.evidence.sort_values(["response", "rank"]).to_dict("records"):
        supported = row.get("grade") in SUPPORTED
        rows.append({"response": row["response"], "rank": row.get("rank"), "driver": row["driver"],
                     "driver_label": ctx.label(row["driver"]), "lag": row.get("lag"), "grade": row.get("grade"),
                     "status": "supported" if supported else "set aside",
                     "words": summary_line(row) if supported else set_aside_reason(row),
                     "flags": _str(row.get("flags"))})
    write_csv(pd.DataFrame(rows), figures_dir / "summary.csv")
    if "evidence_map" in tables:
        write_csv(tables["evidence_map"].reset_index(), figures_dir / "evidence_map.csv")
    for name in ("coverage", "driver_correlations"):
        if name in tables:
            write_csv(tables[name], figures_dir / f"{name}.csv")
    for key, info in panels.items():
        if "lag_table" in info:
            cols = [c for c in ("response", "driver", "lag", "model", "n", "r", "n_eff", "r_crit", "p_adjusted",
                                "r_detrended", "p_surrogate_lag") if c in info["lag_table"]]
            write_csv(info["lag_table"][cols], figures_dir / f"{key}__lags.csv")
    write_csv(pd.DataFrame({"figure": [j.name for j in jobs], "kind": [j.builder for j in jobs],
                            "shows": [FIGURE_WORDS.get(j.builder, "") for j in jobs],
                            "png": [f"{j.name}.png" for j in jobs], "svg": [f"{j.name}.svg" for j in jobs]}),
              figures_dir / "figures.csv")


FIGURE_WORDS = {
    "evidence_grid": "grade of every response x driver hypothesis at its chosen lag",
    "coverage": "years with data in every series after alignment; gaps and filled years marked",
    "driver_correlation": "Pearson r between drivers in the same year; |r| > 0.7 outlined",
    "overlay": "response and lagged driver, both standardised",
    "scatter": "response against the lagged driver with the linear fit (and the spline where fitted)",
    "lag_profile": "r at every lag tried with the autocorrelation-adjusted p = 0.05 band",
    "forecasts": "out-of-sample one-step forecasts against observed and the three baselines",
    "null_distributions": "the statistic over surrogate drivers and the real driver's value",
    "gam_effect": "partial effect of the driver in the penalised spline with a 95% band",
}


def build_report(study, table, screen, evidence, forecasts, nulls, notes, provenance, figures_dir,
                 annual: pd.DataFrame | None = None, workers: int = 1,
                 renderer: fg.FigureRenderer | None = None, extra_sections: str = "") -> tuple[str, dict]:
    """Render the report HTML; write its figures (PNG 300 dpi and SVG) and tables (CSV) under
    ``figures_dir``. Returns (html, figures) where figures maps name -> (base64 PNG, size).

    With a ``renderer`` (a :class:`figures.FigureRenderer` on ``figures_dir``) the SVG copies
    are left to the caller (``renderer.write_svgs()`` / ``close()``); without one they are
    written before this returns, using ``workers`` processes. ``extra_sections``: HTML
    fragments built elsewhere and already escaped (the ledger's "Since the previous run"),
    placed after the data section."""
    figures_dir = Path(figures_dir)
    figures_dir.mkdir(parents=True, exist_ok=True)
    for old in list(figures_dir.glob("*.png")) + list(figures_dir.glob("*.svg")) + list(figures_dir.glob("*.csv")):
        old.unlink()
    ctx = Context(study=study, table=table, screen=screen, evidence=evidence, forecasts=forecasts, nulls=nulls,
                  notes=notes, annual=annual, provenance=provenance,
                  labels={s["id"]: s.get("label") or s["id"] for s in study.responses + study.drivers},
                  units={s["id"]: s["unit"] for s in study.responses + study.drivers if s.get("unit")},
                  invented=bool(study.raw.get("invented")))
    jobs, panels, tables = plan_figures(ctx)
    if renderer is None:
        figs = fg.render_jobs(jobs, figures_dir, workers=workers)
    else:
        figs = renderer.draw(jobs)
    _write_tables(ctx, tables, panels, jobs, figures_dir)
    import time

    provenance.setdefault("finished", time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()))
    body = "\n".join([_header(ctx), _summary(ctx), _overview(ctx, figs), _evidence_table(ctx),
                      _hypotheses(ctx, figs, panels), _data(ctx, figs, tables), extra_sections,
                      _methods(ctx, tables),
                      _provenance(ctx), _footer(ctx)])
    return _page(ctx, body), figs


# ----------------------------------------------------------------------------- PDF
def pdf_engine() -> str:
    """'weasyprint' when it imports and can render here, else 'matplotlib'."""
    try:
        import weasyprint  # noqa: F401
    except Exception:  # ImportError, or OSError when its system libraries are missing
        return "matplotlib"
    return "weasyprint"


def write_pdf(html_text: str, path: str | Path, *, study_id: str, title: str, summary: list[str],
              figures: list[tuple[str, str]], invented: bool, engine: str | None = None) -> str:
    """Write the report as PDF; returns the engine used.

    weasyprint renders the HTML itself with the print stylesheet. Without it, matplotlib's
    PdfPages writes the title, cautions and summary as text followed by the figures
    (``figures``: (caption, base64 PNG) pairs).
    """
    from lagsieve.io.files import atomic_path

    engine = engine or pdf_engine()
    if engine == "weasyprint":
        try:
            import weasyprint

            for name in ("weasyprint", "weasyprint.progress", "fontTools", "fontTools.subset"):
                logging.getLogger(name).setLevel(logging.ERROR)
            with atomic_path(path) as tmp:
                weasyprint.HTML(string=html_text, base_url=str(Path(path).parent)).write_pdf(str(tmp))
            return "weasyprint"
        except Exception as exc:  # a broken installation: fall back rather than lose the PDF
            logging.getLogger(__name__).warning("weasyprint failed (%s); writing the PDF with matplotlib", exc)
    _pdf_matplotlib(path, study_id=study_id, title=title, summary=summary, figures=figures, invented=invented)
    return "matplotlib"


def _pdf_matplotlib(path, *, study_id, title, summary, figures, invented) -> None:
    import io

    import matplotlib.image as mpimg
    import matplotlib.pyplot as plt
    from matplotlib.backends.backend_pdf import PdfPages

    from lagsieve.io.files import atomic_path

    lines: list[tuple[str, float, str]] = [(f"Driver screening: {title}", 13, "bold"), (f"study {study_id}", 9, "normal")]
    if invented:
        lines.append(("INVENTED DATA: every number was made up to demonstrate the tool.", 9.5, "bold"))
    for a, b in CAUTIONS:
        lines += [(w, 8.5, "normal") for w in textwrap.wrap(f"{a} {b}", 100)]
    lines.append(("", 6, "normal"))
    for s in summary:
        bold = not s.startswith(" ")
        lines += [(w, 8.5, "bold" if bold and k == 0 else "normal")
                  for k, w in enumerate(textwrap.wrap(s, 100, subsequent_indent="    "))]
    with atomic_path(path) as tmp, PdfPages(tmp, metadata={"Title": f"Driver screening: {study_id}"}) as pdf:
        k = 0
        while k < len(lines):
            fig = plt.figure(figsize=(8.27, 11.69))
            y = 0.95
            while k < len(lines) and y > 0.05:
                text, size, weight = lines[k]
                fig.text(0.07, y, fg.mpl_text(text), fontsize=size, fontweight=weight, va="top")
                y -= size / 11.69 / 72 * 1.55
                k += 1
            pdf.savefig(fig)
            plt.close(fig)
        for i in range(0, len(figures), 2):
            fig = plt.figure(figsize=(8.27, 11.69))
            for j, (caption, b64) in enumerate(figures[i:i + 2]):
                img = mpimg.imread(io.BytesIO(base64.b64decode(b64)), format="png")
                ax = fig.add_axes([0.07, 0.53 - 0.47 * j, 0.86, 0.40])
                ax.imshow(img)
                ax.set_axis_off()
                fig.text(0.07, 0.515 - 0.47 * j, "\n".join(textwrap.wrap(fg.mpl_text(caption), 110)),
                         fontsize=7.5, va="top")
            pdf.savefig(fig)
            plt.close(fig)


def pdf_summary_lines(study, evidence: pd.DataFrame) -> list[str]:
    """The summary of the report as text lines (for the matplotlib PDF)."""
    labels = {s["id"]: s.get("label") or s["id"] for s in study.responses + study.drivers}
    out = []
    for rid in study.response_ids:
        sub = evidence[evidence["response"] == rid].sort_values("rank")
        out.append(f"{labels.get(rid, rid)} ({rid})")
        for row in sub.to_dict("records"):
            words = summary_line(row) if row.get("grade") in SUPPORTED else "set aside: " + set_aside_reason(row)
            out.append(f"    {labels.get(row['driver'], row['driver'])}, {words}")
    return out

