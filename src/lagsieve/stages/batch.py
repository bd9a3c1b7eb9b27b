"""Batches of studies: a chunk of studies per job, every stage of each study in one process.

A small study costs little to compute and much to start: one process per stage and response,
each paying Python's start, its imports and its worker pool. With ``batch: K`` in Snakemake's
config (``--config batch=K``, or ``batch: K`` in the file given with ``--configfile``) the
workflow runs one job per chunk of K studies instead (``rules/batch.smk``): the job runs every
stage of its studies, one study after the other, in one process, and writes every study's
outputs and logs exactly where the per-stage jobs write them. A study whose config and input
files have not changed since the chunk last ran it is not run again (its stamp,
``work/batch_stamp.json``, holds their digests), so a rerun after one study's input changed
redoes that study only, although Snakemake reruns its whole chunk.
"""
from __future__ import annotations

import gc
import json
import sys
import time
from pathlib import Path
from types import SimpleNamespace

from lagsieve.errors import InputErrors, InputProblem, report_problems, show
from lagsieve.io.files import write_json
from lagsieve.stages.plan import PlannedStudy, files_stamp, study_files

CONDITION_OUTPUTS = ("condition.csv", "condition_sensitivity.csv", "work/condition_fish.csv", "work/condition_fit.json")


def batch_problems(value, n_studies: int) -> list[InputProblem]:
    """What is wrong with ``batch`` (Snakemake's config: studies per job) for a run of
    ``n_studies`` studies: one problem, or none."""
    fix = f"give a whole number from 1 to {n_studies} (this run's studies; each job runs that many)"
    if isinstance(value, bool) or not isinstance(value, (int, str)) or not str(value).strip().isdigit():
        what = f"{show(value)} is not a whole number of studies per job"
    elif int(str(value).strip()) == 0:
        what = "0 studies per job: a job must run at least one study"
    elif int(str(value).strip()) > n_studies:
        what = f"{int(str(value).strip())} studies per job, but this run has {n_studies}"
    else:
        return []
    return [InputProblem(what=what, fix=fix, key="batch")]


def plan_batches(config: dict, studies: dict[str, PlannedStudy]) -> dict[str, list[str]]:
    """Chunks of ``batch`` studies (in the order of the run's configs), named ``0001``, ``0002``
    and so on; none without ``batch`` in Snakemake's config. A bad value prints one line and
    exits with status 2."""
    value = config.get("batch")
    if value is None:
        return {}
    problems = batch_problems(value, len(studies))
    if problems:
        sys.exit(report_problems(InputErrors(problems)))
    ids, size = list(studies), int(str(value).strip())
    return {f"{i // size + 1:04d}": ids[i:i + size] for i in range(0, len(ids), size)}


def study_stamp(planned: PlannedStudy) -> str:
    """A digest of what a study's results are made from: its config file, its input and sample
    files (:func:`~lagsieve.stages.plan.study_files`), and the tool's version."""
    return files_stamp(study_files(planned.study))


def _log(folder: Path, name: str) -> SimpleNamespace:
    """What :func:`logged` needs of a Snakemake job: its log path."""
    return SimpleNamespace(log=[str(folder / "logs" / name)])


def run_study(planned: PlannedStudy, out: Path, threads: int = 1) -> None:
    """Every stage of one study, writing what the per-stage jobs write, each stage's log where
    its job's log goes."""
    # imported here, not at the top: the Snakefile imports this module when it plans a run
    # (plan_batches), and the stages' imports (matplotlib, pandas, scipy) cost every run's
    # planning about 1.9 s of CPU (python -X importtime); a batch job pays them once, here
    from lagsieve.ledger.update import update_ledger
    from lagsieve.stages.condition import run_condition  # lazy: see above
    from lagsieve.stages.evidence import run_align, run_evidence  # lazy: see above
    from lagsieve.stages.report import run_report  # lazy: see above
    from lagsieve.stages.common import logged  # lazy: see above (pandas)
    from lagsieve.stages.screen import run_screen  # lazy: see above

    cfg, d = planned.config_path, out / planned.study.id
    condition = [] if planned.condition is None else [str(d / "condition.csv")]
    if condition:
        with logged(_log(d, "condition.log")):
            run_condition(cfg, *[d / name for name in CONDITION_OUTPUTS])
    for r in planned.response_slugs:
        with logged(_log(d, f"screen/{r}.log")):
            run_screen(cfg, None, r, d / "work" / "responses" / r, threads=threads, files=list(planned.input_paths),
                       condition=condition if r in planned.condition_responses else [])
    annual, notes = d / "work" / "annual.csv", d / "work" / "notes.csv"
    with logged(_log(d, "evidence.log")):
        run_align(cfg, annual, notes, condition=condition)
        run_evidence(cfg, annual, d / "work", d / "screen.csv", d / "evidence.csv")
    with logged(_log(d, "report.log")):
        update_ledger(cfg, annual, d / "evidence.csv", d, d / "work" / "ledger_update.json")
        run_report(cfg, annual, notes, d / "work", d / "screen.csv", d / "evidence.csv", d / "report.html",
                   d / "provenance.json", d / "figures", threads=threads,
                   condition=[str(d / name) for name in CONDITION_OUTPUTS] if condition else [])


def run_batch(studies: list[PlannedStudy], out: str | Path, record: str | Path, threads: int = 1) -> None:
    """Every study of a chunk, one after the other (a study whose stamp is unchanged and whose
    report exists is left as it is); ``record``: what ran, with seconds per study. A study that
    fails does not stop the others; the job fails at the end, naming them."""
    # imported here, as run_study's stages are (see there): the report's figures pull in matplotlib
    from lagsieve.report.figures import spares_kept

    out = Path(out)
    with spares_kept():  # one study's figures are drawn on the previous study's, set aside
        rows, failed = _run_each(studies, out, threads)
    if failed:
        raise RuntimeError(f"{len(failed)} of {len(studies)} studies of this batch failed: {', '.join(failed)} "
                           f"(see each study's logs/)")
    write_json({"studies": rows}, record)


def _run_each(studies: list[PlannedStudy], out: Path, threads: int) -> tuple[list[dict], list[str]]:
    """:func:`run_batch`'s loop: (what ran, with seconds per study; the ids of the studies that failed)."""
    rows, failed = [], []
    for planned in studies:
        d = out / planned.study.id
        stamp, stamp_file = study_stamp(planned), d / "work" / "batch_stamp.json"
        if (d / "report.html").is_file() and stamp_file.is_file() and json.loads(stamp_file.read_text()) == stamp:
            rows.append({"study": planned.study.id, "ran": False, "seconds": 0.0})
            continue
        t0 = time.perf_counter()
        try:
            run_study(planned, out, threads)
        except (Exception, SystemExit) as exc:  # noqa: BLE001 - the traceback is in the study's stage log
            if isinstance(exc, SystemExit) and exc.code != 1:  # logged: 1 a failed stage, 130 Ctrl-C
                raise
            failed.append(planned.study.id)  # the others go on
            continue
        finally:
            gc.unfreeze()  # the stages froze their objects for an exit that has not come (stages.allocator)
        write_json(stamp, stamp_file)
        rows.append({"study": planned.study.id, "ran": True, "seconds": round(time.perf_counter() - t0, 3)})
    return rows, failed
