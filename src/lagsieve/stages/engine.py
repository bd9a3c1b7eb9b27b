"""The workflow engine's process, started by `lagsieve run` while it checks the studies.

``python -m lagsieve.stages.engine`` imports Snakemake's command line, what it imports later on
every run (:data:`LATER`) and what the Snakefile imports to plan (the lagsieve modules of its
first lines, with jsonschema; not pandas: tests/test_architecture.py), then waits for one line
on its standard input: Snakemake's arguments as a JSON list, which it runs as ``python -m
snakemake ARGS`` would. An empty input (the run was refused) ends it with nothing done. The
imports are most of the engine's work before its first job (about 1.7 of 1.9-2.1 s of CPU for a
dry run of the demo on this shared 2-core machine) and the check of `lagsieve run` takes about
1.2 s, so on two cores the two overlap instead of following each other. Nothing is written
before the arguments arrive: a refusal of the check still comes first.
"""
from __future__ import annotations

import atexit
import importlib
import json
import os
import sys
import threading
from pathlib import Path

from lagsieve.errors import REINSTALL

# modules Snakemake 9 imports only once its command runs, on every run (the report plugins and
# the source cache's URI parser, 0.3-0.4 s of CPU together); a missing one is skipped
LATER = ("snakemake.report", "smart_open")


# Snakemake's exit status once it has run; None until then (a normal exit)
_STATUS: list[int | None] = [None]


def _exit_now() -> None:
    """The last exit handler (registered first, so it runs after Snakemake's own, which remove
    its temporary folders and close its logs): once Snakemake has run, end the process with its
    status without tearing down its thousands of modules (0.05-0.25 s on this shared machine,
    after the last job of every run)."""
    if _STATUS[0] is None:
        return
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (OSError, ValueError):
            continue
    os._exit(_STATUS[0])


def end_timers() -> None:
    """Cancel the timers still waiting once Snakemake has run. Its scheduler starts a 1 s
    ``threading.Timer`` after every pass that starts jobs (to look again when
    ``--max-jobs-per-timespan``, default 100/1s, allows more), and the pass that starts the
    target rule ``all`` leaves one behind; a timer is not a daemon thread, so Python waited for
    it before exiting: 1.0 s after the last job of every run (threads listed at the
    interpreter's shutdown, demo on this shared 2-core machine). The scheduler has returned by
    now, so the timers would only release a lock that nothing waits on."""
    for thread in threading.enumerate():
        if isinstance(thread, threading.Timer):
            thread.cancel()


def _status(code) -> int:
    """The process status of ``sys.exit(code)``."""
    return 0 if code is None else code if isinstance(code, int) else 1


def _preload() -> None:
    for name in LATER:
        try:
            importlib.import_module(name)
        except ImportError:
            continue


def _wait_for_arguments() -> list[str] | None:
    """Snakemake's arguments from the first line of standard input; None when it is empty.
    Standard input is then /dev/null: the jobs have nothing to read."""
    line = sys.stdin.readline()
    null = os.open(os.devnull, os.O_RDONLY)
    os.dup2(null, 0)
    os.close(null)
    return json.loads(line) if line.strip() else None


def main() -> int:
    atexit.register(_exit_now)
    try:
        # imported before the arguments arrive: this is the work that overlaps the check
        from snakemake.cli import main as snakemake_main

        import lagsieve.stages.batch  # noqa: F401  (the Snakefile's imports; kept in sys.modules)
        import lagsieve.stages.plan  # noqa: F401

        _preload()
        argv = _wait_for_arguments()
    except KeyboardInterrupt:  # Ctrl-C during the check: `lagsieve run` prints the one line
        return 130
    except ImportError as exc:  # a damaged installation: one line, as for the package's own files
        print(f"lagsieve: the workflow engine cannot be imported ({exc}); reinstall the package: {REINSTALL}",
              file=sys.stderr)
        return 2
    if argv is None:
        return 0
    # Snakemake names its command in its log by sys.argv: the one `python -m snakemake` would show
    sys.argv = [str(Path(sys.modules["snakemake"].__file__).with_name("__main__.py")), *argv]
    try:
        snakemake_main(argv)  # exits with Snakemake's status
    except SystemExit as done:
        _STATUS[0] = _status(done.code)
        end_timers()
        raise
    return 0


if __name__ == "__main__":
    sys.exit(main())
