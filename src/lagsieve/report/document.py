"""The editable annex document, ``report.docx`` (python-docx): the study's heading and
provenance line, the cautions, the annex summary tables (report.annex), the grade rules, the
methods text with its references and the key figures with captions. Headings use the word
processor's own styles (Title, Heading 1, Heading 2), so its navigation pane and table of
contents find them; tables use the built-in "Table Grid" style.
"""
from __future__ import annotations

import base64
import functools
import io
from pathlib import Path

from docx import Document
from docx.enum.section import WD_ORIENT
from docx.enum.style import WD_STYLE_TYPE
from docx.shared import Cm, Pt

from lagsieve.io.files import atomic_path
from lagsieve.io.names import pair_slug
from lagsieve.report import annex
from lagsieve.report.context import Context, leading
from lagsieve.report.exports import FIGURE_WORDS
from lagsieve.report.methods import reference_list
from lagsieve.report.sections import CAUTIONS, methods_text

FIGURE_WIDTH = Cm(24)  # landscape A4 less its margins

#: The paragraph styles the document uses (the word processor's own).
STYLES = ("Title", "Heading 1", "Heading 2", "List Bullet", "Caption")


@functools.lru_cache(maxsize=1)
def _style_ids() -> dict[str, str | None]:
    """The id of each of ``STYLES`` in python-docx's template (every document here starts from
    it), looked up once per process: python-docx looks a style up by name for every paragraph,
    scanning the template's styles twice (about 1 ms a paragraph, 17 paragraphs a document)."""
    styles = Document().styles
    return {name: styles.get_style_id(name, WD_STYLE_TYPE.PARAGRAPH) for name in STYLES}


def _paragraph(doc, text: str = "", style: str | None = None):
    """``doc.add_paragraph(text, style)``, with the style's id from :func:`_style_ids` (python-docx's
    ``Paragraph.style`` setter sets the same id after its own look-up)."""
    p = doc.add_paragraph(text)
    if style is not None:
        p._p.style = _style_ids()[style]  # noqa: SLF001 - the element the style setter writes to
    return p


def _heading(doc, text: str, level: int):
    """``doc.add_heading(text, level)`` through :func:`_paragraph` (level 0: the title)."""
    return _paragraph(doc, text, "Title" if level == 0 else f"Heading {level}")


def key_figures(figs: dict, ctx: Context) -> list[tuple[str, str]]:
    """(figure name, caption) of the figures the document carries: the evidence map, then the
    forecasts of the best-ranked hypothesis of each response."""
    out = [("evidence_map", "Evidence map: " + FIGURE_WORDS["evidence_grid"] + ".")] if "evidence_map" in figs else []
    for rid in ctx.study.response_ids:
        for row in leading(ctx, rid)[:1]:
            name = f"{pair_slug(rid, row['driver'])}__forecasts"
            if name in figs:
                out.append((name, f"{ctx.label(rid)} and {ctx.label(row['driver'])}: "
                                  f"{FIGURE_WORDS['forecasts']}."))
    return out


def _landscape(doc) -> None:
    sec = doc.sections[0]
    sec.orientation = WD_ORIENT.LANDSCAPE
    sec.page_width, sec.page_height = Cm(29.7), Cm(21.0)
    for side in ("left_margin", "right_margin", "top_margin", "bottom_margin"):
        setattr(sec, side, Cm(1.5))
    doc.styles["Normal"].font.size = Pt(9)


def _heading_part(doc, ctx: Context) -> None:
    st, prov = ctx.study, ctx.provenance
    _heading(doc, f"Driver screening: {st.raw.get('title') or st.id}", 0)
    doc.add_paragraph(f"Study {st.id} · lagsieve {prov.get('tool_version', '')} · report made "
                      f"{prov.get('finished', prov.get('started', ''))} · config SHA-256 "
                      f"{prov.get('config_sha256', '')} · seed {prov.get('seed', '')}")
    if ctx.invented:
        doc.add_paragraph().add_run("Invented data: every number in this study was made up to demonstrate "
                                    "the tool; nothing here should be cited as a finding.").bold = True
    _heading(doc, "Read with care", 1)
    for head, words in CAUTIONS:
        p = _paragraph(doc, style="List Bullet")
        p.add_run(head + " ").bold = True
        p.add_run(words)


def _summary_part(doc, section: dict) -> None:
    _heading(doc, "Annex summary", 1)
    doc.add_paragraph("For each response, the drivers with at least weak evidence: the evidence in words (how "
                      "sure the screening is of an association, not how large it is; drivers with less than weak "
                      "evidence are named under each table), the effect with its 95% interval in the "
                      "response's units for the stated change of the driver or, for a driver not carried forward, "
                      "the largest effect the data still allow, the forecast skill on years not used to fit, "
                      "cautions, and a rival driver that explains the same signal.")
    for resp in section["responses"]:
        _heading(doc, resp["label"] + (f" ({resp['unit']})" if resp["unit"] else ""), 2)
        _summary_table(doc, section, resp)
        if resp["others"]:
            doc.add_paragraph("Not carried forward: " + "; ".join(f"{words}: {', '.join(names)}"
                                                                   for words, names in resp["others"]) + ".")
    for line in section["cautions"]:
        _paragraph(doc, line, "List Bullet")


def _summary_table(doc, section: dict, resp: dict) -> None:
    """The annex table of one response (drivers graded weak or better), or a line saying none is."""
    if not resp["rows"]:
        doc.add_paragraph("No driver reaches weak evidence or better.")
        return
    table = doc.add_table(rows=1, cols=len(section["header"]), style="Table Grid")
    for cell, name in zip(table.rows[0].cells, section["header"]):
        cell.text = ""
        cell.paragraphs[0].add_run(name).bold = True
    for r in resp["rows"]:
        values = annex.cells(r)
        values[3] = f"{values[3]}. {r['statement']}"
        for cell, value in zip(table.add_row().cells, values):
            cell.text = value


def _rules_part(doc, section: dict) -> None:
    _heading(doc, "Grade rules", 1)
    for code, words, rule in section["grade_rules"]:
        p = doc.add_paragraph()
        p.add_run(f"{words} ({code}): ").bold = True
        p.add_run(rule)


def _methods_part(doc, ctx: Context) -> None:
    paragraphs, refs = methods_text(ctx)
    _heading(doc, "Methods", 1)
    for text in paragraphs:
        doc.add_paragraph(text)
    _heading(doc, "References", 2)
    for ref in reference_list(refs):
        doc.add_paragraph(ref)


def _figures_part(doc, ctx: Context, figs: dict) -> None:
    chosen = key_figures(figs, ctx)
    if not chosen:
        return
    _heading(doc, "Key figures", 1)
    for k, (name, caption) in enumerate(chosen, start=1):
        doc.add_picture(io.BytesIO(base64.b64decode(figs[name][0])), width=FIGURE_WIDTH)
        _paragraph(doc, f"Figure {k}. {caption}", "Caption")


def write_docx(ctx: Context, figs: dict, path: str | Path) -> None:
    """Write ``report.docx`` for a report's context and its drawn figures (name -> (base64 PNG, size))."""
    doc = Document()
    _landscape(doc)
    doc.core_properties.title = f"Driver screening: {ctx.study.raw.get('title') or ctx.study.id}"
    _heading_part(doc, ctx)
    section = annex.section(ctx)
    _summary_part(doc, section)
    _rules_part(doc, section)
    _methods_part(doc, ctx)
    _figures_part(doc, ctx, figs)
    with atomic_path(path) as tmp:
        doc.save(str(tmp))
