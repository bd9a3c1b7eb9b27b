"""Templates and static files of the report: one Jinja2 environment (autoescape on), the
stylesheet and script read from the package, and their content-security-policy hashes."""
from __future__ import annotations

import base64
import hashlib
from functools import lru_cache
from importlib import resources
from pathlib import Path

import pandas as pd
from jinja2 import Environment, PackageLoader, StrictUndefined, select_autoescape

from lagsieve.ledger.section import LedgerSection, ledger_section


@lru_cache(maxsize=1)
def environment() -> Environment:
    """The report's Jinja2 environment: templates from ``lagsieve/report/templates``, HTML escaped."""
    return Environment(loader=PackageLoader("lagsieve.report", "templates"),
                       autoescape=select_autoescape(["html"], default_for_string=True, default=True),
                       undefined=StrictUndefined, keep_trailing_newline=False)


def render(name: str, **context) -> str:
    """Render the template ``name`` with ``context``."""
    return environment().get_template(name).render(**context)


@lru_cache(maxsize=None)
def static_text(name: str) -> str:
    """The text of ``lagsieve/report/static/<name>`` (the stylesheet or the script)."""
    return resources.files("lagsieve.report").joinpath("static", name).read_text(encoding="utf-8")


def csp_hash(text: str) -> str:
    """The content-security-policy source for an inline block with exactly this text."""
    return "'sha256-" + base64.b64encode(hashlib.sha256(text.encode("utf-8")).digest()).decode() + "'"


def ledger_section_html(ledger_path: str | Path, study, evidence_df: pd.DataFrame | None = None) -> str:
    """The report section "Since the previous run" as an HTML fragment (one <section>), escaped.
    Never raises for a missing or unreadable ledger: the section then says so."""
    return render_ledger_section(ledger_section(ledger_path, study, evidence_df))


def render_ledger_section(section: LedgerSection) -> str:
    return render("ledger_section.html", s=section)
