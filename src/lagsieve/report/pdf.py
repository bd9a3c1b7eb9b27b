"""The PDF copy of the report: weasyprint renders the page itself; without it, matplotlib
writes the title, cautions and summary as text pages followed by the figures."""
from __future__ import annotations

import base64
import importlib.util
import io
import logging
import multiprocessing as mp
import os
import re
import signal
import sys
import textwrap
from pathlib import Path

import matplotlib.image as mpimg
import matplotlib.pyplot as plt
import pandas as pd

from lagsieve.evidence.vocabulary import SUPPORTED
from lagsieve.io.files import atomic_path, unfinished_copies
from lagsieve.report import figures as fg
from lagsieve.report.context import set_aside_reason, summary_line
from lagsieve.report.sections import CAUTIONS

A4 = (8.27, 11.69)  # inches
WRAP = 100  # characters per line of the text pages
EMBEDDED_PNG = re.compile(r'src="data:image/png;base64,([^"]+)"')


def with_figure_files(html_text: str, figs: dict, figures_dir: str | Path) -> str:
    """The page with each embedded figure (a base64 data URI of ``figs``) replaced by the URI of
    the same PNG file in ``figures_dir``: WeasyPrint then reads the file instead of parsing about
    9 MB of base64 text on the demo (its parse of the page 0.95-0.99 -> 0.37-0.40 s of CPU in three
    alternating runs on a shared machine, of a PDF of 13-17 s). A data URI of no figure of ``figs``
    is left as it is."""
    folder = Path(figures_dir).resolve()
    names = {b64: name for name, (b64, _size) in figs.items()}

    def uri(m: re.Match) -> str:
        name = names.get(m.group(1))
        path = folder / f"{name}.png"
        return f'src="{path.as_uri()}"' if name is not None and path.is_file() else m.group(0)

    return EMBEDDED_PNG.sub(uri, html_text)


def pdf_engine() -> str:
    """'weasyprint' when it imports and can render here, else 'matplotlib'."""
    try:  # imported here, not at the top: it is slow to import and optional (may be absent or broken)
        import weasyprint  # noqa: F401
    except Exception:  # ImportError, or OSError when its system libraries are missing
        return "matplotlib"
    return "weasyprint"


def weasyprint_found() -> bool:
    """Whether WeasyPrint is installed: found, not imported (the process that writes the PDF
    imports it; when it cannot, :meth:`PdfJob.finish` falls back to matplotlib)."""
    return importlib.util.find_spec("weasyprint") is not None


def _write_weasyprint(html_text: str, path: str | Path) -> None:
    import weasyprint  # optional and slow to import: see pdf_engine

    for name in ("weasyprint", "weasyprint.progress", "fontTools", "fontTools.subset"):
        logging.getLogger(name).setLevel(logging.ERROR)
    with atomic_path(path) as tmp:
        # pdf_tags: a tagged PDF (structure tree, reading order, alt texts) where the installed
        # WeasyPrint offers it (an option of recent versions; older ones write an untagged PDF)
        tags = {"pdf_tags": True} if "pdf_tags" in getattr(weasyprint, "DEFAULT_OPTIONS", {}) else {}
        weasyprint.HTML(string=html_text, base_url=str(Path(path).parent)).write_pdf(str(tmp), **tags)


def write_pdf(html_text: str, path: str | Path, *, study_id: str, title: str, summary: list[str],
              figures: list[tuple[str, str]], invented: bool, engine: str | None = None) -> str:
    """Write the report as PDF; returns the engine used.

    weasyprint renders the HTML itself with the print stylesheet. Without it, matplotlib's
    PdfPages writes the title, cautions and summary as text followed by the figures
    (``figures``: (caption, base64 PNG) pairs).
    """
    engine = engine or pdf_engine()
    if engine == "weasyprint":
        try:
            _write_weasyprint(html_text, path)
            return "weasyprint"
        except Exception as exc:  # a broken installation: fall back rather than lose the PDF
            logging.getLogger(__name__).warning("weasyprint failed (%s); writing the PDF with matplotlib", exc)
    _pdf_matplotlib(path, study_id=study_id, title=title, summary=summary, figures=figures, invented=invented)
    return "matplotlib"


def _text_lines(study_id, title, summary, invented) -> list[tuple[str, float, str]]:
    """(text, font size, weight) of every line of the text pages."""
    lines: list[tuple[str, float, str]] = [(f"Driver screening: {title}", 13, "bold"), (f"study {study_id}", 9, "normal")]
    if invented:
        lines.append(("INVENTED DATA: every number was made up to demonstrate the tool.", 9.5, "bold"))
    for a, b in CAUTIONS:
        lines += [(w, 8.5, "normal") for w in textwrap.wrap(f"{a} {b}", WRAP)]
    lines.append(("", 6, "normal"))
    for s in summary:
        bold = not s.startswith(" ")
        lines += [(w, 8.5, "bold" if bold and k == 0 else "normal")
                  for k, w in enumerate(textwrap.wrap(s, WRAP, subsequent_indent="    "))]
    return lines


def _text_pages(pdf, lines: list[tuple[str, float, str]]) -> None:
    k = 0
    while k < len(lines):
        fig = plt.figure(figsize=A4)
        y = 0.95
        while k < len(lines) and y > 0.05:
            words, size, weight = lines[k]
            fig.text(0.07, y, fg.mpl_text(words), fontsize=size, fontweight=weight, va="top")
            y -= size / A4[1] / 72 * 1.55
            k += 1
        pdf.savefig(fig)
        plt.close(fig)


def _figure_pages(pdf, figures: list[tuple[str, str]]) -> None:
    for i in range(0, len(figures), 2):
        fig = plt.figure(figsize=A4)
        for j, (caption, b64) in enumerate(figures[i:i + 2]):
            img = mpimg.imread(io.BytesIO(base64.b64decode(b64)), format="png")
            ax = fig.add_axes([0.07, 0.53 - 0.47 * j, 0.86, 0.40])
            ax.imshow(img)
            ax.set_axis_off()
            fig.text(0.07, 0.515 - 0.47 * j, "\n".join(textwrap.wrap(fg.mpl_text(caption), 110)),
                     fontsize=7.5, va="top")
        pdf.savefig(fig)
        plt.close(fig)


def _pdf_matplotlib(path, *, study_id, title, summary, figures, invented) -> None:
    # imported here: the fallback alone uses it, and it costs every report job about 0.28 s to
    # import (python -X importtime; it brings fontTools.subset)
    from matplotlib.backends.backend_pdf import PdfPages

    lines = _text_lines(study_id, title, summary, invented)
    with atomic_path(path) as tmp, PdfPages(tmp, metadata={"Title": f"Driver screening: {study_id}"}) as pdf:
        _text_pages(pdf, lines)
        _figure_pages(pdf, figures)


def pdf_summary_lines(study, evidence: pd.DataFrame) -> list[str]:
    """The summary of the report as text lines (for the matplotlib PDF)."""
    labels = {s["id"]: s.get("label") or s["id"] for s in study.responses + study.drivers}
    out = []
    for rid in study.response_ids:
        sub = evidence[evidence["response"] == rid].sort_values("rank")
        out.append(f"{labels.get(rid, rid)} ({rid})")
        for row in sub.to_dict("records"):
            words = summary_line(row) if row.get("grade") in SUPPORTED else "set aside: " + set_aside_reason(row, lambda i: labels.get(i, i))
            out.append(f"    {labels.get(row['driver'], row['driver'])}, {words}")
    return out


class PdfJob:
    """The PDF copy written by WeasyPrint in a forked process (:func:`start_pdf`) while this
    process goes on with the report; :meth:`finish` waits for it. The PDF depends only on the print
    copy and the figure files it names, which exist before the fork, so it is the same file
    whenever the process ends. Where the platform cannot fork, it is written at once."""

    def __init__(self, html_text: str, path: str | Path, figs: dict, figures_dir: str | Path):
        self.path = Path(path)
        self.error: str | None = None
        self._process = self._conn = None
        if "fork" not in mp.get_all_start_methods():
            self.error = _weasyprint_or_error(html_text, self.path, figs, figures_dir)
            return
        self._conn, child = mp.get_context("fork").Pipe(duplex=False)
        sys.stdout.flush()
        sys.stderr.flush()
        self._process = mp.get_context("fork").Process(
            target=_pdf_process, args=(child, html_text, self.path, figs, figures_dir, os.getpid()), daemon=True)
        self._process.start()
        child.close()

    def _wait(self) -> None:
        if self._process is None:
            return
        try:
            self.error = self._conn.recv()
        except EOFError:  # ended without a word: killed, or out of memory, its file left unfinished
            self.error = f"its process ended with exit code {self._process.exitcode}"
            _remove_unfinished(self.path)
        self._process.join()
        self._conn.close()
        self._process = None

    def finish(self, study, evidence: pd.DataFrame, figs: dict) -> str:
        """Wait for the PDF; returns the engine used. When WeasyPrint failed, the PDF is written by
        matplotlib here, from every figure of ``figs`` (as :func:`write_pdf` does)."""
        self._wait()
        if self.error is None:
            return "weasyprint"
        logging.getLogger(__name__).warning("weasyprint failed (%s); writing the PDF with matplotlib", self.error)
        return write_report_pdf("", self.path, study, evidence, figs, engine="matplotlib")

    def cancel(self) -> None:
        """Stop the PDF (the report failed): the process is ended, and neither its temporary file
        nor its PDF is left."""
        if self._process is not None:
            self._process.terminate()  # SIGTERM: the process leaves atomic_path, which removes its file
            self._process.join(10)
            if self._process.is_alive():
                self._process.kill()
                self._process.join()
            self._conn.close()
            self._process = None
        _remove_unfinished(self.path)
        self.path.unlink(missing_ok=True)


def _remove_unfinished(path: Path) -> None:
    """The temporary file a PDF process killed while writing left beside ``path``."""
    for left in unfinished_copies(path):
        left.unlink(missing_ok=True)


def _weasyprint_or_error(html_text: str, path: Path, figs: dict, figures_dir) -> str | None:
    """The print copy written by WeasyPrint (figures read from their files); None, or why not."""
    try:
        _write_weasyprint(with_figure_files(html_text, figs, figures_dir), path)
    except Exception as exc:  # a broken installation: the caller falls back to matplotlib
        return f"{type(exc).__name__}: {exc}"
    return None


def _pdf_process(conn, html_text: str, path: Path, figs: dict, figures_dir, parent: int) -> None:
    """The forked process of :class:`PdfJob`: SIGTERM becomes SystemExit, so that atomic_path
    removes the unfinished file, and on Linux the process gets SIGTERM when its parent ends (a
    report job killed before it waits); sends None or the error's text."""
    signal.signal(signal.SIGTERM, lambda *_: sys.exit(1))
    signal.signal(signal.SIGINT, signal.SIG_IGN)  # Ctrl-C reaches the report's process, which cancels this one
    if sys.platform.startswith("linux"):
        import ctypes  # Linux only: prctl(PR_SET_PDEATHSIG = 1, SIGTERM)

        ctypes.CDLL(None, use_errno=True).prctl(1, int(signal.SIGTERM), 0, 0, 0)
    if os.getppid() != parent:  # the parent ended before the signal was asked for
        sys.exit(1)
    conn.send(_weasyprint_or_error(html_text, path, figs, figures_dir))
    conn.close()


def start_pdf(html_text: str, path: str | Path, figs: dict, figures_dir: str | Path) -> PdfJob:
    """Start writing the PDF copy of the print copy ``html_text`` with WeasyPrint in a forked
    process; ``figs`` (name -> (base64 PNG, size)) are read from their PNG files in
    ``figures_dir``. Returns the job; call :meth:`PdfJob.finish` (or :meth:`PdfJob.cancel`)."""
    return PdfJob(html_text, path, figs, figures_dir)


def write_report_pdf(html_text: str, path: str | Path, study, evidence: pd.DataFrame, figs: dict,
                     figures_dir: str | Path | None = None, engine: str | None = None) -> str:
    """The study's PDF copy: the evidence map first, then the hypotheses' panels, then coverage
    and collinearity (for the matplotlib fallback). Returns the engine used. With ``figures_dir``
    (where the figures' PNG files are) WeasyPrint reads the figures from their files
    (:func:`with_figure_files`)."""
    if figures_dir is not None:
        html_text = with_figure_files(html_text, figs, figures_dir)
    last = ("coverage", "driver_correlation")
    order = ["evidence_map"] + [n for n in figs if n not in ("evidence_map",) + last] + [n for n in last if n in figs]
    return write_pdf(html_text, path, study_id=study.id, title=study.raw.get("title") or study.id,
                     summary=pdf_summary_lines(study, evidence),
                     figures=[(n.replace("__", " / "), figs[n][0]) for n in order if n in figs],
                     invented=bool(study.raw.get("invented")), engine=engine)
