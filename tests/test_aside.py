"""Work set aside in a forked process (lagsieve.stages.aside), and the evidence stage that uses
it (threads=2) against the same stage on one core: our own rules, no outside source; the
reference is the same function run in this process."""
from __future__ import annotations

import filecmp
import os
import signal

import numpy as np
import pandas as pd
import pytest

from lagsieve.stages.evidence import run_evidence
from lagsieve.stages.aside import AsideLost, aside

from helpers import run_study, tiny_config

FORK = pytest.mark.skipif(not hasattr(os, "fork"), reason="the platform cannot fork")


@FORK
def test_the_result_is_what_the_function_returns_here():
    frame = pd.DataFrame({"a": np.arange(5.0), "b": list("vwxyz")}, index=[3, 1, 4, 1, 5])
    job = aside(lambda: (frame.assign(c=frame["a"] ** 0.5), os.getpid()))
    got, pid = job.result()
    pd.testing.assert_frame_equal(got, frame.assign(c=frame["a"] ** 0.5))
    assert pid != os.getpid()  # computed in the child


@FORK
def test_an_exception_in_the_child_is_raised_again_here(capfd):
    def fails():
        raise ValueError("made to fail")

    with pytest.raises(ValueError, match="made to fail"):
        aside(fails).result()
    assert "Traceback" in capfd.readouterr().err  # the child's traceback reaches the job's log


@FORK
def test_a_child_killed_by_a_signal_is_said_in_words():
    with pytest.raises(AsideLost, match="without its result"):
        aside(lambda: os.kill(os.getpid(), signal.SIGKILL)).result()


@FORK
def test_cancel_ends_the_child():
    job = aside(lambda: signal.pause())  # would never end by itself
    job.cancel()
    with pytest.raises(ChildProcessError):
        os.waitpid(job.pid, os.WNOHANG)  # already reaped: nothing left running


def test_without_fork_the_work_runs_here_when_asked():
    calls = []
    job = aside(lambda: calls.append(os.getpid()) or 7, fork=False)
    assert calls == []
    assert job.result() == 7 and calls == [os.getpid()]


@FORK
def test_the_evidence_stage_on_two_processes_writes_the_same_bytes(tmp_path):
    """evidence_stage(threads=2) (the break test and the state-space refits in a forked process)
    against threads=1, every table byte for byte, on a study with state-space refits."""
    cfg = tiny_config(tmp_path, screen={"lags": [0, 1], "models": ["linear"], "surrogates": 39, "seed": 4,
                                        "state_space": True,
                                        "validation": {"initial_years": 15, "holdout_years": 5}})
    res = run_study(cfg, tmp_path / "out")
    work = res / "work"
    names = ["evidence.csv", "conditional.csv", "windows.csv", "models.csv", "joint.csv"]
    for threads in (1, 2):
        out = tmp_path / f"t{threads}"
        out.mkdir()
        run_evidence(cfg, work / "annual.csv", work, out / "screen.csv", out / "evidence.csv", threads=threads)
    evidence = pd.read_csv(tmp_path / "t1" / "evidence.csv")
    assert evidence["ss_status"].astype(str).str.len().gt(0).any()  # the refits ran
    assert evidence["break_p"].notna().any()  # the break test ran
    for name in names:
        assert filecmp.cmp(tmp_path / "t1" / name, tmp_path / "t2" / name, shallow=False), name
