"""The report in a real browser: Playwright drives Debian's headless Chromium on the HTML file.

* a screenshot is not blank;
* no console errors or uncaught exceptions (a Content-Security-Policy violation is one), no
  failed loads and no request other than ``file:`` or ``data:``, every image decoded;
* clicking a column heading sorts the evidence table (ascending, then descending), a text
  column sorts too, and the grade filter hides the other rows.

Playwright (PyPI ``playwright``) launches the system's ``chromium`` (``executable_path``); its
own browser download is never used (``playwright install`` is not needed). Skipped, with the
reason, only when Chromium or Playwright is not installed (CI installs both).
"""
from __future__ import annotations

import json
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from lagsieve.io.config import load_study

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
    cfg = tiny_config(base, report={"top": 1, "pdf": False},
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
