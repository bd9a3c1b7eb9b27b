"""The report's text drawing (``figures._TextRenderer``) against matplotlib's own Agg renderer (the
reference): the same RGBA bytes for figures with tick labels, legends, wrapped and rotated labels,
bold and italic text, text without antialiasing, and drawn again from the caches; the same text boxes
(the font height metrics of ``Text._get_layout``); caches emptied when the font settings change.
The figures' PNG (``figures.png_bytes``) against Pillow's decoder and Pillow's own PNG writer."""
from __future__ import annotations

import matplotlib
import numpy as np
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from PIL import Image

from lagsieve.report import figures as fg

GLYPHS = pytest.mark.skipif(not fg.GLYPH_BY_GLYPH, reason="matplotlib before 3.11 draws a string at once")
LONG = "Spring (March to May) bottom temperature of the inner shelf, five-year mean \u2026 r\u00b2 \u2212 0.5"


def _text_figure():
    """A figure of plain and tricky text at sub-pixel places: rotated, wrapped, bold, italic."""
    fig, ax = fg.subplots(figsize=(4.1, 2.7), layout=fg.FitLayout())
    ax.plot([0.13, 0.87], [2.0, 3.1], label=fg.mpl_text(LONG, 30))
    for k, angle in enumerate((0, 35, 90, 211.7)):
        ax.text(0.1 + 0.2 * k + 0.0137 * k, 2.2 + 0.071 * k, f"lag {k}\nangle {angle}", rotation=angle,
                fontweight="bold" if k % 2 else "normal", style="italic" if k == 3 else "normal", fontsize=7.3 + k)
    ax.set_xlabel(fg.mpl_text(LONG, 40))
    ax.set_title("$5 a fish (no mathematical text)", loc="left")
    fg._top_legend(fig, ax)
    fg._mark_invented(fig, True)
    return fig


def _bytes(fig) -> bytes:
    fig.canvas.draw()
    return bytes(fig.canvas.buffer_rgba())


def _builders():
    years = np.arange(1990, 2015)
    grades = np.array([["strong", "weak", None], ["insufficient-data", "none", "spurious-trend"]], dtype=object)
    return [_text_figure,
            lambda: fg.overlay(years, np.sin(years), np.cos(years), 1, LONG, LONG, invented=True),
            lambda: fg.evidence_grid(grades, np.array([[1, 0, np.nan], [np.nan, 2, 1]], dtype=object),
                                     ["response one", LONG], ["a", "b", LONG], invented=True)]


@GLYPHS
@pytest.mark.parametrize("antialiased", [True, False])
def test_text_drawn_from_the_caches_is_matplotlibs_pixels(rc, monkeypatch, antialiased):
    """Reference: matplotlib's RendererAgg (GLYPH_BY_GLYPH off), each figure made anew both ways;
    ours drawn twice (the second time every layout and glyph comes from the caches)."""
    matplotlib.rcParams["text.antialiased"] = antialiased
    monkeypatch.setattr(fg, "_SPARE", {})
    monkeypatch.setattr(fg, "_TEXT", fg._TextCache())
    for build in _builders():
        ours = build()
        assert type(ours.canvas.get_renderer()) is fg._TextRenderer
        first = _bytes(ours)
        ours.set_layout_engine(None)  # as write_figure does: drawn again, the fixed layout would move
        assert fg._TEXT.glyphs and fg._TEXT.layouts and fg._TEXT.metrics
        again = _bytes(ours)
        with monkeypatch.context() as m:
            m.setattr(fg, "GLYPH_BY_GLYPH", False)
            m.setattr(fg, "_SPARE", {})
            theirs = build()
            assert type(theirs.canvas.get_renderer()) is matplotlib.backends.backend_agg.RendererAgg
            reference = _bytes(theirs)
        assert first == reference and again == reference


@GLYPHS
def test_text_boxes_are_matplotlibs(rc, monkeypatch):
    """The height metrics (ascent, descent, line gap of the font's OS/2 table) give every text the box
    matplotlib's Text._get_layout gives it on its own renderer, one line or several, at 150 and 72 dpi."""
    monkeypatch.setattr(fg, "_SPARE", {})
    for dpi in (150, 72):
        matplotlib.rcParams["figure.dpi"] = dpi
        fig, ax = fg.subplots(figsize=(3, 2))
        texts = [ax.text(0.1, 0.5, s, fontsize=size) for s, size in (("one", 8), ("two\nlines", 8.5), ("gap", 11))]
        ours = [t.get_window_extent(fig.canvas.get_renderer()).extents for t in texts]
        FigureCanvasAgg(fig)
        theirs = [t.get_window_extent(fig.canvas.get_renderer()).extents for t in texts]
        assert np.array_equal(ours, theirs)


@GLYPHS
def test_the_caches_are_emptied_when_the_font_settings_change(rc, monkeypatch):
    """A string laid out in one font is not drawn from the cache in another: the sans-serif family
    changed to a serif font gives matplotlib's pixels of the serif font, not the cached glyphs."""
    monkeypatch.setattr(fg, "_SPARE", {})
    monkeypatch.setattr(fg, "_TEXT", fg._TextCache())
    sans = _bytes(_text_figure())
    kept = dict(fg._TEXT.glyphs)
    matplotlib.rcParams["font.sans-serif"] = ["DejaVu Serif"]
    serif = _bytes(_text_figure())
    assert serif != sans and not set(kept) & set(fg._TEXT.glyphs)
    monkeypatch.setattr(fg, "GLYPH_BY_GLYPH", False)
    monkeypatch.setattr(fg, "_SPARE", {})
    assert _bytes(_text_figure()) == serif


@pytest.mark.parametrize("shape", [(465, 750), (1, 1), (3, 7)])
def test_png_is_the_rasters_colour_as_pillow_reads_and_writes_it(tmp_path, shape):
    """Reference: Pillow. Its decoder (which checks every chunk's CRC) reads the colour of the RGBA
    raster, alpha dropped as Image.convert("RGB") drops it, and the resolution Pillow's own writer
    stores for 150 dpi."""
    rgba = np.random.default_rng(20261203).integers(0, 256, (*shape, 4), dtype=np.uint8)
    (tmp_path / "ours.png").write_bytes(fg.png_bytes(rgba, 150))
    Image.open(tmp_path / "ours.png").verify()
    ours = Image.open(tmp_path / "ours.png")
    theirs = Image.fromarray(rgba, "RGBA").convert("RGB")
    theirs.save(tmp_path / "theirs.png", dpi=(150, 150))
    assert ours.mode == "RGB" and ours.size == theirs.size
    assert np.array_equal(np.asarray(ours), np.asarray(theirs))
    assert ours.info["dpi"] == Image.open(tmp_path / "theirs.png").info["dpi"]


def _child_draws():
    return len(fg._TEXT.layouts), _bytes(_text_figure())


@GLYPHS
def test_a_forked_process_starts_without_the_parents_text_caches(rc):
    """matplotlib's font objects cannot be used across a fork (they share FreeType's library; a
    forked drawing worker of a process that had drawn text failed with FreeType's 'invalid
    outline' in a full test run): the layouts are emptied in the child, as matplotlib empties its
    own font cache, and the child draws the parent's pixels."""
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor

    here = _bytes(_text_figure())
    assert len(fg._TEXT.layouts) > 0  # the parent has worked out its strings
    with ProcessPoolExecutor(1, mp_context=mp.get_context("fork")) as pool:
        inherited, there = pool.submit(_child_draws).result()
    assert inherited == 0 and there == here
