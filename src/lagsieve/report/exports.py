"""The tables written beside the figures (CSV): evidence, summary, evidence map, coverage,
driver correlations, lag profiles and the figure manifest."""
from __future__ import annotations

from pathlib import Path

import pandas as pd

from lagsieve.evidence.vocabulary import SUPPORTED
from lagsieve.io.files import write_csv
from lagsieve.report.context import Context, set_aside_reason, summary_line
from lagsieve.formats import text
from lagsieve.report.plan import Plan

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

LAG_TABLE_COLUMNS = ("response", "driver", "lag", "model", "n", "r", "n_eff", "r_crit", "p_adjusted",
                     "r_detrended", "p_surrogate_lag")


def summary_rows(ctx: Context) -> pd.DataFrame:
    """The summary of the page as a table: per hypothesis, supported or set aside, and why."""
    rows = []
    for row in ctx.evidence.sort_values(["response", "rank"]).to_dict("records"):
        supported = row.get("grade") in SUPPORTED
        rows.append({"response": row["response"], "rank": row.get("rank"), "driver": row["driver"],
                     "driver_label": ctx.label(row["driver"]), "lag": row.get("lag"), "grade": row.get("grade"),
                     "status": "supported" if supported else "set aside",
                     "words": summary_line(row) if supported else set_aside_reason(row),
                     "flags": text(row.get("flags"))})
    return pd.DataFrame(rows)


def write_tables(ctx: Context, plan: Plan, figures_dir: Path) -> None:
    write_csv(ctx.evidence, figures_dir / "evidence_table.csv")
    write_csv(summary_rows(ctx), figures_dir / "summary.csv")
    if "evidence_map" in plan.tables:
        write_csv(plan.tables["evidence_map"].reset_index(), figures_dir / "evidence_map.csv")
    for name in ("coverage", "driver_correlations"):
        if name in plan.tables:
            write_csv(plan.tables[name], figures_dir / f"{name}.csv")
    for key, info in plan.panels.items():
        if "lag_table" in info:
            cols = [c for c in LAG_TABLE_COLUMNS if c in info["lag_table"]]
            write_csv(info["lag_table"][cols], figures_dir / f"{key}__lags.csv")
    jobs = plan.jobs
    write_csv(pd.DataFrame({"figure": [j.name for j in jobs], "kind": [j.builder for j in jobs],
                            "shows": [FIGURE_WORDS.get(j.builder, "") for j in jobs],
                            "png": [f"{j.name}.png" for j in jobs], "svg": [f"{j.name}.svg" for j in jobs]}),
              figures_dir / "figures.csv")
