"""The results folder a run writes into: made with one clear line when it cannot be, and locked
so that one `lagsieve run` at a time writes there.

The lock is a small JSON file, ``<out>/.lagsieve-run.lock``, created atomically
(``O_CREAT | O_EXCL``: of two runs starting together exactly one creates it). It records the
process (pid, and on Linux its start time, so that a reused pid is not mistaken for the run),
the host, the start time (UTC) and the command, and later the pid of the workflow engine the
run started. While the lock is held:

* a run on the same host whose processes live holds the folder: a second run, or a
  ``--resume``, is refused with one line naming that run;
* a run of another host cannot be probed from here: it is refused with one line that names
  the host and says which file to remove if that run is gone;
* a lock whose processes are all dead (a crash, a kill, a power cut) is stale: the next run
  takes it over and says so, and continues where the dead run stopped.

The takeover is itself safe against two reruns starting together: the stale lock is first
renamed aside (only one of them can), and only the process that finds the stale record in
what it renamed removes it; the other puts back what it moved and tries again.
"""
from __future__ import annotations

import errno
import json
import os
import socket
import time
import uuid
from dataclasses import asdict, dataclass, replace
from datetime import datetime, timezone
from pathlib import Path

from lagsieve.errors import InputErrors, InputProblem, fail, show

__all__ = ["LOCK_NAME", "LockInfo", "RunLock", "check_folder", "claim_results", "make_folder", "os_problem",
           "process_alive", "unusable_folder"]

LOCK_NAME = ".lagsieve-run.lock"
ATTEMPTS = 3          # creation attempts (each may follow the takeover of a stale lock)
EMPTY_WAIT = 1.0      # seconds a just-created, still empty lock is given to get its record
RESULTS_FIX = "choose another results folder with --out"

# why an operating-system error stops a write, in the user's words
REASONS = {
    errno.ENOSPC: "the disk is full",
    errno.EDQUOT: "the disk quota is used up",
    errno.EACCES: "you may not write there",
    errno.EPERM: "you may not write there",
    errno.EROFS: "the file system is read-only",
    errno.ENOTDIR: "a part of the path is a file, not a folder",
    errno.EEXIST: "it is a file, not a folder",
    errno.ENAMETOOLONG: "the path is too long",
}


def os_problem(exc: OSError, path: str | Path, what: str, fix: str) -> InputProblem:
    """One line for an operating-system error met while writing ``path``: ``what`` (e.g. "the
    results folder cannot be made"), the reason in words, and ``fix``; a full disk adds that
    space must be freed."""
    reason = REASONS.get(exc.errno) or show(exc.strerror or type(exc).__name__, 80)
    if exc.errno in (errno.ENOSPC, errno.EDQUOT):
        fix = f"free some space, or {fix}"
    return InputProblem(what=f"{what}: {reason}", fix=fix, file=show(str(path), 300))


def unusable_folder(path: Path) -> int | None:
    """Why ``path`` cannot be (made into) a folder to write in, found without writing: the
    errno of the failure a write would meet (EEXIST: it is a file; ENOTDIR: a part of it is a
    file; EACCES: the nearest existing folder is not writable), or None when it is usable."""
    nearest = next((p for p in (path, *path.parents) if p.exists()), None)
    if nearest is None:
        return None
    if not nearest.is_dir():
        return errno.EEXIST if nearest == path else errno.ENOTDIR
    if not os.access(nearest, os.W_OK | os.X_OK):
        return errno.EACCES
    return None


def check_folder(path: Path, what: str, fix: str) -> None:
    """:class:`InputErrors` with one line (:func:`os_problem`) if :func:`unusable_folder`; writes nothing."""
    code = unusable_folder(path)
    if code is not None:
        raise InputErrors([os_problem(OSError(code, os.strerror(code)), path, what, fix)])


def make_folder(path: Path, what: str, fix: str) -> None:
    """Make the folder ``path`` (and its parents) if it is missing; :class:`InputErrors` with one
    line (:func:`os_problem`) when it cannot be made or is not a folder."""
    try:
        path.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InputErrors([os_problem(exc, path, what, fix)]) from None


# ---------------------------------------------------------------- processes
def _proc_stat(pid: int) -> tuple[str, str] | None:
    """(state, start time in clock ticks since boot) of a process from Linux's /proc; None
    where /proc is not there or the process is gone."""
    try:
        text = Path(f"/proc/{pid}/stat").read_text()
    except OSError:
        return None
    fields = text[text.rindex(")") + 2:].split()  # after "pid (name) ": state is field 3
    return fields[0], fields[19]                    # starttime is field 22


def process_start(pid: int) -> str | None:
    """The start time of a process as /proc records it (tells a reused pid apart); None if unknown."""
    stat = _proc_stat(pid)
    return None if stat is None else stat[1]


def process_alive(pid: int | None, start: str | None = None) -> bool:
    """Whether process ``pid`` of this host lives (a zombie does not; a process with another
    start time than ``start``, when that is known, is a different process under a reused pid)."""
    if not pid or pid < 0:
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        pass  # it exists, under another user
    stat = _proc_stat(pid)
    if stat is None:
        return True
    state, started = stat
    return state not in ("Z", "X") and (start is None or started == start)


# ---------------------------------------------------------------- the record
@dataclass(frozen=True)
class LockInfo:
    """What a lock records: who holds the results folder, since when, doing what."""

    pid: int
    host: str
    started_utc: str = "?"
    command: str = "?"
    token: str = ""
    pid_start: str | None = None
    child_pid: int | None = None
    child_start: str | None = None

    @classmethod
    def mine(cls, command: str) -> "LockInfo":
        """The record of this process, now."""
        return cls(pid=os.getpid(), host=socket.gethostname(),
                   started_utc=datetime.now(timezone.utc).strftime("%Y-%m-%d %H:%M:%S UTC"),
                   command=command, token=uuid.uuid4().hex, pid_start=process_start(os.getpid()))

    @classmethod
    def parse(cls, text: str) -> "LockInfo | None":
        """The record in a lock file's text; None when it is not one."""
        try:
            raw = json.loads(text)
            known = {k: raw[k] for k in cls.__dataclass_fields__ if k in raw}
            info = cls(**known)
        except (ValueError, TypeError, KeyError):
            return None
        return info if isinstance(info.pid, int) and isinstance(info.host, str) else None

    def text(self) -> str:
        return json.dumps(asdict(self), indent=1) + "\n"

    def here(self) -> bool:
        return self.host == socket.gethostname()

    def alive(self) -> bool:
        """Whether a process of the run lives (only answerable on the run's own host)."""
        return process_alive(self.pid, self.pid_start) or process_alive(self.child_pid, self.child_start)

    def describe(self) -> str:
        return f"pid {self.pid} on host {self.host}, started {self.started_utc}: {show(self.command, 200)}"


# ---------------------------------------------------------------- the lock
@dataclass
class RunLock:
    """A held lock; ``took_over`` is the record of the dead run whose stale lock it replaced."""

    path: Path
    info: LockInfo
    took_over: LockInfo | None = None

    def record_child(self, pid: int) -> None:
        """Add the workflow engine's pid to the record (the lock then lives while either does)."""
        self.info = replace(self.info, child_pid=pid, child_start=process_start(pid))
        tmp = self.path.with_name(f"{self.path.name}.{self.info.token}.tmp")
        tmp.write_text(self.info.text(), encoding="utf-8")
        os.replace(tmp, self.path)

    def release(self) -> None:
        """Remove the lock if it is still this run's."""
        held = LockInfo.parse(_read(self.path) or "")
        if held is not None and held.token == self.info.token:
            self.path.unlink(missing_ok=True)

    def __enter__(self) -> "RunLock":
        return self

    def __exit__(self, *exc) -> None:
        self.release()


def _read(path: Path) -> str | None:
    """A lock's text, waiting briefly while a just-created lock is still empty; None if gone."""
    deadline = time.monotonic() + EMPTY_WAIT
    while True:
        try:
            text = path.read_text(encoding="utf-8", errors="replace")
        except FileNotFoundError:
            return None
        if text.strip() or time.monotonic() > deadline:
            return text
        time.sleep(0.05)


def _create(path: Path, info: LockInfo) -> None:
    """Create the lock with its record; FileExistsError if there is one."""
    fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            fh.write(info.text())
    except BaseException:
        path.unlink(missing_ok=True)
        raise


def _remove_stale(path: Path, stale_text: str, token: str) -> None:
    """Remove the stale lock whose text is ``stale_text``, unless another process took it over
    first (then what was renamed aside is put back)."""
    aside = path.with_name(f"{path.name}.{token}.stale")
    try:
        os.rename(path, aside)
    except FileNotFoundError:
        return
    if aside.read_text(encoding="utf-8", errors="replace") != stale_text:
        try:
            os.link(aside, path)
        except FileExistsError:
            pass
    aside.unlink()


def _refuse(path: Path, held: LockInfo | None, text: str) -> None:
    folder = show(str(path.parent), 300)
    if held is None:
        fail(f"the run lock {path.name} cannot be read ('{show(text, 60)}')",
             f"if no lagsieve run is writing in this folder, remove {path} and run again", file=folder)
    if held.here():
        fail(f"a lagsieve run is in progress in this results folder ({held.describe()})",
             "wait for it to finish, or stop it; a plain rerun then continues where it stopped",
             file=folder)
    fail(f"the results folder is locked by a run on another host ({held.describe()})",
         f"wait for that run to finish; if it is no longer going, remove {path} and run again",
         file=folder)


def _acquire(path: Path, mine: LockInfo) -> RunLock:
    took_over = None
    for _ in range(ATTEMPTS):
        try:
            _create(path, mine)
            return RunLock(path, mine, took_over)
        except FileExistsError:
            pass
        text = _read(path)
        if text is None:
            continue  # released meanwhile
        held = LockInfo.parse(text)
        if held is None or not held.here() or held.alive():
            _refuse(path, held, text)
        _remove_stale(path, text, mine.token)
        took_over = held
    fail("the run lock keeps changing hands (other runs are starting in this results folder)",
         "let one run finish, then run again", file=show(str(path.parent), 300))


def claim_results(out: str | Path, command: str) -> RunLock:
    """Make the results folder ``out`` and lock it for this run (see the module docstring).

    Raises :class:`InputErrors` with one line when the folder cannot be made or written (a
    file, a path under a file, no permission, a full disk) or a live run holds it."""
    out = Path(out)
    fix = RESULTS_FIX
    make_folder(out, "the results folder cannot be made", fix)
    path = out / LOCK_NAME
    try:
        return _acquire(path, LockInfo.mine(command))
    except OSError as exc:
        raise InputErrors([os_problem(exc, out, "the results folder cannot be written", fix)]) from None
