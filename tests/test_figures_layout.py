"""The figures' cheaper drawing paths against what matplotlib itself computes (the reference):

* ``figures._tight_box`` (the fixed layout's one measuring pass) gives the box of
  ``Axes.get_tightbbox(renderer, for_layout_only=True)`` to the pixel, on panels with long labels,
  titles, an axes legend, two axes side by side and shared y axes;
* ``figures._fix_ticks`` keeps the labels matplotlib's formatter writes, leaves out only ticks
  outside the view, and leaves an axis whose formatter needs an offset text to matplotlib;
* ``figures._histogram`` draws the bars of ``Axes.hist`` (numpy.histogram's counts and edges) with
  the same y range;
* the correlation heatmap colours each cell by the colour map at its r and hides the upper triangle.
"""
from __future__ import annotations

import matplotlib.pyplot as plt
import numpy as np

from lagsieve.report import figures as fg

LONG = "Spring (March to May) bottom temperature of the inner shelf, five-year mean"  # as test_report_style's


def _panels():
    years = np.arange(1990, 2015)
    rng = np.random.default_rng(20261203)
    nulls = [{"values": rng.normal(size=300), "observed": 2.5, "label": "best-lag r (directed)", "p": 0.01,
              "title": "In sample"},
             {"values": np.r_[rng.normal(size=299), -40.0], "observed": 0.3, "label": "skill vs hardest baseline",
              "p": 0.2, "title": "Out of sample"}]
    shares = {"age2": rng.uniform(0, 0.3, (3, 25)), "age5+": rng.uniform(0, 0.3, (3, 25))}
    return [fg.overlay(years, np.sin(years), np.cos(years), 1, LONG, LONG, invented=True),
            fg.null_distributions(nulls, invented=True),
            fg.variance_fractions([0.05, 0.12, -0.02, 1.03], [LONG, LONG], LONG, invented=True),
            fg.gam_effect(np.linspace(0, 1, 50), np.sin(np.linspace(0, 3, 50)), np.sin(np.linspace(0, 3, 50)) - 0.2,
                          np.sin(np.linspace(0, 3, 50)) + 0.2, rng.uniform(0, 1, 25), LONG, LONG,
                          "edf 2.1, p = 0.01, share of the year term 12%"),
            fg.condition_sensitivity(["age2", "age5+"], [0.8, 0.85, 0.9], years, shares, 0.85, invented=True)]


def test_one_measuring_pass_gives_matplotlibs_layout_box(rc):
    """Reference: matplotlib's own Axes.get_tightbbox(for_layout_only=True), box by box."""
    n = 0
    for fig in _panels():
        assert isinstance(fig.get_layout_engine(), fg.FitLayout)
        renderer = fig.canvas.get_renderer()
        for ax in fig.axes:
            fixed = all([fg._fix_ticks(ax.xaxis), fg._fix_ticks(ax.yaxis)])
            assert fixed  # plain number axes: labels fixed, measured by the cheaper pass
            ours = fg._tight_box(ax, renderer, fixed)
            theirs = ax.get_tightbbox(renderer, for_layout_only=True)
            assert np.allclose(ours.extents, theirs.extents, atol=0.01), (ours, theirs)
            n += 1
    assert n == 7


def test_fixed_ticks_keep_the_formatters_labels_inside_the_view(rc):
    fig, ax = plt.subplots()
    ax.plot([0.13, 0.87], [2.0, 3.1])
    fig.canvas.draw()
    locs = ax.xaxis.get_majorticklocs()
    labels = ax.xaxis.get_major_formatter().format_ticks(locs)
    lo, hi = ax.get_xlim()
    assert fg._fix_ticks(ax.xaxis)
    inside = (locs >= lo) & (locs <= hi)
    assert inside.sum() < len(locs)  # the locator gave ticks outside the view: those are left out
    assert list(ax.xaxis.get_majorticklocs()) == list(locs[inside])
    assert [t.get_text() for t in ax.xaxis.get_ticklabels()] == [t for t, k in zip(labels, inside) if k]


def test_an_axis_with_an_offset_text_is_left_to_matplotlib(rc):
    fig, ax = plt.subplots(layout=fg.FitLayout())
    ax.plot([1e6 + 1, 1e6 + 2], [0.0, 1.0])  # ScalarFormatter writes 1, 2 and the offset "+1e6"
    fig.canvas.draw()
    assert not fg._fix_ticks(ax.xaxis)
    assert ax.xaxis.get_major_formatter().get_offset() != ""
    fig.canvas.draw()
    assert ax.xaxis.offsetText.get_text() != ""  # the offset is still drawn


def test_histogram_bars_are_those_of_axes_hist(rc):
    """Reference: matplotlib's Axes.hist (numpy.histogram's counts and edges) and its y range."""
    v = np.random.default_rng(7).gamma(2.0, size=999)
    fig, (a, b) = plt.subplots(1, 2)
    counts, edges, _ = a.hist(v, bins=30)
    fg._histogram(b, v, 30, "surrogates")
    (coll,) = b.collections
    bars = np.array([p.vertices[:4] for p in coll.get_paths()])
    assert np.allclose(bars[:, 0, 0], edges[:-1]) and np.allclose(bars[:, 2, 0], edges[1:])
    assert np.allclose(bars[:, 1, 1], counts) and np.allclose(bars[:, 0, 1], 0.0)
    assert np.allclose(b.get_ylim(), a.get_ylim())
    assert coll.get_label() == "surrogates"


def test_heatmap_cells_coloured_by_r_upper_triangle_hidden(rc):
    k = 5
    corr = np.eye(k) + 0.2 * (1 - np.eye(k))
    corr[3, 1] = corr[1, 3] = -0.9
    fig = fg.driver_correlation(corr, [f"d{i}" for i in range(k)])
    mesh = fig.axes[0].collections[0]
    shown = corr[1:, :-1]
    data = mesh.get_array()
    assert data.mask.sum() == (k - 1) * (k - 2) // 2  # the upper triangle (without the diagonal) hidden
    assert np.allclose(data.compressed(), shown[~data.mask.reshape(shown.shape)])
    assert mesh.norm.vmin == -1 and mesh.norm.vmax == 1
    # seaborn's heatmap resamples the colour map (256 colours, centred on 0): the same colours within a step
    at = np.linspace(0, 1, 11)
    assert np.allclose(mesh.get_cmap()(at), fg.CORR_CMAP(at), atol=0.02)
    assert [t.get_text() for t in fig.axes[0].texts].count("-0.90*") == 1


def _overlay_job(name: str, shift: float) -> fg.FigureJob:
    years = np.arange(1990, 2015)
    return fg.FigureJob(name, "overlay", dict(years=years, y=np.sin(years + shift), x=np.cos(years), lag=1,
                                              response=LONG, driver=f"driver {shift}", invented=True))


def test_a_figure_set_aside_draws_what_a_new_figure_draws(rc, tmp_path, monkeypatch):
    """A figure written by _draw_job is cleared and reused by the next builder of its size; the
    reference is the same job drawn on a new figure: the PNG files are byte for byte equal."""
    monkeypatch.setattr(fg, "_SPARE", {})
    first, second = _overlay_job("a", 0.0), _overlay_job("b", 1.0)
    fg._draw_job(first, str(tmp_path / "reused"), None, ("png",))
    (spare,) = fg._SPARE.values()
    fg._draw_job(second, str(tmp_path / "reused"), None, ("png",))
    assert list(fg._SPARE.values()) == [spare]  # the second job was drawn on the first one's figure
    fg._SPARE.clear()
    fg._draw_job(second, str(tmp_path / "new"), None, ("png",))
    assert (tmp_path / "reused" / "b.png").read_bytes() == (tmp_path / "new" / "b.png").read_bytes()


def test_renderer_lets_go_of_the_figures_set_aside_when_it_closes(rc, tmp_path, monkeypatch):
    """A batch job draws the reports of many studies in one process, with figures of many sizes: the
    figures set aside for reuse go with the renderer that drew them, so memory does not grow per study."""
    monkeypatch.setattr(fg, "_SPARE", {})
    with fg.FigureRenderer(tmp_path / "figs", workers=1) as renderer:
        renderer.draw([_overlay_job("a", 0.0)])
        assert len(fg._SPARE) == 1
    assert fg._SPARE == {}


def test_a_batch_keeps_the_figures_set_aside_from_one_renderer_to_the_next(rc, tmp_path, monkeypatch):
    """Inside spares_kept (a batch job's studies), a renderer that closes leaves its figures set aside
    for the next study's renderer, which draws on them the same PNG bytes as on a new figure; at most
    SPARE_LIMIT are kept, the most recent, and none once the block ends."""
    monkeypatch.setattr(fg, "_SPARE", {})
    with fg.spares_kept():
        with fg.FigureRenderer(tmp_path / "one", workers=1) as renderer:
            renderer.draw([_overlay_job("a", 0.0)])
        (spare,) = fg._SPARE.values()
        with fg.FigureRenderer(tmp_path / "two", workers=1) as renderer:
            renderer.draw([_overlay_job("b", 1.0)])
        assert list(fg._SPARE.values()) == [spare]  # the second study's figure was drawn on the first's
        for i in range(fg.SPARE_LIMIT + 3):
            fg._SPARE[(float(i), 1.0, 100.0)] = i
        fg._release_spares()
        assert list(fg._SPARE.values()) == list(range(3, fg.SPARE_LIMIT + 3))
    assert fg._SPARE == {}
    fg._draw_job(_overlay_job("b", 1.0), str(tmp_path / "new"), None, ("png",))
    assert (tmp_path / "two" / "b.png").read_bytes() == (tmp_path / "new" / "b.png").read_bytes()


def test_a_figure_held_by_its_caller_is_never_reused(rc, monkeypatch):
    monkeypatch.setattr(fg, "_SPARE", {})
    one, two = (fg.BUILDERS["overlay"](**_overlay_job(n, s).kwargs) for n, s in (("a", 0.0), ("b", 1.0)))
    assert one is not two and len(one.axes) == 1 and one.axes[0].get_lines()
    assert fg._SPARE == {}


def test_default_y_ticks_at_most_y_bins_intervals_chosen_ticks_kept(rc):
    """Our own rule (no published source): a fixed-layout panel's y axis on matplotlib's default
    locator gets at most Y_BINS intervals at 1, 2, 2.5 or 5 times a power of ten; ticks a builder
    chose stay as they are."""
    years = np.arange(1990, 2015)
    fig = fg.overlay(years, np.sin(years), np.cos(years), 1, "M", "T")
    fig.canvas.draw()
    ticks = fig.axes[0].get_yticks()
    assert 3 <= len(ticks) <= fg.Y_BINS + 1
    step = np.diff(ticks)[0] / 10.0 ** np.floor(np.log10(np.diff(ticks)[0]))
    assert np.allclose(np.diff(ticks), np.diff(ticks)[0]) and any(np.isclose(step, s) for s in (1, 2, 2.5, 5))
    fig = fg.lag_profile(np.arange(6), np.linspace(-0.3, 0.4, 6), np.full(6, 0.35), 2)
    fig.canvas.draw()
    assert [t.get_text() for t in fig.axes[0].get_xticklabels()] == ["0", "1", "2*", "3", "4", "5"]
