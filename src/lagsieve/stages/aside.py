"""Work set aside in a forked process while this one goes on (:func:`aside`): a stage whose
independent parts would leave the job's second core idle runs one of them in a child forked
after the imports and the shared inputs, and takes its result back (pickled through a pipe).

Used by the evidence stage (:func:`lagsieve.stages.evidence.evidence_stage`), which otherwise
runs on one core while nothing else of the study can run. The child's result is the same
object the function returns in this process (tests/test_aside.py); an exception in the child
is raised again here, its traceback in the job's log; a child that ends without a word (a
signal: the out-of-memory killer) raises :class:`AsideLost`. Where the platform cannot fork,
or ``fork`` is false, the work runs in this process when its result is asked for.
"""
from __future__ import annotations

import os
import pickle
import signal
import sys
import traceback


class AsideLost(RuntimeError):
    """The forked process ended without returning its result."""


class _Inline:
    def __init__(self, fn):
        self._fn = fn

    def result(self):
        return self._fn()

    def cancel(self) -> None:
        pass


class _Forked:
    def __init__(self, fn):
        read, write = os.pipe()
        sys.stdout.flush()
        sys.stderr.flush()  # the job's log: the child must not inherit (and write again) unwritten lines
        self.pid = os.fork()
        if self.pid == 0:  # the child: compute, send, end without running the parent's clean-ups
            try:
                os.close(read)
                signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C is the parent's, which ends this
                _send(write, fn)
            finally:
                os._exit(0)
        os.close(write)
        self._read, self._done = read, False

    def result(self):
        with os.fdopen(self._read, "rb") as fh:
            data = fh.read()
        os.waitpid(self.pid, 0)
        self._done = True
        if not data:
            raise AsideLost("a process of this stage ended without its result (killed by a signal: out of memory?)")
        ok, value = pickle.loads(data)
        if not ok:
            raise value
        return value

    def cancel(self) -> None:
        """End the child (its result is no longer wanted: this process failed or was stopped)."""
        if self._done:
            return
        self._done = True
        try:
            os.kill(self.pid, signal.SIGKILL)
            os.waitpid(self.pid, 0)
        except (ProcessLookupError, ChildProcessError):
            pass
        try:
            os.close(self._read)
        except OSError:
            pass


def _send(fd: int, fn) -> None:
    try:
        payload = (True, fn())
    except BaseException as exc:  # noqa: BLE001 - raised again in the parent
        traceback.print_exc()
        payload = (False, exc)
    try:
        data = pickle.dumps(payload, protocol=pickle.HIGHEST_PROTOCOL)
    except Exception as exc:  # an exception or result that cannot be pickled
        data = pickle.dumps((False, RuntimeError(f"a process of this stage failed: {payload[1]!r} ({exc})")))
    with os.fdopen(fd, "wb") as fh:
        fh.write(data)


def aside(fn, fork: bool = True):
    """``fn()`` started in a forked process (``fork`` and where the platform can fork), else
    kept to run here; returns an object whose ``result()`` gives ``fn()``'s value (or raises its
    exception) and whose ``cancel()`` ends the child."""
    if fork and hasattr(os, "fork"):
        return _Forked(fn)
    return _Inline(fn)
