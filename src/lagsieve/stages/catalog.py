"""How the report job's figures are listed in Snakemake's own report (`snakemake --report`):
file-name patterns that split a figure's name into response, driver and kind, the labels shown
for each figure (study, response, driver and figure kind, by their labels), and one caption
per kind (in ``workflow/report/figures.rst``, a Jinja template that Snakemake renders with the
figure's wildcards).

Figure files are named ``<response>__<driver>__<kind>.png`` (one hypothesis),
``<kind>__<response>__<driver>.png`` or ``<kind>__<response>.png`` for the kinds of
:data:`LEADING_KINDS` (a series of a joint screen stands in the response's place), and
``<kind>.png`` (the study), with response and driver as file-name slugs
(:func:`lagsieve.io.names.slug`); the patterns below keep them apart (a part never holds
``__``), so every figure is listed once.
"""
from __future__ import annotations

from lagsieve.io.config import Study
from lagsieve.io.names import slug

_PART = r"(?:(?!__)[^/])+"  # a slug: anything but a path separator, without a double underscore
_KIND = r"[a-z]+(?:_[a-z]+)*"
#: Kinds named first, before the response (and driver) they are about.
LEADING_KINDS = ("partition", "windows", "joint")
_NOT_LEADING = r"(?!(?:" + "|".join(LEADING_KINDS) + r")__)"
_LEADING = "|".join(LEADING_KINDS)
FIGURE_PATTERNS = [
    f"{{response,{_NOT_LEADING}{_PART}}}__{{driver,{_PART}}}__{{kind,{_KIND}}}.png",
    f"{{kind,{_LEADING}}}__{{response,{_PART}}}__{{driver,{_PART}}}.png",
    f"{{kind,{_LEADING}}}__{{response,{_PART}}}.png",
    f"{{kind,{_KIND}}}.png",
]

def figure_labels(study: Study, wildcards) -> dict[str, str]:
    """The labels of one figure in Snakemake's report: study, response, driver, figure kind
    (a series by its label; a dash where the figure is not about one)."""
    names = {slug(s["id"]): s.get("label") or s["id"] for s in study.responses + study.drivers}
    get = getattr(wildcards, "get", None) or (lambda k, d=None: getattr(wildcards, k, d))
    response, driver, kind = get("response"), get("driver"), get("kind") or "other"
    return {"study": study.id,
            "response": names.get(response, response) if response else "-",
            "driver": names.get(driver, driver) if driver else "-",
            "figure": kind.replace("_", " ")}
