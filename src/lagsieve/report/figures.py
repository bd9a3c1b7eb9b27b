"""Figures of the report (matplotlib, Agg backend).

Every figure builder is a plain function of arrays and strings that returns a Figure. The
report describes each figure as a :class:`FigureJob` (builder name + arguments) and
:func:`render_jobs` draws them, in worker processes when more than one is allowed. Each
figure is written as PNG (``PNG_DPI``), and as SVG when the study asks for it, under ``figures/``
by the process that draws it, with its content key beside it, so an unchanged figure is reused
on a rerun; the report embeds the PNG as a data URI.

Colours are a palette of our own: grades run from deep blue (most support) through pale
blue to grey, with orange reserved for the grades of a trend (spurious-trend, trend-confounded). The blue-orange contrast and the
lightness ramp survive the common colour-vision deficiencies, and every coloured mark also
carries a text label, so no reading depends on colour alone.
"""
from __future__ import annotations

import base64
import contextlib
import functools
import hashlib
import inspect
import json
import math
import multiprocessing as mp
import os
import shutil
import struct
import sys
import textwrap
import traceback
import warnings
import zlib
from concurrent.futures import ProcessPoolExecutor
from concurrent.futures.process import BrokenProcessPool
from dataclasses import dataclass, field
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.layout_engine import LayoutEngine  # noqa: E402
from matplotlib.backends.backend_agg import FigureCanvasAgg, RendererAgg, get_hinting_flag  # noqa: E402
from matplotlib.collections import PolyCollection  # noqa: E402
from matplotlib.colors import LinearSegmentedColormap, ListedColormap  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.font_manager import fontManager, get_font  # noqa: E402
from matplotlib.ft2font import FT2Font, RenderMode  # noqa: E402
from matplotlib.patches import Patch, Rectangle  # noqa: E402
from matplotlib.ticker import AutoLocator, FixedFormatter, FixedLocator, MaxNLocator  # noqa: E402
from matplotlib.text import Text  # noqa: E402
from matplotlib.transforms import Bbox  # noqa: E402
from lagsieve.io.files import atomic_path, sha256_file, write_text  # noqa: E402
from lagsieve.io.provenance import tool_version  # noqa: E402
from lagsieve.stats.distributions import t_ppf  # noqa: E402  (scipy.special: scipy.stats costs an import)

# ----------------------------------------------------------------------------- palette
#: grade -> (fill colour, text colour on that fill): every pair at least 4.5:1 (WCAG 2.1 AA);
#: figures and the page name a grade by its word in ``evidence.vocabulary.GRADES``, never another
GRADE_STYLE = {
    "strong": ("#0b3c68", "#ffffff"),
    "moderate": ("#2f74b5", "#ffffff"),
    "weak": ("#b8d4ec", "#10263a"),
    "no-forecast-skill": ("#d7c6e6", "#241433"),
    "autocorrelation-only": ("#f6d09a", "#2a1a00"),
    "trend-confounded": ("#d99a5b", "#1f1300"),
    "spurious-trend": ("#e8913a", "#1f1300"),
    "none": ("#e9e9e9", "#2b2b2b"),
    "insufficient-data": ("#ffffff", "#555555"),
}
GRADE_COLOURS = {g: s[0] for g, s in GRADE_STYLE.items()}

INK = "#1e2a33"
RESPONSE_COLOUR = "#0b3c68"   # deep blue
DRIVER_COLOUR = "#c4561b"     # burnt orange
SMOOTH_COLOUR = "#6a4c93"     # violet
BASELINE_STYLES = {           # grey family, told apart by dash pattern and marker too
    "climatology": ("#8c8c8c", (0, (1, 1.5)), None),
    "persistence": ("#6f6f6f", (0, (4, 2)), None),
    "trend": ("#4a4a4a", (0, (6, 2, 1, 2)), None),
    "trend_ar1": ("#2f2f2f", (0, (2, 1, 2, 3)), None),
}
CORR_CMAP = LinearSegmentedColormap.from_list(
    "lagsieve_div", ["#0b3c68", "#6fa3d2", "#f7f7f5", "#eda363", "#9c3d0c"])

#: The smallest text of any figure, in points at the figure's own size: figures are shown at their
#: size in inches (96 CSS px per inch) or larger, so no tick, label or legend shows below 8 pt.
TEXT_PT = 8

RC = {
    "font.size": TEXT_PT, "axes.titlesize": 8.5, "axes.labelsize": TEXT_PT, "xtick.labelsize": TEXT_PT,
    "ytick.labelsize": TEXT_PT, "legend.fontsize": TEXT_PT, "axes.spines.top": False,
    "axes.spines.right": False, "axes.edgecolor": "#555555", "axes.labelcolor": INK,
    "text.color": INK, "xtick.color": "#444444", "ytick.color": "#444444",
    "axes.grid": True, "grid.color": "#e3e3e3", "grid.linewidth": 0.6,
    "svg.fonttype": "none", "svg.hashsalt": "lagsieve",
}

#: One raster per figure, the exported PNG and the page's embedded copy alike: figures are
#: shown at their size in inches (96 CSS px per inch), so 150 dpi gives about 1.5 device pixels
#: per CSS pixel, and the PDF's half-width panels about 200 dpi. The SVG, a copy for print or
#: editing, is written only when asked (config ``report.svg``; FigureRenderer's ``formats``): on
#: the demo it was a fifth to a quarter of the figures' CPU.
PNG_DPI = 150
RC["figure.dpi"] = PNG_DPI  # figures made at the raster's resolution: one renderer measures and draws
#: Glyphs drawn from their outlines without FreeType's hinting: at 150 dpi (8 pt is 17 pixels) the
#: text looks the same to the eye (compared side by side at 2x), and matplotlib renders every glyph
#: anew, its hinting program run for each: the demo's 107 figures took 13% less CPU (9.7 -> 8.4 s,
#: best of two, shared machine). The SVG keeps its text as text.
RC["text.hinting"] = "no_hinting"
FORMATS = ("png", "svg")   # every format a figure can have, each written by the process that draws it
RASTER = ("png",)          # the formats of a report that asked for no SVG
KEY_SUFFIX = ".key"        # the content key stored beside a figure (see content_key)
KEY_FORMAT = 3             # raise when the key's meaning changes, so no stored figure matches
INVENTED_NOTE = "invented data"


def study_formats(report_settings: dict) -> tuple[str, ...]:
    """The figure formats a study's ``report`` settings ask for: PNG, and SVG with ``svg: true``."""
    return FORMATS if report_settings.get("svg") else RASTER


def mpl_text(s, width: int | None = None) -> str:
    """A user string made safe for matplotlib ('$' would otherwise start mathematical text),
    optionally wrapped onto lines of at most ``width`` characters."""
    s = str(s)
    if width and len(s) > width:
        s = "\n".join(textwrap.wrap(s, width, break_long_words=True)[:3])
    return s.replace("\\", "\\\\").replace("$", r"\$")


def _short(s, n: int = 44) -> str:
    """A label shortened for a legend entry (the full text is in the report around it)."""
    s = str(s)
    return s if len(s) <= n else s[: n - 1].rstrip() + "\u2026"


def r_critical(n_eff, p: float = 0.05) -> np.ndarray:
    """Two-sided critical |r| at level ``p`` for an effective sample size:
    ``r_crit = t / sqrt(df + t^2)`` with ``df = n_eff - 2`` and ``t`` the t quantile.
    NaN where ``df <= 0``."""
    n_eff = np.asarray(n_eff, float)
    df = n_eff - 2.0
    with np.errstate(invalid="ignore", divide="ignore"):
        t = t_ppf(1.0 - p / 2.0, np.where(df > 0, df, np.nan))
        return t / np.sqrt(df + t ** 2)


PANEL_SIZE = (5.0, 3.1)  # inches; every per-hypothesis panel has this size

#: Largest figure drawn, in inches (width, height): 4800 x 4800 px at 300 dpi, about 90 MB of
#: RGBA raster plus its RGB copy. A figure whose size grows with the study (coverage, heatmap,
#: evidence map) is clipped to it; report.plan keeps their content below this size for large
#: studies (summary forms), so the clip is a guard, never the way a figure is made to fit.
MAX_FIGURE_INCHES = (16.0, 16.0)


def capped_size(width: float, height: float) -> tuple[float, float]:
    """``(width, height)`` in inches, each at most ``MAX_FIGURE_INCHES``."""
    return min(float(width), MAX_FIGURE_INCHES[0]), min(float(height), MAX_FIGURE_INCHES[1])


# ----------------------------------------------------------------------------- drawing text
#: The font settings a string's glyphs depend on besides its FontProperties (which font a family
#: name finds, a missing glyph's last resort, kerning, hinting); the text caches below are emptied
#: when they change.
_FONT_RC = ("font.serif", "font.sans-serif", "font.cursive", "font.fantasy", "font.monospace",
            "font.enable_last_resort", "text.kerning_factor", "text.hinting", "text.hinting_factor")
#: Entries kept in a text cache before it is emptied (a glyph's coverage is about 100-300 bytes).
TEXT_CACHE_LIMIT = 50_000


class _TextCache:
    """What :class:`_TextRenderer` has worked out, in this process, under one set of font settings:
    each font's height metrics, each string's glyphs and places, each glyph's coverage bitmap."""

    def __init__(self):
        self.settings, self.metrics, self.layouts, self.glyphs = None, {}, {}, {}

    def check(self) -> None:
        """Empty the caches when the font settings changed (or a cache grew past its limit)."""
        rc = matplotlib.rcParams
        settings = tuple(tuple(v) if isinstance(v, list) else v for v in (rc[k] for k in _FONT_RC))
        if settings != self.settings or max(len(self.layouts), len(self.glyphs)) > TEXT_CACHE_LIMIT:
            self.settings, self.metrics, self.layouts, self.glyphs = settings, {}, {}, {}

    def clear(self) -> None:
        self.settings, self.metrics, self.layouts, self.glyphs = None, {}, {}, {}


_TEXT = _TextCache()
if hasattr(os, "register_at_fork"):
    # the layouts hold matplotlib's font objects, which a forked process must not use (they share
    # FreeType's library with the parent: FreeType then fails with 'invalid outline' or worse);
    # matplotlib empties its own font cache in a forked child the same way
    os.register_at_fork(after_in_child=_TEXT.clear)


def _font_key(prop) -> tuple:
    """What a FontProperties' font and size are found from (what its hash is made of)."""
    return (tuple(prop.get_family()), prop.get_slant(), prop.get_variant(), prop.get_weight(), prop.get_stretch(),
            prop.get_size_in_points(), prop.get_file(), prop.get_math_fontfamily())


class _TextRenderer(RendererAgg):
    """matplotlib's Agg renderer drawing the same pixels with less work per string (matplotlib 3.11+
    draws a string glyph by glyph). Per string, matplotlib finds its font, lays it out again
    (``FT2Font._layout``, about 0.35 ms) and renders every glyph from its outline (about 25 us
    each) each time it is drawn, and reads the font's height tables from the file each time a text
    is measured (``Text._get_layout``: 9,470 times for the demo's 107 figures, 2,188 strings drawn,
    453 of them different, 22,977 glyphs, 9,529 different at their sub-pixel offsets). Here the
    height metrics, each string's layout and each glyph's coverage at its sub-pixel offset are kept
    (:data:`_TEXT`) and a glyph is placed by whole pixels: FreeType renders an outline moved by whole
    pixels into the same coverage, moved (tests: every demo figure byte-identical to matplotlib's
    renderer). Mathematical text, and text with font features or a language, is left to matplotlib."""

    figure = None  # set by _Canvas: the height metrics scale with the figure's resolution, as matplotlib's

    def _get_font_height_metrics(self, prop):
        """Ascent, descent and line gap of ``prop``'s font, as ``Text._get_layout`` reads them from the
        font's OS/2 or hhea table (the hook matplotlib's PDF and PS renderers use), kept per font."""
        dpi = self.figure.dpi if self.figure is not None else self.dpi
        key = (_font_key(prop), dpi)
        got = _TEXT.metrics.get(key)
        if got is None:
            got = _TEXT.metrics[key] = _height_metrics(prop, dpi)
        return got

    def draw_text(self, gc, x, y, s, prop, angle, ismath=False, mtext=None):
        if ismath or (mtext is not None and (mtext.get_fontfeatures() or mtext.get_language())):
            return super().draw_text(gc, x, y, s, prop, angle, ismath, mtext)
        flags = get_hinting_flag()
        size = prop.get_size_in_points()
        key = (s, _font_key(prop), self.dpi, flags)
        items = _TEXT.layouts.get(key)
        if items is None:
            font = self._prepare_font(prop)
            items = _TEXT.layouts[key] = [(i.ft_object, i.glyph_index, i.x, i.y)
                                          for i in font._layout(s, flags=flags, features=None, language=None)]
        cos, sin = math.cos(math.radians(angle)), math.sin(math.radians(angle))
        matrix = (0x10000 * np.array([[cos, -sin], [sin, cos]]) @ [[1, 0], [0, 1]]).round().astype(int)
        mode = RenderMode.NORMAL if gc.get_antialiased() else RenderMode.MONO
        common = (size, self.dpi, flags, mode, tuple(matrix.ravel().tolist()))
        for font, index, dx, dy in items:
            # where matplotlib puts the glyph, in 1/64 pixel; FreeType's y is upwards
            px, py = round(0x40 * (x + dx * cos - dy * sin)), round(0x40 * (self.height - y + dx * sin + dy * cos))
            gkey = (font.fname, font.face_index, index, px & 63, py & 63, common)
            got = _TEXT.glyphs.get(gkey)
            if got is None:
                font.set_size(size, self.dpi)
                font._set_transform(matrix, [px & 63, py & 63])
                bitmap = font._render_glyph(index, flags, mode)
                buffer = bitmap.buffer
                if mode == RenderMode.MONO:
                    buffer *= 0xff
                got = _TEXT.glyphs[gkey] = (buffer, bitmap.left, bitmap.top)
            buffer, left, top = got
            self._renderer.draw_text_image(buffer, left + (px >> 6),
                                           int(self.height) - (top + (py >> 6)) + buffer.shape[0], 0, gc)


def _height_metrics(prop, dpi) -> tuple:
    """``(ascent, descent, line gap)`` of ``prop``'s font at ``dpi`` in pixels, computed as
    matplotlib's ``Text._get_layout`` computes them (OS/2 table, else hhea), or Nones."""
    font = get_font(fontManager._find_fonts_by_props(prop))
    for table_name, linegap_key, ascent_key, descent_key in (
            ("OS/2", "sTypoLineGap", "sTypoAscender", "sTypoDescender"), ("hhea", "lineGap", "ascent", "descent")):
        table = font.get_sfnt_table(table_name)
        if table is None:
            continue
        scale = 1 / font.get_sfnt_table("head")["unitsPerEm"] * prop.get_size_in_points() * dpi / 72
        return table[ascent_key] * scale, -table[descent_key] * scale, table[linegap_key] * scale
    return None, None, None


#: matplotlib draws text glyph by glyph (3.11 and later): figures are drawn by :class:`_TextRenderer`.
#: It calls matplotlib's private text functions, so only on the minor versions whose pixels
#: tests/test_figures_text.py has compared (3.11); any other version draws with matplotlib's own.
TEXT_RENDERER_VERSIONS = ("3.11",)
GLYPH_BY_GLYPH = (".".join(matplotlib.__version__.split(".")[:2]) in TEXT_RENDERER_VERSIONS
                  and hasattr(RendererAgg, "_draw_text_glyphs_and_boxes")
                  and all(hasattr(FT2Font, n) for n in ("_layout", "_render_glyph", "_set_transform")))


class _Canvas(FigureCanvasAgg):
    """The Agg canvas of the report's figures: its renderer is a :class:`_TextRenderer` (the same pixels)."""

    def get_renderer(self):
        renderer = super().get_renderer()
        if GLYPH_BY_GLYPH and type(renderer) is RendererAgg:  # a new one (new size or resolution)
            renderer = self.renderer = _TextRenderer(renderer.width, renderer.height, renderer.dpi)
            renderer.figure = self.figure
        return renderer

    def draw(self):
        _TEXT.check()
        super().draw()


#: Figures written by :func:`_draw_job` in this process and set aside for the next builder of the
#: same size and resolution (:func:`subplots`), by (width, height, dpi).
_SPARE: dict = {}
_MARGINS = ("left", "right", "bottom", "top", "wspace", "hspace")
#: Inside :func:`spares_kept`, the figures set aside that a closing renderer leaves for the next
#: study's renderer, at most this many (the most recently written), so a batch's memory stays bounded.
SPARE_LIMIT = 12
_KEPT = [0]  # the depth of spares_kept() in this process


@contextlib.contextmanager
def spares_kept():
    """The figures set aside (:func:`subplots`) outlive the renderers that close inside this block
    (at most ``SPARE_LIMIT`` of them) and go when it ends: a batch job draws the reports of many
    studies one after the other in one process, and the next study's figures of the same sizes are
    drawn on them, with their renderers and matplotlib's cache of text sizes (the same pixels as on
    new figures)."""
    _KEPT[0] += 1
    try:
        yield
    finally:
        _KEPT[0] -= 1
        if not _KEPT[0]:
            _SPARE.clear()


def _release_spares() -> None:
    """What a closing renderer does with the figures set aside: all go, unless :func:`spares_kept`
    holds them (then only the oldest beyond ``SPARE_LIMIT``)."""
    if not _KEPT[0]:
        _SPARE.clear()
    for size in list(_SPARE)[:max(0, len(_SPARE) - SPARE_LIMIT)]:
        del _SPARE[size]


def subplots(nrows: int = 1, ncols: int = 1, *, figsize, layout=None, **kwargs):
    """``plt.subplots`` for the builders, without pyplot: a figure of the same size that
    :func:`_draw_job` has written and set aside in this process is cleared and used again. Its
    canvas keeps its renderer and with it matplotlib's cache of text sizes, which the next figure's
    tick labels, axis labels and legend entries mostly hit (a new figure measures every text anew:
    about a tenth of the CPU of the demo's figures). A figure returned to a caller is never reused
    while the caller holds it; the drawn result is the same as on a new figure (tests)."""
    dpi = float(matplotlib.rcParams["figure.dpi"])
    fig = _SPARE.pop((float(figsize[0]), float(figsize[1]), dpi), None)
    if fig is None:
        fig = Figure(figsize=figsize, dpi=dpi)
        _Canvas(fig)
    fig.set_layout_engine(layout)
    _TEXT.check()  # the font settings this figure is made under
    return fig, fig.subplots(nrows, ncols, **kwargs)


def _set_aside(fig) -> None:
    """Keep a written figure for the next builder of its size (:func:`subplots`): emptied, with a new
    figure's margins and resolution and no layout engine."""
    for ax in fig.axes:
        ax.remove()  # not cleared first, as fig.clear() would: that rebuilds each axes' ticks to drop them
    fig.clear()
    fig.set_layout_engine(None)
    fig.subplotpars.update(**{k: matplotlib.rcParams[f"figure.subplot.{k}"] for k in _MARGINS})
    fig.set_dpi(matplotlib.rcParams["figure.dpi"])
    w, h = fig.get_size_inches()
    _SPARE[(float(w), float(h), float(fig.dpi))] = fig


def _mark_invented(fig, invented: bool) -> None:
    """A small note in the bottom-right corner (laid out with the figure, never over data: a figure
    with a fixed layout keeps room for it below the axes, see :func:`fit_layout`)."""
    if not invented:
        return
    style = dict(ha="right", fontsize=TEXT_PT, color="#9c3d0c", style="italic")
    if isinstance(fig.get_layout_engine(), FitLayout):
        fig.text(0.995, 0.0, INVENTED_NOTE, va="bottom", **style)
    else:
        fig.supxlabel(INVENTED_NOTE, x=0.995, **style)


#: The room left around a figure's text by :func:`fit_layout`, in points.
LAYOUT_PAD_PT = 4.0


def _fix_ticks(axis) -> bool:
    """Fix an axis' major ticks where its locator put them, and, when its formatter needs no
    offset text, their labels as the formatter wrote them: a narrower axes would otherwise choose
    other ticks and other label widths, and every later pass (the draw runs two per axis) formats
    fixed strings instead of working out a format again. Ticks outside the view, which are never
    drawn, are left out. True when the labels were fixed (the axis can be measured by
    :func:`_axis_boxes`)."""
    locs = np.asarray(axis.get_majorticklocs(), float)
    formatter = axis.get_major_formatter()
    labels = formatter.format_ticks(locs)  # as the draw would write them: every loc, view or not
    if formatter.get_offset():
        axis.set_major_locator(FixedLocator(locs))
        return False
    lo, hi = sorted(axis.get_view_interval())
    slack = 1e-6 * (hi - lo)  # generous: a tick kept outside the view is still not drawn
    inside = (locs >= lo - slack) & (locs <= hi + slack)
    axis.set_major_locator(FixedLocator(locs[inside]))
    axis.set_major_formatter(FixedFormatter([t for t, keep in zip(labels, inside) if keep]))
    return True


def _axis_boxes(axis, spine, renderer) -> list:
    """What :meth:`matplotlib.axis.Axis.get_tightbbox` measures for layout (tick labels; the axis
    label placed below or left of them, counted for its height or width only), measured once: the
    matplotlib method works out the ticks and their label boxes twice. For an x axis at the bottom
    or a y axis at the left whose labels :func:`_fix_ticks` fixed (no offset text)."""
    boxes = [t.get_window_extent(renderer) for t in axis.get_ticklabels() if t.get_text()]
    label = axis.label
    if not (label.get_visible() and label.get_text()):
        return boxes
    edge = Bbox.union(boxes + [spine.get_window_extent(renderer)])
    x, y = label.get_position()
    shift = axis.labelpad * axis.get_figure(root=True).dpi / 72.0
    label.set_position((x, edge.y0 - shift) if axis.axis_name == "x" else (edge.x0 - shift, y))
    box = label.get_window_extent(renderer).frozen()  # where the draw puts it (its own placement rule)
    if axis.axis_name == "x":
        box.x0 = box.x1 = (box.x0 + box.x1) / 2
    else:
        box.y0 = box.y1 = (box.y0 + box.y1) / 2
    return boxes + [box]


def _tight_box(ax, renderer, fixed: bool):
    """The axes' box for layout, as ``ax.get_tightbbox(renderer, for_layout_only=True)`` gives it, at
    about half the cost for an axes with ticks fixed by :func:`_fix_ticks`, x ticks and label at the
    bottom and y at the left (every fixed-layout figure of the report); any other axes is measured
    by matplotlib."""
    plain = (fixed and ax.xaxis.get_ticks_position() == "bottom" and ax.xaxis.get_label_position() == "bottom"
             and ax.yaxis.get_ticks_position() == "left" and ax.yaxis.get_label_position() == "left")
    if not plain:
        return ax.get_tightbbox(renderer, for_layout_only=True)
    ax.apply_aspect()
    boxes = [ax.get_window_extent(renderer)]
    for axis, side in ((ax.xaxis, "bottom"), (ax.yaxis, "left")):
        if axis.get_visible() and axis.get_in_layout():
            boxes += _axis_boxes(axis, ax.spines.get(side, ax), renderer)
    for title in (c for c in ax.get_children() if isinstance(c, Text) and c not in ax.texts):  # the titles
        if title.get_visible() and title.get_text():
            box = title.get_window_extent(renderer).frozen()
            box.x0 = box.x1 = (box.x0 + box.x1) / 2  # a title counts for its height only
            boxes.append(box)
    boxes += [a.get_tightbbox(renderer) for a in ax.get_default_bbox_extra_artists()]
    return Bbox.union([b for b in boxes if b is not None and np.isfinite(b.bounds).all() and (b.width or b.height)])


#: Intervals between the y ticks of a fixed-layout figure whose builder left matplotlib's default
#: locator (at most Y_BINS + 1 ticks): the default put 8-9 labels on a 3.1-inch panel, each a text
#: to lay out and draw, where 4-6 read the values as well.
Y_BINS = 5


def fit_layout(fig, pad_pt: float = LAYOUT_PAD_PT) -> None:
    """A fixed layout (the :class:`FitLayout` engine's): the figure's axes (one row) are placed
    once, with margins measured from their own text (tick labels, axis labels, titles, an axes
    legend), the figure's legends above them and its notes below, and ``pad_pt`` to spare. A y axis
    on matplotlib's default locator gets at most ``Y_BINS`` intervals. The ticks are fixed where
    they were measured (:func:`_fix_ticks`: a narrower axes would otherwise
    choose other ticks, and other label widths). One measuring pass (:func:`_tight_box`) and
    ``subplots_adjust``: matplotlib's constrained layout measures every axes twice per draw, about
    40% of drawing a panel (cProfile over the demo's figures). Centred axis labels and titles are
    measured for their height only, as constrained layout does: a builder keeps them narrower than
    its figure."""
    axes = fig.axes
    if not axes:
        return
    for ax in axes:
        if type(ax.yaxis.get_major_locator()) is AutoLocator:  # matplotlib's default: 8-9 labels on a panel
            ax.yaxis.set_major_locator(MaxNLocator(nbins=Y_BINS, steps=[1, 2, 2.5, 5, 10]))
    fixed = {ax: all([_fix_ticks(ax.xaxis), _fix_ticks(ax.yaxis)]) for ax in axes}
    renderer = fig.canvas.get_renderer()
    pad = pad_pt * fig.dpi / 72.0
    w, h = fig.bbox.width, fig.bbox.height
    top = min([h] + [leg.get_window_extent(renderer).y0 for leg in fig.legends]) - pad
    bottom = max([0.0] + [t.get_window_extent(renderer).y1 for t in fig.texts]) + pad
    boxes = [(ax.get_window_extent(renderer), _tight_box(ax, renderer, fixed[ax])) for ax in axes]
    below = max(p.y0 - t.y0 for p, t in boxes)
    above = max(t.y1 - p.y1 for p, t in boxes)
    x0 = pad + boxes[0][0].x0 - boxes[0][1].x0
    x1 = w - pad - (boxes[-1][1].x1 - boxes[-1][0].x1)
    gap = pad + max([a[1].x1 - a[0].x1 + b[0].x0 - b[1].x0 for a, b in zip(boxes, boxes[1:])], default=0.0)
    width = (x1 - x0 - (len(axes) - 1) * gap) / len(axes)
    fig.subplots_adjust(left=x0 / w, right=x1 / w, bottom=(bottom + below) / h, top=(top - above) / h,
                        wspace=gap / width)


class FitLayout(LayoutEngine):
    """The layout engine of a figure with a fixed layout: :func:`fit_layout` when it is drawn (a
    builder passes ``layout=FitLayout()``; ``write_figure`` draws once and then removes the engine)."""

    _adjust_compatible = True
    _colorbar_gridspec = True

    def execute(self, fig) -> None:
        fit_layout(fig)


def _top_legend(fig, ax, ncol: int = 3) -> None:
    """The legend above the axes, outside the data area, in as many columns (up to ``ncol``) as
    fit the figure's width: a legend wider than its figure would be cut at the edges."""
    handles, labels = ax.get_legend_handles_labels()
    renderer = fig.canvas.get_renderer()
    for n in range(min(ncol, len(handles)), 0, -1):
        legend = fig.legend(handles, labels, loc="outside upper center", ncol=n, frameon=False, fontsize=TEXT_PT,
                            handlelength=2.2, columnspacing=1.2)
        if n == 1 or legend.get_window_extent(renderer).width <= fig.bbox.width:
            return
        legend.remove()


def _gapped(years, *series):
    """Insert a NaN row wherever consecutive years are not adjacent, so lines break at gaps."""
    years = np.asarray(years, float)
    if len(years) < 2:
        return (years,) + tuple(np.asarray(v, float) for v in series)
    full = np.arange(years.min(), years.max() + 1)
    pos = np.searchsorted(full, years)
    out = []
    for v in series:
        a = np.full(len(full), np.nan)
        a[pos] = np.asarray(v, float)
        out.append(a)
    return (full, *out)


def _integer_years(ax) -> None:
    ax.xaxis.set_major_locator(MaxNLocator(integer=True, nbins=8))


def _z(v):
    v = np.asarray(v, float)
    sd = np.nanstd(v)
    return (v - np.nanmean(v)) / (sd if sd > 0 else 1.0)


# ----------------------------------------------------------------------------- study-wide
def coverage(series: list[str], labels: list[str], roles: list[str], years, observed, filled,
             invented: bool = False):
    """Years observed per series: a bar over each run of observed years, so every gap shows
    as a break; filled (interpolated) years hatched; missing years inside a series crossed."""
    years = np.asarray(years, int)
    obs = np.asarray(observed, bool)
    fil = np.asarray(filled, bool)
    k = len(series)
    fig, ax = subplots(figsize=capped_size(8.2, 0.3 * k + 1.25), layout="constrained")
    for i in range(k):
        colour = RESPONSE_COLOUR if roles[i] == "response" else DRIVER_COLOUR
        runs, start = [], None
        for j, ok in enumerate(obs[i]):
            if ok and start is None:
                start = j
            if (not ok or j == len(years) - 1) and start is not None:
                end = j if ok else j - 1
                runs.append((years[start] - 0.45, years[end] - years[start] + 0.9))
                start = None
        ax.broken_barh(runs, (i - 0.32, 0.64), facecolors=colour, edgecolor="none")
        fy = years[fil[i] & obs[i]]
        if len(fy):
            ax.broken_barh([(y - 0.45, 0.9) for y in fy], (i - 0.32, 0.64), facecolors="white",
                           edgecolor=colour, hatch="////", linewidth=0.6)
        if obs[i].any():
            first, last = np.flatnonzero(obs[i])[[0, -1]]
            inner = ~obs[i] & (np.arange(len(years)) > first) & (np.arange(len(years)) < last)
            ax.scatter(years[inner], np.full(inner.sum(), i), marker="x", s=16, color="#b11d1d",
                       linewidths=1.0, zorder=3, label="_missing")
    ax.set_yticks(range(k), [mpl_text(_short(s, 45)) for s in labels])
    ax.set_ylim(k - 0.5, -0.5)
    ax.set_xlim(years.min() - 1, years.max() + 1)
    ax.grid(axis="y", visible=False)
    ax.set_xlabel("year")
    handles = [Patch(color=RESPONSE_COLOUR, label="response, observed"),  # the legend names only what is drawn
               Patch(color=DRIVER_COLOUR, label="driver, observed"),
               Patch(facecolor="white", edgecolor="#555555", hatch="////", label="filled (interpolated)"),
               plt.Line2D([], [], marker="x", color="#b11d1d", ls="none", label="missing inside the series")]
    crossed = any(len(c.get_offsets()) for c in ax.collections if c.get_label() == "_missing")
    drawn = ("response" in roles, any(r != "response" for r in roles), bool((fil & obs).any()), crossed)
    handles = [h for h, shown in zip(handles, drawn) if shown]
    fig.legend(handles=handles, loc="outside lower center", ncol=len(handles), frameon=False, fontsize=TEXT_PT)
    _mark_invented(fig, invented)
    return fig


def ink_on(rgba) -> str:
    """Black or white text for a fill colour, whichever contrasts more with it (WCAG 2.1: relative
    luminance L of the linearised sRGB channels, ratio (L1 + 0.05) / (L2 + 0.05)); the better of the
    two is at least 4.58:1 on any fill (at L = 0.179 the two are equal)."""
    c = np.asarray(rgba[:3], float)
    lum = float(np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4) @ [0.2126, 0.7152, 0.0722])
    return "#000000" if (lum + 0.05) / 0.05 >= 1.05 / (lum + 0.05) else "#ffffff"


def driver_correlation(corr: np.ndarray, labels: list[str], threshold: float = 0.7,
                       invented: bool = False):
    """Lower triangle of the driver-driver Pearson r; cells with |r| above the collinearity
    threshold are outlined and their value starred."""
    full = np.asarray(corr, float)
    k = len(labels)
    corr = full[1:, :-1]  # the lower triangle without the diagonal: rows 2..k, columns 1..k-1
    m = k - 1
    hidden = np.triu(np.ones((m, m), bool), k=1) | np.isnan(corr)
    side = max(3.6, 0.5 * m + 2.4)
    fig, ax = subplots(figsize=capped_size(side + 1.2, side), layout="constrained")
    import seaborn as sns  # here, not at the top: 0.55 s of CPU to import, and one figure uses it

    with warnings.catch_warnings():  # seaborn 0.13 calls a colormap method matplotlib plans to rename
        warnings.simplefilter("ignore", PendingDeprecationWarning)
        sns.heatmap(corr, mask=hidden, cmap=CORR_CMAP, vmin=-1, vmax=1, center=0, annot=False, square=True,
                    linewidths=0.6, linecolor="white", cbar_kws={"label": "Pearson r (same year)", "shrink": 0.7},
                    ax=ax)
    # the numbers are written here rather than by seaborn's annot, whose switch between dark and
    # light text at luminance 0.408 left white on mid blues at 2.7:1: ink_on picks by WCAG contrast
    for i, j in zip(*np.nonzero(~hidden)):
        v = corr[i, j]
        ax.text(j + 0.5, i + 0.5, f"{v:.2f}*" if abs(v) > threshold else f"{v:.2f}", ha="center", va="center",
                fontsize=TEXT_PT, color=ink_on(CORR_CMAP((v + 1) / 2)))
    for i in range(m):
        for j in range(i + 1):
            if abs(corr[i, j]) > threshold:
                ax.add_patch(Rectangle((j + 0.03, i + 0.03), 0.94, 0.94, fill=False, edgecolor="#000000",
                                       linewidth=2.6, zorder=5))
                ax.add_patch(Rectangle((j + 0.1, i + 0.1), 0.8, 0.8, fill=False, edgecolor="#ffffff",
                                       linewidth=0.9, zorder=6))
    short = [mpl_text(_short(s, 40)) for s in labels]
    # upright labels (wrapped) stay above their own column: slanted ones ran off the left edge
    ax.set_xticks(np.arange(m) + 0.5, [mpl_text(_short(s, 40), 16) for s in labels[:-1]], rotation=90,
                  ha="center")
    ax.set_yticks(np.arange(m) + 0.5, short[1:], rotation=0)
    ax.grid(False)
    ax.set_title(mpl_text(f"Outlined and starred: |r| > {threshold:g}, too collinear to separate",
                          max(30, int(7 * side))), loc="left")  # wrapped on small grids
    _mark_invented(fig, invented)
    return fig


def evidence_grid(grades: np.ndarray, lags: np.ndarray, row_labels: list[str], col_labels: list[str],
                  invented: bool = False):
    """Responses x drivers: the grade as the cell colour and as words, with the lag."""
    order = list(GRADE_STYLE)
    g = np.asarray(grades, dtype=object)
    nr, nc = g.shape
    idx = np.full((nr, nc), np.nan)
    for i in range(nr):
        for j in range(nc):
            if g[i, j] in GRADE_STYLE:
                idx[i, j] = order.index(g[i, j])
    fig, ax = subplots(figsize=capped_size(max(5.5, 0.95 * nc + 2.6), 0.62 * nr + 1.9), layout=FitLayout())
    cmap = ListedColormap([GRADE_STYLE[k][0] for k in order]).with_extremes(bad="#ffffff")
    ax.imshow(np.ma.masked_invalid(idx), cmap=cmap, vmin=-0.5, vmax=len(order) - 0.5, aspect="auto")
    for i in range(nr):
        for j in range(nc):
            grade = g[i, j]
            if grade in GRADE_STYLE:
                fill, text = GRADE_STYLE[grade]
                lag = lags[i, j]
                sub = "" if lag is None or (isinstance(lag, float) and np.isnan(lag)) else f"\nlag {int(lag)}"
                ax.text(j, i, grade.replace("-", "-\n", 1) + sub, ha="center", va="center", fontsize=TEXT_PT, color=text,
                        fontweight="bold" if grade in ("strong", "moderate") else "normal")
                if grade == "insufficient-data":
                    ax.add_patch(Rectangle((j - 0.5, i - 0.5), 1, 1, fill=False, hatch="///",
                                           edgecolor="#bdbdbd", linewidth=0))
            else:
                ax.text(j, i, "not tried", ha="center", va="center", fontsize=TEXT_PT, color="#888888")
    ax.set_xticks(range(nc), [mpl_text(_short(s, 40)) for s in col_labels], rotation=35, ha="right")
    ax.set_yticks(range(nr), [mpl_text(_short(s, 45)) for s in row_labels])
    ax.set_xticks(np.arange(nc + 1) - 0.5, minor=True)
    ax.set_yticks(np.arange(nr + 1) - 0.5, minor=True)
    ax.grid(False)
    ax.grid(which="minor", color="white", linewidth=2)
    ax.tick_params(which="minor", length=0)
    for s in ax.spines.values():
        s.set_visible(False)
    _mark_invented(fig, invented)
    return fig


# ----------------------------------------------------------------------------- per hypothesis
def overlay(years, y, x, lag: int, response: str, driver: str, invented: bool = False):
    """Both series standardised (mean 0, sd 1) on the response's years, the driver shifted
    by its lag so that what is compared is what the screen compared."""
    fig, ax = subplots(figsize=PANEL_SIZE, layout=FitLayout())
    ax.axhline(0, color="#bbbbbb", lw=0.8)
    yrs, zy, zx = _gapped(years, _z(y), _z(x))
    ax.plot(yrs, zy, "-o", ms=3, lw=1.4, color=RESPONSE_COLOUR, label=mpl_text(_short(response, 60)))
    shifted = "same year" if lag == 0 else f"{lag} year{'s' if lag > 1 else ''} earlier"
    ax.plot(yrs, zx, "--s", ms=2.8, lw=1.2, color=DRIVER_COLOUR,
            label=mpl_text(f"{_short(driver, 48)} ({shifted})"))
    ax.set_xlabel("year of the response")
    ax.set_ylabel("standardised value (z)")
    _integer_years(ax)
    _top_legend(fig, ax, ncol=1)
    _mark_invented(fig, invented)
    return fig


def scatter(x, y, lag: int, response: str, driver: str, smooth: dict | None = None,
            invented: bool = False):
    """Response against the lagged driver: the least-squares line, and the penalised-spline
    fit when a GAM was screened for this pair."""
    x = np.asarray(x, float)
    y = np.asarray(y, float)
    fig, ax = subplots(figsize=PANEL_SIZE, layout=FitLayout())
    ax.scatter(x, y, s=15, color=RESPONSE_COLOUR, alpha=0.85, edgecolors="white", linewidths=0.4,
               label="years")
    if len(x) >= 3 and np.ptp(x) > 0:
        b, a = np.polyfit(x, y, 1)
        g = np.linspace(np.min(x), np.max(x), 50)
        r = np.corrcoef(x, y)[0, 1]
        ax.plot(g, a + b * g, color=DRIVER_COLOUR, lw=1.6, label=f"linear fit (r = {r:.2f}, n = {len(x)})")
    if smooth is not None:
        ax.plot(smooth["grid"], smooth["fit"], color=SMOOTH_COLOUR, lw=1.6, ls=(0, (5, 2)),
                label=f"penalised spline (edf {smooth['edf']:.1f})" + (", mean year" if smooth.get("trend") else ""))
    lead = "same year" if lag == 0 else f"{lag}-year lead"
    ax.set_xlabel(mpl_text(f"{driver}, {lead}", 70))
    ax.set_ylabel(mpl_text(response, 45))
    _top_legend(fig, ax, ncol=3)
    _mark_invented(fig, invented)
    return fig


def lag_profile(lags, r, r_crit, chosen: int, r_detrended=None, invented: bool = False):
    """Pearson r at every lag tried, with the band inside which |r| is not significant at
    p = 0.05 once autocorrelation is allowed for (critical |r| from each lag's n_eff)."""
    lags = np.asarray(lags, float)
    r = np.asarray(r, float)
    rc = np.asarray(r_crit, float)
    fig, ax = subplots(figsize=PANEL_SIZE, layout=FitLayout())
    edges = np.concatenate([[lags[0] - 0.5], lags + 0.5])
    band = np.concatenate([rc, rc[-1:]])
    ax.fill_between(edges, -band, band, step="post", color="#d9d9d9", alpha=0.8, lw=0,
                    label="not significant (p > 0.05, n_eff)")
    ax.axhline(0, color="#888888", lw=0.8)
    colours = [RESPONSE_COLOUR if lg == chosen else "#8fb3d6" for lg in lags]
    ax.bar(lags, r, width=0.55, color=colours, edgecolor=RESPONSE_COLOUR, linewidth=0.8,
           label="r (dark: chosen lag)", zorder=3)
    if r_detrended is not None:
        ax.scatter(lags, r_detrended, marker="D", s=22, facecolors="white", edgecolors=DRIVER_COLOUR,
                   linewidths=1.2, zorder=4, label="r after detrending")
    lim = np.nanmax(np.abs(np.concatenate([r, rc, [0.3]] + ([np.asarray(r_detrended, float)]
                                                            if r_detrended is not None else []))))
    ax.set_ylim(-1.25 * lim, 1.25 * lim)
    ax.set_xticks(lags.astype(int), [f"{int(v)}*" if v == chosen else f"{int(v)}" for v in lags])
    ax.set_xlabel("driver lead (years; * chosen)")
    ax.set_ylabel("Pearson r")
    _top_legend(fig, ax, ncol=3)
    ax.grid(axis="x", visible=False)
    _mark_invented(fig, invented)
    return fig


def forecasts(years, observed, baselines: dict, model, hardest: str, response: str, driver: str,
              invented: bool = False):
    """Out-of-sample one-step forecasts: observed, the three baselines, and the hardest
    baseline plus the driver (every forecast made from earlier years only)."""
    fig, ax = subplots(figsize=PANEL_SIZE, layout=FitLayout())
    names = list(baselines)
    yrs, obs, mod, *base = _gapped(years, observed, model, *[baselines[n] for n in names])
    ax.plot(yrs, obs, "-o", ms=3.2, lw=1.2, color="#111111", label="observed", zorder=4)
    for name, values in zip(names, base):
        colour, dash, _ = BASELINE_STYLES.get(name, ("#777777", "--", None))
        ax.plot(yrs, values, color=colour, ls=dash, lw=1.1, label=f"{name} baseline")
    ax.plot(yrs, mod, "-s", ms=2.8, lw=1.6, color=DRIVER_COLOUR, zorder=5,
            label=mpl_text(f"{hardest} + {driver}", 44))
    ax.set_xlabel("forecast year")
    ax.set_ylabel(mpl_text(response, 45))
    _integer_years(ax)
    _top_legend(fig, ax, ncol=2)
    _mark_invented(fig, invented)
    return fig


def null_limits(values: np.ndarray, observed: float) -> tuple[float, float]:
    """The x range of a null distribution panel: the finite surrogate ``values`` and the real
    driver's value (when finite), with 5% room. A few surrogates can be far out (a skill of -40
    against a good baseline): below the 1% quantile they are left beyond the left edge when the
    lowest lies more than 4 interquartile ranges below the lower quartile."""
    v = np.asarray(values, float)
    v = v[np.isfinite(v)]
    known = [observed] if np.isfinite(observed) else []
    if not len(v) and not known:
        return -0.05, 1.05
    lo = min(known) if known else np.inf
    if len(v):
        q1, q25, q75 = np.quantile(v, [0.01, 0.25, 0.75])
        far = np.min(v) < q25 - 4.0 * (q75 - q25)
        lo = min([q1 if far else np.min(v)] + known)
    top = max(([float(np.max(v))] if len(v) else []) + known)
    span = (top - lo) if len(v) else 1.0
    span = span if span > 0 else 1.0
    return float(lo - 0.05 * span), float(top + 0.05 * span)


def _histogram(ax, values, bins: int, label: str) -> None:
    """The bars of ``np.histogram(values, bins)`` as one collection (what ``ax.hist`` draws, the same
    bars, edges and y range from 0: one artist instead of one Rectangle per bar, which cost a null
    panel about a third of its CPU)."""
    counts, edges = np.histogram(values, bins=bins)
    verts = np.stack([np.column_stack([edges[:-1], np.zeros_like(counts)]), np.column_stack([edges[:-1], counts]),
                      np.column_stack([edges[1:], counts]), np.column_stack([edges[1:], np.zeros_like(counts)])], axis=1)
    ax.add_collection(PolyCollection(verts, facecolors="#b8d4ec", edgecolors="white", linewidths=0.4, label=label),
                      autolim=False)
    ax.set_ylim(0, 1.05 * max(1, counts.max(initial=0)))  # hist's range: from 0 (its sticky edge), 5% above


def null_distributions(panels: list[dict], invented: bool = False):
    """Histograms of the statistic over the surrogate drivers with the real driver's value.
    ``panels``: dicts with values, observed, label, p, title."""
    n = len(panels)
    fig, axes = subplots(1, n, figsize=PANEL_SIZE, layout=FitLayout(), squeeze=False)
    for k, (ax, p) in enumerate(zip(axes[0], panels)):
        v = np.asarray(p["values"], float)
        v = v[np.isfinite(v)]
        obs = float(p["observed"])
        lo, hi = null_limits(v, obs)
        shown = v[v >= lo]
        _histogram(ax, shown, int(np.clip(len(shown) // 10, 8, 30)), "surrogates")
        if np.isfinite(obs):  # a statistic that could not be computed has no line to draw
            ax.axvline(obs, color=DRIVER_COLOUR, lw=2, label="real driver")
        ax.set_xlim(lo, hi)
        ax.set_xlabel(mpl_text(p["label"]))
        if k == 0:
            ax.set_ylabel("surrogates")
        ptxt = "" if p.get("p") is None or not np.isfinite(p["p"]) else f", p = {p['p']:.3f}"
        ax.set_title(mpl_text(p["title"]) + ptxt, loc="left")
        hidden = len(v) - len(shown)
        if hidden:
            ax.text(0.02, 0.97, f"{hidden} lower\nnot shown", transform=ax.transAxes, fontsize=TEXT_PT,
                    va="top", color="#555555")
        ax.grid(axis="x", visible=False)
    _top_legend(fig, axes[0][0], ncol=2)
    _mark_invented(fig, invented)
    return fig


def gam_effect(grid, curve, lower, upper, x_obs, driver: str, response: str, stats_line: str,
               invented: bool = False):
    """Partial effect of the driver from the penalised spline, with its pointwise 95% band
    and a rug of the observed driver values."""
    fig, ax = subplots(figsize=PANEL_SIZE, layout=FitLayout())
    ax.fill_between(grid, lower, upper, color=SMOOTH_COLOUR, alpha=0.18, lw=0, label="95% band")
    ax.plot(grid, curve, color=SMOOTH_COLOUR, lw=1.8, label="partial effect")
    ax.axhline(0, color="#888888", lw=0.8)
    ymin = np.nanmin(lower)
    span = np.nanmax(upper) - ymin
    ax.plot(x_obs, np.full(len(x_obs), ymin - 0.04 * span), "|", color=INK, ms=8, mew=0.8,
            label="observed driver values")
    ax.set_xlabel(mpl_text(driver, 70))
    ax.set_ylabel(mpl_text(f"effect on {response}", 45))
    ax.set_title(mpl_text(stats_line, 70), loc="left", fontsize=TEXT_PT)
    _top_legend(fig, ax, ncol=3)
    _mark_invented(fig, invented)
    return fig


# ----------------------------------------------------------------------------- condition (issue 18)
GROUP_COLOURS = ("#0b3c68", "#c4561b", "#3b7d3b", "#7a3d8c", "#8a6d1f", "#2d7f8a")


def condition_fit(log_length, log_weight, log_a: float, b: float, seasons: list[str], residuals: list,
                  invented: bool = False):
    """The length-weight reference on log-log axes (a sample of the fish and the fitted line),
    and the residuals (log Kn) by season as box plots."""
    fig, (ax, bx) = subplots(1, 2, figsize=(8.6, 3.6), layout=FitLayout())
    x = np.asarray(log_length, float)
    ax.scatter(x, np.asarray(log_weight, float), s=3, alpha=0.25, color=RESPONSE_COLOUR, linewidths=0,
               label="fish (a sample)")
    grid = np.linspace(np.nanmin(x), np.nanmax(x), 50)
    ax.plot(grid, log_a + b * grid, color=DRIVER_COLOUR, lw=1.6, label=f"reference: b = {b:.3f}")
    ax.set_xlabel("log length (cm)")
    ax.set_ylabel("log weight (g)")
    ax.legend(fontsize=TEXT_PT, frameon=False, loc="upper left")
    bx.boxplot([np.asarray(r, float) for r in residuals], showfliers=False)
    bx.set_xticks(range(1, len(seasons) + 1), [mpl_text(_short(s, 14)) for s in seasons])
    bx.axhline(0, color=INK, lw=0.6, ls="--")
    bx.set_ylabel("log Kn (residual from the reference)")
    _mark_invented(fig, invented)
    return fig


def condition_indices(panels: list[dict], invented: bool = False):
    """Season-adjusted annual indices by age group with their 95% intervals: one panel per kind
    (``panels``: title, ylabel, lines of group, years, value, low, high)."""
    fig, axes = subplots(1, len(panels), figsize=(4.4 * len(panels), 3.6), layout=FitLayout(),
                             squeeze=False)
    for ax, panel in zip(axes[0], panels):
        for k, line in enumerate(panel["lines"]):
            colour = GROUP_COLOURS[k % len(GROUP_COLOURS)]
            yrs, v, lo, hi = _gapped(line["years"], line["value"], line["low"], line["high"])
            ax.fill_between(yrs, lo, hi, color=colour, alpha=0.18, linewidth=0)
            ax.plot(yrs, v, color=colour, lw=1.3, label=mpl_text(_short(line["group"], 20)))
        ax.set_title(mpl_text(panel["title"]), loc="left", fontsize=8.5)
        ax.set_ylabel(mpl_text(panel["ylabel"]))
        ax.set_xlabel("year")
        _integer_years(ax)
    axes[0][0].legend(fontsize=TEXT_PT, frameon=False, title="age group", title_fontsize=TEXT_PT)
    _mark_invented(fig, invented)
    return fig


def condition_design(seasons: list[str], effects: dict, years, design: dict, invented: bool = False):
    """Season effects on log Kn by age group (``effects``: group -> one value per season) and the
    design effect of the annual condition index by year (``design``: group -> one per year)."""
    fig, (ax, bx) = subplots(1, 2, figsize=(8.6, 3.4), layout=FitLayout())
    width = 0.8 / max(1, len(effects))
    for k, (group, vals) in enumerate(effects.items()):
        colour = GROUP_COLOURS[k % len(GROUP_COLOURS)]
        ax.bar(np.arange(len(seasons)) + k * width, vals, width, color=colour,
               label=mpl_text(_short(group, 20)))
        bx.plot(years, design[group], color=colour, lw=1.2, marker="o", ms=2.5)
    ax.set_xticks(np.arange(len(seasons)) + width * (len(effects) - 1) / 2,
                  [mpl_text(_short(s, 14)) for s in seasons])
    ax.axhline(0, color=INK, lw=0.6)
    ax.set_ylabel("season effect on log Kn")
    ax.legend(fontsize=TEXT_PT, frameon=False, title="age group", title_fontsize=TEXT_PT)
    bx.axhline(1, color=INK, lw=0.6, ls="--")
    bx.set_ylabel("design effect 1 + (m - 1) rho")
    bx.set_xlabel("year")
    _integer_years(bx)
    _mark_invented(fig, invented)
    return fig


def condition_sensitivity(groups: list[str], thresholds: list[float], years, shares: dict, chosen: float,
                          invented: bool = False):
    """The season-adjusted poor-condition share by year at every threshold of the grid, one
    panel per age group (``shares``: group -> array thresholds x years); the chosen threshold bold."""
    fig, axes = subplots(1, len(groups), figsize=(3.2 * len(groups) + 1, 3.4), layout=FitLayout(),
                             squeeze=False, sharey=True)
    cmap = plt.get_cmap("viridis")
    for ax, group in zip(axes[0], groups):
        for j, t in enumerate(thresholds):
            bold = np.isclose(t, chosen)
            ax.plot(years, shares[group][j], color=cmap(j / max(1, len(thresholds) - 1)),
                    lw=2.0 if bold else 0.9, label=f"{t:g}" + (" (chosen)" if bold else ""))
        ax.set_title(mpl_text(_short(group, 20)), loc="left", fontsize=8.5)
        ax.set_xlabel("year")
        _integer_years(ax)
    axes[0][0].set_ylabel("share of fish below the threshold")
    axes[0][-1].legend(fontsize=TEXT_PT, frameon=False, title="threshold Kn", title_fontsize=TEXT_PT)
    _mark_invented(fig, invented)
    return fig


def variance_fractions(fractions: list[float], labels: list[str], response: str, invented: bool = False):
    """Variance partition of two drivers as horizontal bars: the part of the response's variance
    unique to each driver, the part they share, and the part neither explains (adjusted R^2
    fractions; a negative shared fraction is drawn as it is, left of zero)."""
    names = [f"unique to {mpl_text(_short(labels[0], 30))}", "shared", f"unique to {mpl_text(_short(labels[1], 30))}",
             "unexplained"]
    colours = [DRIVER_COLOUR, SMOOTH_COLOUR, RESPONSE_COLOUR, "#b9bec2"]
    v = np.asarray(fractions, float)
    fig, ax = subplots(figsize=PANEL_SIZE, layout=FitLayout())
    pos = np.arange(len(v))[::-1]
    ax.barh(pos, np.nan_to_num(v), color=colours, height=0.6)
    for y, x in zip(pos, v):
        if np.isfinite(x):
            ax.text(max(x, 0) + 0.01, y, f"{x:.0%}", va="center", fontsize=TEXT_PT)
    ax.set_yticks(pos, names)
    ax.axvline(0, color=INK, linewidth=0.8)
    top = max(1.1, float(np.nanmax(v)) + 0.3) if np.isfinite(v).any() else 1.1  # room for the last "103%"
    ax.set_xlim(min(0.0, float(np.nanmin(v)) - 0.05) if np.isfinite(v).any() else 0.0, top)
    # two lines from the axes' right edge: centred on one line, it ran past the figure's edges
    # (the bar names leave the axes narrow)
    ax.set_xlabel(mpl_text(f"share of the variance of {_short(response, 40)} (adjusted R\u00b2)", 48), loc="right")
    _mark_invented(fig, invented)
    return fig


BUILDERS = {f.__name__: f for f in (coverage, driver_correlation, evidence_grid, overlay, scatter,
                                    lag_profile, forecasts, null_distributions, gam_effect,
                                    condition_fit, condition_indices, condition_design,
                                    condition_sensitivity, variance_fractions)}


# ----------------------------------------------------------------------------- rendering
@dataclass
class FigureJob:
    """One figure to draw: ``BUILDERS[builder](**kwargs)``, saved under ``name``."""

    name: str
    builder: str
    kwargs: dict = field(default_factory=dict)


def _feed(h, v) -> None:
    """Feed one argument value into the hash ``h`` in a canonical form (type-tagged, lengths
    stated, arrays by dtype, shape and bytes). A type it does not know raises TypeError."""
    if v is None or isinstance(v, (bool, np.bool_)):
        h.update(b"N" if v is None else (b"b1" if v else b"b0"))
    elif isinstance(v, (int, np.integer)):
        h.update(b"i%d;" % int(v))
    elif isinstance(v, (float, np.floating)):
        h.update(b"f" + float(v).hex().encode() + b";")
    elif isinstance(v, str):
        data = v.encode("utf-8", "surrogatepass")
        h.update(b"s%d:" % len(data) + data)
    elif isinstance(v, (list, tuple)):
        h.update(b"l%d:" % len(v))
        for x in v:
            _feed(h, x)
    elif isinstance(v, dict):
        h.update(b"d%d:" % len(v))
        for k, x in v.items():  # in order: the order of entries is the order they are drawn in
            _feed(h, k)
            _feed(h, x)
    elif isinstance(v, np.ndarray) and v.dtype == object:
        h.update(b"O" + repr(v.shape).encode())
        for x in v.ravel():
            _feed(h, x)
    elif isinstance(v, np.ndarray):
        h.update(b"a" + v.dtype.str.encode() + repr(v.shape).encode())
        h.update(np.ascontiguousarray(v).tobytes())
    else:
        raise TypeError(f"no content key for a {type(v).__name__}")


@functools.lru_cache(maxsize=None)
def _code_digest(path: str | None) -> str:
    """sha256 of the source file that holds a builder ('' when there is none to read)."""
    try:
        return sha256_file(path) if path else ""
    except OSError:
        return ""


@functools.lru_cache(maxsize=1)
def _settings_digest() -> str:
    """What every figure depends on besides its own arguments: the rc settings, the raster's
    resolution and the versions of the tool and of the drawing libraries."""
    h = hashlib.sha256()
    _feed(h, [KEY_FORMAT, PNG_DPI, tool_version(), matplotlib.__version__, np.__version__])
    _feed(h, {k: repr(v) for k, v in sorted(RC.items())})
    return h.hexdigest()


def content_key(job: FigureJob) -> str | None:
    """The figure's content key: sha256 of its builder (name and the source file it is in), its
    arguments and :func:`_settings_digest`. Equal keys draw equal figures, so a figure whose
    key is stored beside it (``name.key``) is not drawn again. None when an argument has a type
    the key cannot read: that figure is always drawn."""
    builder = BUILDERS.get(job.builder)
    h = hashlib.sha256()
    try:
        _feed(h, [job.builder, _code_digest(inspect.getsourcefile(builder) if builder else None), _settings_digest()])
        _feed(h, job.kwargs)
    except TypeError:
        return None
    return h.hexdigest()


def _key_path(d: Path, name: str) -> Path:
    return d / f"{name}{KEY_SUFFIX}"


def stored(d: str | Path, name: str, key: str | None, formats=FORMATS) -> tuple[int, int] | None:
    """The display size of figure ``name`` stored in ``d`` under ``key`` in every one of
    ``formats``; None when there is no such figure (absent, drawn from other inputs, or written
    only in part)."""
    if key is None:
        return None
    d = Path(d)
    try:
        meta = json.loads(_key_path(d, name).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if meta.get("key") != key or not all((d / f"{name}.{ext}").is_file() for ext in formats):
        return None
    return tuple(meta["size"])


def forget(d: str | Path, name: str) -> None:
    """Remove figure ``name`` (its key first, then its files) from ``d``."""
    d = Path(d)
    for path in [_key_path(d, name)] + [d / f"{name}.{ext}" for ext in FORMATS]:
        path.unlink(missing_ok=True)


def prune(d: str | Path, keep) -> None:
    """Remove from ``d`` every figure (PNG, SVG, key) whose name is not in ``keep``."""
    d = Path(d)
    keep = set(keep)
    for ext in FORMATS + (KEY_SUFFIX.lstrip("."),):
        for path in d.glob(f"*.{ext}"):
            if path.name[: -len(ext) - 1] not in keep:
                path.unlink(missing_ok=True)


#: zlib level of the figures' PNG: with unfiltered rows, level 3 gave the demo's 107 figures in
#: 5.9 MB (Pillow's compress_level=1, which chooses a filter for every row: 6.6 MB) at about half
#: Pillow's CPU (0.55 against 1.1 s, shared machine).
PNG_LEVEL = 3


def _png_chunk(kind: bytes, data: bytes) -> bytes:
    return struct.pack(">I", len(data)) + kind + data + struct.pack(">I", zlib.crc32(kind + data))


def png_bytes(rgba: np.ndarray, dpi: float) -> bytes:
    """The PNG (ISO/IEC 15948) of an RGBA raster's colour, without its alpha (a figure's canvas is
    opaque): 8-bit RGB, every row unfiltered (filter type 0), one zlib stream at ``PNG_LEVEL``, and
    the resolution in a pHYs chunk (pixels per metre, rounded as Pillow writes it)."""
    h, w = rgba.shape[:2]
    rows = np.empty((h, 1 + 3 * w), np.uint8)
    rows[:, 0] = 0
    rows[:, 1:].reshape(h, w, 3)[:] = rgba[:, :, :3]
    per_metre = int(dpi / 0.0254 + 0.5)
    return b"".join([b"\x89PNG\r\n\x1a\n", _png_chunk(b"IHDR", struct.pack(">IIBBBBB", w, h, 8, 2, 0, 0, 0)),
                     _png_chunk(b"pHYs", struct.pack(">IIB", per_metre, per_metre, 1)),
                     _png_chunk(b"IDAT", zlib.compress(rows.tobytes(), PNG_LEVEL)), _png_chunk(b"IEND", b"")])


def write_figure(fig, d: str | Path, name: str, formats=FORMATS) -> tuple[int, int]:
    """Lay the figure out and draw it once at ``PNG_DPI``; write ``name``.png (the exported file
    and the page's embedded copy are one raster) and, when ``formats`` has it, ``name``.svg from
    the same frozen layout. Returns the display size in CSS pixels (96 per inch)."""
    d = Path(d)
    d.mkdir(parents=True, exist_ok=True)
    width_in, height_in = fig.get_size_inches()
    fig.set_dpi(PNG_DPI)
    fig.canvas.draw()
    fig.set_layout_engine(None)  # keep the positions; with no engine, the SVG does not lay out again
    with atomic_path(d / f"{name}.png") as tmp:
        tmp.write_bytes(png_bytes(np.asarray(fig.canvas.buffer_rgba()), PNG_DPI))
    if "svg" in formats:
        with atomic_path(d / f"{name}.svg") as tmp:
            fig.savefig(tmp, format="svg", metadata={"Date": None, "Creator": None})
    return round(width_in * 96), round(height_in * 96)


def _draw_job(job: FigureJob, d: str, key: str | None, formats=FORMATS):
    """Draw one job and write each of ``formats`` into ``d``, then its key; returns (name, size).
    A figure that cannot be drawn gives (name, None) and its traceback in the log (stderr):
    the page leaves it out, and the rest of the report is still made."""
    forget(d, job.name)  # the old key goes first: a figure written in part is never reused
    with plt.rc_context(RC):
        try:
            fig = BUILDERS[job.builder](**job.kwargs)
            size = write_figure(fig, d, job.name, formats)
        except Exception:  # noqa: BLE001 - one figure never stops the report
            sys.stderr.write(f"lagsieve: figure {job.name} could not be drawn; left out of the report\n")
            traceback.print_exc(file=sys.stderr)
            forget(d, job.name)  # the half-built figure (made by subplots, not pyplot) is not set aside
            return job.name, None
        _set_aside(fig)
    if key is not None:
        write_text(json.dumps({"key": key, "size": list(size)}), _key_path(Path(d), job.name))
    return job.name, size


def _draw_star(args):
    return _draw_job(*args)


def _fork_pool(workers: int, nice: int = 0):
    """A pool of ``workers`` forked processes (``nice``: their scheduling priority lowered by that
    much), or None where the platform cannot fork."""
    if workers < 2 or not hasattr(os, "fork"):
        return None
    try:
        return ProcessPoolExecutor(max_workers=workers, mp_context=mp.get_context("fork"),
                                   initializer=_lower_priority if nice else None, initargs=(nice,) if nice else ())
    except (OSError, RuntimeError, ValueError):  # no process creation here: draw serially
        return None


def _lower_priority(nice: int) -> None:
    """A drawing worker's start: its priority lowered (``os.nice``), where the platform can."""
    with contextlib.suppress(OSError, AttributeError):
        os.nice(nice)


class FigureRenderer:
    """Draws figure jobs into ``figures_dir``, in ``workers`` forked processes when there is more
    than one figure to draw. Each worker draws a figure and writes all its ``formats`` (PNG, and
    SVG when asked) itself: no figure crosses a process boundary.

    ``cache_dir`` (default ``figures_dir``) keeps every figure with its content key
    (:func:`content_key`, in ``name.key``): a job whose key is stored there is not drawn again.
    When it is another folder, the figures are drawn there and copied into ``figures_dir`` (a
    folder that a workflow clears before each run can so still reuse them). On closing, the
    figures of ``cache_dir`` that no job asked for are removed. Use as a context manager.
    """

    def __init__(self, figures_dir: str | Path, workers: int = 1, cache_dir: str | Path | None = None,
                 formats=FORMATS):
        self.formats = tuple(formats)
        self.figures_dir = Path(figures_dir)
        self.cache_dir = Path(cache_dir) if cache_dir is not None else self.figures_dir
        self.workers = max(1, int(workers))
        self.drawn: list[str] = []   # names drawn by the last draw(); the others were reused
        self._asked: set[str] | None = None  # every name asked for; None before the first draw
        self._pool = None
        self.nice = 0  # workers started from now on run at this lower priority (see release_workers)

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False

    def _run(self, todo: list[tuple]) -> list[tuple]:
        if len(todo) > 1 and self._pool is None:
            self._pool = _fork_pool(self.workers, self.nice)
        if self._pool is not None and len(todo) > 1:
            try:
                return list(self._pool.map(_draw_star, todo, chunksize=1))
            except BrokenProcessPool:
                self._pool = None
        return [_draw_job(*a) for a in todo]

    def draw(self, jobs: list[FigureJob]) -> dict:
        """Write every job's formats (drawn, or reused when its key is stored); returns
        name -> (base64 PNG, (width, height) in CSS px)."""
        self.cache_dir.mkdir(parents=True, exist_ok=True)
        self.figures_dir.mkdir(parents=True, exist_ok=True)
        self._asked = (self._asked or set()) | {j.name for j in jobs}
        keys = {j.name: content_key(j) for j in jobs}
        sizes = {j.name: stored(self.cache_dir, j.name, keys[j.name], self.formats) for j in jobs}
        todo = [(j, str(self.cache_dir), keys[j.name], self.formats) for j in jobs if sizes[j.name] is None]
        self.drawn = [t[0].name for t in todo]
        sizes.update(self._run(todo))
        out = {}
        for j in jobs:
            if sizes[j.name] is None:  # not drawn (see _draw_job)
                continue
            png = (self.cache_dir / f"{j.name}.png").read_bytes()
            if self.cache_dir != self.figures_dir:
                for ext in self.formats:
                    with atomic_path(self.figures_dir / f"{j.name}.{ext}") as tmp:
                        shutil.copyfile(self.cache_dir / f"{j.name}.{ext}", tmp)
            out[j.name] = (base64.b64encode(png).decode("ascii"), tuple(sizes[j.name]))
        return out

    def release_workers(self, nice: int = 0) -> None:
        """End the drawing processes (the next :meth:`draw` starts new ones, at a priority lowered
        by ``nice``): this process then runs no thread of the pool's and may fork safely (the
        report's PDF process, which the workers started after it then leave the CPU to first)."""
        if self._pool is not None:
            self._pool.shutdown(wait=True)
            self._pool = None
        self.nice = nice

    def close(self) -> None:
        self.release_workers()
        _release_spares()  # the figures set aside in this process (a batch job draws many studies)
        if self._asked is not None:
            prune(self.cache_dir, self._asked)


def render_jobs(jobs: list[FigureJob], figures_dir: str | Path, workers: int = 1,
                cache_dir: str | Path | None = None, formats=FORMATS) -> dict:
    """Draw every job (its ``formats`` under ``figures_dir``; see :class:`FigureRenderer`);
    returns name -> (base64 PNG, (width, height) in CSS px)."""
    with FigureRenderer(figures_dir, workers, cache_dir, formats) as r:
        return r.draw(jobs)
