"""The job log of a workflow script (lagsieve.stages.common.logged): progress in the log and,
at a readable pace, on the terminal; a failure's traceback in the log and one line on the
terminal; Ctrl-C one line in the log and status 130 (common practice of command-line tools)."""
from __future__ import annotations

import contextlib
import io
import logging
import sys
from types import SimpleNamespace

import pytest

from lagsieve.stages.common import PacedHandler, logged


def test_progress_reaches_the_terminal_at_most_once_per_pace(monkeypatch):
    clock = iter([0.0, 1.0, 5.5, 6.0, 11.0])
    monkeypatch.setattr("lagsieve.stages.common.time.monotonic", lambda: next(clock))
    out = io.StringIO()
    handler = PacedHandler(out, pace=5.0)
    for i in range(5):
        handler.emit(logging.LogRecord("lagsieve.x", logging.INFO, __file__, 1, "driver %d of 5", (i + 1,), None))
    assert out.getvalue().splitlines() == ["lagsieve: driver 1 of 5", "lagsieve: driver 3 of 5",
                                           "lagsieve: driver 5 of 5"]


def _nothing():
    return contextlib.nullcontext()


def _job(tmp_path):
    return SimpleNamespace(log=[str(tmp_path / "logs" / "stage.log")])


def test_progress_goes_to_the_log_and_the_terminal(tmp_path, monkeypatch):
    terminal = io.StringIO()
    monkeypatch.setattr(sys, "__stderr__", terminal)
    with logged(_job(tmp_path)):
        logging.getLogger("lagsieve.screen.response").info("screen m: driver 1 of 2 (x) done, 0.1 s")
    log = (tmp_path / "logs" / "stage.log").read_text()
    assert "screen m: driver 1 of 2 (x) done" in log and "lagsieve: stage took" in log
    assert terminal.getvalue() == "lagsieve: screen m: driver 1 of 2 (x) done, 0.1 s\n"


def test_the_log_lets_go_of_the_root_logger_when_the_job_ends(tmp_path, monkeypatch):
    """A batch (and a test) runs stages in one process: after a job's log is closed, the root
    logger has its own handlers and level again, and no handler writes to the closed file (which
    would print logging's 'Logging error' report on the next record)."""
    monkeypatch.setattr(sys, "__stderr__", io.StringIO())
    root, stage = logging.getLogger(), logging.getLogger("lagsieve.x")
    handlers, level = root.handlers[:], root.level
    for fail in (False, True):
        stage.info("before the job")  # the logger caches its level check ...
        with pytest.raises(SystemExit) if fail else _nothing():
            with logged(_job(tmp_path)):
                stage.info("inside")  # ... which the job's log must clear
                if fail:
                    raise ValueError("boom")
        assert "inside" in (tmp_path / "logs" / "stage.log").read_text()
        assert root.handlers == handlers and root.level == level


@pytest.mark.parametrize("exc, status, line", [(KeyboardInterrupt, 130, "lagsieve: interrupted"),
                                               (ValueError, 1, "Traceback")])
def test_a_failure_is_one_line_on_the_terminal(tmp_path, monkeypatch, exc, status, line):
    terminal = io.StringIO()
    monkeypatch.setattr(sys, "__stderr__", terminal)
    with pytest.raises(SystemExit) as info:
        with logged(_job(tmp_path)):
            raise exc("boom") if exc is ValueError else exc()
    assert info.value.code == status and info.value.__cause__ is None
    assert line in (tmp_path / "logs" / "stage.log").read_text()
    assert "Traceback" not in terminal.getvalue() and len(terminal.getvalue().splitlines()) <= 1
