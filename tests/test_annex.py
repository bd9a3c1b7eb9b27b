"""Outputs fit for an ecosystem annex (issue 19): files readable by others, the annex summary in
management units (report, PDF, figures/summary.csv), the editable report.docx and the PDF as an
annex (page numbers, running header, no page holding only a heading, tagged).

One small study (two responses, three drivers of the demo data, hostile labels) is screened and
reported once under umask 022; the documents are read back with outside libraries (python-docx,
pypdf). The study takes about half a minute, so the tests that use it are marked slow.
"""
from __future__ import annotations

import os
import stat

import pandas as pd
import pytest

from lagsieve.io.config import load_study
from lagsieve.report.annex import EVIDENCE_WORDS, effect_words, skill_words

from helpers import make_report, run_study, tiny_config

CAUTION_HEADS = ("Association is not cause", "A screening generates hypotheses",
                 "Results inform, and do not replace")


@pytest.fixture(scope="module")
def annex_run(tmp_path_factory):
    """The study screened and reported with the process's umask set to 022."""
    base = tmp_path_factory.mktemp("annex")
    old = os.umask(0o022)
    try:
        cfg = tiny_config(base, report={"top": 1})
        res = run_study(cfg, base / "results")
        make_report(cfg, res)
    finally:
        os.umask(old)
    return {"cfg": cfg, "res": res, "study": load_study(cfg), "evidence": pd.read_csv(res / "evidence.csv")}


# ----------------------------------------------------------------------------- words (fast)
def test_skill_in_words_follows_the_skill_definition():
    # skill = 1 - MSE(model)/MSE(baseline) (Murphy 1988, Mon. Wea. Rev. 116:2417, recalled from
    # memory): 0.69 means a mean squared error 69% lower than the baseline's
    assert skill_words({"oos_skill": 0.69, "oos_hardest": "trend"}) == \
        "squared forecast error 69% lower than a trend-only forecast"
    assert skill_words({"oos_skill": -0.1, "oos_hardest": "climatology"}) == "no better than a mean-only forecast"
    assert skill_words({"oos_skill": float("nan")}) == "not tested"
    # a positive skill that rounds to 0% is not called "0% lower"
    assert skill_words({"oos_skill": 0.003, "oos_hardest": "trend"}) == \
        "squared forecast error less than 1% lower than a trend-only forecast"


def test_set_aside_effect_is_the_largest_allowed():
    row = {"grade": "none", "effect": 0.01, "effect_ci_low": -0.02, "effect_ci_high": 0.09,
           "effect_largest_allowed": 0.09, "effect_unit": "per year", "effect_basis": "per 1 kt of forage"}
    value, note = effect_words(row)
    assert value == "at most 0.090 either way"
    assert "95% interval -0.020 to 0.090" in note and "per 1 kt of forage" in note
    value, _ = effect_words({**row, "grade": "strong", "effect_largest_allowed": float("nan")})
    assert value == "+0.010 (-0.020 to 0.090)"


def test_evidence_words_never_call_a_grade_an_effect():
    assert all("effect" not in w for w in EVIDENCE_WORDS.values())
    assert EVIDENCE_WORDS["strong"] == "strong evidence"


# ----------------------------------------------------------------------------- files
@pytest.mark.slow
def test_results_are_readable_by_others_under_umask_022(annex_run):
    """POSIX open(2): a new file gets 0666 less the umask, 0644 under 022 (atomic writes too)."""
    res = annex_run["res"]
    named = [res / n for n in ("report.html", "report.pdf", "report.docx", "evidence.csv", "screen.csv",
                               "provenance.json", "work/annual.csv", "work/notes.csv")]
    figures = list((res / "figures").glob("*"))
    work = [p for p in (res / "work").rglob("*") if p.is_file()]
    assert figures and work
    for p in named + figures + work:
        assert stat.S_IMODE(p.stat().st_mode) == 0o644, p


@pytest.mark.slow
def test_summary_csv_is_the_annex_table(annex_run):
    ev, res = annex_run["evidence"], annex_run["res"]
    summary = pd.read_csv(res / "figures" / "summary.csv", keep_default_na=False)
    assert len(summary) == len(ev)
    assert set(summary["response"]) == set(ev["response"])
    merged = summary.merge(ev, on=["response", "driver"], suffixes=("", "_ev"))
    assert (merged["grade"] == merged["grade_ev"]).all()
    assert list(merged["evidence"]) == [EVIDENCE_WORDS[g] for g in merged["grade"]]
    aside = merged[~merged["grade"].isin(["strong", "moderate"])]
    got = pd.to_numeric(aside["effect_largest_allowed"], errors="coerce")
    assert got.equals(aside["effect_largest_allowed_ev"]) or (got - aside["effect_largest_allowed_ev"]).abs().max() < 1e-9
    assert not summary.apply(lambda c: c.astype(str).str.contains("strong effect")).any().any()


@pytest.mark.slow
def test_annex_section_first_in_the_page(annex_run):
    h = (annex_run["res"] / "report.html").read_text(encoding="utf-8")
    assert h.index('id="annex"') < h.index('id="summary"') < h.index('id="table"')
    annex_html = h[h.index('id="annex"'):h.index('id="summary"')]
    assert "strong effect" not in annex_html
    assert "Association is not cause" in annex_html and "do not replace" in annex_html
    assert "M age 2" in annex_html  # labels, not ids
    assert '<div class="colkey">' in h  # the ranked table's column key, printed


# ----------------------------------------------------------------------------- report.docx
@pytest.mark.slow
def test_docx_reads_back(annex_run):
    import docx  # python-docx, the outside reader of the document (imported where used: optional)

    d = docx.Document(str(annex_run["res"] / "report.docx"))
    heads = [(p.style.name, p.text) for p in d.paragraphs if p.style.name.startswith(("Heading", "Title"))]
    names = [t for _, t in heads]
    assert heads[0][0] == "Title"
    for want in ("Read with care", "Annex summary", "Grade rules", "Methods", "References"):
        assert want in names
    assert dict(heads)["Heading 2"]  # response headings under the summary
    ev = annex_run["evidence"]
    study = annex_run["study"]
    labels = {s["id"]: s.get("label") or s["id"] for s in study.drivers}
    # a table per response with drivers graded weak or better; the others named on one line
    shown = ev[ev["grade"].isin(["strong", "moderate", "weak"])]
    with_rows = [rid for rid in study.response_ids if (shown["response"] == rid).any()]
    assert len(d.tables) == len(with_rows)
    for table, rid in zip(d.tables, with_rows):
        want = shown[shown["response"] == rid].sort_values("rank")
        rows = table.rows[1:]
        assert len(rows) == len(want)
        for row, (_, e) in zip(rows, want.iterrows()):
            assert row.cells[0].text.startswith(labels[e["driver"]])
    body = "\n".join(p.text for p in d.paragraphs)
    for _, e in ev[~ev["grade"].isin(["strong", "moderate", "weak"])].iterrows():
        assert f"{EVIDENCE_WORDS[e['grade']]}: " in body and labels[e["driver"]] in body
    for head in CAUTION_HEADS:
        assert head in body
    assert "Westfall & Young 1993" in body or "gam" not in study.screen["models"]
    assert "strong effect" not in body + "".join(c.text for t in d.tables for r in t.rows for c in r.cells)


@pytest.mark.slow
def test_docx_methods_text_is_the_reports(annex_run, tmp_path):
    import docx  # python-docx, the outside reader (imported where used: optional)

    h = (annex_run["res"] / "report.html").read_text(encoding="utf-8")
    d = docx.Document(str(annex_run["res"] / "report.docx"))
    texts = [p.text for p in d.paragraphs]
    first = texts.index("Methods") + 1
    assert texts[first].startswith("The screening covered")
    assert "rolling-origin" in " ".join(texts[first:first + 12])
    assert len(d.inline_shapes) >= 1  # the evidence map at least
    assert "The screening covered" in h


@pytest.mark.slow
def test_docx_false_is_honoured(annex_run, tmp_path):
    cfg = tiny_config(tmp_path / "cfg", report={"top": 1, "pdf": False, "docx": False})
    out = make_report(cfg, annex_run["res"], tmp_path / "out")
    assert (out / "report.html").is_file() and not (out / "report.docx").exists()


# ----------------------------------------------------------------------------- the PDF as an annex
@pytest.mark.slow
def test_pdf_has_page_numbers_header_tags_and_no_heading_only_page(annex_run):
    from pypdf import PdfReader  # test extra; imported where used

    reader = PdfReader(annex_run["res"] / "report.pdf")
    n = len(reader.pages)
    print(f"PDF pages: {n}")  # the page count follows the content; reported, not fixed
    assert n >= 2
    root = reader.trailer["/Root"]
    assert "/StructTreeRoot" in root  # tagged (WeasyPrint pdf_tags)
    for k, page in enumerate(reader.pages, start=1):
        text = page.extract_text() or ""
        assert f"page {k} of {n}" in text
        assert "tiny_escape" in text  # the running header: title, study, date
        body = [line for line in text.splitlines() if line.strip() and f"page {k} of" not in line
                and "tiny_escape" not in line]
        assert len(body) > 1, f"page {k} holds only {body}"


# ----------------------------------------------------------------------------- the methods text (fast)
def test_methods_text_uses_labels_and_carries_the_grade_rules(tmp_path):
    from lagsieve.evidence.vocabulary import GRADE_RULES
    from lagsieve.report.context import Context
    from lagsieve.report.methods import REF, methods_paragraphs, reference_list

    from helpers import HOSTILE

    study = load_study(tiny_config(tmp_path))
    empty = pd.DataFrame()
    ctx = Context.of(study, pd.DataFrame({"x": [1.0, 2.0]}, index=[1990, 2020]), empty, empty, empty, empty,
                     empty, {})
    paragraphs, refs = methods_paragraphs(ctx)
    text = " ".join(paragraphs)
    assert f"natural log for {HOSTILE}" in text and "forage_biomass" not in text  # the label, not the id
    for rule in GRADE_RULES.values():
        assert rule in text
    # splines are screened in this study: the min-p combination and its reference travel with the text
    assert "min-p rule (Westfall & Young 1993)" in text and REF["westfall"] in reference_list(refs)
    assert "at every origin the baseline, the lag, the form (line or spline) and its smoothing" in text
