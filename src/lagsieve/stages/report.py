"""Stage `report` (:func:`run_report`): figures, tables, the self-contained HTML report, its
PDF copy, the editable annex document and provenance. The report modules (matplotlib, the
figure code) are imported by this module only."""
from __future__ import annotations

import os
import time
from pathlib import Path

import pandas as pd

from lagsieve.io.config import Study, load_study
from lagsieve.io.files import sha256_file, write_json, write_text
from lagsieve.io.provenance import package_versions, tool_version
from lagsieve.ledger.section import ledger_section
from lagsieve.ledger.store import resolve_ledger_path
from lagsieve.ledger.update import input_hashes
from lagsieve.report.condition import read_outputs
from lagsieve.report.figures import FigureRenderer, study_formats
from lagsieve.report.html import build_report
from lagsieve.report.joint import read_joint
from lagsieve.report.pdf import PdfJob, start_pdf, weasyprint_found, write_report_pdf
from lagsieve.report.rivals import read_outputs as read_rivals
from lagsieve.report.stability import read_windows
from lagsieve.stages.allocator import allocator_variables
from lagsieve.stages.common import load_table, response_dirs
from lagsieve.stages.plan import pdf_wanted


def _iso(t: float) -> str:
    return time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime(t))


def _response_tables(dirs: dict, name: str) -> pd.DataFrame:
    """One of the screen's per-response tables (forecasts.csv, nulls.csv), all responses stacked."""
    parts = [pd.read_csv(d / name) for d in dirs.values() if (d / name).is_file() and (d / name).stat().st_size > 1]
    return pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(
        columns=["response", "driver", "year", "test", "value", "observed"])


def _report_provenance(study: Study, annual_csv, dirs: dict, t0: float) -> dict:
    """What provenance.json records before the report is drawn: config, inputs, versions, times."""
    inputs = input_hashes(study)
    screened = [(d / "screen.csv").stat().st_mtime for d in dirs.values() if (d / "screen.csv").is_file()]
    prov = {
        "study": study.id,
        "config_path": str(study.path),
        "config_sha256": sha256_file(study.path),
        "config": study.raw,
        "inputs_sha256": inputs,
        "seed": study.screen["seed"],
        "tool_version": tool_version(),
        "versions": package_versions("pillow", "weasyprint"),  # with the report's own libraries
        "inputs_prepared": _iso(Path(annual_csv).stat().st_mtime),
        "screened": _iso(max(screened)) if screened else None,
        "started": _iso(t0),
        "allocator": allocator_variables(os.environ),
    }
    return prov


def run_report(config_path, annual_csv, notes_csv, work_dir, screen_csv, evidence_csv,
               out_report, out_provenance, figures_dir, started: float | None = None,
               out_pdf=None, threads: int | None = None, condition=None) -> None:
    """Stage `report`: figures and tables under ``figures_dir``, the self-contained HTML
    report, its PDF copy (``out_pdf``, default ``report.pdf`` beside the report, unless the
    config sets ``report.pdf: false``), the editable annex ``report.docx`` beside it (unless
    ``report.docx: false``) and provenance.json.

    ``threads``: worker processes for drawing the figures (default: up to 4 CPUs). The figures
    are kept with their content keys in ``work_dir``/figures and copied into ``figures_dir`` (which
    Snakemake clears before the job): an unchanged figure is not drawn again.
    ``condition``: the condition stage's outputs (paths), shown in a section of their own.
    """
    t0 = time.time() if started is None else started
    study = load_study(config_path)
    table = load_table(study, annual_csv)
    annual = pd.read_csv(annual_csv)
    dirs = response_dirs(work_dir, study)
    forecasts, nulls = _response_tables(dirs, "forecasts.csv"), _response_tables(dirs, "nulls.csv")
    evidence = pd.read_csv(evidence_csv, keep_default_na=True)
    screen = pd.read_csv(screen_csv)
    notes = pd.read_csv(notes_csv)
    prov = _report_provenance(study, annual_csv, dirs, t0)
    workers = threads if threads else min(4, os.cpu_count() or 1)
    pdf_path = Path(out_pdf) if out_pdf else Path(out_report).with_name("report.pdf")
    docx_path = Path(out_report).with_name("report.docx")
    if docx_path.is_file():  # written again below when wanted; a copy left by an earlier run would be stale
        docx_path.unlink()
    # WeasyPrint writes the PDF in a forked process (report.pdf.PdfJob) as soon as the figures of
    # the print copy are drawn, while this process draws the others and writes tables and document
    jobs: list[PdfJob] = []
    early = pdf_wanted(study) and weasyprint_found()
    try:
        with FigureRenderer(figures_dir, workers, cache_dir=Path(work_dir) / "figures",
                            formats=study_formats(study.report)) as renderer:
            since = ledger_section(resolve_ledger_path(study, Path(out_report).parent), study, evidence)
            html, figs, print_html = build_report(
                study, table, screen, evidence, forecasts, nulls, notes, prov, figures_dir, annual=annual,
                renderer=renderer, since=since, docx_path=docx_path if study.report["docx"] else None,
                condition=read_outputs(condition), rivals=read_rivals(evidence_csv), windows=read_windows(evidence_csv),
                joint=read_joint(evidence_csv), print_copy=pdf_wanted(study),
                on_print_copy=(lambda text, printed: jobs.append(_start_pdf(renderer, text, pdf_path, printed,
                                                                            figures_dir)))
                if early else None)
            write_text(html, out_report)
        prov["pdf"] = _finish_pdf(study, evidence, figs, print_html, pdf_path, jobs, figures_dir,
                                  stale=out_pdf is None)
    except BaseException:
        for job in jobs:  # no PDF of a report that failed
            job.cancel()
        raise
    prov["report_finished"] = _iso(time.time())
    write_json(prov, out_provenance)


def _start_pdf(renderer: FigureRenderer, text: str, pdf_path: Path, printed: dict, figures_dir) -> PdfJob:
    """The PDF's process forked once the drawing processes have ended: a fork from a process with
    other threads running (the pool's) may leave the child holding a lock no thread will release."""
    renderer.release_workers(nice=PDF_FIRST)
    return start_pdf(text, pdf_path, printed, figures_dir)


#: How much lower the priority of the figure workers started beside the PDF's process is (os.nice):
#: the PDF is the report's longest single task and the job waits for it at the end, so it gets a
#: core while the workers share what is left (see DEVELOPERS.md, "How the report stays fast").
PDF_FIRST = 5


def _finish_pdf(study: Study, evidence, figs: dict, print_html, pdf_path: Path, jobs: list, figures_dir,
                stale: bool) -> str | None:
    """The PDF's engine: the forked WeasyPrint job waited for, or the PDF written here (matplotlib,
    or WeasyPrint where no job was started); None without a PDF, when an earlier run's copy
    (``stale``: the default path) is removed."""
    if jobs:
        return jobs[0].finish(study, evidence, figs)
    if pdf_wanted(study):
        return write_report_pdf(print_html, pdf_path, study, evidence, figs, figures_dir=figures_dir)
    if stale and pdf_path.is_file():  # a copy left by an earlier run would be stale
        pdf_path.unlink()
    return None
