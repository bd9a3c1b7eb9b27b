"""The evidence report: one self-contained HTML file (figures embedded, nothing fetched)."""
from __future__ import annotations

import html
import json

import numpy as np
import pandas as pd

from . import figures as fg
from .alignment import lagged_pair
from .evidence import FLAGS, GRADE_RULES

CAUTION = ("A screening shows association, not cause. It generates hypotheses to be examined, "
           "it does not test mechanisms. Its results inform, and do not replace, the stock "
           "assessment's own review and the local management rules.")

REFERENCES = [
    "Benjamini, Y. & Hochberg, Y. (1995) Controlling the false discovery rate. J. R. Stat. Soc. B 57:289-300.",
    "Bergmeir, C., Hyndman, R.J. & Koo, B. (2018) A note on the validity of cross-validation for evaluating autoregressive time series prediction. Comput. Stat. Data Anal. 120:70-83.",
    "Diebold, F.X. & Mariano, R.S. (1995) Comparing predictive accuracy. J. Bus. Econ. Stat. 13:253-263.",
    "Dormann, C.F. et al. (2013) Collinearity: a review of methods to deal with it. Ecography 36:27-46.",
    "Ebisuzaki, W. (1997) A method to estimate the statistical significance of a correlation when the data are serially correlated. J. Climate 10:2147-2153.",
    "Granger, C.W.J. & Newbold, P. (1974) Spurious regressions in econometrics. J. Econometrics 2:111-120.",
    "Harvey, D., Leybourne, S. & Newbold, P. (1997) Testing the equality of prediction mean squared errors. Int. J. Forecasting 13:281-291.",
    "Newey, W.K. & West, K.D. (1987) A simple, positive semi-definite, heteroskedasticity and autocorrelation consistent covariance matrix. Econometrica 55:703-708.",
    "Pyper, B.J. & Peterman, R.M. (1998) Comparison of methods to account for autocorrelation in correlation analyses of fish data. Can. J. Fish. Aquat. Sci. 55:2127-2140.",
    "Tashman, L.J. (2000) Out-of-sample tests of forecasting accuracy. Int. J. Forecasting 16:437-450.",
]

CSS = """
body{font-family:system-ui,-apple-system,'Segoe UI',sans-serif;max-width:1100px;margin:0 auto;padding:1rem 1.5rem;color:#1d1d1d;line-height:1.45}
h1{font-size:1.6rem;margin-bottom:.2rem}h2{border-bottom:2px solid #1b5e8c;padding-bottom:.2rem;margin-top:2rem}
table{border-collapse:collapse;font-size:.82rem;width:100%}th,td{border-bottom:1px solid #ddd;padding:.25rem .4rem;text-align:left;vertical-align:top}
th{background:#f1f4f8;cursor:pointer;position:sticky;top:0}.grade{padding:.05rem .4rem;border-radius:.3rem;font-weight:600;white-space:nowrap}
.flag{font-family:ui-monospace,monospace;font-size:.75rem;background:#f3eee6;border:1px solid #e0d5c3;border-radius:.25rem;padding:0 .25rem;margin-right:.15rem;white-space:nowrap}
.caution{background:#fff6e5;border-left:5px solid #d9822b;padding:.6rem 1rem}.panel{display:flex;flex-wrap:wrap;gap:.5rem}
.panel img{max-width:100%;height:auto}.muted{color:#666;font-size:.85rem}code{font-size:.85rem}
@media print{th{position:static}.noprint{display:none}h2{page-break-after:avoid}.hyp{page-break-inside:avoid}}
"""

SORT_JS = """
document.querySelectorAll('table.sortable').forEach(function(t){
  t.querySelectorAll('th').forEach(function(th,i){th.addEventListener('click',function(){
    var b=t.tBodies[0],rows=Array.from(b.rows),asc=th.dataset.asc!=='1';th.dataset.asc=asc?'1':'0';
    rows.sort(function(a,c){var x=a.cells[i].dataset.v||a.cells[i].textContent,y=c.cells[i].dataset.v||c.cells[i].textContent;
      var nx=parseFloat(x),ny=parseFloat(y);if(!isNaN(nx)&&!isNaN(ny)){return asc?nx-ny:ny-nx;}return asc?x.localeCompare(y):y.localeCompare(x);});
    rows.forEach(function(r){b.appendChild(r);});});});});
var f=document.getElementById('filter');if(f){f.addEventListener('input',function(){var q=f.value.toLowerCase();
  document.querySelectorAll('#evidence tbody tr').forEach(function(r){r.style.display=r.textContent.toLowerCase().indexOf(q)>=0?'':'none';});});}
"""

e = html.escape


def _num(v, fmt="{:.3f}"):
    if v is None or (isinstance(v, float) and np.isnan(v)):
        return ""
    try:
        return fmt.format(float(v))
    except (TypeError, ValueError):
        return e(str(v))


def _grade(g: str) -> str:
    colour = fg.GRADE_COLOURS.get(g, "#eee")
    dark = g in ("strong",)
    return f'<span class="grade" style="background:{colour};color:{"#fff" if dark else "#111"}">{e(g)}</span>'


def _flags(fl) -> str:
    if not isinstance(fl, str) or not fl:
        return ""
    return "".join(f'<span class="flag" title="{e(FLAGS.get(c, c))}">{e(c)}</span>' for c in fl.split(";"))


def _img(b64: str, alt: str) -> str:
    return f'<img alt="{e(alt)}" src="data:image/png;base64,{b64}">'


def evidence_table(ev: pd.DataFrame) -> str:
    cols = [("response", None), ("rank", "{:.0f}"), ("driver", None), ("category", None), ("lag", "{:.0f}"),
            ("model", None), ("n", "{:.0f}"), ("r", "{:.2f}"), ("p_naive", "{:.3f}"), ("p_adjusted", "{:.3f}"),
            ("p_surrogate", "{:.3f}"), ("q_value", "{:.3f}"), ("oos_skill", "{:+.2f}"), ("oos_p_surrogate", "{:.3f}"),
            ("retest_skill", "{:+.2f}"), ("grade", None), ("flags", None)]
    head = "".join(f"<th>{e(c)}</th>" for c, _ in cols)
    body = []
    for row in ev.to_dict("records"):
        cells = []
        for c, fmt in cols:
            v = row.get(c)
            if c == "grade":
                cells.append(f'<td data-v="{e(str(v))}">{_grade(str(v))}</td>')
            elif c == "flags":
                cells.append(f"<td>{_flags(v)}</td>")
            elif fmt:
                cells.append(f'<td data-v="{_num(v, "{:.6g}")}">{_num(v, fmt)}</td>')
            else:
                cells.append(f"<td>{e('' if v is None or (isinstance(v, float) and np.isnan(v)) else str(v))}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    return (f'<p class="noprint"><label>Filter rows: <input id="filter" type="search" placeholder="driver, grade, flag..."></label>'
            f' <span class="muted">(click a column heading to sort)</span></p>'
            f'<table id="evidence" class="sortable"><thead><tr>{head}</tr></thead><tbody>{"".join(body)}</tbody></table>')


def build_report(study, table, screen, evidence, forecasts, nulls, notes, provenance, figures_dir) -> str:
    """Render the report HTML and write its figures under ``figures_dir``."""
    roles = {r: "response" for r in study.response_ids} | {d: "driver" for d in study.driver_ids}
    labels = {s["id"]: s.get("label", s["id"]) for s in study.responses + study.drivers}
    parts = []
    title = study.raw.get("title") or study.study
    parts.append(f"<h1>Driver screening: {e(title)}</h1>")
    parts.append(f'<p class="muted">study <code>{e(study.study)}</code> · lagsieve {e(provenance["tool_version"])}'
                 f' · run {e(provenance["started"])}</p>')
    if study.raw.get("invented"):
        parts.append('<p class="caution"><b>Invented data.</b> This study uses invented demonstration data; '
                     'no real stock, place or survey is described.</p>')
    parts.append(f'<p class="caution"><b>Caution.</b> {e(CAUTION)}</p>')

    parts.append("<h2>Summary</h2>")
    for rid in study.response_ids:
        sub = evidence[evidence["response"] == rid].sort_values("rank")
        parts.append(f"<h3>{e(labels.get(rid, rid))} <code>{e(rid)}</code></h3><ul>")
        top = sub[sub["grade"].isin(["strong", "moderate"])]
        for row in top.to_dict("records"):
            parts.append(f"<li><b>{e(labels.get(row['driver'], row['driver']))}</b>, {e(str(row['summary']))}</li>")
        if top.empty:
            parts.append("<li>No driver reaches moderate or strong evidence.</li>")
        aside = sub[~sub["grade"].isin(["strong", "moderate"])]
        if len(aside):
            parts.append("<li>Set aside: " + "; ".join(
                f"{e(labels.get(r['driver'], r['driver']))} ({e(r['grade'])}{', ' + e(r['flags'].replace(';', ', ')) if isinstance(r['flags'], str) and r['flags'] else ''})"
                for r in aside.to_dict("records")) + "</li>")
        parts.append("</ul>")

    parts.append("<h2>Ranked evidence</h2>")
    parts.append(evidence_table(evidence))
    parts.append("<h3>Grades</h3><dl>" + "".join(f"<dt>{_grade(g)}</dt><dd>{e(t)}</dd>" for g, t in GRADE_RULES.items()) + "</dl>")
    parts.append("<h3>Flags</h3><dl>" + "".join(f'<dt><span class="flag">{e(c)}</span></dt><dd>{e(t)}</dd>' for c, t in FLAGS.items()) + "</dl>")

    parts.append("<h2>Data coverage</h2>")
    parts.append(_img(fg.save(fg.coverage(table, roles), figures_dir, "coverage"), "data coverage by series and year"))
    changed = notes[notes["action"].isin(["dropped", "filled"])] if len(notes) else notes
    if len(changed):
        parts.append("<p>Years dropped or filled: " + "; ".join(
            f"{e(str(r['series']))} {int(r['year'])} {e(str(r['action']))} ({e(str(r['reason']))})"
            for r in changed.to_dict("records")) + "</p>")
    warns = notes[notes["action"] == "warning"] if len(notes) else notes
    if len(warns):
        parts.append("<p>Warnings: " + "; ".join(f"{e(str(r['series']))}: {e(str(r['reason']))}" for r in warns.to_dict("records")) + "</p>")

    parts.append("<h2>Top hypotheses</h2>")
    top_n = int(study.report.get("top", 3))
    for rid in study.response_ids:
        sub = evidence[(evidence["response"] == rid) & evidence["lag"].notna()].sort_values("rank").head(top_n)
        for row in sub.to_dict("records"):
            did, lag = row["driver"], int(row["lag"])
            name = f"{rid}__{did}".replace(":", "-")
            pair = lagged_pair(table, rid, did, lag)
            imgs = [_img(fg.save(fg.overlay(pair.years, pair.y, pair.x, lag, rid, did), figures_dir, f"overlay_{name}"), "overlay"),
                    _img(fg.save(fg.scatter(pair.x, pair.y, lag, rid, did), figures_dir, f"scatter_{name}"), "scatter")]
            fc = forecasts[(forecasts["response"] == rid) & (forecasts["driver"] == did)] if len(forecasts) else forecasts
            if len(fc) and isinstance(row.get("oos_hardest"), str):
                imgs.append(_img(fg.save(fg.forecasts(fc, row["oos_hardest"], rid, did), figures_dir, f"forecasts_{name}"), "forecasts"))
            nl = nulls[(nulls["response"] == rid) & (nulls["driver"] == did) & (nulls["test"] == "out-of-sample")] if len(nulls) else nulls
            if len(nl):
                imgs.append(_img(fg.save(fg.null_distribution(nl["value"].to_numpy(), float(nl["observed"].iloc[0]),
                                                              "skill vs hardest baseline"), figures_dir, f"null_{name}"), "surrogate null"))
            parts.append(f'<div class="hyp"><h3>{e(rid)} ~ {e(did)} (rank {int(row["rank"])}, {_grade(row["grade"])})</h3>'
                         f"<p>{e(str(row['summary']))} {_flags(row.get('flags'))}</p><div class='panel'>{''.join(imgs)}</div></div>")

    sc = study.screen
    parts.append("<h2>Methods</h2>")
    parts.append(
        f"<p>Each response was paired with each candidate driver at lags {e(', '.join(map(str, sc['lags'])))} years "
        f"(driver leading). For each pair: Pearson r and its naive p; the Pyper & Peterman (1998) effective sample "
        f"size and the adjusted p; r after removing a linear trend and r of first differences; the OLS slope with a "
        f"Newey & West (1987) standard error. {int(sc['surrogates'])} surrogate drivers ({e(sc['surrogate_method'])} "
        f"method; Ebisuzaki 1997) kept each driver's autocorrelation; the best lag was chosen within every surrogate "
        f"as for the real driver, so the surrogate p-values pay for the choice of lag. Out-of-sample skill came from "
        f"rolling-origin one-step forecasts (expanding window, initial window "
        f"{e(str(sc['validation'].get('initial_years', 'default')))} years) in which the lag and all coefficients were "
        f"estimated from the training years only, against climatology, persistence (AR(1)) and linear-trend baselines; "
        f"its significance by the Diebold-Mariano test with the Harvey et al. (1997) correction and against surrogates. "
        f"The latest {e(str(sc['validation'].get('holdout_years', 'default')))} years were re-tested with the fit frozen "
        f"before them. q-values by Benjamini & Hochberg (1995) over all hypotheses at FDR {sc['fdr']}. Seed {sc['seed']}.</p>")
    parts.append("<h3>References</h3><ul>" + "".join(f"<li>{e(r)}</li>" for r in REFERENCES) + "</ul>")

    parts.append("<h2>Provenance</h2>")
    prov_rows = "".join(f"<tr><td><code>{e(k)}</code></td><td><code>{e(v)}</code></td></tr>" for k, v in provenance["inputs_sha256"].items())
    parts.append(f"<table><thead><tr><th>input</th><th>SHA-256</th></tr></thead><tbody>{prov_rows}</tbody></table>")
    parts.append("<details><summary>Versions and config as run</summary><pre>"
                 + e(json.dumps({"versions": provenance["versions"], "config": provenance["config"]}, indent=1, default=str))
                 + "</pre></details>")
    parts.append(f'<footer><p class="caution">{e(CAUTION)}</p></footer>')
    body = "\n".join(parts)
    return (f'<!DOCTYPE html><html lang="en"><head><meta charset="utf-8"><meta name="viewport" content="width=device-width, initial-scale=1">'
            f"<title>lagsieve report: {e(study.study)}</title><style>{CSS}</style></head><body>{body}"
            f"<script>{SORT_JS}</script></body></html>")
