"""The report's figures drawn one after another in one process: how much CPU, and where it goes.

Takes the results folder of a finished study (``--study``, for example
``<demo>/results/caldrin_shelf_demo`` after ``lagsieve init <demo>`` and ``lagsieve run``), copies
it to a temporary folder and runs the report stage there once with the figure renderer recording
its jobs (``figures.FigureJob``: the demo's 107). Then it draws every job ``--rounds`` times
(default 3) through ``figures._draw_job`` in this process, as a drawing worker does (figures set
aside and reused by size, the text caches kept), and prints the CPU of each round (the first
includes what the later ones reuse) and per builder. ``--profile N`` profiles one more round
(cProfile on CPU time; the profiler slows the drawing about threefold) and prints the N functions
with the most CPU of their own and the N with the most in all. ``--keep DIR`` keeps the last
round's PNGs there (to compare them with ``cmp`` before and after a change).

No figure is timed by a test: the CPU depends on the machine and its load (compare runs made one
after the other, alternating before and after).
"""
from __future__ import annotations

import argparse
import cProfile
import collections
import io
import pstats
import shutil
import sys
import tempfile
import time
from pathlib import Path

import yaml

import lagsieve.report.html  # noqa: F401  (registers every builder in figures.BUILDERS)
from lagsieve.report import figures as fg
from lagsieve.stages.report import run_report

CONDITION = ("condition.csv", "condition_sensitivity.csv", "work/condition_fish.csv", "work/condition_fit.json")


def capture_jobs(study: Path, tmp: Path) -> list:
    """The figure jobs of ``study``'s report, recorded while the report stage runs on a copy."""
    d = tmp / study.name
    shutil.copytree(study, d, ignore=shutil.ignore_patterns("figures"))
    checked = yaml.safe_load((study / "work" / "run_config.yaml").read_text(encoding="utf-8"))["checked"]
    config = next(iter(checked))
    jobs = []
    draw = fg.FigureRenderer.draw

    def recording(self, js):
        jobs.extend(js)
        return draw(self, js)

    fg.FigureRenderer.draw = recording
    try:
        run_report(config, d / "work/annual.csv", d / "work/notes.csv", d / "work", d / "screen.csv",
                   d / "evidence.csv", d / "report.html", d / "provenance.json", d / "figures", threads=1,
                   condition=[str(d / c) for c in CONDITION if (d / c).exists()])
    finally:
        fg.FigureRenderer.draw = draw
    return jobs


def draw_round(jobs: list, out: Path) -> tuple[float, dict]:
    """CPU seconds of drawing and writing every job once, in all and per builder."""
    shutil.rmtree(out, ignore_errors=True)
    out.mkdir(parents=True)
    per = collections.Counter()
    start = time.process_time()
    for job in jobs:
        t0 = time.process_time()
        fg._draw_job(job, str(out), None, ("png",))
        per[job.builder] += time.process_time() - t0
    return time.process_time() - start, per


def profile_round(jobs: list, out: Path, top: int) -> None:
    prof = cProfile.Profile(time.process_time)
    prof.enable()
    draw_round(jobs, out)
    prof.disable()
    for order in ("tottime", "cumulative"):
        text = io.StringIO()
        pstats.Stats(prof, stream=text).sort_stats(order).print_stats(top)
        print(text.getvalue().split("\n\n", 1)[-1].rstrip())


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--study", required=True, type=Path, help="results folder of a finished study")
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("--profile", type=int, default=0, metavar="N", help="profile one more round, print N rows")
    ap.add_argument("--keep", type=Path, help="keep the last round's PNGs in this folder")
    args = ap.parse_args(argv)
    with tempfile.TemporaryDirectory() as tmp:
        jobs = capture_jobs(args.study.resolve(), Path(tmp))
        fg._SPARE.clear()
        out = args.keep or Path(tmp) / "drawn"
        print(f"{len(jobs)} figures; matplotlib draws text glyph by glyph: {fg.GLYPH_BY_GLYPH}")
        for k in range(args.rounds):
            total, per = draw_round(jobs, out)
            print(f"round {k + 1}: {total:.2f} s of CPU")
        count = collections.Counter(j.builder for j in jobs)
        for name, cpu in per.most_common():
            print(f"  {name:24s} {cpu:6.2f} s  {count[name]:3d} figures  {1000 * cpu / count[name]:6.1f} ms each")
        if args.profile:
            profile_round(jobs, Path(tmp) / "profiled", args.profile)
    return 0


if __name__ == "__main__":
    sys.exit(main())
