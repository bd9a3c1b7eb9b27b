"""The `lagsieve` command line: init, check, run, ledger (also `python -m lagsieve`).

A user's mistake prints one line per problem and exits with status 2, never a traceback; so
does a file of the installed package that has gone missing (with the advice to reinstall).

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
import os
import subprocess
import sys
from pathlib import Path

from jinja2 import TemplateNotFound

import lagsieve
import lagsieve.workflow
from lagsieve.errors import InputErrors, report_problems

EXIT_USER = 2
REINSTALL = "python -m pip install --force-reinstall lagsieve"


def _err(msg: str) -> int:
    print(msg, file=sys.stderr)
    return EXIT_USER


def cmd_init(args) -> int:
    from lagsieve.demo import demo_config_text, write_demo  # lazy: see the module docstring

    d = Path(args.dir)
    cfg = d / "config.yaml"
    if cfg.exists():
        return _err(f"{cfg}: a config already exists here; choose an empty folder or remove it first")
    d.mkdir(parents=True, exist_ok=True)
    write_demo(d / "data")
    cfg.write_text(demo_config_text("data"), encoding="utf-8")
    print(f"wrote {cfg} and the invented demo data in {d / 'data'}; next: lagsieve run {cfg}")
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
    from lagsieve.io.config import WORKFLOW  # lazy: see the module docstring

    try:
        study, *_ = _check(args.config)
    except InputErrors as exc:
        return report_problems(exc)
    cfg = Path(args.config).resolve()
    out = Path(args.out).resolve() if args.out else cfg.parent / "results"
    out.mkdir(parents=True, exist_ok=True)
    snakefile = WORKFLOW / "Snakefile"
    _require(snakefile)
    from lagsieve.pipeline import write_run_config  # lazy: see the module docstring

    # the paths go in a YAML file: `--config key=value` would cut a folder name at its commas
    run_config = write_run_config(cfg, out, out / study.id / "work" / "run_config.yaml")
    cmd = [sys.executable, "-m", "snakemake", "--snakefile", str(snakefile), "--configfile", str(run_config),
           "--directory", str(out), "--cores", str(args.cores), *extra]
    env = dict(os.environ)
    if args.resume:
        # a killed run leaves Snakemake's lock and its incomplete-job markers behind
        subprocess.run(cmd + ["--unlock"], env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        cmd.append("--rerun-incomplete")
    proc = subprocess.run(cmd, env=env)
    if proc.returncode == 0 and not ({"-n", "--dry-run", "--dryrun"} & set(extra)):
        print(f"results in {out / study.id}")
    return proc.returncode


def cmd_ledger(args) -> int:
    from lagsieve.ledger import print_track_record  # lazy: see the module docstring

    try:
        return print_track_record(args.config, args.out)
    except InputErrors as exc:
        return report_problems(exc)


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="lagsieve", description="Screen candidate drivers of natural mortality "
                                "or condition honestly: lagged and nonlinear, out of sample, against surrogates.")
    p.add_argument("--version", action="version", version=f"lagsieve {lagsieve.__version__}")
    sub = p.add_subparsers(dest="command", required=True)
    s = sub.add_parser("init", help="write a new study folder with a commented config and the invented demo data")
    s.add_argument("dir")
    s = sub.add_parser("check", help="validate a study config and every input file")
    s.add_argument("config")
    s = sub.add_parser("run", help="run the screening workflow for a study (extra options go to Snakemake)")
    s.add_argument("config")
    s.add_argument("--cores", type=int, default=max(1, os.cpu_count() or 1))
    s.add_argument("--out", help="results folder (default: results/ beside the config)")
    s.add_argument("--resume", action="store_true",
                   help="after an interrupted run: remove the stale lock and redo incomplete jobs")
    s = sub.add_parser("ledger", help="print the forecast track record of a study")
    s.add_argument("config")
    s.add_argument("--out", help="results folder (default: results/ beside the config)")
    return p


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    parser = build_parser()
    args, extra = parser.parse_known_args(argv)
    if extra and args.command != "run":
        parser.error(f"unrecognised arguments: {' '.join(extra)}")
    try:
        return _dispatch(args, extra)
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
