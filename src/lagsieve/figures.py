"""Figures of the report (matplotlib, Agg backend). Each function returns a Figure; the report
embeds it as PNG and writes PNG (300 dpi) and SVG copies under ``figures/``."""
from __future__ import annotations

import base64
import io
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402

# A colour-blind-safe palette of our own for the grades (checked against deuteranopia and
# protanopia simulations by eye; text labels always accompany the colour).
GRADE_COLOURS = {
    "strong": "#1b5e8c",
    "moderate": "#4fa3d1",
    "weak": "#c9c3e6",
    "none": "#e6e6e6",
    "spurious-trend": "#d9822b",
    "insufficient-data": "#9e9e9e",
}
SERIES_COLOURS = ("#1b5e8c", "#d9822b", "#6b4c9a", "#2e8b57")


def to_png_base64(fig, dpi: int = 110) -> str:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, bbox_inches="tight")
    return base64.b64encode(buf.getvalue()).decode("ascii")


def save(fig, figures_dir: str | Path, name: str) -> str:
    """Write PNG (300 dpi) and SVG copies; return the embedded PNG as base64; close the figure."""
    d = Path(figures_dir)
    d.mkdir(parents=True, exist_ok=True)
    fig.savefig(d / f"{name}.png", dpi=300, bbox_inches="tight")
    fig.savefig(d / f"{name}.svg", bbox_inches="tight", metadata={"Date": None})
    b64 = to_png_base64(fig)
    plt.close(fig)
    return b64


def coverage(table: pd.DataFrame, roles: dict[str, str]):
    """Which years each series has: one row per series, a mark per observed year."""
    cols = sorted(table.columns, key=lambda c: (roles.get(c, "driver") != "response", c))
    fig, ax = plt.subplots(figsize=(8, 0.28 * len(cols) + 1.2))
    years = table.index.to_numpy()
    for i, c in enumerate(cols):
        ok = ~np.isnan(table[c].to_numpy(float))
        colour = SERIES_COLOURS[0] if roles.get(c) == "response" else SERIES_COLOURS[1]
        ax.scatter(years[ok], np.full(ok.sum(), i), marker="s", s=18, color=colour, linewidths=0)
        ax.scatter(years[~ok], np.full((~ok).sum(), i), marker="x", s=12, color="#b0b0b0", linewidths=0.8)
    ax.set_yticks(range(len(cols)), cols, fontsize=8)
    ax.invert_yaxis()
    ax.set_xlabel("year")
    ax.set_title("Data coverage (squares: observed; x: missing; blue: responses, orange: drivers)", fontsize=9)
    ax.grid(axis="x", alpha=0.3)
    return fig


def overlay(years, y, x, lag: int, response: str, driver: str):
    """Both series standardised, the driver shifted by its lag."""
    z = lambda v: (v - np.nanmean(v)) / np.nanstd(v)
    fig, ax = plt.subplots(figsize=(5.2, 2.8))
    ax.plot(years, z(y), "-o", ms=3, color=SERIES_COLOURS[0], label=response)
    ax.plot(years, z(x), "-s", ms=3, color=SERIES_COLOURS[1], label=f"{driver} (year - {lag})")
    ax.set_xlabel("year")
    ax.set_ylabel("standardised value")
    ax.legend(fontsize=7, frameon=False)
    ax.grid(alpha=0.3)
    return fig


def scatter(x, y, lag: int, response: str, driver: str, smooth: tuple | None = None):
    """Response against the lagged driver, with the least-squares line and an optional smooth."""
    fig, ax = plt.subplots(figsize=(4.2, 2.8))
    ax.scatter(x, y, s=14, color=SERIES_COLOURS[0])
    b, a = np.polyfit(x, y, 1)
    g = np.linspace(np.min(x), np.max(x), 50)
    ax.plot(g, a + b * g, color=SERIES_COLOURS[1], label="linear fit")
    if smooth is not None:
        ax.plot(smooth[0], smooth[1], color=SERIES_COLOURS[2], ls="--", label="smooth (GAM)")
    ax.set_xlabel(f"{driver} (year - {lag})")
    ax.set_ylabel(response)
    ax.legend(fontsize=7, frameon=False)
    ax.grid(alpha=0.3)
    return fig


def forecasts(fc: pd.DataFrame, baseline: str, response: str, driver: str):
    """Out-of-sample one-step forecasts of baseline + driver against observed and the baseline."""
    fig, ax = plt.subplots(figsize=(5.2, 2.8))
    ax.plot(fc["year"], fc["observed"], "-o", ms=3, color="black", label="observed")
    ax.plot(fc["year"], fc[f"baseline_{baseline}"], "--", color="#9e9e9e", label=f"{baseline} baseline")
    ax.plot(fc["year"], fc[f"model_{baseline}"], "-s", ms=3, color=SERIES_COLOURS[0], label=f"{baseline} + {driver}")
    ax.set_xlabel("forecast year")
    ax.set_ylabel(response)
    ax.legend(fontsize=7, frameon=False)
    ax.grid(alpha=0.3)
    return fig


def null_distribution(values: np.ndarray, observed: float, label: str):
    """Histogram of the surrogate statistics with the observed value marked."""
    fig, ax = plt.subplots(figsize=(4.2, 2.6))
    ax.hist(values, bins=40, color="#c9c3e6", edgecolor="white")
    ax.axvline(observed, color=SERIES_COLOURS[0], lw=2, label="observed")
    ax.set_xlabel(label)
    ax.set_ylabel("surrogates")
    ax.legend(fontsize=7, frameon=False)
    return fig
