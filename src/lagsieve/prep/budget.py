"""The plan's budget: how large a study one run may be, checked from the config alone.

A study's cost grows with what it screens: every response x driver pair is a hypothesis, every
lag of it a screen row per model, and every hypothesis stores its statistic over the surrogates
twice (in sample, out of sample) for the report. ``lagsieve check`` refuses a plan above the
limits below with one line saying how to split it, before any job starts.

The limits come from ``bench/large.py`` (2 shared cores, 40 years, lags 0-3, linear, 19
surrogates; bench/README.md has the table): with 500 drivers x 3 responses (1,500 hypotheses,
6,000 screen rows) the largest job peaked at 921 MB without a PDF and 1,735 MB with one (the
report, summed over its drawing processes), a screen job at 552 MB against 451 MB with 40 drivers: about 0.22 MB per hypothesis
over a fixed 440 MB. Parsing stored surrogate values (nulls.csv) took 177 MB per million at its
peak, and the report stacks every response's values (twice that while they are joined). Each
limit keeps its job under about 1.5 GB, inside the 2 GB target.
"""
from __future__ import annotations

from dataclasses import dataclass

from lagsieve.errors import InputProblem
from lagsieve.io.config import Study

#: response x driver x lag x model rows of the screen table of one study, which the evidence and
#: report jobs hold whole: 6,000 rows measured with the evidence job at 211 MB (about 190 MB of it
#: the interpreter and libraries); 200,000 rows of about 1 kB each add some 200 MB.
MAX_SCREEN_ROWS = 200_000
#: hypotheses (drivers) of one response: one screen worker holds all of them, their forecasts and
#: surrogate values; at 0.22 MB each over a fixed 440 MB, 2,000 need about 900 MB. The study's
#: screen job runs two such workers, forked (the fixed part shared): with 500 drivers x 3
#: responses it peaked at 452 MB, the job and its workers' RSS summed (bench/large.py, session 10).
MAX_HYPOTHESES_PER_RESPONSE = 2_000
#: surrogate statistics stored for the report (hypotheses x surrogates x 2), which the report
#: reads and stacks: about 350 MB per million at the peak, so 3 million is about 1 GB (500 drivers
#: x 3 responses with the default 999 surrogates, 2,997,000 values, still passes).
MAX_SURROGATE_VALUES = 3_000_000
#: hypotheses of a study whose report has a PDF copy: WeasyPrint lays out the whole page, whose
#: ranked table has a row per hypothesis. On the 500-driver page (1,500 rows) it alone peaked at
#: 1,155 MB (181 s), about 0.6 MB per row over some 250 MB, and the whole report job at 1,735 MB
#: (bench/large.py --pdf, drawing processes summed); 300 more rows bring it to about 1.9 GB.
MAX_HYPOTHESES_WITH_PDF = 1_800
#: hypotheses of a study without a PDF: the page (about 2 kB of HTML per hypothesis on the
#: 500-driver page, 5.3 MB in all with its figures) stays a few tens of MB.
MAX_HYPOTHESES = 10_000

@dataclass(frozen=True)
class PlanSize:
    """What a study's config asks for, counted before anything is read."""

    screen_rows: int
    hypotheses: int
    largest_response: int  # hypotheses of the response with the most drivers
    surrogate_values: int
    pdf: bool  # the report has a PDF copy (report.pdf, default true)


def plan_size(study: Study) -> PlanSize:
    """Count the screen rows, hypotheses and stored surrogate values of ``study``."""
    models = len(study.screen.get("models") or ["linear"])
    per_response = [study.drivers_for(r) for r in study.response_ids]
    rows = sum(len(study.lags_for(d)) * models for drivers in per_response for d in drivers)
    hyps = sum(len(drivers) for drivers in per_response)
    return PlanSize(screen_rows=rows, hypotheses=hyps,
                    largest_response=max((len(d) for d in per_response), default=0),
                    surrogate_values=2 * hyps * int(study.screen.get("surrogates", 0)),
                    pdf=(study.raw.get("report") or {}).get("pdf") is not False)


def budget_problems(study: Study) -> list[InputProblem]:
    """One problem per limit that the study's plan exceeds (none within the budget)."""
    size = plan_size(study)
    split = "split the drivers across several study configs"
    checks = [
        (size.screen_rows, MAX_SCREEN_ROWS, "screen rows (responses x drivers x lags x models)",
         f"{split}, or screen fewer lags or models"),
        (size.largest_response, MAX_HYPOTHESES_PER_RESPONSE, "drivers for one response",
         f"{split} (each with part of the drivers)"),
        (size.hypotheses, MAX_HYPOTHESES_WITH_PDF if size.pdf else MAX_HYPOTHESES,
         "hypotheses (responses x drivers)" + (" with a PDF report" if size.pdf else ""),
         ("set report.pdf: false (the HTML report holds them all) or " if size.pdf else "") + split),
        (size.surrogate_values, MAX_SURROGATE_VALUES, "stored surrogate values (hypotheses x surrogates x 2)",
         f"lower screen.surrogates or {split}"),
    ]
    return [InputProblem(what=f"study has {n:,} {what} (limit {limit:,})", fix=fix, file=str(study.path))
            for n, limit, what, fix in checks if n > limit]
