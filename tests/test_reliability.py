"""Nothing lost, nothing random: determinism, failures contained to one hypothesis,
kill-and-resume, and ids that could reach a path refused."""
from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pandas as pd
import pytest
import yaml

from lagsieve import pipeline as stages
from lagsieve.io.config import load_study
from lagsieve.io.lock import LOCK_NAME
from lagsieve.io.names import slug
from lagsieve.screen import response as screening

from helpers import lagsieve, set_screen


def _run_stages(cfg, out):
    """align -> screen (every response) -> evidence, called directly (no Snakemake)."""
    study = load_study(cfg)
    work = out / "work"
    condition = [out / "condition.csv", out / "condition_sensitivity.csv", work / "condition_fish.csv",
                 work / "condition_fit.json"]
    stages.run_condition(cfg, *condition)  # the demo has a condition section
    stages.run_align(cfg, work / "annual.csv", work / "notes.csv", condition[:1])
    for rid in study.response_ids:
        stages.run_screen(cfg, work / "annual.csv", slug(rid), work / "responses" / slug(rid))
    stages.run_evidence(cfg, work / "annual.csv", work, out / "screen.csv", out / "evidence.csv")


@pytest.mark.slow  # two whole runs of the demo study through the stages
def test_two_runs_are_byte_identical(tmp_path, new_study):
    cfg = set_screen(new_study, surrogates=19, models=["linear", "gam"])
    _run_stages(cfg, tmp_path / "a")
    _run_stages(cfg, tmp_path / "b")
    for name in ("screen.csv", "evidence.csv"):
        assert (tmp_path / "a" / name).read_bytes() == (tmp_path / "b" / name).read_bytes(), name
    # and a different seed changes the surrogate p-values
    data = yaml.safe_load(cfg.read_text())
    data["screen"]["seed"] = 7
    cfg.write_text(yaml.safe_dump(data))
    _run_stages(cfg, tmp_path / "c")
    a = pd.read_csv(tmp_path / "a" / "evidence.csv").sort_values(["response", "driver"])
    c = pd.read_csv(tmp_path / "c" / "evidence.csv").sort_values(["response", "driver"])
    assert not np.allclose(a["p_surrogate"], c["p_surrogate"])
    assert np.allclose(a["r"], c["r"])  # statistics of the real data do not depend on the seed


def test_failure_in_one_hypothesis_is_contained(tmp_path, monkeypatch, new_study):
    cfg = set_screen(new_study, surrogates=19)
    real = screening.screen_hypothesis

    def flaky(table, response, driver, *a, **k):
        if driver["id"] == "zooplankton_index":
            raise np.linalg.LinAlgError("Singular matrix")
        return real(table, response, driver, *a, **k)

    monkeypatch.setattr(screening, "screen_hypothesis", flaky)
    _run_stages(cfg, tmp_path / "o")
    ev = pd.read_csv(tmp_path / "o" / "evidence.csv")
    bad = ev[ev.driver == "zooplankton_index"]
    assert len(bad) == 6 and (bad.status == "failed: Singular matrix").all()  # every response of the demo
    assert (bad.grade == "insufficient-data").all() and (bad["flags"] == "failed").all()
    good = ev[ev.driver != "zooplankton_index"]
    assert (good.status == "ok").all() and good.oos_skill.notna().all()


@pytest.mark.slow
@pytest.mark.parametrize("rerun", [[], ["--resume"]], ids=["plain", "resume"])
def test_killed_run_resumes(tmp_path, new_study, rerun):
    """A run killed outright (lagsieve and Snakemake, SIGKILL) leaves the tool's lock of a dead
    pid and Snakemake's own lock; the same command run again (or with the older --resume) takes
    the lock over, clears Snakemake's, redoes the incomplete jobs and finishes."""
    cfg = set_screen(new_study, surrogates=99)
    out = tmp_path / "s" / "results"
    env = dict(os.environ, MPLBACKEND="Agg")
    proc = subprocess.Popen([sys.executable, "-m", "lagsieve", "run", str(cfg), "--cores", "1"],
                            env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True)
    responses = out / "caldrin_shelf_demo" / "work" / "responses"
    deadline = time.time() + 180
    while not list(responses.glob("*/screen.csv")) and time.time() < deadline:
        time.sleep(0.2)
    assert list(responses.glob("*/screen.csv")), "no screen job finished"
    time.sleep(1.0)  # with --cores 1 the next screen job is running now
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    assert not (out / "caldrin_shelf_demo" / "evidence.csv").exists()
    # no half-written file is left under a final name: every stage writes to a temporary name
    leftovers = [p for p in out.rglob("*.csv") if p.stat().st_size == 0]
    assert not leftovers
    # the dead run's locks: the tool's (its pid) and Snakemake's
    assert json.loads((out / LOCK_NAME).read_text())["pid"] == proc.pid
    assert list((out / ".snakemake" / "locks").iterdir())
    resumed = lagsieve("run", cfg, "--cores", "2", *rerun)
    assert resumed.returncode == 0, resumed.stderr[-2000:]
    assert "LockException" not in resumed.stderr and "IncompleteFilesException" not in resumed.stderr
    assert f"the run that held {out} has stopped (pid {proc.pid}" in resumed.stderr
    assert (out / "caldrin_shelf_demo" / "evidence.csv").stat().st_size > 0
    assert (out / "caldrin_shelf_demo" / "report.html").stat().st_size > 0
    assert not (out / LOCK_NAME).exists() and not list((out / ".snakemake" / "locks").glob("*"))


@pytest.mark.slow
def test_ctrl_c_stops_every_job_with_one_line(tmp_path, new_study):
    """Ctrl-C (SIGINT to the terminal's process group: the tool, Snakemake and its jobs) while
    a screen job runs: every process stops, the terminal gets one line after the interrupt and
    no traceback, status 130 (128 + SIGINT, the shell's convention); the lock is released and
    the same command then finishes the study (common practice of command-line tools)."""
    cfg = set_screen(new_study, surrogates=99)
    out = new_study.parent / "results"
    proc = subprocess.Popen([sys.executable, "-m", "lagsieve", "run", str(new_study.parent), "--cores", "1"],
                            env=dict(os.environ, MPLBACKEND="Agg"), stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, start_new_session=True,
                            preexec_fn=lambda: signal.signal(signal.SIGINT, signal.SIG_DFL))
    logs = out / "caldrin_shelf_demo" / "logs" / "screen"
    deadline = time.time() + 180
    while not list(logs.glob("*.log")) and time.time() < deadline:
        time.sleep(0.1)
    time.sleep(0.5)  # the job's script is under way
    os.killpg(proc.pid, signal.SIGINT)
    stdout, stderr = proc.communicate(timeout=120)
    assert proc.returncode == 130
    assert stderr.rstrip().splitlines()[-1] == "interrupted; run the same command again to continue where it stopped"
    assert "Traceback" not in stderr + stdout and "KeyboardInterrupt" not in stderr + stdout
    assert not (out / LOCK_NAME).exists()
    with pytest.raises(ProcessLookupError):
        os.killpg(proc.pid, 0)  # no process of the run is left
    assert not (out / "caldrin_shelf_demo" / "evidence.csv").exists()
    resumed = lagsieve("run", cfg, "--cores", "2")
    assert resumed.returncode == 0, resumed.stderr[-2000:]
    assert (out / "caldrin_shelf_demo" / "report.html").stat().st_size > 0


@pytest.mark.parametrize("key, value, needle", [
    ("study", "../../x", "key 'study'"),
    ("study", "a;rm -rf b", "key 'study'"),
])
def test_unsafe_study_ids_refused(tmp_path, key, value, needle, new_study):
    cfg = new_study
    data = yaml.safe_load(cfg.read_text())
    data[key] = value
    cfg.write_text(yaml.safe_dump(data))
    proc = lagsieve("check", cfg)
    assert proc.returncode == 2 and needle in proc.stderr and "Traceback" not in proc.stderr


def test_unsafe_series_id_refused(tmp_path, new_study):
    cfg = new_study
    data = yaml.safe_load(cfg.read_text())
    data["drivers"][0]["id"] = "$(touch pwned)"
    cfg.write_text(yaml.safe_dump(data))
    proc = lagsieve("check", cfg)
    assert proc.returncode == 2 and "drivers[1] (id '$(touch pwned)').id" in proc.stderr
    assert not (tmp_path / "s" / "pwned").exists()


def test_yaml_is_loaded_safely(tmp_path, new_study):
    cfg = new_study
    cfg.write_text("study: !!python/object/apply:os.system ['touch pwned']\n")
    proc = lagsieve("check", cfg)
    assert proc.returncode == 2 and "YAML" in proc.stderr and "Traceback" not in proc.stderr
    assert not (tmp_path / "s" / "pwned").exists()


def test_worker_processes_change_nothing(tmp_path, new_study):
    """A response screened by two worker processes (drivers dealt out longest first) gives
    the same frames, in the same order, as one process: every random draw is keyed by the
    driver (screening.driver_rng), not by the process or the order of work."""
    cfg = set_screen(new_study, surrogates=19, models=["linear", "gam"])
    work = tmp_path / "work"
    stages.run_align(cfg, work / "annual.csv", work / "notes.csv")
    study = load_study(cfg)
    table = stages.load_table(study, work / "annual.csv")
    rid = study.response_ids[1]
    one = screening.screen_response(table, study, rid, workers=1)
    two = screening.screen_response(table, study, rid, workers=2)
    for name in ("screen", "hypotheses", "forecasts", "nulls"):
        pd.testing.assert_frame_equal(getattr(one, name), getattr(two, name), check_exact=True, obj=name)
    assert list(one.hypotheses.driver) == [d["id"] for d in study.drivers_for(rid)]
