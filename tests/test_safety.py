"""User files are sacred, locks are the tool's own, a damaged ledger is named (issue 14,
deliverables 5-7): every refusal is one line, exit 2, with nothing written under results.

Tests that refuse before Snakemake starts call the command line in this process
(``cli.main``) or as a subprocess; none of them runs the workflow (the kill-and-rerun test
is in test_reliability.py, marked slow).
"""
from __future__ import annotations

import errno
import hashlib
import json
import os
import socket
import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

import lagsieve.demo.write as demo_write
import lagsieve.io.lock as run_lock
from lagsieve import cli
from lagsieve.errors import InputErrors
from lagsieve.io.lock import LOCK_NAME, LockInfo, claim_results, process_alive
from lagsieve.ledger.store import SCHEMA_VERSION, check_ledger, connect

from helpers import lagsieve

AS_ROOT = hasattr(os, "geteuid") and os.geteuid() == 0


def _one_line(err: str, *needles: str) -> str:
    lines = [ln for ln in err.splitlines() if ln.strip() and not ln.startswith("warning:")]
    assert len(lines) == 1, err
    assert "Traceback" not in err and "; " in lines[0], err
    for n in needles:
        assert n in lines[0], (n, lines[0])
    return lines[0]


def _main(capsys, *argv) -> str:
    """cli.main in this process: exit 2 and one line on stderr, which is returned."""
    assert cli.main([str(a) for a in argv]) == 2
    return _one_line(capsys.readouterr().err)


def _state(path: Path) -> dict:
    """Every file under ``path`` with its bytes' digest and modification time (ns)."""
    if path.is_file():
        return {path.name: (hashlib.sha256(path.read_bytes()).hexdigest(), path.stat().st_mtime_ns)}
    return {str(p.relative_to(path)): (hashlib.sha256(p.read_bytes()).hexdigest() if p.is_file() else "dir",
                                       p.stat().st_mtime_ns) for p in sorted(path.rglob("*"))}


def _reaped() -> int:
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid


def _write_lock(folder: Path, **fields) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    record = {"host": socket.gethostname(), "started_utc": "2026-01-01 00:00:00 UTC",
              "command": "lagsieve run elsewhere/config.yaml", **fields}
    path = folder / LOCK_NAME
    path.write_text(json.dumps(record))
    return path


# ----------------------------------------------------------------------------- init never overwrites
def test_init_refuses_to_overwrite_user_data(tmp_path):
    """A folder with the user's own data/surveys_annual.csv (a demo file name): refused with one
    line naming it; the user's file and the folder are exactly as they were."""
    study = tmp_path / "mine"
    (study / "data").mkdir(parents=True)
    own = study / "data" / "surveys_annual.csv"
    own.write_text("year,my_series\n2001,1.5\n")
    before = _state(study)
    proc = lagsieve("init", study)
    assert proc.returncode == 2
    _one_line(proc.stderr, "1 of the files init writes exist already", "data/surveys_annual.csv", "never overwrites")
    assert _state(study) == before
    assert not (study / "config.yaml").exists()


def test_init_lists_every_existing_file(initialised_study, capsys):
    line = _main(capsys, "init", initialised_study.parent)
    assert "9 of the files" in line and "config.yaml" in line and "data/TRUTH.md" in line


def test_init_beside_other_user_files_keeps_them(tmp_path, capsys):
    """Files of other names in the folder are left alone; init writes its own beside them."""
    study = tmp_path / "mine"
    (study / "data").mkdir(parents=True)
    own = study / "data" / "my_landings.csv"
    own.write_text("year,landings\n2001,3\n")
    before = _state(own)
    assert cli.main(["init", str(study)]) == 0
    assert _state(own) == before
    assert sorted(p.name for p in (study / "data").iterdir()) == sorted(
        ["my_landings.csv", *demo_write.DEMO_FILES])
    assert not list(study.glob(".lagsieve-init-*"))  # the staging folder is gone


def test_init_on_a_file_is_one_line(tmp_path, capsys):
    f = tmp_path / "notes.txt"
    f.write_text("mine\n")
    before = _state(f)
    _main(capsys, "init", f)
    assert _state(f) == before
    line = _main(capsys, "init", f / "study")
    assert "a part of the path is a file, not a folder" in line


def test_init_data_folder_is_a_file(tmp_path, capsys):
    (tmp_path / "s").mkdir()
    (tmp_path / "s" / "data").write_text("mine\n")
    line = _main(capsys, "init", tmp_path / "s")
    assert "data" in line and "is a file, not a folder" in line
    assert sorted(p.name for p in (tmp_path / "s").iterdir()) == ["data"]


def test_init_on_a_full_disk_is_one_line(tmp_path, capsys, monkeypatch):
    def full(*a, **k):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(demo_write, "write_text", full)
    line = _main(capsys, "init", tmp_path / "s")
    assert "the disk is full" in line and "free some space" in line
    assert list((tmp_path / "s").iterdir()) == []  # the staged files are gone


def test_init_refuses_a_file_made_while_it_writes(tmp_path, monkeypatch):
    """A file that appears between the check and the placing is not replaced (os.link fails)."""
    study = tmp_path / "s"
    real = demo_write._place

    def racing(src, dest):
        if dest.name == "indices_long.csv":
            dest.write_text("made meanwhile\n")
        real(src, dest)

    monkeypatch.setattr(demo_write, "_place", racing)
    with pytest.raises(InputErrors, match="data/indices_long.csv"):
        demo_write.write_study(study)
    assert (study / "data" / "indices_long.csv").read_text() == "made meanwhile\n"


# ----------------------------------------------------------------------------- impossible options, output folders
@pytest.mark.parametrize("cores", ["0", "-3"])
def test_run_refuses_cores_below_one(new_study, cores):
    proc = lagsieve("run", new_study, "--cores", cores)
    assert proc.returncode == 2
    _one_line(proc.stderr, f"--cores {cores}", "at least one core")
    assert not (new_study.parent / "results").exists()


def test_run_out_is_a_file(new_study, capsys):
    out = new_study.parent / "results.txt"
    out.write_text("the user's notes\n")
    before = _state(out)
    line = _main(capsys, "run", new_study, "--out", out, "--cores", "1")
    assert "it is a file, not a folder" in line and "--out" in line
    assert _state(out) == before


def test_run_out_under_a_file(new_study, capsys):
    out = new_study.parent / "results.txt"
    out.write_text("the user's notes\n")
    line = _main(capsys, "run", new_study, "--out", out / "sub", "--cores", "1")
    assert "a part of the path is a file, not a folder" in line


def test_run_out_unwritable(new_study, capsys, tmp_path):
    if AS_ROOT:
        pytest.skip("as root chmod does not stop writes; the path-under-a-file case covers the same refusal")
    locked = tmp_path / "locked"
    locked.mkdir()
    locked.chmod(0o500)
    try:
        line = _main(capsys, "run", new_study, "--out", locked / "results", "--cores", "1")
    finally:
        locked.chmod(0o700)
    assert "you may not write there" in line
    assert list(locked.iterdir()) == []


def test_run_on_a_full_disk_is_one_line(new_study, capsys, monkeypatch):
    """The first write under results is the lock: a full disk there is one line, no lock left."""
    def full(path, info):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(run_lock, "_create", full)
    line = _main(capsys, "run", new_study, "--cores", "1")
    assert "results folder cannot be written: the disk is full" in line and "free some space" in line
    assert list((new_study.parent / "results").iterdir()) == []


def test_lock_write_failure_leaves_no_lock(tmp_path, monkeypatch):
    def full(self):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(LockInfo, "text", full)
    with pytest.raises(InputErrors, match="the disk is full"):
        claim_results(tmp_path / "out", "test")
    assert not (tmp_path / "out" / LOCK_NAME).exists()


# ----------------------------------------------------------------------------- the run lock
def test_live_lock_refuses_run_and_resume(new_study):
    """A lock held by a live process of this host (this test's own pid): `run` and `run --resume`
    refuse with one line naming it, exit 2, without starting Snakemake; the lock is kept."""
    results = new_study.parent / "results"
    lock = _write_lock(results, pid=os.getpid())
    before = _state(results)
    for extra in ([], ["--resume"]):
        proc = lagsieve("run", new_study, "--cores", "1", *extra)
        assert proc.returncode == 2
        _one_line(proc.stderr, "a lagsieve run is in progress", f"pid {os.getpid()}",
                  "lagsieve run elsewhere/config.yaml", "wait for it to finish")
        assert _state(results) == before  # no .snakemake, no study folder, the lock untouched
    assert json.loads(lock.read_text())["pid"] == os.getpid()


def test_live_child_keeps_the_lock(tmp_path):
    """The lock lives while the workflow engine (child_pid) lives, even if its parent died."""
    sleeper = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(60)"])
    try:
        _write_lock(tmp_path, pid=_reaped(), child_pid=sleeper.pid)
        with pytest.raises(InputErrors, match="in progress"):
            claim_results(tmp_path, "test")
    finally:
        sleeper.kill()
        sleeper.wait()
    held = claim_results(tmp_path, "test")  # its engine gone too: stale
    assert held.took_over is not None and held.took_over.child_pid == sleeper.pid
    held.release()


def test_lock_of_another_host_names_it(tmp_path):
    lock = _write_lock(tmp_path, pid=os.getpid(), host="far-away-node")
    with pytest.raises(InputErrors) as info:
        claim_results(tmp_path, "test")
    line = _one_line(str(info.value), "host far-away-node", f"remove {lock}")
    assert "another host" in line
    assert lock.exists()


def test_stale_lock_is_taken_over(tmp_path):
    """A lock of a dead pid: taken over (the dead run's record is kept in took_over), the new
    lock records this process, and releasing it removes the file."""
    dead = _reaped()
    _write_lock(tmp_path, pid=dead)
    held = claim_results(tmp_path, "lagsieve run x")
    assert held.took_over.pid == dead
    record = json.loads((tmp_path / LOCK_NAME).read_text())
    assert record["pid"] == os.getpid() and record["command"] == "lagsieve run x"
    assert record["host"] == socket.gethostname() and record["started_utc"].endswith("UTC")
    assert sorted(p.name for p in tmp_path.iterdir()) == [LOCK_NAME]  # nothing left aside
    held.release()
    assert not (tmp_path / LOCK_NAME).exists()


def test_reused_pid_is_not_the_run(tmp_path):
    """A pid that lives but started at another time than the lock recorded is another process."""
    if run_lock.process_start(os.getpid()) is None:
        pytest.skip("no /proc here: process start times are not known")
    assert process_alive(os.getpid(), run_lock.process_start(os.getpid()))
    assert not process_alive(os.getpid(), "0")
    _write_lock(tmp_path, pid=os.getpid(), pid_start="0")
    held = claim_results(tmp_path, "test")
    assert held.took_over.pid == os.getpid()
    held.release()


def test_second_claim_in_same_folder_is_refused(tmp_path):
    with claim_results(tmp_path, "first") as first:
        with pytest.raises(InputErrors, match="in progress"):
            claim_results(tmp_path, "second")
        assert json.loads((tmp_path / LOCK_NAME).read_text())["token"] == first.info.token
    assert not (tmp_path / LOCK_NAME).exists()


def test_release_leaves_another_runs_lock(tmp_path):
    held = claim_results(tmp_path, "first")
    other = _write_lock(tmp_path, pid=os.getpid(), token="someone-else")
    held.release()
    assert other.exists()


def test_unreadable_lock_says_which_file_to_remove(tmp_path, monkeypatch):
    monkeypatch.setattr(run_lock, "EMPTY_WAIT", 0.1)
    lock = tmp_path / LOCK_NAME
    lock.write_text("{not json")
    with pytest.raises(InputErrors) as info:
        claim_results(tmp_path, "test")
    _one_line(str(info.value), "cannot be read", f"remove {lock}")


def test_dead_process_is_not_alive():
    assert process_alive(os.getpid())
    assert not process_alive(_reaped())
    assert not process_alive(None) and not process_alive(0)


def test_zombie_is_not_alive():
    """A child that has exited but not been reaped yet (a zombie) holds nothing."""
    if run_lock.process_start(os.getpid()) is None:
        pytest.skip("no /proc here: the zombie state cannot be read")
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    try:
        os.waitid(os.P_PID, child.pid, os.WEXITED | os.WNOWAIT)  # ended, not reaped
        assert not process_alive(child.pid)
    finally:
        child.wait()


# ----------------------------------------------------------------------------- inputs that are not regular files
def test_named_pipe_input_refused_at_check(new_study):
    """A named pipe in place of an input file: one line at check (opening it would hang)."""
    data = new_study.parent / "data" / "surveys_annual.csv"
    data.unlink()
    os.mkfifo(data)
    proc = subprocess.run([sys.executable, "-m", "lagsieve", "check", str(new_study)],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 2
    _one_line(proc.stderr, "data/surveys_annual.csv", "not a regular file")


@pytest.mark.parametrize("target", ["/dev/null", "folder"])
def test_device_or_folder_input_refused(new_study, target, capsys):
    raw = yaml.safe_load(new_study.read_text())
    if target == "folder":
        (new_study.parent / "data" / "tables.csv").mkdir()
        target = "data/tables.csv"
    raw["inputs"][1] = target
    new_study.write_text(yaml.safe_dump(raw, sort_keys=False))
    line = _main(capsys, "check", new_study)
    assert target in line and ("not a regular file" in line or "a folder, not a file" in line)


# ----------------------------------------------------------------------------- a damaged ledger
def _ledger(path: Path) -> Path:
    """A real (empty) forecast ledger at ``path``."""
    connect(path).close()
    return path


def _truncated(path: Path) -> Path:
    _ledger(path)
    with sqlite3.connect(path) as con:  # some pages of data, so that a cut falls inside a table
        con.execute("CREATE TABLE filler (x TEXT)")
        con.executemany("INSERT INTO filler VALUES (?)", [("x" * 500,)] * 400)
    con.close()
    os.truncate(path, path.stat().st_size // 2)
    return path


def _scrambled(path: Path) -> Path:
    _truncated(path)
    data = bytearray(path.read_bytes())
    data[4096:4096 + 2048] = b"\xa5" * 2048  # the second page
    path.write_bytes(bytes(data))
    return path


def _foreign(path: Path) -> Path:
    with sqlite3.connect(path) as con:
        con.execute("CREATE TABLE my_notes (x TEXT)")
    con.close()
    return path


def _future(path: Path) -> Path:
    _ledger(path)
    with sqlite3.connect(path) as con:
        con.execute("UPDATE meta SET value = '99' WHERE key = 'schema_version'")
    con.close()
    return path


DAMAGED = {
    "folder": (lambda p: (p.mkdir(), p)[1], "a folder, not a file"),
    "text file": (lambda p: (p.write_text("year,value\n2001,3\n"), p)[1], "not an SQLite database"),
    "truncated": (_truncated, "the forecast ledger is damaged"),
    "scrambled": (_scrambled, "the forecast ledger is damaged"),
    "other database": (_foreign, "not a forecast ledger"),
    "future schema": (_future, "schema version 99"),
    "under a file": (lambda p: (p.parent.write_text("x"), p)[1], "a part of the forecast ledger's path is a file"),
}


@pytest.mark.parametrize("case", sorted(DAMAGED))
def test_damaged_ledger_refused_at_start(new_study, tmp_path, case, capsys):
    """ledger.path naming a folder, a text file, a truncated or scrambled SQLite file, another
    program's database, a ledger of a newer schema, a path through a file: `lagsieve run`
    refuses before Snakemake starts, with one line saying how to continue; the file is left
    byte for byte and time stamp as it was, and nothing is written under results."""
    make, needle = DAMAGED[case]
    target = tmp_path / "elsewhere" / "ledger.sqlite"
    if case != "under a file":
        target.parent.mkdir()
    path = make(target)
    raw = yaml.safe_load(new_study.read_text())
    raw["ledger"] = {"path": str(path)}
    new_study.write_text(yaml.safe_dump(raw, sort_keys=False))
    before = _state(tmp_path / "elsewhere")
    line = _main(capsys, "run", new_study, "--cores", "1")
    assert needle in line and str(path) in line and "ledger.path" in line
    if case in ("text file", "truncated", "scrambled"):
        assert "move it aside" in line and "kept unchanged" in line
    assert _state(tmp_path / "elsewhere") == before
    assert not (new_study.parent / "results").exists()


def test_damaged_default_ledger_subprocess(new_study):
    """The default ledger (results/<study>/ledger.sqlite) damaged: `lagsieve run` as a user runs it
    says so in one line; the results folder is exactly as it was."""
    ledger = new_study.parent / "results" / "caldrin_shelf_demo" / "ledger.sqlite"
    ledger.parent.mkdir(parents=True)
    _truncated(ledger)
    before = _state(new_study.parent / "results")
    proc = lagsieve("run", new_study, "--cores", "1")
    assert proc.returncode == 2
    _one_line(proc.stderr, str(ledger), "the forecast ledger is damaged", "move it aside")
    assert _state(new_study.parent / "results") == before


def test_sound_ledgers_pass(tmp_path):
    check_ledger(tmp_path / "new.sqlite")  # none yet: a new one will be made
    (tmp_path / "empty.sqlite").write_bytes(b"")
    check_ledger(tmp_path / "empty.sqlite")
    check_ledger(_ledger(tmp_path / "ledger.sqlite"))
    assert not (tmp_path / "new.sqlite").exists()


def test_ledger_with_hot_journal_passes_untouched(tmp_path):
    """A run killed while writing leaves a hot journal: the ledger is sound (the next writer
    rolls it back); the check reads a scratch copy and leaves file and journal as they were."""
    path = _ledger(tmp_path / "ledger.sqlite")
    code = ("import os, signal, sqlite3, sys\n"
            "con = sqlite3.connect(sys.argv[1], isolation_level=None)\n"
            "con.execute('PRAGMA cache_size=1'); con.execute('BEGIN IMMEDIATE')\n"
            "con.execute('CREATE TABLE big (x TEXT)')\n"
            "for i in range(3000): con.execute('INSERT INTO big VALUES (?)', ('y' * 300,))\n"
            "con.execute(\"UPDATE meta SET value = 'x' WHERE key = 'schema_version'\")\n"
            "os.kill(os.getpid(), signal.SIGKILL)\n")
    subprocess.run([sys.executable, "-c", code, str(path)])
    journal = Path(f"{path}-journal")
    assert journal.exists() and journal.stat().st_size > 0
    before = _state(tmp_path)
    check_ledger(path)
    assert _state(tmp_path) == before
    con = connect(path)  # the writer rolls the journal back: the ledger as it was
    assert con.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()[0] == SCHEMA_VERSION
    con.close()


def test_connect_refuses_damaged_ledger(tmp_path):
    """The ledger stage (connect) refuses the same files with the same line, untouched."""
    path = _truncated(tmp_path / "ledger.sqlite")
    before = _state(tmp_path)
    with pytest.raises(InputErrors, match="the forecast ledger is damaged"):
        connect(path)
    assert _state(tmp_path) == before


def test_ledger_on_a_full_disk_is_one_line(tmp_path, monkeypatch):
    """SQLite's own 'disk is full' while the ledger stage opens it: one line, the file kept;
    a fault of the program (here a failing statement) keeps its traceback."""
    import lagsieve.ledger.store as store

    def full(con):
        exc = sqlite3.OperationalError("database or disk is full")
        exc.sqlite_errorname = "SQLITE_FULL"
        raise exc

    monkeypatch.setattr(store, "ensure_schema", full)
    with pytest.raises(InputErrors) as info:
        connect(tmp_path / "ledger.sqlite")
    _one_line(str(info.value), "cannot be written (database or disk is full)", "free some space", "ledger.path")
    monkeypatch.setattr(store, "ensure_schema", lambda con: con.execute("SELECT * FROM no_such_table"))
    with pytest.raises(sqlite3.OperationalError, match="no_such_table"):
        connect(tmp_path / "ledger.sqlite")


def _claim_and_hold(args):
    folder, start = args
    import time as _time

    while _time.time() < start:  # all contenders start together
        _time.sleep(0.001)
    try:
        held = claim_results(folder, "contender")
    except InputErrors as exc:
        return "refused" if "in progress" in str(exc) or "changing hands" in str(exc) else str(exc)
    _time.sleep(1.5)  # hold it while the others try
    held.release()
    return "held"


def test_one_of_many_reruns_takes_over_a_stale_lock(tmp_path):
    """Four reruns start at once on a folder with a dead run's lock: exactly one takes it over,
    the others are refused (the stale lock is renamed aside before removal, so no rerun can
    remove the lock another has just made)."""
    import multiprocessing as mp
    import time

    _write_lock(tmp_path, pid=_reaped())
    start = time.time() + 1.0
    with mp.get_context("fork").Pool(4) as pool:
        outcomes = pool.map(_claim_and_hold, [(tmp_path, start)] * 4)
    assert sorted(outcomes) == ["held", "refused", "refused", "refused"], outcomes
    assert list(tmp_path.iterdir()) == []  # released, nothing left aside


def test_check_and_ledger_write_nothing(new_study, capsys):
    """`check` and `ledger` only read: the study folder (config, data, an existing ledger) keeps
    every byte and time stamp, and no file appears."""
    ledger = _ledger(new_study.parent / "results" / "caldrin_shelf_demo" / "ledger.sqlite")
    before = _state(new_study.parent)
    assert lagsieve("check", new_study).returncode == 0
    cli.main(["ledger", str(new_study)])
    capsys.readouterr()
    assert _state(new_study.parent) == before
    assert ledger.exists()
