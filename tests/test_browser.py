"""The report in a real browser: headless Chromium opens the HTML file.

* a screenshot (``--screenshot``) is not blank;
* through the DevTools protocol: no console errors or exceptions (a Content-Security-Policy
  violation would be one), no failed loads and no request other than ``file:`` or ``data:``,
  every image decoded; clicking a column heading sorts the evidence table (ascending, then
  descending) and the grade filter hides the other rows.

Skipped, with the reason, only when Chromium is not installed (CI installs it).
"""
from __future__ import annotations

import json
import os
import shutil
import subprocess
import time
import urllib.request
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from test_report import make_report, run_study, tiny_config

CHROMIUM = next((p for p in (shutil.which("chromium"), shutil.which("chromium-browser"), "/usr/bin/chromium")
                 if p and os.path.exists(p)), None)
pytestmark = [pytest.mark.slow,
              pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed (apt-get install chromium)")]

FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
         "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-extensions",
         "--disable-default-apps", "--mute-audio"]


@pytest.fixture(scope="module")
def report_file(tmp_path_factory):
    base = tmp_path_factory.mktemp("browser")
    cfg = tiny_config(base, report={"top": 1, "pdf": False},
                      screen={"lags": [0, 1], "models": ["linear"], "surrogates": 29, "seed": 3,
                              "validation": {"initial_years": 15, "holdout_years": 5}})
    res = run_study(cfg, base / "results")
    make_report(cfg, res)
    return res / "report.html", pd.read_csv(res / "evidence.csv")


def test_screenshot_not_blank(report_file, tmp_path):
    from PIL import Image

    html, _ = report_file
    shot = tmp_path / "shot.png"
    subprocess.run([CHROMIUM, *FLAGS, f"--user-data-dir={tmp_path / 'profile'}", "--hide-scrollbars",
                    "--window-size=1280,2400", f"--screenshot={shot}", html.as_uri()],
                   check=True, timeout=120, capture_output=True)
    with Image.open(shot) as im:
        assert im.format == "PNG"
        arr = np.asarray(im.convert("L"), dtype=float)
    assert arr.shape[1] == 1280
    assert arr.std() > 10  # text, badges and figures, not an empty page
    assert (arr < 128).mean() > 0.01


class DevTools:
    """A minimal client of the Chrome DevTools protocol over one page's websocket."""

    def __init__(self, ws_url: str):
        import websocket

        self.ws = websocket.create_connection(ws_url, timeout=30, suppress_origin=True)
        self.next_id = 0
        self.events: list[dict] = []

    def call(self, method: str, **params):
        self.next_id += 1
        my_id = self.next_id
        self.ws.send(json.dumps({"id": my_id, "method": method, "params": params}))
        while True:
            msg = json.loads(self.ws.recv())
            if msg.get("id") == my_id:
                if "error" in msg:
                    raise RuntimeError(f"{method}: {msg['error']}")
                return msg.get("result", {})
            self.events.append(msg)

    def wait_for(self, method: str, timeout: float = 30):
        end = time.time() + timeout
        for ev in self.events:
            if ev.get("method") == method:
                return ev
        while time.time() < end:
            msg = json.loads(self.ws.recv())
            self.events.append(msg)
            if msg.get("method") == method:
                return msg
        raise TimeoutError(method)

    def js(self, expression: str):
        res = self.call("Runtime.evaluate", expression=expression, returnByValue=True, awaitPromise=True)
        if "exceptionDetails" in res:
            raise RuntimeError(res["exceptionDetails"])
        return res["result"].get("value")

    def drain(self, seconds: float = 0.5):
        self.ws.settimeout(seconds)
        try:
            while True:
                self.events.append(json.loads(self.ws.recv()))
        except Exception:  # timeout: nothing more queued
            pass
        finally:
            self.ws.settimeout(30)

    def close(self):
        self.ws.close()


@pytest.fixture
def devtools(tmp_path):
    profile = tmp_path / "profile"
    proc = subprocess.Popen([CHROMIUM, *FLAGS, f"--user-data-dir={profile}", "--remote-debugging-port=0",
                             "--window-size=1280,1600", "about:blank"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        port_file = profile / "DevToolsActivePort"
        end = time.time() + 60
        while not (port_file.is_file() and port_file.read_text().strip()):
            if time.time() > end or proc.poll() is not None:
                raise RuntimeError("chromium did not open its DevTools port")
            time.sleep(0.1)
        port = int(port_file.read_text().split()[0])
        with urllib.request.urlopen(f"http://127.0.0.1:{port}/json/list", timeout=10) as r:
            pages = [t for t in json.load(r) if t.get("type") == "page"]
        dt = DevTools(pages[0]["webSocketDebuggerUrl"])
        yield dt
        dt.close()
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()


def _problems(events: list[dict]) -> list[str]:
    out = []
    for ev in events:
        m, p = ev.get("method"), ev.get("params", {})
        if m == "Runtime.exceptionThrown":
            out.append(f"exception: {p['exceptionDetails'].get('text')} {p['exceptionDetails'].get('exception', {})}")
        elif m == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
            out.append(f"console.{p['type']}: {[a.get('value') for a in p.get('args', [])]}")
        elif m == "Log.entryAdded" and p["entry"].get("level") == "error":
            out.append(f"log: {p['entry'].get('text')} {p['entry'].get('url', '')}")
        elif m == "Network.loadingFailed":
            out.append(f"failed load: {p.get('errorText')}")
        elif m == "Network.requestWillBeSent":
            url = p["request"]["url"]
            if not (url.startswith("file:") or url.startswith("data:")):
                out.append(f"network request: {url}")
    return out


def _open(dt, url: str) -> None:
    """Enable the DevTools domains the checks read, load ``url`` and let its events arrive."""
    for domain in ("Page", "Runtime", "Log", "Network"):
        dt.call(f"{domain}.enable")
    dt.call("Page.navigate", url=url)
    dt.wait_for("Page.loadEventFired", timeout=60)
    dt.drain(0.5)


def test_page_loads_clean_and_table_sorts(report_file, devtools):
    html, evidence = report_file
    dt = devtools
    _open(dt, html.as_uri())

    images = dt.js("Array.from(document.images).map(i => [i.complete, i.naturalWidth, i.naturalHeight])")
    assert len(images) >= 5
    assert all(c and w > 0 and h > 0 for c, w, h in images), images

    rows_js = ("Array.from(document.querySelectorAll('#evidence-table tbody tr'))"
               ".map(r => r.cells[{i}].getAttribute('data-v'))")
    col = dt.js("Array.from(document.querySelectorAll('#evidence-table thead th'))"
                ".findIndex(th => th.dataset.key === 'r')")
    assert col >= 0
    before = [float(v) for v in dt.js(rows_js.format(i=col))]
    assert len(before) == len(evidence)
    assert before == pytest.approx(evidence["r"].tolist(), abs=1e-6)  # page order = evidence.csv order

    dt.js("document.querySelector('#evidence-table th[data-key=\"r\"] button').click()")
    asc = [float(v) for v in dt.js(rows_js.format(i=col))]
    assert asc == sorted(before)
    assert dt.js("document.querySelector('#evidence-table th[data-key=\"r\"]').getAttribute('aria-sort')") == "ascending"
    dt.js("document.querySelector('#evidence-table th[data-key=\"r\"] button').click()")
    desc = [float(v) for v in dt.js(rows_js.format(i=col))]
    assert desc == sorted(before, reverse=True)
    assert asc != before or desc != before  # the order did change

    # sorting by a text column (driver) works too
    dcol = dt.js("Array.from(document.querySelectorAll('#evidence-table thead th'))"
                 ".findIndex(th => th.dataset.key === 'driver')")
    dt.js("document.querySelector('#evidence-table th[data-key=\"driver\"] button').click()")
    names = dt.js(rows_js.format(i=dcol))
    assert sorted(names) == sorted(evidence["driver"].map(labels_of(evidence, html)).tolist())
    assert dt.js(f"(function (a) {{ return a.every(function (v, i) {{ return i === 0 || a[i - 1].localeCompare(v) <= 0; }}); }})"
                 f"({json.dumps(names)})")

    # the grade filter keeps exactly the rows of that grade
    grade = evidence["grade"].value_counts().index[0]
    dt.js(f"var s = document.getElementById('f-grade'); s.value = {json.dumps(grade)};"
          "s.dispatchEvent(new Event('change'));")
    shown = dt.js("Array.from(document.querySelectorAll('#evidence-table tbody tr'))"
                  ".filter(r => !r.hidden).map(r => r.getAttribute('data-grade'))")
    assert shown == [grade] * int((evidence["grade"] == grade).sum())
    assert dt.js("document.getElementById('f-count').textContent").startswith(f"{len(shown)} of {len(evidence)}")

    dt.drain(0.3)
    assert _problems(dt.events) == []


def labels_of(evidence: pd.DataFrame, html: Path) -> dict:
    """driver id -> label, from the study config beside the results."""
    from lagsieve.io.config import load_study

    study = load_study(html.parents[2] / "config.yaml")
    return {d["id"]: d.get("label") or d["id"] for d in study.drivers}


def test_detector_sees_a_blocked_script(report_file, devtools, tmp_path):
    """The checks above are not vacuous: a page whose script no longer matches the hash in its
    Content-Security-Policy is blocked, and the blocking is reported."""
    html, _ = report_file
    broken = tmp_path / "broken.html"
    broken.write_text(html.read_text(encoding="utf-8").replace("'use strict';", "'use strict'; ", 1),
                      encoding="utf-8")
    dt = devtools
    _open(dt, broken.as_uri())
    assert _problems(dt.events)
