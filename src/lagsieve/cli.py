"""The `lagsieve` command line: init, check, run, ledger.

A user's mistake prints one line per problem and exits with status 2, never a traceback.
"""
from __future__ import annotations

import argparse
import os
import subprocess
import sys
from pathlib import Path

from lagsieve.io.config import WORKFLOW
from lagsieve.errors import InputErrors, report_problems

EXIT_USER = 2


def _err(msg: str) -> int:
    print(msg, file=sys.stderr)
    return EXIT_USER


def cmd_init(args) -> int:
    from lagsieve.demo.simulate import demo_config_text, write_demo

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
    from lagsieve.pipeline import check_study

    return check_study(config)


def cmd_check(args) -> int:
    try:
        study, annual, notes, warnings = _check(args.config)
    except InputErrors as exc:
        return report_problems(exc)
    for w in warnings:
        print(w.line(), file=sys.stderr)
    years = annual["year"]
    print(f"ok: study '{study.study}': {len(study.responses)} responses, {len(study.drivers)} drivers, "
          f"years {int(years.min())}-{int(years.max())}, {len(notes)} years dropped or filled")
    return 0


def cmd_run(args, extra: list[str]) -> int:
    try:
        study, *_ = _check(args.config)
    except InputErrors as exc:
        return report_problems(exc)
    cfg = Path(args.config).resolve()
    out = Path(args.out).resolve() if args.out else cfg.parent / "results"
    out.mkdir(parents=True, exist_ok=True)
    cmd = [sys.executable, "-m", "snakemake", "--snakefile", str(WORKFLOW / "Snakefile"),
           "--directory", str(out), "--cores", str(args.cores),
           "--config", f"study_config={cfg}", f"out={out}", *extra]
    env = dict(os.environ)
    if args.resume:
        # a killed run leaves Snakemake's lock and its incomplete-job markers behind
        subprocess.run(cmd + ["--unlock"], env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        cmd.append("--rerun-incomplete")
    proc = subprocess.run(cmd, env=env)
    if proc.returncode == 0 and not ({"-n", "--dry-run", "--dryrun"} & set(extra)):
        print(f"results in {out / study.study}")
    return proc.returncode


def cmd_ledger(args) -> int:
    try:
        from lagsieve.ledger.store import print_track_record
    except ImportError:
        return _err("the forecast ledger is not available in this version")
    try:
        return print_track_record(args.config, args.out)
    except InputErrors as exc:
        return report_problems(exc)


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="lagsieve", description="Screen candidate drivers of natural mortality "
                                "or condition honestly: lagged and nonlinear, out of sample, against surrogates.")
    p.add_argument("--version", action="version", version=f"lagsieve {__import__('lagsieve').__version__}")
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
    if args.command == "init":
        return cmd_init(args)
    if args.command == "check":
        return cmd_check(args)
    if args.command == "run":
        return cmd_run(args, [a for a in extra if a != "--"])
    return cmd_ledger(args)


if __name__ == "__main__":
    sys.exit(main())
