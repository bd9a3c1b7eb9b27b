"""The C allocator's setting for the workflow's jobs (glibc on Linux).

glibc's ``malloc`` gives memory back to the system whenever the free space at the top of its
heap passes a small threshold, and serves large blocks from fresh ``mmap`` calls; the screen
allocates and frees multi-megabyte temporaries thousands of times, so every reuse faults the
pages in again. Measured on the demo (one screen job, one process, 2-core machine; median of
two): 190,000-250,000 minor page faults and 0.6-0.8 s of system time with glibc's defaults,
46,000 and 0.23-0.31 s with ``MALLOC_TOP_PAD_`` at 256 MiB (the heap grows in steps of that
size and keeps that much free at its top), at the same peak memory (about 235 MB).
``MALLOC_TRIM_THRESHOLD_`` alone made it worse (640,000-900,000 faults, 1.8-2.2 s: a fixed
threshold turns off glibc's adaptive ``mmap`` threshold) and is not set.

glibc reads these variables when a process starts, so they go into the environment of the
process that starts the jobs: the Snakefile sets them at parse time (Snakemake's jobs, their
worker processes and, on a cluster, the job's own Snakemake inherit them). A user who set any
``MALLOC_*`` variable, or a ``glibc.malloc`` tunable in ``GLIBC_TUNABLES``, keeps the
allocator exactly as they set it. Other C libraries ignore the variable.

The end of a process: Python's last act is to clear its modules and collect the cycles among
their objects, which walks every object the imports made. A job that imported its stage spent
that long exiting (``python -c "from lagsieve.stages.X import *"``, from its last statement to
the process's end; 2-core machine shared at load 5, three runs): screen 0.61-0.71 s, evidence
0.63-0.86 s, report 1.16-1.19 s, Snakemake's own process 0.72-1.28 s; after ``gc.freeze()``
(the objects alive then are left out of every later collection) 0.07-0.17 s and 0.13-0.15 s;
the report stage's import and exit took 2.55-2.65 s of CPU against 2.00-2.06 s. A collection
during a stage is not the cost (one demo screen: one full collection; its CPU did not change
with the objects frozen at its start), so :func:`spare_final_collection` freezes them where a
process is about to end: after each stage of a job (:func:`lagsieve.stages.common.logged`),
in Snakemake's process once the workflow is parsed, and in `lagsieve run` before it waits for
Snakemake. A process that goes on after a stage (a batch, :mod:`lagsieve.stages.batch`) gives
them back to the collector (``gc.unfreeze``) before the next study, so their cycles are freed.
"""
from __future__ import annotations

import gc
import sys
from typing import Mapping

#: The setting, as environment variables (a value in bytes).
ALLOCATOR_SETTING = {"MALLOC_TOP_PAD_": str(256 * 1024 * 1024)}


def user_tuned(environ: Mapping[str, str]) -> bool:
    """Whether ``environ`` already tunes glibc's allocator (any ``MALLOC_*`` variable, or a
    ``glibc.malloc`` tunable)."""
    return any(k.startswith("MALLOC_") for k in environ) or "glibc.malloc" in environ.get("GLIBC_TUNABLES", "")


def allocator_environment(environ: Mapping[str, str], platform: str = sys.platform) -> dict[str, str]:
    """The variables to add to ``environ`` for the jobs: :data:`ALLOCATOR_SETTING` on Linux
    unless the user tuned the allocator (:func:`user_tuned`), else none."""
    if not platform.startswith("linux") or user_tuned(environ):
        return {}
    return dict(ALLOCATOR_SETTING)


def allocator_variables(environ: Mapping[str, str]) -> dict[str, str]:
    """The variables of ``environ`` that tune glibc's allocator (as provenance.json records
    them: the setting a run had, whether the workflow's or the user's)."""
    return {k: v for k, v in sorted(environ.items()) if k.startswith("MALLOC_") or k == "GLIBC_TUNABLES"}


def spare_final_collection() -> None:
    """Leave the objects alive now out of the garbage collector's later passes, the last one at
    the process's exit included (``gc.freeze``; see the module docstring for what it saves)."""
    gc.freeze()
