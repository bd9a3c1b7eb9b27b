"""The tables written beside the figures (CSV): evidence, the annex summary, evidence map, coverage,
driver correlations, lag profiles and the figure manifest."""
from __future__ import annotations

from pathlib import Path

import pandas as pd

from lagsieve.io.files import write_csv
from lagsieve.report.annex import annex_frame
from lagsieve.report.context import Context
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


def write_tables(ctx: Context, plan: Plan, figures_dir: Path) -> None:
    write_csv(ctx.evidence, figures_dir / "evidence_table.csv")
    write_csv(annex_frame(ctx), figures_dir / "summary.csv")  # the annex summary (report.annex)
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
                            "png": [f"{j.name}.png" for j in jobs],
                            "svg": [f"{j.name}.svg" if ctx.study.report.get("svg") else "" for j in jobs]}),
              figures_dir / "figures.csv")
