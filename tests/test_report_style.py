"""How the report looks, checked without a browser.

* contrast: every text colour of the stylesheet and every grade badge at least 4.5:1 against the
  backgrounds it sits on, by the relative luminance and contrast ratio of WCAG 2.1 (W3C, success
  criterion 1.4.3, level AA; definitions "relative luminance" and "contrast ratio");
* figures: every text inside the figure (nothing cut at an edge), legends naming only what is drawn,
  the grade words of the vocabulary and no other (our own rules: no published source);
* the spline panel's share: what the driver's curve adds beyond the year term, against least squares
  fits by numpy (a penalised spline with a very large penalty is the straight line, so the share is
  the partial R^2 of the linear term: common practice, e.g. Draper & Smith 1998, Applied Regression
  Analysis, 3rd ed., sec. 6.2, from memory).
"""
from __future__ import annotations

import re

import numpy as np
import pytest

from lagsieve.evidence.vocabulary import GRADES
from lagsieve.report import figures as fg
from lagsieve.report.context import added_share
from lagsieve.report.plan import gam_stats_line
from lagsieve.report.render import stylesheet
from lagsieve.stats.splines import fit_pspline


# ----------------------------------------------------------------------------- contrast (WCAG 2.1)
def relative_luminance(colour: str) -> float:
    """WCAG 2.1 relative luminance of an sRGB colour #rgb or #rrggbb."""
    h = colour.lstrip("#")
    h = "".join(c * 2 for c in h) if len(h) == 3 else h
    c = np.array([int(h[i:i + 2], 16) / 255 for i in (0, 2, 4)])
    c = np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)  # the W3C's threshold
    return float(0.2126 * c[0] + 0.7152 * c[1] + 0.0722 * c[2])


def contrast_ratio(a: str, b: str) -> float:
    """(L1 + 0.05) / (L2 + 0.05), L1 the lighter (WCAG 2.1)."""
    hi, lo = sorted([relative_luminance(a), relative_luminance(b)], reverse=True)
    return (hi + 0.05) / (lo + 0.05)


def test_contrast_formula_against_w3c_values():
    assert contrast_ratio("#000000", "#ffffff") == pytest.approx(21.0)   # the largest ratio (WCAG 2.1)
    assert contrast_ratio("#777777", "#ffffff") == pytest.approx(4.48, abs=0.01)  # the common "#777 fails AA"
    assert contrast_ratio("#3d85c6", "#ffffff") < 4.5                      # the old "moderate" badge: 3.9:1


@pytest.mark.parametrize("r", np.linspace(-1, 1, 81))
def test_heatmap_numbers_contrast_with_their_cell(r):
    """The driver-correlation heatmap writes each r in black or white, the one that contrasts more
    with the cell's fill, and that is at least 4.5:1 (WCAG 2.1 AA) for every r."""
    fill = "#%02x%02x%02x" % tuple(round(255 * v) for v in fg.CORR_CMAP((r + 1) / 2)[:3])
    ink = fg.ink_on(fg.CORR_CMAP((r + 1) / 2))
    other = "#ffffff" if ink == "#000000" else "#000000"
    assert contrast_ratio(ink, fill) >= max(4.5, contrast_ratio(other, fill) - 1e-9), (r, fill, ink)


def _rules(css: str) -> list[tuple[str, dict]]:
    """(selector, {property: value}) of every rule, custom properties (var(--x)) resolved."""
    root = dict(re.findall(r"--([\w-]+):\s*(#[0-9a-fA-F]{3,6})", css))
    css = re.sub(r"var\(--([\w-]+)\)", lambda m: root[m.group(1)], css)
    css = re.sub(r"/\*.*?\*/", "", css, flags=re.S)
    out = []
    for selector, body in re.findall(r"([^{}]+)\{([^{}]*)\}", css):
        props = dict((k.strip(), v.strip()) for k, v in (d.split(":", 1) for d in body.split(";") if ":" in d))
        out.append((selector.strip(), props))
    return out


def _hex(value: str | None) -> str | None:
    m = re.fullmatch(r"(#[0-9a-fA-F]{6}|#[0-9a-fA-F]{3})", (value or "").split()[0] if value else "")
    return m.group(1) if m else None


def test_every_colour_of_the_stylesheet_meets_aa():
    rules = _rules(stylesheet())
    badges, texts, grounds = [], [], {"#ffffff"}
    for selector, props in rules:
        colour, ground = _hex(props.get("color")), _hex(props.get("background") or props.get("background-color"))
        if colour and ground:
            badges.append((selector, colour, ground))   # a text on its own background (badges, buttons)
        elif colour:
            texts.append((selector, colour))             # a text on whatever lies behind it
        elif ground and relative_luminance(ground) > 0.5:
            grounds.add(ground)                          # a light background text sits on (rows, panels)
    assert len(badges) >= len(GRADES) and len(texts) >= 5 and len(grounds) >= 5
    low = [(s, c, g, round(contrast_ratio(c, g), 2)) for s, c, g in badges if contrast_ratio(c, g) < 4.5]
    low += [(s, c, g, round(contrast_ratio(c, g), 2)) for s, c in texts for g in grounds
            if contrast_ratio(c, g) < 4.5]
    assert low == []


def test_grade_badges_meet_aa():
    for grade in GRADES:
        fill, text = fg.GRADE_STYLE[grade]
        assert contrast_ratio(text, fill) >= 4.5, grade


# ----------------------------------------------------------------------------- figures
def _texts(fig) -> list:
    fig.canvas.draw()
    return [t for t in fig.findobj(lambda a: hasattr(a, "get_text") and hasattr(a, "get_fontsize"))
            if t.get_visible() and t.get_text().strip()]


def _cut(fig) -> list[float]:
    """How far (inches) the drawn texts and artists reach beyond each edge of the figure
    (left, bottom, right, top; matplotlib's tight box counts only what is drawn), 0.01 in allowed."""
    fig.canvas.draw()
    box = fig.get_tightbbox(fig.canvas.get_renderer())
    w, h = fig.get_size_inches()
    return [round(v, 3) for v in (-box.x0, -box.y0, box.x1 - w, box.y1 - h) if v > 0.01]


LONG = "Spring (March to May) bottom temperature of the inner shelf, five-year mean"


def test_heatmap_and_forecast_legend_whole(rc):
    k = 8
    corr = np.eye(k) + 0.3 * (1 - np.eye(k))
    fig = fg.driver_correlation(corr, [f"{LONG} {i}" for i in range(k)], invented=True)
    assert _cut(fig) == []
    years = np.arange(1990, 2015)
    obs = np.sin(years / 3.0)
    fig = fg.forecasts(years, obs, {b: obs + 0.1 for b in ("climatology", "persistence", "trend", "trend_ar1")},
                       obs + 0.05, "trend_ar1", "M age 5+", LONG, invented=True)
    assert _cut(fig) == []
    legend_text = " ".join(" ".join(t.get_text() for t in fig.legends[0].get_texts()).split())
    assert "\u2026" not in legend_text and "five-year mean" in legend_text  # the driver named whole


def test_fixed_layout_panels_whole_and_sized_to_their_labels(rc):
    """Panels laid out by ``figures.fit_layout`` (one measuring pass, no constrained layout) keep
    every text inside the figure, and their margins follow their labels (our own rule, no published
    source). The partition figure with long names cut its x label at both edges under constrained
    layout, and a share above 100% ran past the right edge."""
    fig = fg.variance_fractions([0.05, 0.12, -0.02, 1.03], [LONG, LONG], LONG, invented=True)
    assert isinstance(fig.get_layout_engine(), fg.FitLayout)
    assert _cut(fig) == []
    rng = np.random.default_rng(20261203)
    panels = [{"values": rng.normal(size=300), "observed": 2.5, "label": "best-lag r (directed)", "p": 0.01,
               "title": "In sample"},
              {"values": np.r_[rng.normal(size=299), -40.0], "observed": 0.3, "label": "skill vs hardest baseline",
               "p": 0.2, "title": "Out of sample"}]
    fig = fg.null_distributions(panels, invented=True)
    assert _cut(fig) == []
    left, right = (a.get_position() for a in fig.axes)
    assert left.x1 < right.x0  # the second panel's tick labels clear the first panel
    years = np.arange(1990, 2015)
    short = fg.overlay(years, np.sin(years), np.cos(years), 1, "M", "T")
    noted = fg.overlay(years, np.sin(years), np.cos(years), 1, LONG, LONG, invented=True)
    for f in (short, noted):
        assert _cut(f) == []
    # short tick labels leave the axes most of the width; the invented-data note takes height below
    assert short.axes[0].get_position().width > 0.8
    assert noted.axes[0].get_position().y0 > short.axes[0].get_position().y0 + 0.03


def test_every_text_at_least_8_pt(rc):
    years = np.arange(1990, 2015)
    fig = fg.overlay(years, np.sin(years), np.cos(years), 1, LONG, LONG, invented=True)
    assert min(t.get_fontsize() for t in _texts(fig)) >= 8
    assert _cut(fig) == []


def test_coverage_legend_names_only_what_is_drawn(rc):
    years = np.arange(2000, 2010)
    observed = np.ones((2, 10), bool)
    fig = fg.coverage(["m", "x"], ["M", "X"], ["response", "driver"], years, observed, np.zeros((2, 10), bool))
    words = [t.get_text() for t in fig.legends[0].get_texts()]
    assert words == ["response, observed", "driver, observed"]  # nothing filled, nothing missing
    observed[1, 4] = False
    filled = np.zeros((2, 10), bool)
    filled[0, 3] = True
    fig = fg.coverage(["m", "x"], ["M", "X"], ["response", "driver"], years, observed, filled)
    words = [t.get_text() for t in fig.legends[0].get_texts()]
    assert words == ["response, observed", "driver, observed", "filled (interpolated)", "missing inside the series"]


def test_evidence_map_names_grades_by_their_words(rc):
    grades = np.array([list(GRADES)], dtype=object)
    fig = fg.evidence_grid(grades, np.ones((1, len(GRADES))), ["M"], [f"d{i}" for i in range(len(GRADES))])
    cells = [t.get_text().split("\nlag")[0].replace("-\n", "-") for t in fig.axes[0].texts]
    assert cells == list(GRADES)
    fig = fg.evidence_grid(grades, np.ones((1, len(GRADES))), [LONG], [LONG] * len(GRADES))
    assert _cut(fig) == []  # long labels of drivers and responses stay inside the figure


# ----------------------------------------------------------------------------- the spline panel's share
def test_added_share_is_what_the_curve_adds_beyond_the_year():
    rng = np.random.default_rng(5)
    years = np.arange(1980, 2020).astype(float)
    x = rng.normal(size=40)
    y = 0.08 * (years - 2000) + 0.3 * x + rng.normal(scale=0.3, size=40)
    fit = fit_pspline(x, y, trend=years)
    # by hand (numpy least squares): the year-only model's RSS
    design = np.column_stack([np.ones(40), years])
    rss_year = np.sum((y - design @ np.linalg.lstsq(design, y, rcond=None)[0]) ** 2)
    tss = np.sum((y - y.mean()) ** 2)
    assert added_share(fit) == pytest.approx((rss_year - float(fit.rss)) / tss, rel=1e-9)
    assert float(fit.deviance_explained) - added_share(fit) == pytest.approx(1 - rss_year / tss, rel=1e-9)
    assert added_share(fit) < 0.5 * float(fit.deviance_explained)  # the year carries most of it here
    no_trend = fit_pspline(x, y)
    assert added_share(no_trend) == pytest.approx(float(no_trend.deviance_explained), rel=1e-12)


def test_spline_panel_line_credits_the_year_to_the_year():
    """The old line said "deviance explained 91%" where the year term explained 79% of it."""
    line = gam_stats_line(1, {"edf": 3.2, "p_smooth": 0.004}, {"added": 0.12, "explained": 0.91, "trend": True})
    assert line.startswith("lag 1: curve adds 12% of the variation to the year term's 79%; edf 3.2")
    assert "91%" not in line
    line = gam_stats_line(0, {"edf": 2.0, "p_smooth": 0.2}, {"added": 0.4, "explained": 0.4, "trend": False})
    assert line.startswith("lag 0: curve explains 40% of the variation; edf 2.0")
