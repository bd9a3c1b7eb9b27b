"""Incremental reruns, read from Snakemake's own dry-run job list (Snakemake 9).

What Snakemake decides, and what these tests pin down:

* A file whose modification time is newer but whose bytes are unchanged does not trigger a
  rerun: Snakemake 9 records the checksum of every input up to ``--max-checksum-file-size``
  (1 MB by default) and skips an "updated" input with the recorded checksum.
* The job list is fixed before any job runs. When `evidence` (which aligns the inputs, then
  grades) must rerun, every job downstream of its outputs is scheduled in the same
  invocation, even if it then writes the same bytes; in a *later* invocation byte-identical
  outputs rerun nothing.
* The `screen` job (one per study) depends on the input files that hold its responses or
  their drivers, not on the study-wide aligned table, and reruns when one of them changes.
  Inside it each response is screened again only when its own content key changed
  (lagsieve.stages.screen_cache: its settings, the bytes it reads, the code); the others are
  copied from the cache, byte for byte. So a year appended to a driver's file reruns the
  screens of the responses that driver is screened against and the study-wide `evidence` and
  `report` (which updates the ledger first) — nothing else. The screen job's log says which
  responses it computed and which it reused.
* The forecast ledger is not a declared output: ``--delete-all-output`` leaves it, and the
  rerun that follows adds nothing to it.

The study is the invented demo with one extra driver in a file of its own, restricted to one
response (``responses: [m:age2]``); to stay fast it uses 19 surrogates, linear models, one
panel per response and no PDF.
"""
from __future__ import annotations

import json
import os
import re
import re
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import yaml

from lagsieve.demo import demo_config_text, write_demo

from helpers import REPO

pytestmark = pytest.mark.slow  # real Snakemake runs (about a minute)

STUDY = "caldrin_shelf_demo"
RESPONSES = ("m--age2", "m--age3-4", "m--age5plus")


class Workflow:
    def __init__(self, root: Path):
        self.root = root
        write_demo(root / "data")
        rng = np.random.default_rng(7)
        (root / "data" / "local.csv").write_text(
            "series,year,value\n" + "".join(f"local_index,{y},{rng.normal():.3f}\n" for y in range(1984, 2023)))
        cfg = yaml.safe_load(demo_config_text("data"))
        cfg["screen"].update(surrogates=19, models=["linear"])
        cfg["report"] = {"top": 1, "pdf": False}
        # the M responses only: the condition stage (per-fish samples) has tests of its own
        cfg.pop("condition", None)
        cfg["responses"] = [r for r in cfg["responses"] if r["id"].startswith("m:")]
        cfg["drivers"] = [d for d in cfg["drivers"] if d["id"] in ("forage_biomass", "bottom_temp", "shrimp_index")]
        for d in cfg["drivers"]:
            d.pop("expected_sign_by_response", None)
        cfg["inputs"].append("data/local.csv")
        cfg["drivers"].append({"id": "local_index", "category": "other", "responses": ["m:age2"], "lags": [1]})
        self.config = root / "config.yaml"
        self.config.write_text(yaml.safe_dump(cfg, sort_keys=False))
        self.out = root / "results"
        self.study = self.out / STUDY
        self.targets = [str(self.study / "report.html")]

    def snakemake(self, *args) -> subprocess.CompletedProcess:
        cmd = [sys.executable, "-m", "snakemake", *self.targets, "--snakefile", str(REPO / "Snakefile"),
               "--directory", str(self.out), "--cores", "2", *args,
               "--config", f"study_config={self.config}", f"out={self.out}"]
        env = dict(os.environ, MPLBACKEND="Agg")
        proc = subprocess.run(cmd, capture_output=True, text=True, env=env, cwd=self.root)
        assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-3000:]
        return proc

    def jobs(self, *args) -> list[tuple[str, str]]:
        """The dry-run job list: (rule, response wildcard or '') for every job, sorted."""
        return self.run("-n", *args)

    def run(self, *args) -> list[tuple[str, str]]:
        """Run Snakemake; the jobs it listed (planned with -n, else executed), sorted."""
        proc = self.snakemake(*args)
        text = proc.stdout + proc.stderr
        if "Nothing to be done" in text:
            return []
        found = []
        for block in re.split(r"\n(?=(?:local)?(?:rule|checkpoint) \w+:)", text)[1:]:
            rule = re.match(r"(?:local)?(?:rule|checkpoint) (\w+):", block).group(1)
            wc = re.search(r"^\s+wildcards: (.*)$", block, re.M)
            resp = re.search(r"response=([^,\s]+)", wc.group(1)) if wc else None
            found.append((rule, resp.group(1) if resp else ""))
        assert found, text[-2000:]
        return sorted(found)

    def outputs(self) -> dict[str, dict[str, bytes]]:
        """Every table of every response's screen, as bytes."""
        return {r: {t: (self.study / "work" / "responses" / r / t).read_bytes() for t in TABLES} for r in RESPONSES}

    def screened(self) -> dict[str, str]:
        """What the last screen job did per response (its log): computed or reused."""
        text = (self.study / "logs" / "screen.log").read_text()
        return dict(re.findall(r"screen (\S+): (computed|reused)", text))


TABLES = ("screen.csv", "hypotheses.csv", "forecasts.csv", "nulls.csv", "paired.csv")
EVERYTHING = sorted([("evidence", ""), ("report", ""), ("screen", "")])  # one screen job for the study


@pytest.fixture(scope="module")
def wf(tmp_path_factory):
    w = Workflow(tmp_path_factory.mktemp("incremental"))
    assert w.jobs() == EVERYTHING
    w.snakemake("-q")
    assert w.screened() == {r: "computed" for r in RESPONSES}
    return w


def test_up_to_date_after_a_run(wf):
    assert wf.jobs() == []
    summary = json.loads((wf.study / "work" / "ledger_update.json").read_text())
    assert summary["status"] == "recorded" and summary["run_id"] == 1


def test_newer_file_with_the_same_bytes_reruns_nothing(wf):
    later = time.time() + 5
    for p in [wf.config, *sorted((wf.root / "data").glob("*.csv"))]:
        os.utime(p, (later, later))
    assert wf.jobs() == []


def test_identical_outputs_of_a_forced_evidence_job_rerun_nothing_later(wf):
    annual = wf.study / "work" / "annual.csv"
    before, mtime = annual.read_bytes(), annual.stat().st_mtime_ns
    # decided before evidence runs: everything that reads its outputs (not the screens, which
    # read their own input files)
    assert wf.jobs("--forcerun", "evidence") == sorted([("evidence", ""), ("report", "")])
    assert wf.run("--forcerun", "evidence", "--until", "evidence") == [("evidence", "")]
    assert annual.stat().st_mtime_ns > mtime and annual.read_bytes() == before
    assert wf.jobs() == []  # the checksum of annual.csv equals the recorded one


def test_appended_year_of_a_driver_reruns_its_dependents(wf):
    before = wf.outputs()
    with open(wf.root / "data" / "local.csv", "a") as fh:
        fh.write("local_index,2023,0.250\n")  # pairs (lag 1) with the response of 2024
    assert wf.jobs() == EVERYTHING  # the dry-run job list: the study's screen job, evidence, report
    assert wf.run() == EVERYTHING
    # inside the screen job only the response screened against local_index is screened again
    assert wf.screened() == {"m--age2": "computed", "m--age3-4": "reused", "m--age5plus": "reused"}
    after = wf.outputs()
    assert after["m--age2"]["screen.csv"] != before["m--age2"]["screen.csv"]
    assert after["m--age3-4"] == before["m--age3-4"] and after["m--age5plus"] == before["m--age5plus"]
    summary = json.loads((wf.study / "work" / "ledger_update.json").read_text())
    assert summary["status"] == "recorded" and summary["run_id"] == 2  # the data fingerprint changed...
    assert (summary["scored"], summary["superseded"]) == (0, 0)  # ...but no response year arrived
    assert wf.jobs() == []


def _edited(wf, change) -> list[tuple[str, str]]:
    """The dry-run job list after ``change(config dict)``; the config is put back afterwards."""
    text = wf.config.read_text()
    cfg = yaml.safe_load(text)
    change(cfg)
    wf.config.write_text(yaml.safe_dump(cfg, sort_keys=False))
    try:
        return wf.jobs()
    finally:
        wf.config.write_text(text)


def _driver(cfg, did):
    return next(d for d in cfg["drivers"] if d["id"] == did)


def test_reruns_follow_what_changed_in_the_config(wf):
    """Each stage reruns when the settings it reads change (lagsieve.stages.digest, Snakemake's
    params rerun trigger), not on any edit of the config file."""
    report = [("report", "")]
    assert _edited(wf, lambda c: c.update(title="A new title")) == report
    assert _edited(wf, lambda c: c.update(description="Rewritten")) == report
    assert _edited(wf, lambda c: c["report"].update(top=2)) == report
    # labels and units: the evidence table's sentences use them; no screen reruns
    assert _edited(wf, lambda c: _driver(c, "bottom_temp").update(label="Bottom water temperature")) == \
        sorted([("evidence", ""), ("report", "")])
    # one driver's settings: the study's screen job (inside it, the responses that driver is
    # screened against: tests/test_screen_cache.py), then evidence and report
    assert _edited(wf, lambda c: _driver(c, "local_index").update(lags=[1, 2])) == EVERYTHING
    # a screen setting: every screen
    assert _edited(wf, lambda c: c["screen"].update(surrogates=29)) == EVERYTHING
    assert wf.jobs() == []  # the config put back: nothing to do


def test_delete_all_output_keeps_the_ledger(wf):
    db = wf.study / "ledger.sqlite"
    con = sqlite3.connect(str(db))
    rows = list(con.iterdump())
    con.close()
    wf.snakemake("--delete-all-output")
    assert not (wf.study / "evidence.csv").exists()
    assert not (wf.study / "work" / "ledger_update.json").exists()
    assert db.is_file()
    wf.snakemake("-q")
    # the cache is not a declared output: every response's tables come back from it
    assert wf.screened() == {r: "reused" for r in RESPONSES}
    summary = json.loads((wf.study / "work" / "ledger_update.json").read_text())
    assert summary["status"] == "unchanged" and summary["new"] == 0
    con = sqlite3.connect(str(db))
    assert list(con.iterdump()) == rows
    con.close()
