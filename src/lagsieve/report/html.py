"""The evidence report: one self-contained HTML file per study (figures embedded as data URIs,
inline CSS and script, nothing fetched), figure and table exports, and a PDF copy (pdf.py).

Layout of the page, top to bottom (templates/page.html): heading and cautions; the annex
summary in management units (annex.py); summary in plain
words per response; the study-wide evidence map; the ranked evidence table (sortable,
filterable) with the grade and flag legends; panels for the leading hypotheses of each
response; data coverage and driver collinearity; the forecast ledger's "Since the previous
run"; a methods text generated from the run with its references; provenance.

The page is rendered from Jinja2 templates with autoescape on, so every user string (ids,
labels, titles, file names) is escaped; it carries a Content-Security-Policy that forbids any
network request and allows only the page's own script and style (by hash), so even a mistake
in escaping could not run a script or fetch anything.
"""
from __future__ import annotations

import logging
import time
from pathlib import Path

import pandas as pd

from lagsieve.ledger.section import LedgerSection
from lagsieve.report import annex
from lagsieve.report import figures as fg
from lagsieve.report import condition as cond
from lagsieve.report import joint as jnt
from lagsieve.report import estimates as est
from lagsieve.report import rivals as rv
from lagsieve.report import sections
from lagsieve.report import stability as stab
from lagsieve.report import statespace as ssp
from lagsieve.report.context import Context
from lagsieve.report.exports import write_tables
from lagsieve.report.plan import plan_figures
from lagsieve.report.render import content_security_policy, render, script, stylesheet


def render_page(ctx: Context, figs: dict, plan, since: LedgerSection | None = None,
                print_copy: bool = False) -> str:
    """The page's HTML from the context, the drawn figures and the plan of panels; with
    ``print_copy``, the copy the PDF is made from (:func:`print_copy_of`)."""
    words = page_context(ctx, figs, plan, since)
    return print_copy_of(words, plan) if print_copy else page_of(words)


def page_of(words: dict) -> str:
    """The page for the screen, rendered from its words (:func:`page_context`)."""
    return render("page.html", **words, print_copy=False) + "\n"


def print_copy_of(words: dict, plan) -> str:
    """The page rendered again from the same words (:func:`page_context`) for the PDF: the
    figures of :func:`print_figures`, and the templates leave out what only the screen needs
    (``print_copy``: the ranked table's rows below weak, the configuration's full text)."""
    return render("page.html", **{**words, "figs": print_figures(words["figs"], plan)}, print_copy=True) + "\n"


def print_figures(figs: dict, plan) -> dict:
    """The figures of the PDF copy: the study-wide ones, the condition, variance partitions and
    moving windows; the panels of each leading hypothesis and the joint screen's slope figures
    stay in the HTML page (on the demo they were two thirds of the PDF's pages)."""
    left_out = {n for info in plan.panels.values() for n in info["names"]}
    left_out |= {j.name for j in plan.jobs if j.builder == "joint_slopes"}
    return {n: v for n, v in figs.items() if n not in left_out}


def stamp_finished(provenance: dict) -> None:
    """The time the report's content is put together (``finished``, "report written"), once the
    figures the page and document show first are drawn; kept when already stamped."""
    provenance.setdefault("finished", time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()))


def _draw_print_first(plan, renderer: fg.FigureRenderer, ctx: Context, since, provenance: dict,
                      on_print_copy) -> tuple[dict, dict]:
    """The figures of the print copy drawn first, the print copy rendered and handed to
    ``on_print_copy`` (print copy, its figures), then the other figures drawn: the PDF is made
    while they are. Returns (every figure in the plan's order, the page's words)."""
    printed = print_figures({j.name: None for j in plan.jobs}, plan)
    figs = renderer.draw([j for j in plan.jobs if j.name in printed])
    stamp_finished(provenance)
    words = page_context(ctx, figs, plan, since)
    on_print_copy(print_copy_of(words, plan), dict(figs))
    figs.update(renderer.draw([j for j in plan.jobs if j.name not in printed]))
    figs = {j.name: figs[j.name] for j in plan.jobs if j.name in figs}
    return figs, {**words, "figs": figs}


def page_context(ctx: Context, figs: dict, plan, since: LedgerSection | None = None) -> dict:
    """Every value the page's templates read."""
    css, js = stylesheet(), script()
    return dict(**sections.page_words(ctx), csp=content_security_policy(css, js), css=css, js=js,
                  figs=figs, shortened=plan.shortened, summary=sections.summary(ctx), table=sections.evidence_table(ctx),
                  hypotheses=sections.hypotheses(ctx, plan.panels), data=sections.data(ctx), since=since,
                  methods=sections.methods(ctx, plan.tables), provenance=sections.provenance(ctx),
                  condition=cond.section(ctx.condition), annex=annex.section(ctx),
                  rivals=rv.section(ctx.rivals, ctx.study.response_ids, ctx.label),
                  statespace=ssp.section(ctx.evidence, ctx.label),
                  estimates=est.section(ctx.evidence, ctx.label),
                  stability=stab.section(ctx.evidence, ctx.windows, ctx.label, ctx.rows),
                  joint=jnt.section(ctx.joint, ctx.label))


def write_document(ctx: Context, figs: dict, path: Path) -> bool:
    """``report.docx`` (report.document); without python-docx, one line in the log and False."""
    try:
        # imported here: a missing python-docx (an optional library) costs the document only, not the report
        from lagsieve.report.document import write_docx
    except ImportError:
        logging.getLogger(__name__).warning("report.docx not written: python-docx is not installed "
                                            "(pip install python-docx)")
        return False
    write_docx(ctx, figs, path)
    return True


def _clear_tables(figures_dir: Path) -> None:
    """Remove the tables of an earlier report (written again below); the figures are kept, to be
    reused by their content keys (figures.FigureRenderer) or pruned when no longer planned."""
    figures_dir.mkdir(parents=True, exist_ok=True)
    for old in figures_dir.glob("*.csv"):
        old.unlink()


def build_report(study, table, screen, evidence, forecasts, nulls, notes, provenance, figures_dir,
                 annual: pd.DataFrame | None = None, workers: int = 1,
                 renderer: fg.FigureRenderer | None = None, since: LedgerSection | None = None,
                 docx_path: Path | None = None, condition: dict | None = None, rivals: dict | None = None,
                 windows: pd.DataFrame | None = None, joint: tuple | None = None,
                 print_copy: bool = False, on_print_copy=None) -> tuple[str, dict, str | None]:
    """Render the report HTML (and, with ``print_copy``, the copy the PDF is made from); write its
    figures (PNG, and SVG when ``report.svg`` asks; drawn or reused by their content keys) and
    tables (CSV) under ``figures_dir``. Returns (html, figures, print copy or None) where figures
    maps name -> (base64 PNG, size).

    The figures are drawn by ``renderer`` (a :class:`figures.FigureRenderer` on ``figures_dir``,
    perhaps with a cache folder of its own), else by one made here with ``workers`` processes;
    figures left from an earlier report that this one does not draw are removed. ``since``: the ledger's section
    "Since the previous run" (:func:`lagsieve.ledger.section.ledger_section`), placed after the
    data section; None leaves it out. ``condition``: the condition stage's outputs
    (:func:`lagsieve.report.condition.read_outputs`), shown in a section of their own. ``rivals``:
    conditional.csv and models.csv (:func:`lagsieve.report.rivals.read_outputs`), the competing
    explanations after the leading hypotheses. ``windows``: windows.csv
    (:func:`lagsieve.report.stability.read_windows`), the relationships that change. ``joint``:
    joint.csv and joint_groups.csv (:func:`lagsieve.report.joint.read_joint`), groups screened jointly.
    ``on_print_copy`` (with ``renderer``): called with (print copy, its figures) as soon as the print
    copy exists, before the other figures, the tables and the document are made (the caller starts
    the PDF there); the print copy is then not returned."""
    figures_dir = Path(figures_dir)
    _clear_tables(figures_dir)
    ctx = Context.of(study, table, screen, evidence, forecasts, nulls, notes, provenance, annual=annual)
    ctx.condition, ctx.rivals, ctx.windows = condition, rivals, windows
    ctx.joint = joint
    plan = plan_figures(ctx)
    plan.jobs += cond.plan_condition(condition, ctx.invented, int(study.screen["seed"]))
    plan.jobs += rv.plan_rivals(rivals, ctx.label, ctx.invented)
    plan.jobs += jnt.plan_joint(joint, ctx.label, ctx.invented)
    plan.jobs += stab.plan_stability(evidence, windows, ctx.label, ctx.invented, ctx.rows)
    if on_print_copy is not None and renderer is not None:
        figs, words = _draw_print_first(plan, renderer, ctx, since, provenance, on_print_copy)
    else:
        figs = (fg.render_jobs(plan.jobs, figures_dir, workers=workers, formats=fg.study_formats(study.report))
                if renderer is None else renderer.draw(plan.jobs))
        words = None
        stamp_finished(provenance)  # before the document, which shows it, as on the path above
    fg.prune(figures_dir, figs)
    write_tables(ctx, plan, figures_dir)
    if docx_path is not None:
        write_document(ctx, figs, docx_path)
    if words is not None:  # the print copy was handed to on_print_copy
        return page_of(words), figs, None
    words = page_context(ctx, figs, plan, since)
    return page_of(words), figs, (print_copy_of(words, plan) if print_copy else None)
