"""Tests of the evidence report (lagsieve.report: html, templates, sections, methods, pdf, figures; stages.run_report).

Two studies are screened once per session by calling the stage functions directly:

* ``demo_report``: the invented demo study of ``config/config.yaml`` with fewer surrogates (99) and
  two hypotheses per response in detail, so the session stays short;
* ``tiny``: two responses and three drivers of the demo data, with hostile labels and title
  (``<script>alert(1)</script>``, quotes, ``$`` signs) to check escaping.

The shared helpers (run_study, make_report, tiny_config) are in ``helpers.py``.
"""
from __future__ import annotations

import base64
import hashlib
import html as hh
import io
import json
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml

from lagsieve import pipeline as stages
from lagsieve.evidence.vocabulary import FLAGS, GRADE_RULES
from lagsieve.io.config import load_study
from lagsieve.io.names import slug
from lagsieve.report.context import Context
from lagsieve.report.figures import PNG_DPI, mpl_text, r_critical
from lagsieve.report.html import build_report, render_page
from lagsieve.report.methods import methods_paragraphs
from lagsieve.report import figures as fg
from lagsieve.report import pdf as rpdf
from lagsieve.report.pdf import pdf_engine, start_pdf, with_figure_files, write_pdf
from lagsieve.report.render import GRADE_CLASS
from lagsieve.report.plan import plan_figures
from lagsieve.report.render import static_text, stylesheet

from helpers import (DOLLAR_LABEL, HOSTILE, HOSTILE_TITLE, REPO, make_report, run_study, tiny_config,
                     write_config)


# ----------------------------------------------------------------------------- helpers
def data_uris(html_text: str) -> list[bytes]:
    return [base64.b64decode(m) for m in re.findall(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', html_text)]


def png_ok(data: bytes) -> tuple[bool, float]:
    from PIL import Image

    with Image.open(io.BytesIO(data)) as im:
        fmt = im.format
        arr = np.asarray(im.convert("RGB"), dtype=float)
    return fmt == "PNG", float(arr.std())


# ----------------------------------------------------------------------------- fixtures
@pytest.fixture(scope="session")
def demo_report(tmp_path_factory):
    """The whole demo study screened and reported (stage functions, no Snakemake): about 20 s,
    so the tests that use it are marked slow (tests/conftest.py, SLOW_FIXTURES)."""
    base = tmp_path_factory.mktemp("demo")
    src = REPO / "config" / "config.yaml"
    raw = yaml.safe_load(src.read_text(encoding="utf-8"))
    raw["inputs"] = [str((src.parent / p).resolve()) for p in raw["inputs"]]
    if raw.get("condition"):
        raw["condition"]["samples"] = [str((src.parent / p).resolve()) for p in raw["condition"]["samples"]]
    for r in raw["responses"]:  # the response's draws and vintages tables, read from the demo's folder
        for key in ("draws", "vintages"):
            if r.get(key):
                r[key] = str((src.parent / r[key]).resolve())
    raw["screen"]["surrogates"] = 99
    raw.setdefault("report", {})["top"] = 2
    cfg = write_config(base / "config.yaml", raw)
    res = run_study(cfg, base / "results")
    make_report(cfg, res)
    html_text = (res / "report.html").read_text(encoding="utf-8")
    return {"cfg": cfg, "res": res, "html": html_text, "study": load_study(cfg),
            "evidence": pd.read_csv(res / "evidence.csv")}


@pytest.fixture(scope="session")
def tiny(tmp_path_factory):
    base = tmp_path_factory.mktemp("tiny")
    cfg = tiny_config(base)
    res = run_study(cfg, base / "results")
    make_report(cfg, res)
    return {"cfg": cfg, "res": res, "html": (res / "report.html").read_text(encoding="utf-8"),
            "base": base}


# ----------------------------------------------------------------------------- escaping, self-containment
def test_hostile_strings_are_escaped(tiny):
    h = tiny["html"]
    assert HOSTILE not in h
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in h
    assert "<img src=x" not in h and 'onerror="alert' not in h
    assert "<script>alert(3)" not in h and "</style><script>" not in h
    assert "<b>bold</b>" not in h and "&lt;b&gt;bold&lt;/b&gt;" in h
    assert h.count("<script") == 1 and h.count("</style>") == 1  # only the page's own script and style
    # the hostile label reached the figures too: the figure with it still renders
    assert all(png_ok(d)[0] for d in data_uris(h))


def test_page_is_self_contained(tiny):
    h = tiny["html"]
    assert not re.search(r'(src|href)\s*=\s*"(?!data:image/png;base64,|#)', h)
    assert "<link" not in h and "@import" not in h and "url(" not in h
    assert not re.search(r"https?://", h)
    # the Content-Security-Policy allows exactly the page's own script and style (by hash)
    csp = hh.unescape(re.search(r'http-equiv="Content-Security-Policy" content="([^"]+)"', h).group(1))
    script = re.search(r"<script>(.*?)</script>", h, re.S).group(1)
    style = re.search(r"<style>(.*?)</style>", h, re.S).group(1)

    def digest(t):
        return base64.b64encode(hashlib.sha256(t.encode()).digest()).decode()

    assert "default-src 'none'" in csp and "img-src data:" in csp
    assert digest(script) in csp and digest(style) in csp


def test_style_and_script_are_the_package_files(tiny):
    h = tiny["html"]
    style = re.search(r"<style>(.*?)</style>", h, re.S).group(1)
    script = re.search(r"<script>(.*?)</script>", h, re.S).group(1)
    assert style == stylesheet() and style.startswith(static_text("report.css"))
    assert script == static_text("report.js") and "evidence-table" in script
    # one badge rule per grade, with the colours of the figures (figures.GRADE_STYLE)
    dashed = GRADE_CLASS["insufficient-data"]  # the class of each grade follows figures.GRADE_STYLE's order
    assert ".g-0{background:#0b3c68;color:#ffffff;" in style
    assert f".{dashed}{{background:#ffffff;color:#555555;border:1px dashed" in style


def _page_with_labels(tiny, label: str) -> str:
    """The tiny study's page (no figures drawn) with ``label`` as the label of every series."""
    res, study = tiny["res"], load_study(tiny["cfg"])
    for s in study.responses + study.drivers:
        s["label"] = label
    ctx = Context.of(study, stages.load_table(study, res / "work" / "annual.csv"), pd.read_csv(res / "screen.csv"),
                     pd.read_csv(res / "evidence.csv"), pd.DataFrame(), pd.DataFrame(),
                     pd.read_csv(res / "work" / "notes.csv"), {"tool_version": "t", "versions": {}, "config": {}})
    return render_page(ctx, {}, plan_figures(ctx))


def _tiny_plan(tiny, grades: dict):
    """The tiny study's context and figure plan, with the grades of some hypotheses replaced
    (``grades``: rank within each response -> grade)."""
    res, study = tiny["res"], load_study(tiny["cfg"])
    ev = pd.read_csv(res / "evidence.csv")
    for rank, grade in grades.items():
        ev.loc[ev["rank"] == rank, "grade"] = grade
    ctx = Context.of(study, stages.load_table(study, res / "work" / "annual.csv"), pd.read_csv(res / "screen.csv"),
                     ev, pd.DataFrame(), pd.DataFrame(), pd.read_csv(res / "work" / "notes.csv"),
                     {"tool_version": "t", "versions": {}, "config": {"study": "tiny"}})
    return ctx, plan_figures(ctx)


def test_panels_only_for_leading_hypotheses_graded_weak_or_better(tiny):
    """Our own rule (plan.PANEL_GRADES): a set-aside leading hypothesis keeps its entry (words,
    numbers, lag table) and gets no figure; one graded weak or better gets its panels."""
    ctx, plan = _tiny_plan(tiny, {1: "strong", 2: "none"})
    names = [j.name for j in plan.jobs]
    for key, info in plan.panels.items():
        rank = info["row"]["rank"]
        assert info["set_aside"] == (rank == 2)
        own = [n for n in names if n.startswith(key + "__")]
        assert (own == [] and info["names"] == []) if rank == 2 else (len(own) >= 3 and own == info["names"])
        assert "lag_table" in info  # the lag profile is exported either way
    _, drawn = _tiny_plan(tiny, {1: "strong", 2: "strong"})  # the same table as when its panels are drawn
    set_aside = [k for k, info in plan.panels.items() if info["set_aside"]]
    assert set_aside
    for key in set_aside:
        pd.testing.assert_frame_equal(plan.panels[key]["lag_table"], drawn.panels[key]["lag_table"])
    page = render_page(ctx, {n: ("", (1, 1)) for n in names}, plan)
    assert page.count("Set aside: no panels are drawn for it.") == sum(i["set_aside"] for i in plan.panels.values())


def _page_and_print_copy(tiny):
    """The tiny study with one hypothesis per response graded strong, none and weak: its context,
    figure plan, page and print copy."""
    ctx, plan = _tiny_plan(tiny, {1: "strong", 2: "none", 3: "weak"})
    figs = {j.name: ("", (1, 1)) for j in plan.jobs}
    page, printed = render_page(ctx, figs, plan), render_page(ctx, figs, plan, print_copy=True)
    return ctx, plan, page, printed


def test_print_copy_leaves_out_panels_rows_below_weak_and_the_config_text(tiny):
    """Our own rule: the page the PDF is made from keeps the study-wide figures and the rows
    graded weak or better; the panels, the other rows and the configuration's text stay in the HTML."""
    ctx, plan, page, printed = _page_and_print_copy(tiny)
    panels = [n for info in plan.panels.values() for n in info["names"]]
    assert panels and all(f'data-name="{n}"' in page and f'data-name="{n}"' not in printed for n in panels)
    assert 'data-name="evidence_map"' in page and 'data-name="evidence_map"' in printed
    kept = ctx.evidence["grade"].isin(["strong", "moderate", "weak"]).sum()
    assert 0 < kept < len(ctx.evidence)
    assert page.count("<tr data-response=") == len(ctx.evidence) and printed.count("<tr data-response=") == kept
    assert f"lists the {kept} hypotheses graded weak or better; all {len(ctx.evidence)} are in report.html" in printed
    assert "Configuration as given" in page and "Configuration as given" not in printed


def test_print_copy_holds_nothing_the_printed_page_hides(tiny):
    """Our own rule: the print copy holds no hidden row, script, section list or control (the
    ranked table's filters, the methods' copy button); WeasyPrint would match styles for each of
    them only to hide it. The page keeps them all."""
    _, _, page, printed = _page_and_print_copy(tiny)
    for tag in ("<script", '<nav class="toc', "<input", "<select", "<button", 'class="controls'):
        assert tag in page and tag not in printed, tag
    assert re.search(r"<tr\b[^>]*\bhidden\b", printed) is None
    hidden_class = re.compile(r'class="[^"]*\bnoprint\b')  # what the print stylesheet hides
    assert hidden_class.search(page) and not hidden_class.search(printed)


@pytest.mark.parametrize("label, escaped", [
    (HOSTILE, "&lt;script&gt;alert(1)&lt;/script&gt;"),
    ('x" onmouseover="alert(4)', "x&#34; onmouseover=&#34;alert(4)"),
])
def test_a_hostile_series_label_is_escaped_everywhere(tiny, label, escaped):
    h = _page_with_labels(tiny, label)
    assert label not in h
    for section in ("summary", "table", "hypotheses", "methods"):
        part = h.split(f'<section id="{section}"')[1].split("</section>")[0]
        assert escaped in part, section
    # in attribute values too: the evidence table's sort key and the response filter's options
    assert f' data-v="{escaped}">' in h and f">{escaped}</option>" in h
    assert h.count("<script") == 1


def test_embedded_images_are_png_and_not_blank(demo_report):
    uris = data_uris(demo_report["html"])
    assert len(uris) >= 10
    for d in uris:
        is_png, std = png_ok(d)
        assert is_png and std > 0


# ----------------------------------------------------------------------------- content
def test_summary_in_plain_words(demo_report):
    ev, text, st = demo_report["evidence"], demo_report["html"], demo_report["study"]
    summary = text.split('id="summary"')[1].split('id="overview"')[0]
    labels = {d["id"]: d.get("label", d["id"]) for d in st.drivers}
    supported = ev[ev["grade"].isin(["strong", "moderate"])]
    assert len(supported), "the demo should have supported hypotheses"
    for row in supported.to_dict("records"):
        assert hh.escape(row["summary"]) in summary
        assert hh.escape(labels[row["driver"]]) in summary
    for row in ev[~ev["grade"].isin(["strong", "moderate"])].to_dict("records"):
        assert hh.escape(labels[row["driver"]]) in summary  # every set-aside driver is named, with its reason
    assert "Set aside" in summary


def test_invented_banner_and_cautions(demo_report):
    h = demo_report["html"]
    assert "Invented data." in h and "invented demonstration data" in h
    for words in ("Association is not cause", "generates hypotheses", "do not replace"):
        assert words in h


def test_flags_and_grades_have_words(demo_report):
    h, ev = demo_report["html"], demo_report["evidence"]
    for codes in ev["flags"].dropna():
        for c in codes.split(";"):
            assert f'<span class="flag" title="{hh.escape(FLAGS[c])}">{c}</span>' in h
    legend = h.split('id="table"')[1].split('id="hypotheses"')[0]
    for c, sentence in FLAGS.items():
        assert hh.escape(sentence) in legend and f">{c}<" in legend
    for g in GRADE_RULES:
        assert hh.escape(GRADE_RULES[g]) in legend
    for g in ev["grade"].unique():  # colour always comes with the grade in words
        assert re.search(rf'<span class="grade g-\d" title="[^"]*">{re.escape(g)}</span>', h)


def test_table_rows_and_sort_keys(demo_report):
    h, ev = demo_report["html"], demo_report["evidence"]
    body = h.split('<table id="evidence-table"')[1].split("</table>")[0]
    assert body.count("<tr data-response=") == len(ev)
    assert 'data-key="r" data-type="num"' in body


def test_panels_of_top_hypotheses(demo_report):
    h, ev = demo_report["html"], demo_report["evidence"]
    top = int(demo_report["study"].report["top"])
    for rid in demo_report["study"].response_ids:
        for row in ev[ev.response == rid].sort_values("rank").head(top).to_dict("records"):
            key = f"{slug(rid)}__{slug(row['driver'])}"
            assert f'id="h-{key}"' in h
            drawn = row["grade"] in ("strong", "moderate", "weak")  # plan.PANEL_GRADES
            for kind in ("overlay", "scatter", "lags", "forecasts", "nulls"):
                assert (demo_report["res"] / "figures" / f"{key}__{kind}.png").is_file() == drawn
            assert (demo_report["res"] / "figures" / f"{key}__lags.csv").is_file()
    for alt in ("standardised overlay", "lag profile of r", "out-of-sample forecasts", "surrogate null"):
        assert f'alt="{alt}' in h
    for name in ("evidence_map", "coverage", "driver_correlation"):
        assert (demo_report["res"] / "figures" / f"{name}.png").is_file()


def test_methods_generated_from_run(demo_report):
    h, st = demo_report["html"], demo_report["study"]
    methods = h.split('id="methods-text"')[1].split("</div>")[0]
    assert "99 surrogate series" in methods
    assert "shares the real driver's linear trend" in hh.unescape(methods)
    assert f"false discovery rate of {st.screen['fdr']:g}" in methods
    assert f"seed {st.screen['seed']}" in methods
    assert "Ebisuzaki" in methods and "Benjamini" in methods and "Pyper" in methods
    ctx = Context(study=st, table=pd.DataFrame({"x": [1.0]}, index=[2000]), screen=pd.DataFrame(),
                  evidence=demo_report["evidence"], forecasts=pd.DataFrame(), nulls=pd.DataFrame(),
                  notes=pd.DataFrame(), annual=None, provenance={})
    st.screen["surrogate_keep_trend"] = False
    try:
        text = " ".join(methods_paragraphs(ctx)[0])
    finally:
        st.screen["surrogate_keep_trend"] = True
    assert "not preserved" in text


def test_provenance_block(demo_report):
    h, res = demo_report["html"], demo_report["res"]
    prov = json.loads((res / "provenance.json").read_text())
    for digest in prov["inputs_sha256"].values():
        assert digest in h
    assert prov["config_sha256"] in h
    assert prov["started"] and prov["finished"] and prov["pdf"] in ("weasyprint", "matplotlib")
    assert f"lagsieve {prov['tool_version']}" in h


# ----------------------------------------------------------------------------- exports
def test_figure_and_table_exports(demo_report):
    from PIL import Image

    figs = demo_report["res"] / "figures"
    manifest = pd.read_csv(figs / "figures.csv")
    assert len(manifest) >= 10
    for name in manifest["figure"]:
        with Image.open(figs / f"{name}.png") as im:
            # one raster at PNG_DPI, the smallest figure 4 inches wide
            assert round(im.info["dpi"][0]) == PNG_DPI and im.width >= 4 * PNG_DPI
        assert not (figs / f"{name}.svg").exists()  # SVG copies only with report.svg: true
    assert manifest["svg"].isna().all()
    for table in ("evidence_table", "summary", "coverage", "driver_correlations", "evidence_map"):
        assert len(pd.read_csv(figs / f"{table}.csv")) > 0
    assert len(pd.read_csv(figs / "evidence_table.csv")) == len(demo_report["evidence"])


def test_pdf_has_pages_and_study_id(demo_report):
    from pypdf import PdfReader

    reader = PdfReader(demo_report["res"] / "report.pdf")
    assert len(reader.pages) >= 1
    text = "".join(p.extract_text() or "" for p in reader.pages[:3])
    assert demo_report["study"].id in text.replace("\n", "")


def test_pdf_fallback_with_matplotlib(tiny, tmp_path):
    from pypdf import PdfReader

    uris = re.findall(r'src="data:image/png;base64,([A-Za-z0-9+/=]+)"', tiny["html"])[:3]
    out = tmp_path / "report.pdf"
    engine = write_pdf(tiny["html"], out, study_id="tiny_escape", title=HOSTILE_TITLE,
                       summary=["M age 2 (m:age2)", f"    {DOLLAR_LABEL}, set aside"],
                       figures=[("fig", u) for u in uris], invented=True, engine="matplotlib")
    assert engine == "matplotlib"
    reader = PdfReader(out)
    assert len(reader.pages) >= 2
    assert "tiny_escape" in reader.pages[0].extract_text()


def test_pdf_reads_the_same_figure_bytes_from_their_files(tiny, tmp_path):
    """The PDF's copy of the page names each figure's PNG file instead of embedding its base64
    text; the file holds exactly the bytes the page embeds, and the PDF is the same."""
    from pypdf import PdfReader

    html, folder = tiny["html"], tiny["res"] / "figures"
    embedded = dict(re.findall(r'data-name="([^"]+)"[^>]*src="data:image/png;base64,([A-Za-z0-9+/=]+)"', html))
    assert embedded
    figs = {name: (b64, (0, 0)) for name, b64 in embedded.items()}
    stray = '<img alt="x" src="data:image/png;base64,AAAA">'  # no figure of the report: left as it is
    out = with_figure_files(html + stray, figs, folder)
    assert "data:image/png;base64,AAAA" in out and out.count("data:image/png") == 1
    for name, b64 in embedded.items():
        uri = (folder / f"{name}.png").resolve().as_uri()
        assert f'src="{uri}"' in out
        assert base64.b64encode((folder / f"{name}.png").read_bytes()).decode() == b64
    if pdf_engine() != "weasyprint":
        pytest.skip("WeasyPrint is not installed")
    pages = []
    for text, name in ((html, "embedded.pdf"), (with_figure_files(html, figs, folder), "files.pdf")):
        write_pdf(text, tmp_path / name, study_id="tiny", title="t", summary=[], figures=[], invented=True)
        reader = PdfReader(tmp_path / name)
        pages.append([(p.extract_text(), sorted(i.data for i in p.images)) for p in reader.pages])
    assert pages[0] == pages[1]


def _one_figure_page(tiny, paragraphs: int = 1) -> tuple[str, dict, object]:
    """A small page naming one of the tiny report's figures: (html, figs, figures folder)."""
    folder = tiny["res"] / "figures"
    name = sorted(p.stem for p in folder.glob("*.png"))[0]
    b64 = base64.b64encode((folder / f"{name}.png").read_bytes()).decode()
    text = "<p>" + "Natural mortality against a driver, every year screened. " * 40 + "</p>"
    html = (f'<html><body><h1>tiny</h1><img data-name="{name}" src="data:image/png;base64,{b64}">'
            + text * paragraphs + "</body></html>")
    return html, {name: (b64, (1, 1))}, folder


def test_pdf_of_the_forked_process_is_the_pdf_written_here(tiny, tmp_path):
    """Our own rule: the PDF written in a forked process (report.pdf.PdfJob) is byte for byte the
    PDF this process writes from the same print copy, so it does not depend on when it ends."""
    if pdf_engine() != "weasyprint":
        pytest.skip("WeasyPrint is not installed")
    html, figs, folder = _one_figure_page(tiny)
    study, ev = load_study(tiny["cfg"]), pd.read_csv(tiny["res"] / "evidence.csv")
    assert start_pdf(html, tmp_path / "forked.pdf", figs, folder).finish(study, ev, figs) == "weasyprint"
    write_pdf(with_figure_files(html, figs, folder), tmp_path / "here.pdf", study_id="tiny", title="t",
              summary=[], figures=[], invented=True)
    assert (tmp_path / "forked.pdf").read_bytes() == (tmp_path / "here.pdf").read_bytes()


def test_pdf_falls_back_to_matplotlib_with_every_figure_when_weasyprint_fails(tiny, tmp_path, monkeypatch):
    """A WeasyPrint that fails in the forked process: the PDF is written by matplotlib in this one,
    from every figure handed to finish (two per page after the text pages), as write_pdf does."""
    from pypdf import PdfReader

    def broken(html_text, path):
        raise OSError("no pango here")

    monkeypatch.setattr(rpdf, "_write_weasyprint", broken)
    html, figs, folder = _one_figure_page(tiny)
    every = {p.stem: (base64.b64encode(p.read_bytes()).decode(), (1, 1)) for p in sorted(folder.glob("*.png"))[:5]}
    study, ev = load_study(tiny["cfg"]), pd.read_csv(tiny["res"] / "evidence.csv")
    out = tmp_path / "report.pdf"
    assert start_pdf(html, out, figs, folder).finish(study, ev, every) == "matplotlib"
    reader = PdfReader(out)
    assert "tiny_escape" in reader.pages[0].extract_text()
    captions = "".join(p.extract_text() for p in reader.pages[-3:]).replace("\n", "")
    assert all(n.replace("__", " / ") in captions for n in every)  # five figures, two per page
    assert not list(tmp_path.glob(".report.pdf.*"))


def test_cancelled_pdf_leaves_no_file(tiny, tmp_path):
    """Our own rule: a report that fails stops its PDF: neither the unfinished temporary file (the
    process is stopped while it writes, here once its file exists) nor a PDF of an earlier run is left."""
    if pdf_engine() != "weasyprint":
        pytest.skip("WeasyPrint is not installed")
    html, figs, folder = _one_figure_page(tiny, paragraphs=400)
    out = tmp_path / "report.pdf"
    out.write_bytes(b"%PDF of an earlier run")
    job = start_pdf(html, out, figs, folder)
    for _ in range(2000):  # until WeasyPrint's temporary file exists (or the PDF is done)
        if list(tmp_path.glob(".report.pdf.*.tmp")) or job._process.exitcode is not None:
            break
        job._process.join(0.005)
    if job._process.exitcode is None:  # still writing: what cancel() sends first, and the process
        job._process.terminate()      # itself removes its temporary file
        job._process.join(120)  # a bound, not a timing: it stops at its next Python instruction
        assert job._process.exitcode == 1, job._process.exitcode
        assert not list(tmp_path.glob(".report.pdf.*.tmp"))
    job.cancel()
    assert sorted(p.name for p in tmp_path.iterdir()) == []


def test_pdf_process_killed_while_writing_falls_back_and_leaves_no_temporary_file(tiny, tmp_path):
    """Our own rule: a PDF process that ends without a word (SIGKILL, as the out-of-memory killer
    sends, once its temporary file exists) gives the matplotlib PDF, and the file it left is removed."""
    if pdf_engine() != "weasyprint":
        pytest.skip("WeasyPrint is not installed")
    html, figs, folder = _one_figure_page(tiny, paragraphs=400)
    out = tmp_path / "report.pdf"
    job = start_pdf(html, out, figs, folder)
    for _ in range(2000):  # until WeasyPrint's temporary file exists (or the PDF is done)
        if list(tmp_path.glob(".report.pdf.*.tmp")) or job._process.exitcode is not None:
            break
        job._process.join(0.005)
    if job._process.exitcode is not None:
        pytest.skip("the PDF was finished before it could be killed")
    os.kill(job._process.pid, signal.SIGKILL)
    study, ev = load_study(tiny["cfg"]), pd.read_csv(tiny["res"] / "evidence.csv")
    assert job.finish(study, ev, figs) == "matplotlib"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["report.pdf"]


KILLED_PARENT = """
import os, signal, sys, time
from pathlib import Path
from lagsieve.report.pdf import start_pdf
out = Path(sys.argv[2])
job = start_pdf(Path(sys.argv[1]).read_text(), out, {}, out.parent)
while not list(out.parent.glob(".report.pdf.*.tmp")) and job._process.exitcode is None:
    time.sleep(0.005)
print(job._process.pid, flush=True)
os.kill(os.getpid(), signal.SIGKILL)
"""


def _ended(pid: int) -> bool:
    try:
        return Path(f"/proc/{pid}/status").read_text().split("State:")[1].split()[0] in ("Z", "X")
    except (FileNotFoundError, IndexError):
        return True


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="the parent-death signal is Linux's")
def test_pdf_process_ends_with_a_killed_report_job(tiny, tmp_path):
    """Our own rule: a report job killed (SIGKILL) while its PDF is written leaves no PDF and no
    temporary file: the forked process is told by the kernel (PR_SET_PDEATHSIG) and removes its file."""
    if pdf_engine() != "weasyprint":
        pytest.skip("WeasyPrint is not installed")
    html, _figs, _folder = _one_figure_page(tiny, paragraphs=400)
    (tmp_path / "page.html").write_text(html, encoding="utf-8")
    out = tmp_path / "pdf" / "report.pdf"
    out.parent.mkdir()
    done = subprocess.run([sys.executable, "-c", KILLED_PARENT, str(tmp_path / "page.html"), str(out)],
                          capture_output=True, text=True, env={**os.environ, "PYTHONPATH": str(REPO / "src")})
    assert done.returncode == -signal.SIGKILL, done.stderr
    pid = int(done.stdout.split()[0])
    for _ in range(6000):  # a bound, not a timing: the process ends once told
        if _ended(pid):
            break
        time.sleep(0.01)
    assert _ended(pid) and list(out.parent.iterdir()) == []


def test_print_copy_handed_over_before_the_other_figures(tiny, tmp_path):
    """build_report with on_print_copy: the print copy is the one print_copy=True renders, handed
    over with exactly its figures while the figure folder holds no other figure yet; the page and
    every figure are the same as without it."""
    res, study = tiny["res"], load_study(tiny["cfg"])
    args = (study, stages.load_table(study, res / "work" / "annual.csv"), pd.read_csv(res / "screen.csv"),
            pd.read_csv(res / "evidence.csv"), pd.DataFrame(), pd.DataFrame(), pd.read_csv(res / "work" / "notes.csv"))

    def report(out, **kw):
        prov = {"tool_version": "t", "inputs_sha256": {}, "versions": {}, "config": {}, "finished": "then"}
        with fg.FigureRenderer(out, 1, cache_dir=tmp_path / "cache") as r:
            return build_report(*args, prov, out, renderer=r, print_copy=True, **kw)

    page, figs, printed = report(tmp_path / "a")
    handed = []
    page2, figs2, none = report(tmp_path / "b", on_print_copy=lambda text, f: handed.append(
        (text, f, sorted(p.stem for p in (tmp_path / "b").glob("*.png")))))
    [(text, first, present)] = handed
    assert none is None and page2 == page and figs2 == figs and list(figs2) == list(figs)
    assert text == printed and first == {n: figs[n] for n in first}
    assert set(first) == set(re.findall(r'<img data-name="([^"]+)"', printed))  # the print copy's figures
    assert present == sorted(first) and 0 < len(first) < len(figs)


# ----------------------------------------------------------------------------- options
def test_gam_panel_only_where_fitted(tiny, tmp_path):
    res = tiny["res"]
    cfg = tiny_config(tmp_path / "cfg", report={"top": 1, "pdf": False})
    screen = pd.read_csv(res / "screen.csv")
    linear = screen[screen["model"] == "linear"]
    # without GAM rows: no partial-effect panel
    no_gam = tmp_path / "screen_linear.csv"
    linear.to_csv(no_gam, index=False)
    out1 = make_report(cfg, res, tmp_path / "a", screen_csv=no_gam)
    h1 = (out1 / "report.html").read_text(encoding="utf-8")
    assert 'alt="GAM partial effect' not in h1 and not list((out1 / "figures").glob("*__gam.png"))
    # with GAM rows (as the screen writes them; made here if this version of the screen does not)
    gam = screen[screen["model"] == "gam"]
    if gam.empty:
        gam = linear.assign(model="gam", edf=3.2, deviance_explained=0.4, p_smooth=0.01, shape="threshold")
    with_gam = tmp_path / "screen_gam.csv"
    pd.concat([linear, gam]).to_csv(with_gam, index=False)
    out2 = make_report(cfg, res, tmp_path / "b", screen_csv=with_gam)
    h2 = (out2 / "report.html").read_text(encoding="utf-8")
    assert 'alt="GAM partial effect' in h2 and list((out2 / "figures").glob("*__gam.png"))
    assert "penalised spline" in h2


def test_no_pdf_and_no_banner_when_configured(tiny):
    base = tiny["base"] / "plain"
    cfg = tiny_config(base, invented=False, report={"top": 1, "pdf": False}, study="tiny_plain")
    res = tiny["res"]
    # reuse the screened tiny study (same data and settings); only the report options differ
    out = make_report(cfg, res, base / "out")
    h = (out / "report.html").read_text(encoding="utf-8")
    assert not (out / "report.pdf").exists()
    assert "Invented data." not in h and "invented demonstration data" not in h
    assert json.loads((out / "provenance.json").read_text())["pdf"] is None


def test_r_critical():
    rc = r_critical([27.0, 12.0, 2.0, 1.0])
    assert rc[0] == pytest.approx(0.3809, abs=2e-4)
    assert rc[1] > rc[0]
    assert np.isnan(rc[2]) and np.isnan(rc[3])


def test_mpl_text_escapes_dollar():
    assert mpl_text("$5 and $6") == r"\$5 and \$6"


def test_report_survives_missing_pieces(tiny, tmp_path):
    """No forecasts, no nulls, a failed hypothesis without a lag, a driver without a label: the
    report still renders, and leaves out (never fakes) the panels it has no data for."""
    res, cfg = tiny["res"], tiny["cfg"]
    study = load_study(cfg)
    table = stages.load_table(study, res / "work" / "annual.csv")
    ev = pd.read_csv(res / "evidence.csv")
    ev.loc[ev["lag"].notna(), "grade"] = "weak"  # panels are drawn for leading hypotheses graded weak or better
    i = ev.index[ev["rank"] == 1][0]
    ev.loc[i, ["lag", "r", "oos_skill", "q_value"]] = np.nan
    ev.loc[i, ["grade", "flags", "status"]] = ["insufficient-data", "failed", "failed: singular matrix"]
    ev.loc[i, "summary"] = np.nan
    html_text, figs, _ = build_report(study, table, pd.read_csv(res / "screen.csv"), ev, pd.DataFrame(),
                                   pd.DataFrame(), pd.read_csv(res / "work" / "notes.csv"),
                                   {"tool_version": "test", "inputs_sha256": {}, "versions": {}, "config": {}},
                                   tmp_path / "figures", workers=2)
    assert "computation failed" in html_text
    assert not any(n.endswith(("__forecasts", "__nulls")) for n in figs)
    assert any(n.endswith("__overlay") for n in figs)
    for d in data_uris(html_text):
        assert png_ok(d)[0]


def test_effects_in_table_and_panels(tiny):
    """The effect column, its legend line outside any tooltip (visible in print) and the panels'
    effect phrase (lagsieve.evidence.effects)."""
    h = tiny["html"]
    ev = pd.read_csv(tiny["res"] / "evidence.csv")
    assert 'data-key="effect" data-type="num"' in h and "Effect (95% CI)" in h
    legend = h.split('<p class="note effect-note">')[1].split("</p>")[0]
    assert legend.startswith("Effect: the change in the response, in its units") and "halving" in legend
    shown = ev[ev["effect"].notna() & ev["lag"].notna()]
    assert len(shown) and shown["effect_basis"].str.len().gt(0).all()
    assert h.count('<p class="effect">') >= 1 and "(95% CI " in h.split('<p class="effect">')[1]
    assert "strong effect" not in h
