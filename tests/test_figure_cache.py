"""Figures reused when their inputs did not change (report.figures: content_key, FigureRenderer).

A figure is stored with its content key (a sha256 of its builder, its arguments, the drawing
settings and the versions); a rerun with the same jobs draws nothing, a changed job draws only
itself. Caching by a content hash is common practice (no published source); the checks below
are of our own rules: what must and must not change the key, and what is drawn again.
"""
from __future__ import annotations

import base64
import hashlib
import json
import shutil

import numpy as np
import pandas as pd
import pytest
import yaml
from PIL import Image

from lagsieve.io.names import slug
from lagsieve.report import figures as fg

from helpers import make_report, run_study, tiny_config, write_config


def _overlay(name: str, shift: float = 0.0, response: str = "M age 2") -> fg.FigureJob:
    years = np.arange(1990, 2010)
    return fg.FigureJob(name, "overlay", {"years": years, "y": np.sin(years / 3.0) + shift * (years - 1990),
                                          "x": np.cos(years / 4.0), "lag": 1, "response": response,
                                          "driver": "forage biomass", "invented": True})


def _jobs(**shifts) -> list[fg.FigureJob]:
    return [_overlay(n, shifts.get(n, 0.0)) for n in ("a", "b", "c")]


def _draw(figures, jobs, cache=None, workers=1):
    with fg.FigureRenderer(figures, workers, cache_dir=cache) as r:
        figs = r.draw(jobs)
    return r.drawn, figs


# ----------------------------------------------------------------------------- the key
def test_key_follows_content_not_object_identity():
    a, b = _overlay("a"), _overlay("a")
    assert fg.content_key(a) == fg.content_key(b)  # equal arguments built twice: one key
    strided = np.arange(1990, 2030)[::2]
    c = _overlay("a")
    c.kwargs["years"] = strided
    d = _overlay("a")
    d.kwargs["years"] = strided.copy()  # a view and a contiguous copy of the same numbers
    assert fg.content_key(c) == fg.content_key(d)


@pytest.mark.parametrize("change", [
    lambda k: k.update(lag=2),                                   # a number
    lambda k: k.update(response="M age 3"),                      # a label
    lambda k: k["y"].__setitem__(3, k["y"][3] + 1e-12),          # one value, by the last bit
    lambda k: k.update(years=k["years"].astype(float)),          # same numbers, other dtype
    lambda k: k.update(invented=False),                          # a flag
])
def test_key_changes_with_any_argument(change):
    job = _overlay("a")
    before = fg.content_key(job)
    change(job.kwargs)
    assert fg.content_key(job) != before


def test_key_includes_the_builder_and_the_settings(monkeypatch):
    job = _overlay("a")
    before = fg.content_key(job)
    assert fg.content_key(fg.FigureJob("a", "scatter", job.kwargs)) != before
    fg._settings_digest.cache_clear()
    monkeypatch.setattr(fg, "PNG_DPI", fg.PNG_DPI + 1)
    try:
        assert fg.content_key(job) != before
    finally:
        fg._settings_digest.cache_clear()


def test_an_argument_the_key_cannot_read_is_always_drawn(tmp_path):
    job = _overlay("a")
    job.kwargs["extra"] = {1, 2}  # a set has no stable order: no key
    assert fg.content_key(job) is None


def test_key_is_the_sha256_of_the_canonical_form():
    """The canonical form of a small value, written out by hand (common practice: type tag,
    length, content); hashlib's sha256 is the reference."""
    h = hashlib.sha256()
    fg._feed(h, {"n": 3, "v": [1.5, None, True], "a": np.array([1, 2], dtype="<i8")})
    expected = hashlib.sha256(b"d3:" + b"s1:n" + b"i3;" + b"s1:v" + b"l3:" + b"f" + (1.5).hex().encode() + b";"
                              + b"N" + b"b1" + b"s1:a" + b"a<i8(2,)" + np.array([1, 2], "<i8").tobytes())
    assert h.hexdigest() == expected.hexdigest()


# ----------------------------------------------------------------------------- reuse
def test_rerun_with_the_same_jobs_draws_nothing(tmp_path):
    drawn, first = _draw(tmp_path, _jobs())
    assert drawn == ["a", "b", "c"]
    stamps = {p.name: p.stat().st_mtime_ns for p in tmp_path.iterdir()}
    drawn, again = _draw(tmp_path, _jobs())
    assert drawn == [] and again == first
    assert {p.name: p.stat().st_mtime_ns for p in tmp_path.iterdir()} == stamps  # not one file rewritten
    meta = json.loads((tmp_path / "a.key").read_text())
    assert meta["key"] == fg.content_key(_overlay("a")) and meta["size"] == [round(5.0 * 96), round(3.1 * 96)]


def test_a_changed_input_redraws_only_its_figure(tmp_path):
    _draw(tmp_path, _jobs())
    old_b = (tmp_path / "b.png").read_bytes()
    drawn, figs = _draw(tmp_path, _jobs(b=0.5))
    assert drawn == ["b"]
    assert (tmp_path / "b.png").read_bytes() != old_b and set(figs) == {"a", "b", "c"}


def test_a_figure_written_in_part_is_drawn_again(tmp_path):
    _draw(tmp_path, _jobs())
    (tmp_path / "c.svg").unlink()       # a file lost
    (tmp_path / "a.key").write_text("{")  # a key written in part
    drawn, _ = _draw(tmp_path, _jobs())
    assert drawn == ["a", "c"] and (tmp_path / "c.svg").is_file()


def test_a_cleared_output_folder_is_filled_from_the_cache(tmp_path):
    """As under Snakemake, which removes a directory output before the job: the figures are kept
    in a cache folder and copied into the output folder."""
    out, cache = tmp_path / "figures", tmp_path / "work" / "figures"
    _, first = _draw(out, _jobs(), cache=cache, workers=2)
    for p in out.iterdir():
        p.unlink()
    out.rmdir()
    drawn, again = _draw(out, _jobs(), cache=cache, workers=2)
    assert drawn == [] and again == first
    assert sorted(p.name for p in out.iterdir()) == sorted(f"{n}.{e}" for n in "abc" for e in ("png", "svg"))
    assert not list(out.glob("*.key"))  # the keys stay in the cache


def test_workers_write_every_format_and_the_embedded_copy_is_the_file(tmp_path):
    drawn, figs = _draw(tmp_path, _jobs(), workers=2)
    assert sorted(drawn) == ["a", "b", "c"]
    for name, (b64, size) in figs.items():
        assert base64.b64decode(b64) == (tmp_path / f"{name}.png").read_bytes()
        with Image.open(tmp_path / f"{name}.png") as im:
            assert round(im.info["dpi"][0]) == fg.PNG_DPI
            assert im.size == (round(5.0 * fg.PNG_DPI), round(3.1 * fg.PNG_DPI))  # fg.PANEL_SIZE
        assert size == (480, round(3.1 * 96))
        assert "</svg>" in (tmp_path / f"{name}.svg").read_text(encoding="utf-8")


def test_svg_only_when_asked(tmp_path):
    """Our own rule: a report that asks for no SVG (``report.svg`` false, the default) gets the PNG
    alone; asking later draws the figures again, since their stored copies lack the SVG."""
    assert fg.study_formats({}) == fg.study_formats({"svg": False}) == ("png",)
    assert fg.study_formats({"svg": True}) == ("png", "svg")
    with fg.FigureRenderer(tmp_path, 2, formats=fg.RASTER) as r:
        r.draw(_jobs())
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(f"{n}.{e}" for n in "abc" for e in ("png", "key"))
    assert r.drawn == ["a", "b", "c"]
    with fg.FigureRenderer(tmp_path, 1, formats=fg.RASTER) as r:
        r.draw(_jobs())
    assert r.drawn == []
    with fg.FigureRenderer(tmp_path, 1, formats=fg.FORMATS) as r:
        r.draw(_jobs())
    assert r.drawn == ["a", "b", "c"] and all((tmp_path / f"{n}.svg").is_file() for n in "abc")


def test_prune_removes_figures_no_longer_planned(tmp_path):
    _draw(tmp_path, _jobs())
    (tmp_path / "table.csv").write_text("x\n1\n")
    fg.prune(tmp_path, ["a"])
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.key", "a.png", "a.svg", "table.csv"]


def test_the_cache_keeps_only_the_figures_still_planned(tmp_path):
    out, cache = tmp_path / "figures", tmp_path / "cache"
    _draw(out, _jobs(), cache=cache)
    drawn, _ = _draw(out, _jobs()[:2], cache=cache)  # figure c is no longer planned
    assert drawn == [] and sorted(p.name for p in cache.iterdir()) == sorted(
        f"{n}.{e}" for n in "ab" for e in ("png", "svg", "key"))


# ----------------------------------------------------------------------------- the report stage
def _stamps(folder):
    return {p.name: (p.stat().st_ino, p.stat().st_mtime_ns) for p in folder.glob("*.png")}


def test_a_report_rerun_redraws_only_the_figures_whose_inputs_changed(tmp_path):
    cfg = tiny_config(tmp_path / "cfg", report={"top": 1, "pdf": False, "docx": False})
    res = run_study(cfg, tmp_path / "results")
    ev = pd.read_csv(res / "evidence.csv")
    ev.loc[ev["lag"].notna(), "grade"] = "weak"  # every leading hypothesis with its panels (plan.PANEL_GRADES)
    ev.to_csv(res / "evidence.csv", index=False)
    make_report(cfg, res)
    cache = res / "work" / "figures"
    first = _stamps(cache)
    assert first and sorted(first) == sorted(p.name for p in (res / "figures").glob("*.png"))
    shutil.rmtree(res / "figures")  # as Snakemake clears a directory output before the job
    make_report(cfg, res)
    assert _stamps(cache) == first  # same inputs: nothing drawn again
    assert sorted(p.name for p in (res / "figures").glob("*.png")) == sorted(first)
    raw = yaml.safe_load(cfg.read_text(encoding="utf-8"))
    raw["responses"][1]["label"] = "M age 5 and older"  # shown in that response's figures only
    write_config(cfg, raw)
    make_report(cfg, res)
    after = _stamps(cache)
    changed = {n for n in first if after[n] != first[n]}
    own = {n for n in first if n.startswith(slug("m:age5plus") + "__")}
    labelled = {n for n in own if n.endswith(("__overlay.png", "__scatter.png", "__forecasts.png"))}
    assert labelled and labelled <= changed  # the panels that show the response's label
    assert changed <= own | {"coverage.png", "evidence_map.png"}  # and the study-wide figures that name it
    assert not any(n.endswith(("__lags.png", "__nulls.png")) for n in changed)  # no label in them: kept


def test_workers_started_beside_the_pdf_leave_it_the_cpu_first(tmp_path):
    """Our own rule (stages.report.PDF_FIRST; measured in DEVELOPERS.md): the drawing workers
    started after release_workers(nice=N), the ones that draw beside the PDF's process, run at a
    priority lowered by N; the workers before it at the report's own."""
    import os

    own = os.nice(0)
    renderer = fg.FigureRenderer(tmp_path, workers=2)
    renderer._pool = fg._fork_pool(renderer.workers, renderer.nice)
    assert renderer._pool.submit(os.nice, 0).result() == own
    renderer.release_workers(nice=3)
    assert renderer._pool is None and renderer.nice == 3
    renderer._pool = fg._fork_pool(renderer.workers, renderer.nice)
    assert renderer._pool.submit(os.nice, 0).result() == min(own + 3, 19)
    renderer.close()
