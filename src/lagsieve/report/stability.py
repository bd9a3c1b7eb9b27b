"""The report's block on relationships that change (issue 21): per hypothesis tested by the
break test (:mod:`lagsieve.evidence.stability`), the break p, the most likely break year with its
interval and the slopes before and after; for each hypothesis flagged ``unstable`` a figure of its
moving-window correlation against the surrogate band with the break year marked.

:func:`read_windows` reads ``windows.csv`` beside evidence.csv, :func:`plan_stability` plans the
figures (at most ``MAX_FIGURES``), :func:`section` gives the plain data of
``templates/stability.html``. The figure builder :func:`window_correlation` is registered in
:data:`lagsieve.report.figures.BUILDERS` when this module is imported."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from lagsieve.formats import is_missing, number, p_text
from lagsieve.io.names import pair_slug
from lagsieve.report import figures as fg
from lagsieve.report.context import missing_last, records

MAX_FIGURES = 30  # window figures in one report (flagged hypotheses, best ranked first)


def read_windows(evidence_csv) -> pd.DataFrame | None:
    """``windows.csv`` beside ``evidence_csv``; None when the evidence stage wrote none."""
    path = Path(evidence_csv).with_name("windows.csv")
    return pd.read_csv(path, keep_default_na=False, na_values=[""]) if path.is_file() else None


def window_correlation(first_year, last_year, r, band_low, band_high, driver: str, response: str,
                       break_year=None, break_low=None, break_high=None, invented: bool = False):
    """Moving-window correlation of a driver with a response (one point per window, at its
    centre year) against the pointwise band of the surrogate drivers, the most likely break
    year and its interval marked."""
    mid = (np.asarray(first_year, float) + np.asarray(last_year, float)) / 2.0
    width = int(last_year[0] - first_year[0] + 1) if len(first_year) else 0
    fig, ax = fg.subplots(figsize=fg.PANEL_SIZE, layout=fg.FitLayout())
    ax.fill_between(mid, band_low, band_high, color="#b9bec2", alpha=0.6, linewidth=0,
                    label="95% of surrogate drivers")
    ax.plot(mid, r, color=fg.DRIVER_COLOUR, linewidth=1.6, label=f"r in {width}-year windows")
    ax.axhline(0, color=fg.INK, linewidth=0.6)
    if not is_missing(break_year):
        if not is_missing(break_low) and not is_missing(break_high):
            ax.axvspan(float(break_low) - 0.5, float(break_high) + 0.5, color=fg.SMOOTH_COLOUR, alpha=0.12,
                       linewidth=0, label="break year, 95% interval")
        ax.axvline(float(break_year) - 0.5, color=fg.SMOOTH_COLOUR, linewidth=1.2, linestyle="--",
                   label=f"most likely break ({int(break_year)})")
    ax.set_ylim(-1.05, 1.05)
    ax.set_xlabel("centre year of the window")
    ax.set_ylabel(f"r: {fg.mpl_text(fg._short(driver, 28))}")
    ax.set_title(fg.mpl_text(fg._short(response, 50)), fontsize=9)
    ax.legend(fontsize=fg.TEXT_PT, loc="lower left", frameon=False)
    fg._mark_invented(fig, invented)
    return fig


fg.BUILDERS[window_correlation.__name__] = window_correlation  # drawn like every other figure


def figure_name(response: str, driver: str) -> str:
    return f"windows__{pair_slug(response, driver)}"


def _flagged(evidence: pd.DataFrame, rows: list[dict]) -> list[dict]:
    """The rows (``rows``: the evidence table's, :func:`~lagsieve.report.context.records`) of the
    hypotheses flagged unstable, best ranked first (missing ranks last, ties in table order)."""
    if "flags" not in evidence:
        return []
    hit = [r for r in rows if "unstable" in ("" if is_missing(r["flags"]) else str(r["flags"])).split(";")]
    return sorted(hit, key=lambda r: missing_last(r["rank"])) if "rank" in evidence else hit


def plan_stability(evidence: pd.DataFrame, windows: pd.DataFrame | None, label, invented: bool,
                   rows: list[dict] | None = None) -> list[fg.FigureJob]:
    """A window figure for every hypothesis flagged unstable that has windows (at most ``MAX_FIGURES``).
    ``rows``: the evidence's rows as dicts when the caller has them (the report's ``Context.rows``)."""
    if windows is None or not len(windows):
        return []
    jobs = []
    for row in _flagged(evidence, records(evidence) if rows is None else rows):
        w = windows[(windows["response"] == row["response"]) & (windows["driver"] == row["driver"])]
        if not len(w) or len(jobs) >= MAX_FIGURES:
            continue
        jobs.append(fg.FigureJob(figure_name(row["response"], row["driver"]), "window_correlation", dict(
            first_year=w["first_year"].to_numpy(), last_year=w["last_year"].to_numpy(), r=w["r"].to_numpy(),
            band_low=w["band_low"].to_numpy(), band_high=w["band_high"].to_numpy(), driver=label(row["driver"]),
            response=label(row["response"]), break_year=row.get("break_year"), break_low=row.get("break_year_low"),
            break_high=row.get("break_year_high"), invented=invented)))
    return jobs


def _slope(value, se) -> str:
    return "" if is_missing(value) else f"{number(value, '{:+.3g}')} ± {number(se, '{:.2g}')}"


def _row(r: dict, label, planned: set) -> dict:
    flagged = "unstable" in str(r.get("flags", "") or "").split(";")
    name = figure_name(r["response"], r["driver"])
    years = "" if is_missing(r.get("break_year")) else (
        f"{int(r['break_year'])} ({int(r['break_year_low'])}–{int(r['break_year_high'])})")
    return {"response": label(r["response"]), "driver": label(r["driver"]), "lag": "" if is_missing(r.get("lag")) else int(r["lag"]),
            "grade": r["grade"], "p": p_text(r.get("break_p")), "year": years, "flagged": flagged,
            "before": _slope(r.get("slope_before"), r.get("slope_before_se")),
            "after": _slope(r.get("slope_after"), r.get("slope_after_se")),
            "figure": name if name in planned else None}


def section(evidence: pd.DataFrame, windows: pd.DataFrame | None, label, rows: list[dict] | None = None) -> dict | None:
    """Rows of the tested hypotheses (flagged first), the skipped ones with their note, and the
    figures planned; None when the evidence has no break test (an older results folder).
    ``rows``: as in :func:`plan_stability`."""
    if "break_p" not in evidence:
        return None
    every = records(evidence) if rows is None else rows
    planned = {j.name for j in plan_stability(evidence, windows, label, False, every)}
    rows = [_row(r, label, planned) for r in every if not is_missing(r["break_p"])]
    rows.sort(key=lambda v: not v["flagged"])
    skipped = [{"response": label(r["response"]), "driver": label(r["driver"]), "note": str(r["break_note"])}
               for r in every if not is_missing(r.get("break_note")) and r["break_note"]]
    if not rows and not skipped:
        return None
    n_flagged = sum(v["flagged"] for v in rows)
    return {"rows": rows, "skipped": skipped, "n_flagged": n_flagged, "max_figures": MAX_FIGURES,
            "figures_capped": n_flagged > MAX_FIGURES}
