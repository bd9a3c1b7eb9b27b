"""The demo study end to end: how long `lagsieve run` takes, and where the time goes.

For each variant (default: with the PDF, and without it through a copy of the config with
``report: {pdf: false}``; ``nojoint``: with the PDF, the config's ``joint`` left out) and each
of ``--runs`` runs (default 3), the script writes a fresh study with `lagsieve init` in a
temporary folder and runs::

    lagsieve run <study>/config.yaml --cores 2

It reports the median over the runs of: the command's wall time; Snakemake's own part
before the first job starts (the CLI's check, Snakemake's start, parsing the workflow and
planning the studies, the DAG) and after the last job ends; and per rule (condition,
screen, evidence, report) the sum of its jobs' wall times, its wall time (first job start to
last job end) and its CPU time. Each job's figures come from the last line of its log, which
the stage writes itself (``lagsieve.stages.common.stage_timing``: start and end to the
millisecond, CPU of the process and of its worker processes, and the process's start-up
before the stage began: Python, Snakemake's preamble, the imports); Snakemake's own log
stamps whole seconds only. The screen is one job per study; the CPU of each response it
screened comes from the last line of that response's log (``logs/screen/<response>.log``).

Then, per workflow script, the import time of exactly what the script imports (and
Snakemake's preamble), from ``python -X importtime``: the total, and the largest packages.

Options: ``--env KEY=VALUE`` adds a variable to the runs' environment (for example
``--env MALLOC_PERTURB_=0``, glibc's default value, leaves the allocator as glibc sets it:
the workflow does not set its own allocator setting over any ``MALLOC_*`` variable);
anything after ``--`` goes to Snakemake (for example ``-- --set-threads screen=2``).

Writes demo_runs.csv (one row per run), demo_jobs.csv (one row per job), demo_imports.csv
and demo.md (printed too) to ``--out`` (default bench/out/demo; not tracked).
"""
from __future__ import annotations

import argparse
import os
import re
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd
import yaml

REPO = Path(__file__).resolve().parents[1]
SCRIPTS = REPO / "workflow" / "scripts"
TIMING = re.compile(r"lagsieve: stage took ([\d.]+) s wall, ([\d.]+) s CPU, ([\d.]+) s CPU in workers; "
                    r"from ([\d.]+) to ([\d.]+) \(epoch s\); process start-up before it ([\d.]+) s \(([\d.]+) s CPU\)")
#: the line a response's own log ends with (logs/screen/<response>.log; stages.screen._screen_to_cache)
RESPONSE = re.compile(r"lagsieve: (\S+) screened in ([\d.]+) s wall, ([\d.]+) s CPU")
SNAKEMAKE_PREAMBLE = "from snakemake.logging import logger\nfrom snakemake.iocontainers import Snakemake\n"
RULES = ["condition", "screen", "evidence", "report"]


def fresh_study(root: Path, pdf: bool, joint: bool = True) -> Path:
    """`lagsieve init` into ``root``; without the PDF, the config gets ``report: {pdf: false}``;
    without the joint screen, the config's ``joint`` key is left out."""
    subprocess.run(["lagsieve", "init", str(root)], check=True, stdout=subprocess.DEVNULL)
    cfg = root / "config.yaml"
    if not pdf or not joint:
        data = yaml.safe_load(cfg.read_text(encoding="utf-8"))
        if not pdf:
            data.setdefault("report", {})["pdf"] = False
        if not joint:
            data.pop("joint", None)
        cfg.write_text(yaml.safe_dump(data, sort_keys=False), encoding="utf-8")
    return cfg


def job_rows(results: Path) -> list[dict]:
    """One row per job from the last line of every log under ``results/*/logs``."""
    rows = []
    for log in sorted(results.glob("*/logs/**/*.log")):
        m = TIMING.search(log.read_text(encoding="utf-8", errors="replace"))
        if m is None:
            continue
        wall, cpu, workers, t0, t1, before, before_cpu = map(float, m.groups())
        rule = "screen" if log.parent.name == "screen" else log.stem
        rows.append({"rule": rule, "job": log.stem, "stage_wall": wall, "stage_cpu": cpu, "workers_cpu": workers,
                     "startup": before, "startup_cpu": before_cpu, "start": t0 - before, "end": t1,
                     "wall": wall + before, "cpu": cpu + workers + before_cpu})
    return rows


def response_cpu(results: Path) -> list[float]:
    """The CPU seconds of each response screened in a run (the study's screen job screens its
    responses in forked workers; each response's log ends with its own figures)."""
    found = (RESPONSE.search(log.read_text(encoding="utf-8", errors="replace"))
             for log in sorted(results.glob("*/logs/screen/*.log")))
    return [float(m.group(3)) for m in found if m is not None]


def one_run(variant: str, env: dict, extra: list[str], cores: int) -> tuple[dict, list[dict]]:
    """A fresh study run once; the run's figures and its jobs' rows."""
    with tempfile.TemporaryDirectory(prefix="lagsieve-demo-") as tmp:
        cfg = fresh_study(Path(tmp) / "study", pdf=variant != "nopdf", joint=variant != "nojoint")
        cmd = ["lagsieve", "run", str(cfg), "--cores", str(cores), *(["--", *extra] if extra else [])]
        t0 = time.time()
        before = os.times()
        proc = subprocess.run(cmd, env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
        t1 = time.time()
        after = os.times()
        if proc.returncode != 0:
            failed = [log.read_text(errors="replace")[-3000:] for log in (Path(tmp) / "study").glob("results/*/logs/**/*.log")
                      if "Traceback" in log.read_text(errors="replace")]
            sys.exit(f"demo run failed ({variant}):\n{proc.stdout[-1500:]}\n" + "\n".join(failed))
        jobs = job_rows(Path(tmp) / "study" / "results")
        per_response = response_cpu(Path(tmp) / "study" / "results")
    cpu = after.children_user + after.children_system - before.children_user - before.children_system
    run = {"variant": variant, "wall": t1 - t0, "cpu": cpu, "jobs": len(jobs),
           "before_first_job": min(j["start"] for j in jobs) - t0, "after_last_job": t1 - max(j["end"] for j in jobs),
           "response_cpu": float(pd.Series(per_response).median()) if per_response else float("nan")}
    for rule in RULES:
        mine = [j for j in jobs if j["rule"] == rule]
        if mine:
            run[f"{rule}_sum"] = sum(j["wall"] for j in mine)
            run[f"{rule}_wall"] = max(j["end"] for j in mine) - min(j["start"] for j in mine)
            run[f"{rule}_cpu"] = sum(j["cpu"] for j in mine)
            run[f"{rule}_startup"] = sum(j["startup"] for j in mine)
    return run, [dict(j, variant=variant, run_wall=run["wall"]) for j in jobs]


def script_imports(script: Path) -> str:
    """The import statements a workflow script runs before its stage starts."""
    lines = script.read_text(encoding="utf-8").splitlines()
    return "\n".join(line for line in lines if line.startswith(("import ", "from ")))


def import_times(path: Path, code: str) -> dict:
    """``python -X importtime`` of ``code``: total self time and the largest top-level packages."""
    proc = subprocess.run([sys.executable, "-X", "importtime", "-c", code], capture_output=True, text=True,
                          cwd=tempfile.gettempdir())
    by_package: dict[str, int] = {}
    for line in proc.stderr.splitlines():
        m = re.match(r"import time:\s+(\d+) \|\s+\d+ \|\s*(\S+)", line)
        if m:
            name = m.group(2).split(".")
            key = ".".join(name[:2]) if name[0] in ("scipy", "lagsieve") else name[0]
            by_package[key] = by_package.get(key, 0) + int(m.group(1))
    top = sorted(by_package.items(), key=lambda kv: -kv[1])[:6]
    return {"script": path.name, "total_s": sum(by_package.values()) / 1e6,
            "largest": ", ".join(f"{k} {v / 1e6:.2f}" for k, v in top)}


def summary(runs: pd.DataFrame, imports: pd.DataFrame, args, note: str) -> str:
    """The Markdown table of medians and the import table."""
    med = runs.groupby("variant", sort=False).median(numeric_only=True)
    lines = [f"# Demo end to end ({note})", "",
             f"`lagsieve run --cores {args.cores}` on a fresh `lagsieve init` study; median of {args.runs} runs per variant "
             f"(seconds); extra environment: {args.env or 'none'}; Snakemake options: {args.extra or 'none'}.", "",
             "| variant | wall | CPU | before first job | after last job | " +
             " | ".join(f"{r} sum / wall / CPU" for r in RULES) + " |",
             "| --- " * (5 + len(RULES)) + "|"]
    for variant, row in med.iterrows():
        cells = [f"{row.get(f'{r}_sum', float('nan')):.2f} / {row.get(f'{r}_wall', float('nan')):.2f} / "
                 f"{row.get(f'{r}_cpu', float('nan')):.2f}" for r in RULES]
        lines.append(f"| {variant} | {row['wall']:.2f} | {row['cpu']:.2f} | {row['before_first_job']:.2f} | "
                     f"{row['after_last_job']:.2f} | " + " | ".join(cells) + " |")
    lines += ["", "Runs (wall, s): " + "; ".join(f"{v}: " + ", ".join(f"{w:.1f}" for w in g["wall"])
                                               for v, g in runs.groupby("variant", sort=False)), "",
              "Job start-up (Python, Snakemake's preamble, imports; median per run, summed over a rule's jobs): " +
              "; ".join(f"{v}: " + ", ".join(f"{r} {row[f'{r}_startup']:.2f} s" for r in RULES if f"{r}_startup" in row)
                        for v, row in med.iterrows()), "",
              "Screen CPU per response (the response's own log; median over a run's responses, then over runs): " +
              "; ".join(f"{v}: {row['response_cpu']:.2f} s" for v, row in med.iterrows()), "",
              "## Imports per workflow script (`python -X importtime`, self times summed, s)", "",
              "| script | total | largest packages |", "| --- | --- | --- |"]
    lines += [f"| {r.script} | {r.total_s:.2f} | {r.largest} |" for r in imports.itertuples()]
    return "\n".join(lines) + "\n"


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--runs", type=int, default=3, help="runs per variant (default 3; the median is reported)")
    ap.add_argument("--variants", default="pdf,nopdf",
                    help="pdf, nopdf, nojoint (with the PDF, without the demo's joint screen), comma-separated "
                         "(default pdf,nopdf)")
    ap.add_argument("--cores", type=int, default=2)
    ap.add_argument("--env", action="append", default=[], metavar="KEY=VALUE", help="add to the runs' environment")
    ap.add_argument("--note", default="", help="a few words on the machine and its load, for the table's title")
    ap.add_argument("--out", default=str(REPO / "bench" / "out" / "demo"))  # bench/out/ is not tracked
    ap.add_argument("extra", nargs="*", help="after --: options for Snakemake")
    args = ap.parse_args(argv)
    if shutil.which("lagsieve") is None:
        sys.exit("the lagsieve command is not installed: python -m pip install -e .")
    env = dict(os.environ, **dict(e.split("=", 1) for e in args.env))
    out = Path(args.out)
    out.mkdir(parents=True, exist_ok=True)
    runs, jobs = [], []
    for _ in range(args.runs):  # variants interleaved, so that a change of load touches both
        for variant in args.variants.split(","):
            run, rows = one_run(variant, env, args.extra, args.cores)
            print(f"{variant}: {run['wall']:.1f} s wall, {run['cpu']:.1f} s CPU", flush=True)
            runs.append(run)
            jobs += rows
            pd.DataFrame(runs).to_csv(out / "demo_runs.csv", index=False)  # after every run: an
            pd.DataFrame(jobs).to_csv(out / "demo_jobs.csv", index=False)  # interrupted bench keeps them
    imports = pd.DataFrame([import_times(p, SNAKEMAKE_PREAMBLE + script_imports(p))
                            for p in sorted(SCRIPTS.glob("*.py"))])
    runs = pd.DataFrame(runs)
    imports.to_csv(out / "demo_imports.csv", index=False)
    text = summary(runs, imports, args, args.note or f"{os.cpu_count()} CPUs")
    (out / "demo.md").write_text(text, encoding="utf-8")
    print(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
