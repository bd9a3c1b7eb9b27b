"""The report in a real browser: Playwright drives Debian's headless Chromium on the HTML file.

* a screenshot is not blank;
* no console errors or uncaught exceptions (a Content-Security-Policy violation is one), no
  failed loads and no request other than ``file:`` or ``data:``, every image decoded;
* clicking a column heading sorts the evidence table (ascending, then descending), a text
  column sorts too, and the grade filter hides the other rows;
* the ranked table fits a 1400 px window (no sideways scroll, no heading cut) and at 800 px
  scrolls sideways with the driver and grade columns held in view; searches by driver, grade and
  flag keep exactly the matching rows; sorting by rank keeps each response together;
* without JavaScript the controls that need it are hidden and the table is still there;
* every figure's smallest text is at least 8 pt as displayed at 1400 px: its size in the SVG
  (points at the figure's size) times the width the page shows it at over its width in CSS px
  (96 px per inch). The 8 pt floor and these layout checks are our own rules (no published source).

Playwright (PyPI ``playwright``) launches the system's ``chromium`` (``executable_path``); its
own browser download is never used (``playwright install`` is not needed). Skipped, with the
reason, only when Chromium or Playwright is not installed (CI installs both).
"""
from __future__ import annotations

import json
import re
import shutil
from contextlib import contextmanager
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from lagsieve.io.config import load_study
from lagsieve.report.figures import PNG_DPI

from helpers import make_report, run_study, tiny_config

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
sync_api = pytest.importorskip("playwright.sync_api",
                               reason="the browser test needs Playwright: python -m pip install playwright")
pytestmark = [pytest.mark.slow,
              pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed (apt-get install chromium)")]

ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
        "--disable-sync", "--no-first-run", "--disable-extensions", "--disable-default-apps", "--mute-audio"]


@pytest.fixture(scope="module")
def report_file(tmp_path_factory):
    base = tmp_path_factory.mktemp("browser")
    cfg = tiny_config(base, report={"top": 1, "pdf": False, "svg": True},  # the SVGs give the text sizes below
                      screen={"lags": [0, 1], "models": ["linear"], "surrogates": 29, "seed": 3,
                              "validation": {"initial_years": 15, "holdout_years": 5}})
    res = run_study(cfg, base / "results")
    make_report(cfg, res)
    return res / "report.html", pd.read_csv(res / "evidence.csv")


@pytest.fixture(scope="module")
def browser():
    with sync_api.sync_playwright() as pw:
        b = pw.chromium.launch(executable_path=CHROMIUM, headless=True, args=ARGS)
        yield b
        b.close()


class Watched:
    """A page with every problem the checks look for collected into ``problems``."""

    def __init__(self, browser, width: int = 1280, height: int = 1600):
        self.page = browser.new_page(viewport={"width": width, "height": height})
        self.problems: list[str] = []
        p = self.page
        p.on("console", lambda m: m.type in ("error", "assert") and self.problems.append(f"console.{m.type}: {m.text}"))
        p.on("pageerror", lambda e: self.problems.append(f"exception: {e}"))
        p.on("requestfailed", lambda r: self.problems.append(f"failed load: {r.url} {r.failure}"))
        p.on("request", lambda r: r.url.startswith(("file:", "data:"))
             or self.problems.append(f"network request: {r.url}"))
        # the browser's own log (where Chromium reports CSP violations), through DevTools
        self.cdp = p.context.new_cdp_session(p)
        self.cdp.on("Log.entryAdded", lambda ev: ev["entry"].get("level") == "error" and self.problems.append(
            f"log: {ev['entry'].get('text')} {ev['entry'].get('url', '')}"))
        self.cdp.send("Log.enable")

    def open(self, url: str) -> None:
        self.page.goto(url, wait_until="load", timeout=60_000)
        self.page.wait_for_timeout(500)  # let late console and log events arrive

    def js(self, expression: str):
        return self.page.evaluate(expression)

    def close(self) -> None:
        self.page.close()


@contextmanager
def opened(browser, url: str, width: int, height: int):
    """A watched page of the given window size with ``url`` loaded, closed afterwards."""
    w = Watched(browser, width, height)
    try:
        w.open(url)
        yield w
    finally:
        w.close()


@pytest.fixture
def watched(browser):
    w = Watched(browser)
    yield w
    w.close()


def test_screenshot_not_blank(report_file, browser, tmp_path):
    from PIL import Image

    html, _ = report_file
    w = Watched(browser, height=2400)
    try:
        w.open(html.as_uri())
        shot = tmp_path / "shot.png"
        w.page.screenshot(path=str(shot))
    finally:
        w.close()
    with Image.open(shot) as im:
        assert im.format == "PNG"
        arr = np.asarray(im.convert("L"), dtype=float)
    assert arr.shape[1] == 1280
    assert arr.std() > 10  # text, badges and figures, not an empty page
    assert (arr < 128).mean() > 0.01


def test_page_loads_clean_and_table_sorts(report_file, watched):
    html, evidence = report_file
    w = watched
    w.open(html.as_uri())

    images = w.js("Array.from(document.images).map(i => [i.complete, i.naturalWidth, i.naturalHeight])")
    assert len(images) >= 5
    assert all(c and wd > 0 and h > 0 for c, wd, h in images), images

    rows_js = ("Array.from(document.querySelectorAll('#evidence-table tbody tr'))"
               ".map(r => r.cells[{i}].getAttribute('data-v'))")
    col = w.js("Array.from(document.querySelectorAll('#evidence-table thead th'))"
               ".findIndex(th => th.dataset.key === 'r')")
    assert col >= 0
    before = [float(v) for v in w.js(rows_js.format(i=col))]
    assert len(before) == len(evidence)
    assert before == pytest.approx(evidence["r"].tolist(), abs=1e-6)  # page order = evidence.csv order

    r_button = w.page.locator('#evidence-table th[data-key="r"] button')
    r_button.click()  # a real click, as a reader would
    asc = [float(v) for v in w.js(rows_js.format(i=col))]
    assert asc == sorted(before)
    assert w.page.get_attribute('#evidence-table th[data-key="r"]', "aria-sort") == "ascending"
    r_button.click()
    desc = [float(v) for v in w.js(rows_js.format(i=col))]
    assert desc == sorted(before, reverse=True)
    assert asc != before or desc != before  # the order did change

    # sorting by a text column (driver) works too
    dcol = w.js("Array.from(document.querySelectorAll('#evidence-table thead th'))"
                ".findIndex(th => th.dataset.key === 'driver')")
    w.page.locator('#evidence-table th[data-key="driver"] button').click()
    names = w.js(rows_js.format(i=dcol))
    assert sorted(names) == sorted(evidence["driver"].map(labels_of(html)).tolist())
    assert w.js(f"(function (a) {{ return a.every(function (v, i) {{ return i === 0 || a[i - 1].localeCompare(v) <= 0; }}); }})"
                f"({json.dumps(names)})")

    # the grade filter keeps exactly the rows of that grade
    grade = evidence["grade"].value_counts().index[0]
    w.page.select_option("#f-grade", grade)
    shown = w.js("Array.from(document.querySelectorAll('#evidence-table tbody tr'))"
                 ".filter(r => !r.hidden).map(r => r.getAttribute('data-grade'))")
    assert shown == [grade] * int((evidence["grade"] == grade).sum())
    assert w.page.text_content("#f-count").startswith(f"{len(shown)} of {len(evidence)}")

    w.page.wait_for_timeout(300)
    assert w.problems == []


def labels_of(html: Path) -> dict:
    """driver id -> label, from the study config beside the results."""
    study = load_study(html.parents[2] / "config.yaml")
    return {d["id"]: d.get("label") or d["id"] for d in study.drivers}


def test_detector_sees_a_blocked_script(report_file, watched, tmp_path):
    """The checks above are not vacuous: a page whose script no longer matches the hash in its
    Content-Security-Policy is blocked, and the blocking is reported."""
    html, _ = report_file
    broken = tmp_path / "broken.html"
    broken.write_text(html.read_text(encoding="utf-8").replace("'use strict';", "'use strict'; ", 1),
                      encoding="utf-8")
    watched.open(broken.as_uri())
    assert watched.problems
    assert any("Content Security Policy" in p for p in watched.problems), watched.problems


# ----------------------------------------------------------------------------- the ranked table's layout
TABLE_BOX = """() => {
  const s = document.querySelector('#table .scroll'), r = s.getBoundingClientRect();
  const heads = Array.from(document.querySelectorAll('#evidence-table thead th'));
  return {scroll: s.scrollWidth, client: s.clientWidth, left: r.left, right: r.right,
          cut: heads.filter(th => th.scrollWidth > th.clientWidth + 1).map(th => th.dataset.key),
          outside: heads.filter(th => th.getBoundingClientRect().right > r.right + 1).map(th => th.dataset.key),
          page: document.documentElement.scrollWidth, window: document.documentElement.clientWidth};
}"""

SEEN = """(sel) => {
  // every cell of the column lies inside the scroller and is the element shown at its centre
  const s = document.querySelector('#table .scroll').getBoundingClientRect();
  return Array.from(document.querySelectorAll(sel)).slice(0, 4).map(c => {
    const b = c.getBoundingClientRect();
    c.scrollIntoView({block: 'center', inline: 'nearest'});
    const b2 = c.getBoundingClientRect();
    const top = document.elementFromPoint(b2.left + b2.width / 2, b2.top + Math.min(b2.height / 2, 8));
    return b.left >= s.left - 1 && b.right <= s.right + 1 && c.contains(top);
  });
}"""


def test_table_fits_at_1400(report_file, browser):
    html, _ = report_file
    with opened(browser, html.as_uri(), 1400, 1000) as w:
        box = w.js(TABLE_BOX)
    assert box["scroll"] <= box["client"] + 1, box  # no sideways scroll at 1400 px
    assert box["cut"] == [] and box["outside"] == [], box
    assert box["page"] <= box["window"], box         # the page itself does not scroll sideways
    assert box["right"] - box["left"] > 1180          # wider than the text column, to use the window


def test_table_at_800_keeps_driver_and_grade(report_file, browser):
    html, _ = report_file
    with opened(browser, html.as_uri(), 800, 900) as w:
        box = w.js(TABLE_BOX)
        assert box["scroll"] > box["client"], box    # the numbers scroll sideways ...
        assert box["cut"] == [] and box["page"] <= box["window"], box
        for at in ("0", "s.scrollWidth"):             # ... under the driver and grade, at either end
            w.js(f"(() => {{ const s = document.querySelector('#table .scroll'); s.scrollLeft = {at}; }})()")
            for sel in ("#evidence-table td.c-driver", "#evidence-table td.c-grade"):
                assert all(w.js(f"({SEEN})({json.dumps(sel)})")), (at, sel)
        assert w.js("document.querySelector('#table .scroll').scrollLeft") > 0
        assert w.problems == []


# ----------------------------------------------------------------------------- search and sort
SHOWN = ("Array.from(document.querySelectorAll('#evidence-table tbody tr')).filter(r => !r.hidden)"
         ".map(r => [r.dataset.response, r.dataset.grade, r.dataset.flags, r.dataset.driver])")


def test_search_by_column(report_file, watched):
    html, evidence = report_file
    w = watched
    w.open(html.as_uri())
    labels = labels_of(html)
    hay = (evidence["driver"].map(labels) + " " + evidence["driver"] + " "
           + evidence["category"].fillna("")).str.lower()  # what the driver search reads: label, id, category
    word = labels[evidence["driver"].iloc[0]].split()[0].lower()
    w.page.fill("#f-driver", word)
    shown = w.js(SHOWN)
    assert len(shown) == int(hay.str.contains(word, regex=False).sum()) > 0
    assert all(word in r[3] for r in shown)
    w.page.fill("#f-driver", "")

    flags = evidence["flags"].fillna("").str.split(";")
    flag = pd.Series([c for f in flags for c in f if c]).value_counts().index[0]
    w.page.select_option("#f-flag", flag)
    shown = w.js(SHOWN)
    assert len(shown) == int(flags.map(lambda f: flag in f).sum()) > 0
    assert all(flag in r[2].split() for r in shown)
    w.page.select_option("#f-flag", "-")  # rows without a flag
    assert len(w.js(SHOWN)) == int(flags.map(lambda f: not any(f)).sum())
    w.page.select_option("#f-flag", "")

    w.page.fill("#f-driver", "trend")  # a word of many cells (baselines, flags), of no driver here
    assert len(w.js(SHOWN)) == int(hay.str.contains("trend", regex=False).sum())
    w.page.fill("#f-driver", "")
    assert len(w.js(SHOWN)) == len(evidence)
    assert w.problems == []


def test_sort_by_rank_within_response(report_file, watched):
    html, evidence = report_file
    w = watched
    w.open(html.as_uri())
    study = load_study(html.parents[2] / "config.yaml")
    order = {r: i for i, r in enumerate(study.response_ids)}
    rank_of = "Array.from(document.querySelectorAll('#evidence-table tbody tr')).map(r => [r.dataset.response, " \
              "parseFloat(r.querySelector('td.c-rank').dataset.v)])"
    w.page.locator('#evidence-table th[data-key="driver"] button').click()  # mix the rows first
    button = w.page.locator('#evidence-table th[data-key="rank"] button')
    button.click()
    rows = w.js(rank_of)
    assert rows == sorted(rows, key=lambda r: (order[r[0]], r[1]))  # each response together, rank 1 first
    button.click()
    rows = w.js(rank_of)
    assert rows == sorted(rows, key=lambda r: (order[r[0]], -r[1]))  # reversed within, responses in order
    assert len(rows) == len(evidence) and len({r[0] for r in rows}) > 1
    assert w.problems == []


def test_page_without_javascript(report_file, browser):
    html, evidence = report_file
    context = browser.new_context(java_script_enabled=False, viewport={"width": 1280, "height": 1200})
    try:
        page = context.new_page()
        page.goto(html.as_uri(), wait_until="load")
        for sel in ("#f-text", "#f-driver", "#f-grade", "#f-flag", "#copy-methods"):
            assert not page.is_visible(sel), sel
        assert page.locator("#evidence-table th button").count() == 0  # no sort button that does nothing
        assert page.locator("#evidence-table tbody tr").count() == len(evidence)
        assert page.is_visible("#evidence-table") and page.is_visible("#table .colkey")
    finally:
        context.close()
    with opened(browser, html.as_uri(), 1280, 1200) as w:  # with the script, the same controls are shown
        assert w.page.is_visible("#f-driver") and w.page.locator("#evidence-table th button").count() > 0


# ----------------------------------------------------------------------------- figure text as displayed
def svg_text_sizes(svg: Path) -> tuple[float, list[float]]:
    """The SVG's width in points and the font size (points at that width) of each of its texts
    (matplotlib writes text as <text> with svg.fonttype 'none')."""
    src = svg.read_text(encoding="utf-8")
    width = float(re.search(r'<svg[^>]* width="([\d.]+)pt"', src).group(1))
    return width, [float(v) for v in re.findall(r"font-size: ([\d.]+)px", src)]


def test_figure_text_at_least_8_pt_as_displayed(report_file, browser):
    html, _ = report_file
    with opened(browser, html.as_uri(), 1400, 1000) as w:
        shown = w.js("Array.from(document.querySelectorAll('img[data-name]'))"
                     ".map(i => [i.dataset.name, i.getBoundingClientRect().width, i.naturalWidth])")
    assert len(shown) >= 5
    small = []
    for name, css_px, natural in shown:
        width_pt, sizes = svg_text_sizes(html.parent / "figures" / f"{name}.svg")
        assert natural == pytest.approx(width_pt / 72 * PNG_DPI, abs=2)  # the PNG is the SVG at PNG_DPI
        scale = css_px / (width_pt / 72 * 96)  # displayed CSS px over the figure's inches at 96 px per inch
        assert sizes, name
        if min(sizes) * scale < 8 - 0.01:
            small.append((name, min(sizes), round(scale, 3)))
    assert small == []
