"""Templates and static files of the report: one Jinja2 environment (autoescape on for HTML;
plain-text and CSS templates are not escaped), the stylesheet and script read from the package,
and their content-security-policy hashes."""
from __future__ import annotations

import base64
import hashlib
from functools import lru_cache
from importlib import resources
from pathlib import Path

import pandas as pd
from jinja2 import Environment, PackageLoader, StrictUndefined, select_autoescape

from lagsieve.evidence.vocabulary import FLAGS, GRADE_RULES
from lagsieve.ledger.section import LedgerSection, ledger_section
from lagsieve.report import figures as fg
from lagsieve.report.context import flag_list, lead_words
from lagsieve.report.plan import PANEL_GRADES
from lagsieve.formats import lag_range, number, p_text, text

GRADE_CLASS = {g: f"g-{i}" for i, g in enumerate(fg.GRADE_STYLE)}  # CSS class of each grade's badge


@lru_cache(maxsize=1)
def environment() -> Environment:
    """The report's Jinja2 environment: templates from ``lagsieve/report/templates``; HTML escaped.
    Block tags on a line of their own leave no blank line (``trim_blocks``, ``lstrip_blocks``)."""
    env = Environment(loader=PackageLoader("lagsieve.report", "templates"),
                      autoescape=select_autoescape(enabled_extensions=("html",), disabled_extensions=("txt", "css"),
                                                   default_for_string=True, default=True),
                      undefined=StrictUndefined, trim_blocks=True, lstrip_blocks=True)
    env.filters.update(num=number, p=p_text, text=text, lead=lead_words, flags=flag_list, range_words=lag_range,
                       g=lambda v: f"{v:g}")
    env.globals.update(GRADE_CLASS=GRADE_CLASS, GRADE_RULES=GRADE_RULES, FLAGS=FLAGS, PANEL_GRADES=PANEL_GRADES,
                       print_copy=False)  # print_copy: True in the page the PDF is made from
    return env


def render(name: str, **context) -> str:
    """Render the template ``name`` with ``context`` (escaped when ``name`` ends in .html)."""
    return environment().get_template(name).render(**context)


def render_text(name: str, **context) -> str:
    """Render a plain-text template and join the lines of each paragraph with one space
    (paragraphs stay separated by a blank line)."""
    paragraphs = render(name, **context).split("\n\n")
    return "\n\n".join(" ".join(line.strip() for line in p.splitlines() if line.strip()) for p in paragraphs)


@lru_cache(maxsize=None)
def static_text(name: str) -> str:
    """The text of ``lagsieve/report/static/<name>`` (the stylesheet or the script)."""
    return resources.files("lagsieve.report").joinpath("static", name).read_text(encoding="utf-8")


def stylesheet() -> str:
    """The page's stylesheet: ``static/report.css`` and one rule per grade colour."""
    return static_text("report.css") + render("grades.css", styles=fg.GRADE_STYLE, classes=GRADE_CLASS)


def script() -> str:
    return static_text("report.js")


def csp_hash(content: str) -> str:
    """The content-security-policy source for an inline block with exactly this text."""
    return "'sha256-" + base64.b64encode(hashlib.sha256(content.encode("utf-8")).digest()).decode() + "'"


def content_security_policy(css: str, js: str) -> str:
    """No network request at all; only the page's own style and script, by hash."""
    return (f"default-src 'none'; img-src data:; style-src {csp_hash(css)}; script-src {csp_hash(js)}; "
            f"base-uri 'none'; form-action 'none'")


def ledger_section_html(ledger_path: str | Path, study, evidence_df: pd.DataFrame | None = None) -> str:
    """The report section "Since the previous run" as an HTML fragment (one <section>), escaped.
    Never raises for a missing or unreadable ledger: the section then says so."""
    return render_ledger_section(ledger_section(ledger_path, study, evidence_df))


def render_ledger_section(section: LedgerSection) -> str:
    return render("ledger_section.html", s=section)
