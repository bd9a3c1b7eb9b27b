"""Peak memory of every job of one large invented study (default 500 drivers x 3 responses).

The script writes an invented study into a folder (``--dir``, default a new temporary folder;
it refuses a folder that is not empty, so it never writes over anything): 40 years, one long
CSV with 3 responses and ``--drivers`` AR(1) drivers (every tenth driver a near copy of the one
before it, so the study has collinear pairs; the first response follows driver d0001 with a
one-year lag), screened with ``--surrogates`` surrogates (default 19), lags 0-3, models
[linear], ``report: {top: 3, pdf: false}`` (``--pdf``: with the PDF copy). Then it runs

    lagsieve check CONFIG                         (under /usr/bin/time -v: peak RSS)
    lagsieve run CONFIG --out DIR/results --cores N

and samples, every 0.2 s with psutil, every Snakemake job (a process running one of the
workflow's scripts, ``.snakemake/scripts/tmp*.<rule>.py``) together with its worker processes.
RSS is summed over a job's processes, so pages shared between a job and its forked workers are
counted more than once: the figures are upper bounds. It prints one row per job (rule, peak MB,
wall s) and checks the target: every job under 2 GB (exit status 1 if not).

It also prints the plan's size (screen rows, hypotheses, stored surrogate values) as
``lagsieve.prep.budget`` counts them, with the peak MB of the screen job (one per study, two
responses at once in forked workers, their RSS summed) divided by the hypotheses of the two
largest responses: the measured cost from which the budget's limits were chosen.

    python bench/large.py                       # 500 drivers, about 5-10 min on 2 shared cores
    python bench/large.py --drivers 200 --cores 2
"""
from __future__ import annotations

import argparse
import os
import re
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import psutil
import yaml

from lagsieve.io.config import load_study
from lagsieve.prep.budget import plan_size

YEARS = np.arange(1981, 2021)
TARGET_MB = 2048
JOB_SCRIPT = re.compile(r"\.snakemake/scripts/tmp\w*\.(\w+)\.py")


def ar1(rng: np.random.Generator, n: int, phi: float) -> np.ndarray:
    x = np.empty(n)
    x[0] = rng.normal()
    for t in range(1, n):
        x[t] = phi * x[t - 1] + rng.normal() * np.sqrt(1 - phi ** 2)
    return x


def write_study(folder: Path, n_drivers: int, surrogates: int, seed: int, pdf: bool = False) -> Path:
    """The invented study's data.csv and config.yaml in ``folder``; returns the config path."""
    rng = np.random.default_rng(seed)
    n = len(YEARS)
    drivers = {}
    for k in range(n_drivers):
        name = f"d{k + 1:04d}"
        prev = drivers.get(f"d{k:04d}")
        drivers[name] = prev + 0.2 * rng.normal(size=n) if (k % 10 == 9 and prev is not None) else ar1(rng, n, 0.5)
    lead = np.r_[0.0, drivers["d0001"][:-1]]
    responses = {"m_a": 0.3 + 0.05 * lead + 0.03 * rng.normal(size=n),
                 "m_b": 0.25 + 0.04 * ar1(rng, n, 0.6),
                 "condition": 1.0 + 0.1 * ar1(rng, n, 0.3)}
    lines = ["series,year,value"]
    for name, v in {**responses, **drivers}.items():
        lines += [f"{name},{y},{x:.6f}" for y, x in zip(YEARS, v)]
    (folder / "data.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    cfg = {"study": "large_invented", "title": f"Invented large study ({n_drivers} drivers)", "invented": True,
           "inputs": ["data.csv"],
           "responses": [{"id": r, "kind": "condition" if r == "condition" else "mortality"} for r in responses],
           "drivers": [{"id": d} for d in drivers],
           "screen": {"surrogates": surrogates, "models": ["linear"], "lags": [0, 1, 2, 3], "seed": seed},
           "report": {"top": 3, "pdf": pdf}}
    path = folder / "config.yaml"
    path.write_text(yaml.safe_dump(cfg, sort_keys=False), encoding="utf-8")
    return path


def peak_of_check(config: Path, env: dict) -> tuple[float, float]:
    """(peak RSS MB, wall s) of ``lagsieve check`` from /usr/bin/time -v."""
    t0 = time.perf_counter()
    p = subprocess.run(["/usr/bin/time", "-v", sys.executable, "-m", "lagsieve", "check", str(config)],
                       env=env, capture_output=True, text=True)
    wall = time.perf_counter() - t0
    m = re.search(r"Maximum resident set size \(kbytes\): (\d+)", p.stderr)
    if p.returncode != 0:
        raise SystemExit(f"lagsieve check failed:\n{p.stdout}{p.stderr[-2000:]}")
    return (int(m.group(1)) / 1024 if m else float("nan")), wall


def _rss_tree(proc: psutil.Process) -> int:
    total = 0
    for q in [proc] + proc.children(recursive=True):
        try:
            total += q.memory_info().rss
        except psutil.Error:
            pass
    return total


def sample_jobs(root: psutil.Process, jobs: dict) -> None:
    """Update ``jobs`` (pid -> record) with every job process under ``root`` alive now."""
    try:
        procs = root.children(recursive=True)
    except psutil.Error:
        return
    now = time.perf_counter()
    for q in procs:
        try:
            m = JOB_SCRIPT.search(" ".join(q.cmdline()))
            if not m or (q.parent() and JOB_SCRIPT.search(" ".join(q.parent().cmdline()))):
                continue  # not a job, or a worker of a job (counted with its job)
            rss = _rss_tree(q)
        except psutil.Error:
            continue
        rec = jobs.setdefault(q.pid, {"rule": m.group(1), "start": now, "end": now, "peak": 0})
        rec["end"], rec["peak"] = now, max(rec["peak"], rss)


def run_measured(cmd: list[str], env: dict, log: Path, max_seconds: float) -> tuple[int, float, list[dict]]:
    t0 = time.perf_counter()
    jobs: dict[int, dict] = {}
    with open(log, "w") as fh:
        p = subprocess.Popen(cmd, env=env, stdout=fh, stderr=subprocess.STDOUT)
        root = psutil.Process(p.pid)
        while p.poll() is None:
            sample_jobs(root, jobs)
            if time.perf_counter() - t0 > max_seconds:
                p.terminate()  # the process this script started; lagsieve stops its own jobs
                p.wait(timeout=120)
                break
            time.sleep(0.2)
    return p.returncode, time.perf_counter() - t0, sorted(jobs.values(), key=lambda r: r["start"])


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--drivers", type=int, default=500)
    ap.add_argument("--surrogates", type=int, default=19)
    ap.add_argument("--cores", type=int, default=2)
    ap.add_argument("--seed", type=int, default=5)
    ap.add_argument("--pdf", action="store_true", help="with the PDF copy of the report (WeasyPrint: slower)")
    ap.add_argument("--dir", help="empty or new folder for the study and its results (default: a temporary one)")
    ap.add_argument("--max-seconds", type=float, default=3000)
    args = ap.parse_args(argv)
    folder = Path(args.dir) if args.dir else Path(tempfile.mkdtemp(prefix="lagsieve-large-"))
    if folder.exists() and any(folder.iterdir()):
        raise SystemExit(f"{folder}: folder is not empty; give a new or empty folder with --dir")
    folder.mkdir(parents=True, exist_ok=True)
    env = dict(os.environ, MPLBACKEND="Agg")
    config = write_study(folder, args.drivers, args.surrogates, args.seed, args.pdf)
    study = load_study(config)
    size = plan_size(study)
    # the screen job screens two responses at once (two forked workers): its peak holds the two largest
    at_once = sum(sorted(len(study.drivers_for(r)) for r in study.response_ids)[-2:])
    print(f"study: {folder} ({args.drivers} drivers x 3 responses, {len(YEARS)} years, lags 0-3, linear, "
          f"{args.surrogates} surrogates, {'with' if args.pdf else 'no'} PDF)")
    print(f"plan: {size.screen_rows:,} screen rows, {size.hypotheses:,} hypotheses, "
          f"{size.largest_response:,} in the largest response, {size.surrogate_values:,} surrogate values")
    check_mb, check_s = peak_of_check(config, env)
    rc, wall, jobs = run_measured([sys.executable, "-m", "lagsieve", "run", str(config), "--out",
                                   str(folder / "results"), "--cores", str(args.cores)],
                                  env, folder / "run.log", args.max_seconds)
    rows = [("check", check_mb, check_s)] + [(j["rule"], j["peak"] / 2 ** 20, j["end"] - j["start"]) for j in jobs]
    print(f"\n| job | peak RSS (MB) | wall (s) |\n| --- | ---: | ---: |")
    for rule, mb, s in rows:
        print(f"| {rule} | {mb:,.0f} | {s:,.0f} |")
    screens = [mb for rule, mb, _ in rows if rule == "screen"]
    if screens:
        print(f"\nscreen: {max(screens) / at_once * 1024:,.0f} kB per hypothesis at most "
              f"(peak of the study's screen job, its two workers summed / {at_once} hypotheses of the two "
              f"largest responses, screened at once)")
    worst = max(mb for _, mb, _ in rows)
    ok = rc == 0 and worst < TARGET_MB
    print(f"run: exit {rc}, {wall:,.0f} s; largest job {worst:,.0f} MB (target < {TARGET_MB} MB): "
          f"{'ok' if ok else 'NOT MET'}")
    if rc != 0:
        print((folder / "run.log").read_text(errors="replace")[-3000:], file=sys.stderr)
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
