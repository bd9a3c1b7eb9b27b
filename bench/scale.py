"""How the workflow scales with the number of studies run in one Snakemake invocation.

For each N (default 10, 50, 200) the script writes N small invented studies into a
temporary folder (1 response x 3 drivers, 40 years, one long CSV each; surrogates 99,
models [linear], a report with one panel per response and no PDF unless ``--pdf``; other
settings the defaults), lists them in one Snakemake config file
(``studies: [...]``, given with ``--configfile``) and runs them all in ONE invocation::

    snakemake --snakefile Snakefile --directory OUT --cores 2 --configfile batch.yaml

It reports the wall time, the peak resident memory of the whole process tree (Snakemake
and every job it started, sampled with psutil every 0.2 s, summed over the processes alive
at that moment), the peak of the Snakemake process alone and the peak of one job (a job's
process and its worker processes, summed), against N, and fits wall = a + b N by least
squares (b: seconds per study; linear growth means the seconds per study do not rise
with N). Each study is R + 2 = 3 jobs (screen, evidence, report); with ``--batch K`` one job
runs every stage of K studies in one process (``batch: K`` in the run's config;
``lagsieve.stages.batch``), so N studies are ceil(N / K) jobs. The CPU time of the whole
run (Snakemake and every job, user + system) is reported beside the wall time. A run longer than
``--max-seconds`` is stopped (its process group, which this script started) and reported
as such, with the number of studies finished by then.

Then planning alone is timed: ``snakemake -n --quiet`` over 5,000 such studies (default
``--plan-n 5000``; with ``--batch K`` as the runs have it), wall and CPU. plan.py loads every
config at parse time and, for up to 50 studies, also reads and checks every input file; beyond
50 it checks the configs only.

Per study, the median CPU of each stage comes from the last line of the stage's log (written
by ``lagsieve.stages.common.logged``), so that the cost of a small study can be read by stage;
the load average of the machine at the start and end of each run is printed beside it (the
machine may be shared: compare CPU seconds).

Why ``--configfile`` and not ``--config studies=[...]``: the list of 5,000 paths is one
command-line argument of about 300 kB, beyond Linux's 128 kB limit for a single argument.

Results: bench/results/scale.csv and scale.md (printed too).
"""
from __future__ import annotations

import argparse
import os
import re
import signal
import subprocess
import sys
import tempfile
import time
from datetime import datetime
from pathlib import Path

import numpy as np
import pandas as pd
import psutil
import yaml

REPO = Path(__file__).resolve().parents[1]
YEARS = np.arange(1981, 2021)


JOBS_PER_STUDY = 3  # one screen (one response) + evidence + report


def write_study(folder: Path, i: int, rng: np.random.Generator, pdf: bool = False) -> Path:
    """One invented study: response m and drivers d1 (lag-1 effect), d2 (trend), d3 (noise)."""
    folder.mkdir(parents=True, exist_ok=True)
    n = len(YEARS)
    d1 = np.empty(n)
    d1[0] = rng.normal()
    for t in range(1, n):
        d1[t] = 0.5 * d1[t - 1] + rng.normal() * np.sqrt(0.75)
    d2 = np.linspace(0, 2, n) + rng.normal(size=n)
    d3 = rng.normal(size=n)
    m = 0.3 + 0.05 * np.r_[0.0, d1[:-1]] + 0.02 * np.linspace(0, 2, n) + 0.03 * rng.normal(size=n)
    lines = ["series,year,value"]
    for name, v in (("m", m), ("d1", d1), ("d2", d2), ("d3", d3)):
        lines += [f"{name},{y},{x:.6f}" for y, x in zip(YEARS, v)]
    (folder / "data.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    cfg = {
        "study": f"s{i:05d}",
        "title": f"Invented scaling study {i}",
        "invented": True,
        "inputs": ["data.csv"],
        "responses": [{"id": "m", "kind": "mortality"}],
        "drivers": [{"id": "d1"}, {"id": "d2"}, {"id": "d3"}],
        "screen": {"surrogates": 99, "models": ["linear"], "seed": i + 1},
        "report": {"top": 1, "pdf": bool(pdf)},
    }
    path = folder / "config.yaml"
    path.write_text(yaml.safe_dump(cfg, sort_keys=False), encoding="utf-8")
    return path


def write_batch(root: Path, n: int, seed: int, pdf: bool = False, batch_size: int = 0) -> Path:
    """N studies and the run's config (``batch: K`` when ``batch_size`` is given, at most N)."""
    rng = np.random.default_rng(seed)
    paths = [str(write_study(root / "studies" / f"s{i:05d}", i, rng, pdf)) for i in range(n)]
    batch = root / "batch.yaml"
    run = {"studies": paths, "out": str(root / "results")}
    if batch_size:
        run["batch"] = min(batch_size, n)
    batch.write_text(yaml.safe_dump(run), encoding="utf-8")
    return batch


def snakemake_cmd(root: Path, batch: Path, cores: int, extra=()) -> list[str]:
    return [sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory",
            str(root / "results"), "--cores", str(cores), "--configfile", str(batch), *extra]


def tree_rss(proc: psutil.Process) -> tuple[int, int, int]:
    """(RSS of proc + all its descendants, RSS of proc alone, largest RSS of one child of proc
    together with its own descendants: one job and its workers), bytes."""
    try:
        own = proc.memory_info().rss
        kids = proc.children(recursive=False)
    except psutil.Error:
        return 0, 0, 0
    total, job_max = own, 0
    for k in kids:
        try:
            sub = k.memory_info().rss
            for g in k.children(recursive=True):
                try:
                    sub += g.memory_info().rss
                except psutil.Error:
                    pass
        except psutil.Error:
            continue
        total += sub
        job_max = max(job_max, sub)
    return total, own, job_max


def run_measured(cmd: list[str], env: dict, max_seconds: float, log: Path) -> dict:
    t0, cpu0 = time.perf_counter(), os.times()
    with open(log, "w") as fh:
        p = subprocess.Popen(cmd, env=env, stdout=fh, stderr=subprocess.STDOUT, start_new_session=True)
        ps = psutil.Process(p.pid)
        peak_tree = peak_own = peak_job = 0
        stopped = False
        while p.poll() is None:
            tot, own, job = tree_rss(ps)
            peak_tree, peak_own, peak_job = max(peak_tree, tot), max(peak_own, own), max(peak_job, job)
            if time.perf_counter() - t0 > max_seconds:
                os.killpg(p.pid, signal.SIGTERM)  # the group this script started
                stopped = True
                p.wait(timeout=60)
                break
            time.sleep(0.2)
    cpu1 = os.times()  # the run's processes are waited for: their CPU is counted as children's
    cpu = cpu1.children_user + cpu1.children_system - cpu0.children_user - cpu0.children_system
    return dict(wall=time.perf_counter() - t0, cpu=cpu, rc=p.returncode, peak_tree_mb=peak_tree / 2**20,
                peak_snakemake_mb=peak_own / 2**20, peak_job_mb=peak_job / 2**20, stopped=stopped)


STAGE_TIMING = re.compile(r"lagsieve: stage took ([\d.]+) s wall, ([\d.]+) s CPU, ([\d.]+) s CPU in workers")


def stage_cpu(results: Path) -> dict[str, float]:
    """Median CPU seconds (the process's and its workers') per study of each stage, from the
    last line of every stage log under ``results/<study>/logs``."""
    by_stage: dict[str, list[float]] = {}
    for log in results.glob("*/logs/**/*.log"):
        m = STAGE_TIMING.search(log.read_text(encoding="utf-8", errors="replace"))
        if m:
            stage = "screen" if log.parent.name == "screen" else log.stem
            by_stage.setdefault(stage, []).append(float(m.group(2)) + float(m.group(3)))
    return {k: float(np.median(v)) for k, v in sorted(by_stage.items())}


def children_cpu() -> float:
    t = os.times()
    return t.children_user + t.children_system


def jobs_done(log: Path) -> dict[str, int]:
    """Finished jobs per rule, from the Snakemake log ('Finished jobid: 7 (Rule: screen)')."""
    counts: dict[str, int] = {}
    for rule in re.findall(r"Finished jobid: \d+ \(Rule: (\w+)\)", log.read_text(errors="replace")):
        counts[rule] = counts.get(rule, 0) + 1
    for rule in ("all", "default"):  # the targets' rules run no work
        counts.pop(rule, None)
    return counts


def job_durations(log: Path) -> dict[str, float]:
    """Median wall seconds per job, by rule, from the Snakemake log: each job's start stamp
    (the '[date]' line before 'localrule X:' with its 'jobid: N') to its 'Finished jobid: N'
    stamp; the stamps have one-second resolution."""
    import re
    from datetime import datetime

    stamp = None
    start, rule_of, dur = {}, {}, {}
    pending_rule = None
    for line in log.read_text(errors="replace").splitlines():
        m = re.match(r"^\[(\w{3} \w{3} +\d+ [\d:]+ \d{4})\]$", line)
        if m:
            stamp = datetime.strptime(m.group(1).replace("  ", " "), "%a %b %d %H:%M:%S %Y")
            continue
        m = re.match(r"^(?:local)?rule (\w+):$", line)
        if m:
            pending_rule = (m.group(1), stamp)
            continue
        m = re.match(r"^\s+jobid: (\d+)$", line)
        if m and pending_rule:
            start[m.group(1)], rule_of[m.group(1)] = pending_rule[1], pending_rule[0]
            pending_rule = None
            continue
        m = re.match(r"^Finished jobid: (\d+)", line)
        if m and m.group(1) in start and stamp is not None:
            dur.setdefault(rule_of[m.group(1)], []).append((stamp - start[m.group(1)]).total_seconds())
    for rule in ("all", "default"):
        dur.pop(rule, None)
    return {k: float(np.median(v)) for k, v in sorted(dur.items())}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--n", default="10,50,200", help="study counts to run (default 10,50,200)")
    ap.add_argument("--plan-n", type=int, default=5000, help="studies for the planning-only timing (0 skips it)")
    ap.add_argument("--plan-max-seconds", type=float, default=900, help="give up the planning timing after this long")
    ap.add_argument("--cores", type=int, default=2)
    ap.add_argument("--max-seconds", type=float, default=2400, help="stop a run after this long (default 2400)")
    ap.add_argument("--pdf", action="store_true", help="write each study's PDF report too (slower)")
    ap.add_argument("--batch", type=int, default=0, help="studies per job (batch: K; default 0: one job per stage)")
    ap.add_argument("--seed", type=int, default=11)
    ap.add_argument("--out", default=str(REPO / "bench" / "out" / "scale"))  # bench/out/ is not tracked
    args = ap.parse_args(argv)
    env = dict(os.environ, PYTHONPATH=os.pathsep.join(filter(None, [str(REPO / "src"), os.environ.get("PYTHONPATH")])),
               MPLBACKEND="Agg")
    rows = []
    with tempfile.TemporaryDirectory(prefix="lagsieve-scale-") as tmp:
        for n in [int(v) for v in args.n.split(",") if v]:
            root = Path(tmp) / f"n{n}"
            batch = write_batch(root, n, args.seed, args.pdf, args.batch)
            jobs = -(-n // min(args.batch, n)) if args.batch else JOBS_PER_STUDY * n
            t0 = time.perf_counter()
            plan = subprocess.run(snakemake_cmd(root, batch, args.cores, ["-n", "--quiet"]), env=env,
                                  capture_output=True, text=True)
            t_plan = time.perf_counter() - t0
            if plan.returncode != 0:
                raise SystemExit(f"dry run failed for N={n}:\n{plan.stderr[-3000:]}")
            print(f"N={n}: planning (snakemake -n --quiet) {t_plan:.1f} s; running ...", flush=True)
            load0 = os.getloadavg()[0]
            m = run_measured(snakemake_cmd(root, batch, args.cores), env, args.max_seconds, root / "snakemake.log")
            load1, stages = os.getloadavg()[0], stage_cpu(root / "results")
            done = sum((root / "results" / f"s{i:05d}" / "report.html").exists() for i in range(n))
            per_rule = jobs_done(root / "snakemake.log")
            durations = job_durations(root / "snakemake.log")
            logs = Path(args.out).parent / "scale_logs"
            logs.mkdir(parents=True, exist_ok=True)
            subprocess.run(["cp", str(root / "snakemake.log"), str(logs / f"n{n}.log")], check=False)
            n_jobs = sum(per_rule.values())
            ok = m["rc"] == 0 and done == n
            if not ok and not m["stopped"]:
                print((root / "snakemake.log").read_text()[-3000:], file=sys.stderr)
            rows.append(dict(studies=n, jobs=jobs, finished=done, jobs_done=n_jobs, wall_s=m["wall"],
                             s_per_job=m["wall"] / max(n_jobs, 1), cpu_s=m["cpu"],
                             s_per_study=m["wall"] / max(done, 1), cpu_per_study=m["cpu"] / max(done, 1),
                             jobs_by_rule=" ".join(f"{k}={v}" for k, v in sorted(per_rule.items())),
                             median_job_s=" ".join(f"{k}={v:.0f}" for k, v in durations.items()),
                             peak_tree_rss_mb=m["peak_tree_mb"], peak_snakemake_rss_mb=m["peak_snakemake_mb"],
                             peak_job_rss_mb=m["peak_job_mb"],
                             stage_cpu=" ".join(f"{k}={v:.2f}" for k, v in stages.items()),
                             load=f"{load0:.1f}-{load1:.1f}",
                             plan_s=t_plan, status="ok" if ok else ("stopped at --max-seconds" if m["stopped"] else f"failed rc={m['rc']}")))
            r = rows[-1]
            print(f"N={n}: {r['status']}, {done}/{n} studies complete, {n_jobs}/{jobs} jobs "
                  f"({r['jobs_by_rule']}) in {r['wall_s']:.0f} s ({r['s_per_job']:.2f} s per job, "
                  f"{r['s_per_study']:.2f} s wall and {r['cpu_per_study']:.2f} s CPU per study; median CPU s per study by "
                  f"stage: {r['stage_cpu']}; load {r['load']}); median job wall s by rule: {r['median_job_s']}; "
                  f"peak RSS tree {r['peak_tree_rss_mb']:.0f} MB, snakemake alone {r['peak_snakemake_rss_mb']:.0f} MB, "
                  f"one job {r['peak_job_rss_mb']:.0f} MB", flush=True)
            # free the disk between sizes
            subprocess.run(["rm", "-rf", str(root)], check=False)
        plan_row = None
        if args.plan_n:
            root = Path(tmp) / f"plan{args.plan_n}"
            t0 = time.perf_counter()
            batch = write_batch(root, args.plan_n, args.seed, args.pdf, args.batch)
            t_write = time.perf_counter() - t0
            t0, cpu0, load0 = time.perf_counter(), children_cpu(), os.getloadavg()[0]
            try:
                plan = subprocess.run(snakemake_cmd(root, batch, args.cores, ["-n", "--quiet"]), env=env,
                                      capture_output=True, text=True, timeout=args.plan_max_seconds)
                status = "ok" if plan.returncode == 0 else f"failed rc={plan.returncode}: {plan.stderr[-500:]}"
            except subprocess.TimeoutExpired:
                status = f"not finished after {args.plan_max_seconds:.0f} s (stopped)"
            t_plan, plan_cpu = time.perf_counter() - t0, children_cpu() - cpu0
            plan_jobs = -(-args.plan_n // args.batch) if args.batch else JOBS_PER_STUDY * args.plan_n
            plan_row = dict(studies=args.plan_n, jobs=plan_jobs, plan_s=t_plan, plan_cpu_s=plan_cpu, status=status,
                            write_s=t_write, load=f"{load0:.1f}-{os.getloadavg()[0]:.1f}")
            print(f"planning only, {args.plan_n} studies ({plan_jobs} jobs): {t_plan:.1f} s wall, {plan_cpu:.1f} s CPU "
                  f"({status}; load {plan_row['load']}); target < 30 s", flush=True)
    df = pd.DataFrame(rows)
    out = Path(args.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    df.to_csv(out.with_suffix(".csv"), index=False, float_format="%.3f")
    md = ["## lagsieve scaling: N studies in one Snakemake run", "",
          f"Each study: 1 response x 3 drivers, 40 years, lags 0-3, 99 surrogates, models [linear], report with "
          f"one panel per response, {'with' if args.pdf else 'without'} PDF; "
          + (f"batch {args.batch}: one job runs every stage of {args.batch} studies" if args.batch else
             f"{JOBS_PER_STUDY} jobs (screen, evidence, report)") + f"; --cores {args.cores}.", "",
          "| studies | jobs | jobs finished | studies complete | wall (s) | s per study | CPU s per study "
          "| median CPU s per study by stage | load | median job wall (s) by rule "
          "| peak RSS, tree (MB) | peak RSS, snakemake (MB) | peak RSS, one job (MB) | planning -n (s) | status |",
          "| ---: | ---: | ---: | ---: | ---: | ---: | ---: | --- | --- | --- | ---: | ---: | ---: | ---: | --- |"]
    for r in rows:
        md.append(f"| {r['studies']} | {r['jobs']} | {r['jobs_done']} ({r['jobs_by_rule']}) | {r['finished']} | "
                  f"{r['wall_s']:.0f} | {r['s_per_study']:.2f} | {r['cpu_per_study']:.2f} | {r['stage_cpu']} | "
                  f"{r['load']} | {r['median_job_s']} | "
                  f"{r['peak_tree_rss_mb']:.0f} | {r['peak_snakemake_rss_mb']:.0f} | {r['peak_job_rss_mb']:.0f} | "
                  f"{r['plan_s']:.1f} | {r['status']} |")
    complete = [r for r in rows if r["status"] == "ok"]
    if len(complete) >= 2:
        ns = np.array([r["studies"] for r in complete], float)
        wall = np.array([r["wall_s"] for r in complete])
        b, a = np.polyfit(ns, wall, 1)
        resid = wall - (a + b * ns)
        first, last = complete[0], complete[-1]
        md += ["", f"Least-squares line through the complete runs: wall = {a:.1f} s + {b:.2f} s x studies "
                   f"(largest residual {np.max(np.abs(resid)):.1f} s). Seconds per study: "
                   + ", ".join(f"{r['s_per_study']:.2f} at N={r['studies']}" for r in complete)
                   + f" (ratio last/first {last['s_per_study'] / first['s_per_study']:.2f}; at or below 1 means the "
                   "total grows no faster than linearly)."]
    if plan_row:
        md += ["", f"Planning only (`snakemake -n --quiet`), {plan_row['studies']} studies, "
                   f"{plan_row['jobs']} jobs: {plan_row['plan_s']:.1f} s wall, {plan_row['plan_cpu_s']:.1f} s CPU "
                   f"({plan_row['status']}; load {plan_row['load']}; target < 30 s). Configs only are checked beyond "
                   "50 studies."]
        pd.DataFrame([plan_row]).to_csv(out.parent / (out.name + "_plan.csv"), index=False, float_format="%.3f")
    text = "\n".join(md) + "\n"
    out.with_suffix(".md").write_text(text, encoding="utf-8")
    print(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
