"""Stage `screen`: one response against all its drivers (:func:`run_screen`); every response of a
study, each reused from the cache while its key holds (:func:`run_screens`, the workflow's job)."""
from __future__ import annotations

import contextlib
import gc
import logging
import os
import shutil
import signal
import sys
import time
import traceback
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import pandas as pd
from threadpoolctl import threadpool_limits

from lagsieve.io.config import Study, load_study
from lagsieve.io.files import write_csv
from lagsieve.io.names import slug
from lagsieve.io.readers import read_inputs
from lagsieve.prep.align import annual_table, se_table
from lagsieve.prep.annual import to_annual
from lagsieve.screen.response import failure_words, screen_response
from lagsieve.screen.seasonal import PAIRED_COLUMNS, paired_table, season_screen
from lagsieve.stages.allocator import spare_final_collection
from lagsieve.stages.common import SCREEN_COLUMNS, condition_table, cpu_since, ordered, root_logging_to
from lagsieve.stages.screen_cache import response_key, restore, staging, store, stored, tidy

log = logging.getLogger(__name__)


def wanted_series(study: Study, response_id: str) -> set[str]:
    """A response, its drivers and, for a season response, the response it comes from and its
    other seasons (the within-year series of the harmonic baselines)."""
    wanted = {response_id} | {d["id"] for d in study.drivers_for(response_id)}
    base = study.season_of(response_id)
    if base:
        wanted |= {base} | {r["id"] for r in study.responses if r.get("season_of") == base}
    return wanted


def response_long(study: Study, response_id: str, files: list[str] | None = None,
                  condition=None) -> tuple[pd.DataFrame, set[str]]:
    """The tidy rows (months kept) of one response and its drivers and the series wanted."""
    specs = study.inputs
    if files is not None:
        keep = {str(Path(f).resolve()) for f in files}
        specs = [sp for sp, p in zip(study.inputs, study.input_paths()) if str(p.resolve()) in keep]
    wanted = wanted_series(study, response_id)
    table = condition_table(condition)
    from_condition = set(table["series"]) & wanted if table is not None else set()
    long, _ = read_inputs(specs, study.base_dir, wanted - from_condition)
    if table is not None:
        # imported here: only a response with a condition series needs the condition package
        from lagsieve.condition.series import input_frame

        long = pd.concat([long, input_frame(table, from_condition)], ignore_index=True)
    return long, wanted


def response_annual(study: Study, response_id: str, files: list[str] | None = None,
                    condition=None) -> pd.DataFrame:
    """The tidy annual data of one response and its drivers, read from ``files`` only (the
    inputs that hold them; default: every input) and from the study's condition.csv
    (``condition``, when one of them is a condition series), exactly as `align` reads them."""
    long, wanted = response_long(study, response_id, files, condition)
    options = {k: v for k, v in study.series_options().items() if k in wanted}
    annual, _ = to_annual(long, options)
    return annual


def run_screen(config_path, annual_csv, response_id: str, out_dir, threads: int = 1,
               files: list[str] | None = None, condition=None) -> None:
    """Stage `screen` for one response: screen rows, hypothesis rows, forecasts, nulls.

    With ``annual_csv`` the aligned study table is used; otherwise (the workflow) the
    response's own input ``files`` are read, so that its screen depends on those files only, and
    the study's condition.csv (``condition``) when a series of the response comes from it.
    """
    screen_into(load_study(config_path), annual_csv, response_id, out_dir, threads, files, condition)


def screen_into(study: Study, annual_csv, response_id: str, out_dir, threads: int = 1,
                files: list[str] | None = None, condition=None) -> None:
    """:func:`run_screen` of a loaded ``study``: the five tables of one response in ``out_dir``."""
    by_slug = {slug(r): r for r in study.response_ids}
    response_id = by_slug.get(response_id, response_id)
    annual = (pd.read_csv(annual_csv) if annual_csv is not None
              else response_annual(study, response_id, files, condition))
    transforms = study.transforms()
    table = annual_table(annual, transforms)
    se = se_table(annual, transforms) if study.screen.get("weights") == "inverse-variance" else None
    season = None
    if study.season_of(response_id):  # a season response: monthly drivers lagged in seasons
        season = season_screen(study, response_id, response_long(study, response_id, files, condition)[0], table)
    workers = max(1, int(threads))
    with threadpool_limits(limits=1):  # many small systems: processes, not BLAS threads, pay off
        res = screen_response(table, study, response_id, se, workers=workers, season=season)
    out = Path(out_dir)
    write_csv(res.forecasts, out / "forecasts.csv")
    write_csv(res.nulls, out / "nulls.csv")
    write_csv(res.hypotheses, out / "hypotheses.csv")
    write_csv(ordered(res.screen, SCREEN_COLUMNS), out / "screen.csv")
    # the monthly drivers at their lags in seasons, for the evidence stage (a declared output of
    # every screen, so that Snakemake tracks it: empty, with its header, for an annual response)
    paired = (paired_table(season, response_id, table.index.to_numpy()) if season is not None
              else pd.DataFrame(columns=PAIRED_COLUMNS))
    write_csv(paired, out / "paired.csv")


# One screen job per study (rules/screen.smk): every response of the study in this process and
# its forked workers, each response's tables reused from the cache (stages.screen_cache) while
# its content key holds. Why one job: a job's Python start and imports cost about 1 s of CPU,
# which six jobs of the demo paid six times (DEVELOPERS.md, "The screen job").


@dataclass(frozen=True)
class ResponseJob:
    """One response of a study's screen job: what it reads, where it writes, logs and caches."""

    response: str      # the response's slug (its folder's name)
    files: list[str]   # the input files its screen reads
    condition: list    # condition.csv, when a series of it comes from there, else empty
    out: Path          # work/responses/<response>/, the declared output
    entry: Path        # work/cache/screen/<response>/
    log: Path          # logs/screen/<response>.log
    key: dict          # screen_cache.response_key
    cost: int          # driver-lag pairs screened: the larger first, so the workers end together


def response_job(study: Study, response: str, reads: dict, out_root: Path, cache: Path, logs: Path) -> ResponseJob:
    """The :class:`ResponseJob` of ``response`` (a slug) reading ``reads`` (``inputs``: its
    input files, ``condition``: condition.csv or nothing)."""
    rid = {slug(r): r for r in study.response_ids}.get(response, response)
    files, condition = list(reads.get("inputs") or []), list(reads.get("condition") or [])
    key = response_key(study, response, files, condition, wanted_series(study, rid))
    cost = sum(len(study.lags_for(d)) for d in study.drivers_for(rid))
    return ResponseJob(response, files, condition, out_root / response, cache / response,
                       logs / f"{response}.log", key, cost)


def run_screens(config_path, responses: dict[str, dict], out_root, log_dir, threads: int = 1,
                cache=None) -> dict[str, str]:
    """Stage `screen` of a study: each response of ``responses`` (slug -> what it reads, see
    :func:`response_job`) copied from the cache when its key is stored there, else screened,
    ``min(threads, to do)`` at a time in forked processes, and stored; its tables written to
    ``out_root/<slug>/``, its log to ``log_dir/<slug>.log``. ``cache``: default the folder
    ``cache/screen`` beside ``out_root``. Returns slug -> ``reused`` or ``computed``. A failed
    response leaves its traceback in its log, nothing in its folder and nothing in the cache; the
    others go on, then the job ends with one line on the terminal and status 1."""
    study, out_root = load_study(config_path), Path(out_root)
    cache = out_root.parent / "cache" / "screen" if cache is None else Path(cache)
    tidy(cache, responses)
    jobs = [response_job(study, r, reads, out_root, cache, Path(log_dir)) for r, reads in responses.items()]
    done, failed = {}, []
    for job in jobs:
        if stored(job.entry, job.key):
            restore(job.entry, job.out)
            done[job.response] = "reused"
            log.info("screen %s: reused (its key is unchanged: %s)", job.response, job.entry)
    todo = {j.response: j for j in sorted((j for j in jobs if j.response not in done), key=lambda j: -j.cost)}
    for response, problem, wall, cpu in _compute(study, list(todo.values()), threads):
        if problem is None:  # its tables in place as soon as it is done (an interrupted job keeps them)
            restore(todo[response].entry, todo[response].out)
            done[response] = "computed"
            log.info("screen %s: computed in %.2f s wall, %.2f s CPU", response, wall, cpu)
        else:
            failed.append(response)
            log.error("screen %s: failed (%s); see %s", response, problem, todo[response].log)
    if failed:
        sys.__stderr__.write(f"lagsieve: job failed; see {todo[failed[0]].log}\n")
        raise SystemExit(1)
    return done


def _compute(study: Study, todo: list[ResponseJob], threads: int):
    """:func:`_screen_to_cache` of every job of ``todo``, each result as it ends: in this
    process when one worker is enough, else in ``min(threads, len(todo))`` processes forked from
    this one (its imports and ``study`` shared). A worker that ends without a word (killed by a
    signal: the out-of-memory killer, a cluster's memory limit) fails the responses it had not
    returned, in words, instead of leaving the job waiting for them."""
    workers = min(max(1, int(threads)), len(todo))
    if workers <= 1:
        yield from (_screen_to_cache(study, job) for job in todo)
        return
    # imported here: a screen job with one response to do (the usual rerun) starts no pool
    import multiprocessing as mp
    from concurrent.futures import ProcessPoolExecutor, as_completed
    from concurrent.futures.process import BrokenProcessPool

    frozen = gc.get_freeze_count()
    spare_final_collection()  # gc.freeze: the workers' collections leave the shared pages unwritten
    sys.stderr.flush()  # the job's log: a worker must not inherit (and write again) unwritten lines
    pool = ProcessPoolExecutor(workers, mp_context=mp.get_context("fork"), initializer=_worker_start,
                               initargs=(study,))
    try:
        futures = {pool.submit(_screen_in_worker, job): job for job in todo}  # in order: largest first
        for done in as_completed(futures):
            try:
                yield done.result()
            except BrokenProcessPool:
                yield futures[done].response, WORKER_LOST, 0.0, 0.0
        pool.shutdown(wait=True)
    finally:
        _end_workers(pool)
        if not frozen:  # the caller's process goes on (a batch, a test): its objects back to the collector
            gc.unfreeze()


#: What a response's failure says when its worker process ended without returning it.
WORKER_LOST = "its worker process ended without a word (killed by a signal: out of memory?)"


def _end_workers(pool) -> None:
    """Stop the pool's workers now (Ctrl-C or a failure in this process: the workers ignore
    Ctrl-C and would otherwise finish their responses first), then let the pool go."""
    for process in list((getattr(pool, "_processes", None) or {}).values()):  # the executor's own table
        if process.is_alive():
            process.terminate()
    pool.shutdown(wait=True, cancel_futures=True)


_WORKER_STUDY: list = []  # the study of a forked worker (_worker_start)


def _worker_start(study: Study) -> None:
    """A worker's start: Ctrl-C is left to the job's process, which then ends its workers."""
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    _WORKER_STUDY[:] = [study]


def _screen_in_worker(job: ResponseJob) -> tuple:
    return _screen_to_cache(_WORKER_STUDY[0], job)


def _screen_to_cache(study: Study, job: ResponseJob) -> tuple[str, str | None, float, float]:
    """Screen one response into a new cache entry, its log in ``job.log``: (slug, None or the
    failure in a few words, wall seconds, CPU seconds of this process)."""
    t0, c0 = time.perf_counter(), os.times()
    with response_log(job.log) as fh:
        folder = staging(job.entry.parent, job.response)
        try:
            screen_into(study, None, job.response, folder, 1, job.files, job.condition)
            store(folder, job.key, job.entry)
        except BaseException as exc:
            shutil.rmtree(folder, ignore_errors=True)
            if isinstance(exc, KeyboardInterrupt):
                raise
            traceback.print_exc(file=fh)
            return job.response, failure_words(exc), time.perf_counter() - t0, cpu_since(c0)
        wall, cpu = time.perf_counter() - t0, cpu_since(c0)
        fh.write(f"lagsieve: {job.response} screened in {wall:.3f} s wall, {cpu:.3f} s CPU (pid {os.getpid()})\n")
    return job.response, None, wall, cpu


@contextmanager
def response_log(path: Path):
    """Warnings, errors and progress of one response's screen to its own log ``path`` (open
    file yielded), the job's log handlers put back afterwards."""
    path.parent.mkdir(parents=True, exist_ok=True)
    with open(path, "w", encoding="utf-8") as fh, contextlib.redirect_stderr(fh), root_logging_to(fh):
        yield fh
