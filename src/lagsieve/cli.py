"""The `lagsieve` command line: init, check, run, ledger (also `python -m lagsieve`).

A user's mistake prints one line per problem and exits with status 2, never a traceback; so
does a file of the installed package that has gone missing (with the advice to reinstall).

User files are kept: `init` never overwrites a file (:func:`lagsieve.demo.write.write_study`);
`run` writes only under its results folder, which it locks for the run
(:mod:`lagsieve.io.lock`: a second run is refused while the first lives; a dead run's lock is
taken over, so a plain rerun continues a killed run), after checking the study, the folder
and the forecast ledger (:func:`lagsieve.ledger.store.check_ledger`) without writing.

Lazy imports, for two reasons. Measured (`python -X importtime -m lagsieve --help`, this
shared machine): 0.35-0.4 s with the imports below, 3.3-4.5 s when the stages
(lagsieve.pipeline, lagsieve.demo, lagsieve.ledger: pandas, scipy.stats) are imported at
the top too; so each command imports its stage inside its function (marked "lazy"). And
lagsieve.io.config reads the packaged schema when it is imported, so it too is imported
inside `main`'s guard, where a missing schema gives the one-line message, not a traceback.
"""
from __future__ import annotations

import argparse
import errno
import json
import os
import shlex
import signal
import subprocess
import sys
import tempfile
import threading
from dataclasses import replace
from pathlib import Path

from jinja2 import TemplateNotFound

import lagsieve
import lagsieve.workflow
from lagsieve.errors import REINSTALL, InputErrors, InputProblem, report_problems
from lagsieve.io.lock import RESULTS_FIX, check_folder, claim_results, make_folder
from lagsieve.stages.allocator import spare_final_collection

EXIT_USER = 2
EXIT_INTERRUPTED = 130  # 128 + SIGINT, the shell's convention
INTERRUPTED = "interrupted; run the same command again to continue where it stopped"
CONFIG_NAME = "config.yaml"  # what `lagsieve init` writes, and what a study folder given alone must hold
DRY_RUN = {"-n", "--dry-run", "--dryrun"}  # Snakemake's options for a dry run
# Snakemake's default job selection solves an integer program with an external solver before
# every start of a job (about 25-40 ms each, nine times for the demo, plus 45 ms to import
# pulp); it pays off with temporary files or scarce resources, which the workflow does not
# have, so a run selects greedily unless the user chose a scheduler or a profile
GREEDY = ["--scheduler", "greedy"]
CHOSEN_ELSEWHERE = ("--scheduler", "--profile", "--workflow-profile")


def _err(msg: str) -> int:
    print(msg, file=sys.stderr)
    return EXIT_USER


def config_path(given: str) -> str:
    """The config file a command works on: ``given`` itself, or, for a study folder,
    the ``config.yaml`` inside it (a folder without one is left for the check to refuse)."""
    folder = Path(given)
    return str(folder / CONFIG_NAME) if folder.is_dir() and (folder / CONFIG_NAME).is_file() else given


def cmd_init(args) -> int:
    from lagsieve.demo.write import DATA_FOLDER, write_study  # lazy: see the module docstring

    try:
        cfg = write_study(args.dir)
    except InputErrors as exc:
        return report_problems(exc)
    print(f"wrote {cfg} and the invented demo data in {cfg.parent / DATA_FOLDER}; next: lagsieve run {cfg}")
    return 0


def _check(config: str):
    from lagsieve.io.config import SCHEMA_FILE  # lazy: see the module docstring
    from lagsieve.pipeline import check_study  # lazy: see the module docstring

    _require(SCHEMA_FILE)
    return check_study(config)


def _require(resource) -> None:
    """A file the package ships (Snakefile, schema): FileNotFoundError if it is gone."""
    if not resource.is_file():
        raise FileNotFoundError(errno.ENOENT, "missing", str(resource))


def _package_roots() -> list[Path]:
    """Where the installed package's own files live (the workflow folder may be mapped apart)."""
    return [Path(lagsieve.__file__).resolve().parent, Path(lagsieve.workflow.__file__).resolve().parent]


def missing_internal(exc: BaseException) -> str | None:
    """The name of a file of the package itself that ``exc`` says is missing, else None."""
    if isinstance(exc, TemplateNotFound):
        return f"template '{exc.name}'"
    if isinstance(exc, ModuleNotFoundError) and (exc.name or "").startswith("lagsieve."):
        return f"module '{exc.name}'"
    if isinstance(exc, FileNotFoundError) and exc.filename:
        path = Path(str(exc.filename)).resolve()
        if any(root == path or root in path.parents for root in _package_roots()):
            return str(path)
    return None


def cmd_check(args) -> int:
    try:
        study, annual, notes, warnings = _check(args.config)
    except InputErrors as exc:
        return report_problems(exc)
    for w in warnings:
        print(w.line(), file=sys.stderr)
    years = annual["year"]
    print(f"ok: study '{study.id}': {len(study.responses)} responses, {len(study.drivers)} drivers, "
          f"years {int(years.min())}-{int(years.max())}, {len(notes)} years dropped or filled")
    return 0


def cmd_run(args, extra: list[str]) -> int:
    """Check the studies and their ledgers, lock the results folder (:mod:`lagsieve.io.lock`),
    run the workflow. Every refusal comes before anything is written under the results folder.
    The workflow engine's process starts first (:class:`_Engine`): its imports overlap the
    check, and it runs only when the check has passed."""
    if args.cores < 1:
        return _err(f"--cores {args.cores}: a run needs at least one core; give --cores 1 or more "
                    f"(this machine has {os.cpu_count() or 1})")
    with _Engine() as engine:
        return _checked_run(args, extra, engine)


def _checked_run(args, extra: list[str], engine: _Engine) -> int:
    """:func:`cmd_run` from the check on, ``engine`` waiting for Snakemake's arguments."""
    from lagsieve.ledger.store import check_ledger, resolve_ledger_path  # lazy: see the module docstring

    try:
        if args.batch is not None and _batch_problems(args.batch, len(args.config)):
            raise InputErrors(_batch_problems(args.batch, len(args.config)))
        checks = [_check(c) for c in args.config]
        studies = [c[0] for c in checks]
        cfgs = [Path(c).resolve() for c in args.config]
        _unique_ids(studies, args.config)
        out = Path(args.out).resolve() if args.out else cfgs[0].parent / "results"
        check_folder(out, "the results folder cannot be made", RESULTS_FIX)
        for study in studies:
            check_ledger(resolve_ledger_path(study, out / study.id))
        batch = [] if args.batch is None else ["--batch", str(args.batch)]
        lock = claim_results(out, shlex.join(["lagsieve", "run", *map(str, cfgs), "--out", str(out),
                                              "--cores", str(args.cores), *batch, *extra]))
    except InputErrors as exc:
        return report_problems(exc)
    with lock:
        if lock.took_over is not None:
            print(f"note: the run that held {out} has stopped ({lock.took_over.describe()}); "
                  f"this run continues where it stopped", file=sys.stderr)
        try:
            return _run_workflow(args, extra, checks, cfgs, out, lock, engine)
        except InputErrors as exc:
            return report_problems(exc)


def _unique_ids(studies: list, configs: list[str]) -> None:
    """One problem for a study id that two of the configs given share (their results would meet)."""
    seen: set[str] = set()
    for study, path in zip(studies, configs):
        if study.id in seen:
            raise InputErrors([InputProblem(what=f"id '{study.id}' is used by two configs", file=path, key="study",
                                            fix="give each study its own id")])
        seen.add(study.id)


def _batch_problems(value: str, n_studies: int) -> list:
    """What is wrong with ``--batch`` (:func:`lagsieve.stages.batch.batch_problems`), named by the
    option rather than the config key."""
    from lagsieve.stages.batch import batch_problems  # lazy: see the module docstring

    return [replace(p, key=None, what=f"--batch {value}: {p.what}") for p in batch_problems(value, n_studies)]


def _scheduler(extra: list[str]) -> list[str]:
    """:data:`GREEDY`, or nothing when ``extra`` or the environment chooses (a profile may)."""
    chosen = any(a.split("=", 1)[0] in CHOSEN_ELSEWHERE for a in extra) or os.environ.get("SNAKEMAKE_PROFILE")
    return [] if chosen else GREEDY


def _snakemake_locked(out: Path) -> bool:
    """Whether Snakemake's own lock files are in ``out`` (left by a killed run: while this run
    holds the tool's lock no other run writes there)."""
    locks = out / ".snakemake" / "locks"
    return locks.is_dir() and any(locks.iterdir())


class _Relay:
    """The workflow engine's output passed on line by line, until Ctrl-C: from then on the
    engine's messages about the jobs it stops (and their tracebacks) are dropped, so that the
    user reads one line (:data:`INTERRUPTED`); the jobs' logs keep the details."""

    def __init__(self, proc: subprocess.Popen):
        self.quiet = threading.Event()
        self.threads = [threading.Thread(target=self._copy, args=(src, dst), daemon=True)
                        for src, dst in ((proc.stdout, sys.stdout), (proc.stderr, sys.stderr))]
        for th in self.threads:
            th.start()
        if threading.current_thread() is threading.main_thread():
            signal.signal(signal.SIGINT, self._interrupted)

    def _interrupted(self, signum, frame):
        # at once: Popen.wait would pass on the engine's lines for a quarter second more
        self.quiet.set()
        signal.signal(signal.SIGINT, signal.default_int_handler)
        raise KeyboardInterrupt

    def _copy(self, src, dst) -> None:
        for line in src:
            if not self.quiet.is_set():
                dst.write(line)
                dst.flush()

    def join(self) -> None:
        for th in self.threads:
            th.join()


class _Engine:
    """Snakemake's process (:mod:`lagsieve.stages.engine`), started early so that its imports
    overlap the check; :meth:`run` hands it Snakemake's arguments. Left without them (a refusal,
    Ctrl-C, a fault) it is stopped when the ``with`` block ends, having written nothing."""

    def __init__(self):
        env = dict(os.environ)
        env.setdefault("PYTHONUNBUFFERED", "1")  # its lines reach the relay (a pipe) as they are written
        self.env = env
        self.proc = subprocess.Popen([sys.executable, "-m", "lagsieve.stages.engine"], env=env,
                                     stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                     text=True, errors="replace")
        self.running = False

    def run(self, argv: list[str]) -> subprocess.Popen:
        """Start Snakemake with ``argv`` (its options, as after ``python -m snakemake``)."""
        self.running = True
        try:
            self.proc.stdin.write(json.dumps(argv) + "\n")
            self.proc.stdin.close()
        except BrokenPipeError:
            pass  # it has ended (a broken installation): its output and status say why
        return self.proc

    def __enter__(self) -> _Engine:
        return self

    def __exit__(self, *exc) -> None:
        if not self.running:
            self.proc.kill()  # it has only imported modules
            self.proc.communicate()


def _wait(proc: subprocess.Popen, lock) -> int:
    """Wait for the workflow engine (its pid joins the lock's record); on Ctrl-C, which reaches
    it and its jobs too (one process group), wait while it stops them, so that the lock is
    released after it, then raise KeyboardInterrupt for :func:`main`'s one line."""
    relay = _Relay(proc)
    try:
        lock.record_child(proc.pid)
    except OSError:
        pass  # the lock still names this process, which lives as long as the engine runs
    try:
        code = proc.wait()
    except KeyboardInterrupt:
        relay.quiet.set()
        _wait_quietly(proc)
        raise
    relay.join()
    return code


def _wait_quietly(proc: subprocess.Popen) -> None:
    """Wait for the engine to stop its jobs; further Ctrl-C presses do not cut the wait short
    (the engine received them and is stopping)."""
    while True:
        try:
            proc.wait()
            return
        except KeyboardInterrupt:
            continue


def _run_workflow(args, extra: list[str], checks: list, cfgs: list[Path], out: Path, lock,
                  engine: _Engine) -> int:
    """Snakemake on the locked results folder ``out``: a stale Snakemake lock is cleared and
    the jobs a killed run left half done are redone, so a plain rerun continues a run. What
    the check of each study (``checks``) found goes to the workflow's plan in the run config,
    so that Snakemake does not check the same files again; ``engine`` runs it."""
    from lagsieve.io.config import WORKFLOW  # lazy: see the module docstring
    from lagsieve.stages.plan import checked_entry, write_run_config  # lazy: see the module docstring

    studies = [c[0] for c in checks]
    snakefile = WORKFLOW / "Snakefile"
    _require(snakefile)
    dry = bool(DRY_RUN & set(extra))
    with tempfile.TemporaryDirectory(prefix="lagsieve-") as scratch:
        # a dry run writes nothing of the study: its run config goes to a scratch folder
        work = Path(scratch) if dry else out / studies[0].id / "work"
        if not dry:
            make_folder(work, "the study's results folder cannot be made", RESULTS_FIX)
        # the paths go in a YAML file: `--config key=value` would cut a folder name at its commas
        checked = {str(cfg): checked_entry(study, annual) for cfg, (study, annual, _, _) in zip(cfgs, checks)}
        run_config = write_run_config(cfgs, out, work / "run_config.yaml", batch=args.batch, checked=checked)
        options = ["--snakefile", str(snakefile), "--configfile", str(run_config), "--directory", str(out),
                   "--cores", str(args.cores), *extra, *_scheduler(extra)]
        if args.resume or lock.took_over is not None or _snakemake_locked(out):
            # a killed run leaves Snakemake's lock behind; this run holds the folder, so it is stale
            subprocess.run([sys.executable, "-m", "snakemake", *options, "--unlock"], env=engine.env,
                           stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        options.append("--rerun-incomplete")  # and the jobs it left half done are done again
        spare_final_collection()  # this process only waits from here on (see lagsieve.stages.allocator)
        returncode = _wait(engine.run(options), lock)
    if returncode == 0 and not dry:
        for study in studies:
            print(f"results in {out / study.id}")
    return returncode


def cmd_ledger(args) -> int:
    from lagsieve.ledger import print_track_record  # lazy: see the module docstring

    try:
        return print_track_record(args.config, args.out)
    except InputErrors as exc:
        return report_problems(exc)


CONFIG_HELP = ("the study's config file, or the study folder holding config.yaml (as `lagsieve init` "
               "writes it)")
EXAMPLES = {
    None: ["lagsieve init mystudy", "lagsieve run mystudy --cores 2"],
    "init": ["lagsieve init mystudy", "lagsieve init ~/studies/shelf2025"],
    "check": ["lagsieve check mystudy", "lagsieve check mystudy/config.yaml"],
    "run": ["lagsieve run mystudy", "lagsieve run mystudy/config.yaml --cores 1 --out /scratch/results",
            "lagsieve run mystudy -n    (a dry run: list the jobs, run none)",
            "lagsieve run studies/*/config.yaml --batch 10 --out results    (10 studies per job)"],
    "ledger": ["lagsieve ledger mystudy", "lagsieve ledger mystudy/config.yaml --out /scratch/results"],
}


def _epilog(command: str | None) -> str:
    return "examples:\n" + "\n".join(f"  {e}" for e in EXAMPLES[command])


def _sub(sub, name: str, text: str) -> argparse.ArgumentParser:
    return sub.add_parser(name, help=text, description=text, epilog=_epilog(name),
                          formatter_class=argparse.RawDescriptionHelpFormatter)


def build_parser() -> argparse.ArgumentParser:
    cores = max(1, os.cpu_count() or 1)
    p = argparse.ArgumentParser(prog="lagsieve", description="Screen candidate drivers of natural mortality "
                                "or condition honestly: lagged and nonlinear, out of sample, against surrogates.",
                                epilog=_epilog(None), formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--version", action="version", version=f"lagsieve {lagsieve.__version__}")
    sub = p.add_subparsers(dest="command", required=True, metavar="{init,check,run,ledger}",
                           help="the command (lagsieve COMMAND --help explains each)")
    s = _sub(sub, "init", "write a new study folder with a commented config and the invented demo data "
                          "(never overwrites a file: refuses, naming them, if any of its files exists)")
    s.add_argument("dir", help="the study folder: new, or one without config.yaml and data/ files of the same names")
    s = _sub(sub, "check", "validate a study config and every input file, listing every problem found")
    s.add_argument("config", help=CONFIG_HELP)
    s = _sub(sub, "run", "check, then run the screening workflow for a study, or several in one run (options "
                         "the tool does not know go to Snakemake)")
    s.add_argument("config", nargs="+", help=CONFIG_HELP + "; several run together, their results side by side "
                   "in one results folder")
    s.add_argument("--batch", metavar="K", help="run the studies K at a time in one job each (every stage of a "
                   "study in one process: Python's start and the imports paid once per K studies, for many small "
                   "studies); K from 1 to the number of configs given (default: one job per stage)")
    s.add_argument("--cores", type=int, default=cores,
                   help=f"cores to use, 1 or more (default: all {cores} cores of this machine)")
    s.add_argument("--out", help="results folder (default: results/ beside the (first) config); one run at a time "
                   "writes there: a second is refused while the first lives")
    s.add_argument("--resume", action="store_true",
                   help="not needed any more: a plain rerun after an interrupted run continues it (it clears "
                        "the dead run's locks and redoes its incomplete jobs); refused while that run lives")
    s = _sub(sub, "ledger", "print the forecast track record of a study")
    s.add_argument("config", help=CONFIG_HELP)
    s.add_argument("--out", help="results folder (default: results/ beside the config)")
    return p


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    parser = build_parser()
    args, extra = parser.parse_known_args(argv)
    if extra and args.command != "run":
        parser.error(f"unrecognised arguments: {' '.join(extra)}")
    if isinstance(getattr(args, "config", None), list):  # run: one or more
        args.config = [config_path(c) for c in args.config]
    elif hasattr(args, "config"):
        args.config = config_path(args.config)
    try:
        return _dispatch(args, extra)
    except KeyboardInterrupt:
        print(INTERRUPTED, file=sys.stderr)
        return EXIT_INTERRUPTED
    except (FileNotFoundError, ModuleNotFoundError, TemplateNotFound) as exc:
        what = missing_internal(exc)
        if what is None:  # not a file of the package: a real fault, with its traceback
            raise
        return _err(f"{what}: this file of the lagsieve package is missing (a damaged installation); "
                    f"reinstall the package: {REINSTALL}")


def _dispatch(args, extra: list[str]) -> int:
    if args.command == "init":
        return cmd_init(args)
    if args.command == "check":
        return cmd_check(args)
    if args.command == "run":
        return cmd_run(args, [a for a in extra if a != "--"])
    return cmd_ledger(args)


if __name__ == "__main__":
    sys.exit(main())
