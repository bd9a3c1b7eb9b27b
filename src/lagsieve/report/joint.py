"""The report's block on groups screened jointly (config ``joint``; issue 21): per series and
driver the shared slope with its interval, the between-group spread, the tests and the words
("acts on all ages", "stronger in older fish", "age2 only", ...), and a figure of the groups'
slopes side by side with the shared line.

:func:`read_joint` reads ``joint.csv`` and ``joint_groups.csv`` beside evidence.csv,
:func:`plan_joint` plans the figures (at most ``MAX_FIGURES``), :func:`section` gives the plain
data of ``templates/joint.html``. The figure builder :func:`joint_slopes` is registered in
:data:`lagsieve.report.figures.BUILDERS` when this module is imported."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from lagsieve.formats import is_missing, number, p_text, skill_percent
from lagsieve.io.names import pair_slug
from lagsieve.report import figures as fg

MAX_FIGURES = 30  # slope figures in one report (series x driver, effects first)
NO_EFFECT = "no joint effect"


def read_joint(evidence_csv) -> tuple[pd.DataFrame, pd.DataFrame] | None:
    """(joint.csv, joint_groups.csv) beside ``evidence_csv``; None when there are none or no rows."""
    paths = [Path(evidence_csv).with_name(n) for n in ("joint.csv", "joint_groups.csv")]
    if not all(p.is_file() for p in paths):
        return None
    joint, groups = (pd.read_csv(p, keep_default_na=False, na_values=[""]) for p in paths)
    return (joint, groups) if len(joint) else None


def joint_slopes(groups, slope, low, high, own, shared, shared_low, shared_high, driver: str, series: str,
                 words: str, invented: bool = False):
    """The groups' shrunken slopes with their 95% intervals (filled) and their own least-squares
    slopes (open), youngest first, beside the shared slope and its 95% interval (line and band)."""
    pos = np.arange(len(groups))
    fig, ax = fg.subplots(figsize=fg.PANEL_SIZE, layout=fg.FitLayout())
    if not is_missing(shared):
        if not is_missing(shared_low) and not is_missing(shared_high):
            ax.axhspan(float(shared_low), float(shared_high), color=fg.SMOOTH_COLOUR, alpha=0.12, linewidth=0,
                       label="shared slope, 95% interval")
        ax.axhline(float(shared), color=fg.SMOOTH_COLOUR, linewidth=1.4, linestyle="--", label="shared slope")
    ax.axhline(0, color=fg.INK, linewidth=0.6)
    slope, low, high = (np.asarray(v, float) for v in (slope, low, high))
    ax.errorbar(pos, slope, yerr=[slope - low, high - slope], fmt="o", color=fg.DRIVER_COLOUR, capsize=3,
                label="group slope (partially pooled), 95%")
    ax.plot(pos + 0.12, own, "o", mfc="none", color=fg.INK, markersize=4, label="group's own fit")
    shown = np.r_[low, high, np.asarray(own, float), 0.0, [] if is_missing(shared) else [float(shared)]]
    span = np.nanmax(shown) - np.nanmin(shown) or 1.0
    ax.set_ylim(np.nanmin(shown) - 0.15 * span, np.nanmax(shown) + 0.15 * span)  # the groups decide; a wide band is cut
    ax.set_xticks(pos, [fg.mpl_text(fg._short(g, 14)) for g in groups])
    ax.set_xlim(-0.6, len(groups) - 0.4)
    ax.set_xlabel("group, youngest first")
    ax.set_ylabel(f"slope on {fg.mpl_text(fg._short(driver, 28))}")
    ax.set_title(fg.mpl_text(fg._short(f"{series}: {words}", 60)), fontsize=9)
    ax.legend(fontsize=fg.TEXT_PT, loc="best", frameon=False)
    fg._mark_invented(fig, invented)
    return fig


fg.BUILDERS[joint_slopes.__name__] = joint_slopes  # drawn like every other figure


def figure_name(series: str, driver: str) -> str:
    return f"joint__{pair_slug(series, driver)}"


def _ordered(joint: pd.DataFrame) -> pd.DataFrame:
    """Fitted rows, effects first, then by the joint p."""
    fitted = joint[joint["lag"].notna()] if "lag" in joint else joint.iloc[0:0]
    key = (fitted["words"] == NO_EFFECT).astype(int)
    return fitted.assign(_k=key).sort_values(["_k", "p_any"], kind="mergesort").drop(columns="_k")


def plan_joint(data: tuple[pd.DataFrame, pd.DataFrame] | None, label, invented: bool) -> list[fg.FigureJob]:
    """A slope figure for every fitted series x driver (at most ``MAX_FIGURES``, effects first)."""
    if data is None:
        return []
    joint, groups = data
    jobs = []
    for row in _ordered(joint).head(MAX_FIGURES).to_dict("records"):
        g = groups[(groups["series"] == row["series"]) & (groups["driver"] == row["driver"])].sort_values("age_rank")
        jobs.append(fg.FigureJob(figure_name(row["series"], row["driver"]), "joint_slopes", dict(
            groups=g["group"].astype(str).tolist(), slope=g["slope"].to_numpy(), low=g["slope_low"].to_numpy(),
            high=g["slope_high"].to_numpy(), own=g["slope_own"].to_numpy(), shared=row["slope"],
            shared_low=row["slope_low"], shared_high=row["slope_high"], driver=label(row["driver"]),
            series=str(row["series"]), words=str(row["words"]), invented=invented)))
    return jobs


def _interval(value, low, high) -> str:
    if is_missing(value):
        return ""
    return f"{number(value, '{:+.3g}')} ({number(low, '{:+.3g}')} to {number(high, '{:+.3g}')})"


def _row(r: dict, label, planned: set) -> dict:
    name = figure_name(r["series"], r["driver"])
    skill = r.get("oos_skill")
    return {"series": str(r["series"]), "groups": str(r["groups"]).replace(";", ", "), "driver": label(r["driver"]),
            "lag": int(r["lag"]), "years": f"{int(r['first_year'])}–{int(r['last_year'])}",
            "shared": _interval(r["slope"], r["slope_low"], r["slope_high"]), "spread": number(r["spread"], "{:.3g}"),
            "p_any": p_text(r.get("p_any")), "p_shared": p_text(r.get("p_surrogate")), "q": p_text(r.get("q_value")),
            "p_differ": p_text(r.get("p_heterogeneity")), "p_lrt": p_text(r.get("p_lrt")),
            "skill": "" if is_missing(skill) else (f"{skill_percent(skill)} lower" if skill > 0 else "none"),
            "words": str(r["words"]), "effect": r["words"] != NO_EFFECT, "age_order": str(r.get("age_order", "")),
            "figure": name if name in planned else None}


def section(data: tuple[pd.DataFrame, pd.DataFrame] | None, label) -> dict | None:
    """Rows of the fitted series x driver (effects first), those not fitted with their note, and
    the figures planned; None without a joint screen."""
    if data is None:
        return None
    joint, _ = data
    planned = {j.name for j in plan_joint(data, label, False)}
    rows = [_row(r, label, planned) for r in _ordered(joint).to_dict("records")]
    skipped = [{"series": str(r["series"]), "driver": label(r["driver"]), "note": str(r["note"])}
               for r in joint.to_dict("records") if is_missing(r.get("lag")) and not is_missing(r.get("note"))]
    orders = sorted({v["age_order"] for v in rows if v["age_order"]})
    return {"rows": rows, "skipped": skipped, "orders": orders, "max_figures": MAX_FIGURES,
            "figures_capped": len(rows) > MAX_FIGURES}
