"""What a report makes once (report.context.Context.once, the evidence rows, the annex summary,
the document's styles, the package versions) gives what it gave when made every time.

Outside references: pandas (``DataFrame.to_dict('records')``, ``DataFrame.sort_values``, which the
report used before), python-docx (``Document.add_heading`` and ``add_paragraph(style=...)``) and
``importlib.metadata.version``."""
from __future__ import annotations

import importlib.metadata as md
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from lagsieve.io.provenance import PACKAGES, package_versions, tool_version
from lagsieve.report.annex import annex_frame, section
from lagsieve.report.context import Context, not_computed, not_computed_reason, ranked, records, top_rows


def _context(evidence: pd.DataFrame, responses=("b", "a"), top=2) -> Context:
    study = SimpleNamespace(response_ids=list(responses), report={"top": top}, screen={"min_overlap": 10})
    return Context(study=study, table=pd.DataFrame(), screen=pd.DataFrame(), evidence=evidence,
                   forecasts=pd.DataFrame(), nulls=pd.DataFrame(), notes=pd.DataFrame(), annual=None,
                   provenance={}, labels={"a": "A", "b": "B", "d1": "D one", "d2": "D two"})


def _evidence() -> pd.DataFrame:
    """Ranks missing and tied across responses, a lag missing, a response the study does not name."""
    return pd.DataFrame({
        "response": ["a", "b", "a", "c", "b", "b"],
        "driver": ["d1", "d2", "d2", "d1", "d1", "d3"],
        "rank": [2, np.nan, 1, 1, 1, 2],
        "lag": [1, 0, np.nan, 2, 3, 1],
        "grade": ["weak", "insufficient-data", "moderate", "none", "strong", "insufficient-data"],
        "summary": ["", "insufficient data: 12 overlapping years", "", "", "", ""],
        "flags": ["lag-selected", "", "", "", "", ""],
    })


def _same(a: list[dict], b: list[dict]) -> bool:
    """Equal records, value types included (NaN equal to NaN)."""
    return len(a) == len(b) and all(
        list(x) == list(y) and all(type(x[k]) is type(y[k]) and (x[k] == y[k] or (x[k] != x[k] and y[k] != y[k]))
                                   for k in x) for x, y in zip(a, b))


def test_records_are_pandas_to_dict():
    frame = pd.DataFrame({
        "f": [1.5, np.nan, 2.0], "i": [1, 2, 3], "b": [True, False, True], "s": ["x", np.nan, "z"],
        "o": pd.Series([np.float64(0.5), np.int64(4), "w"], dtype=object),
        "n": pd.array([1, None, 3], dtype="Int64"), "t": pd.to_datetime(["2020-01-01", "2021-01-01", None]),
    })
    for f in (frame, frame.iloc[:0], _evidence()):
        assert _same(records(f), f.to_dict("records"))  # pandas, the reference


def test_once_is_made_once_and_again_for_new_evidence():
    ctx, calls = _context(_evidence()), []
    make = lambda c: calls.append(1) or len(c.evidence)  # noqa: E731
    assert ctx.once("k", make) == 6 and ctx.once("k", make) == 6 and len(calls) == 1
    assert ctx.rows is ctx.rows
    ctx.evidence = _evidence().iloc[:2]
    assert ctx.once("k", make) == 2 and len(calls) == 2 and len(ctx.rows) == 2


def test_ranked_top_rows_and_not_computed_follow_pandas_sort():
    ev = _evidence()
    ctx = _context(ev)
    for rid in ("a", "b", "c"):  # pandas: sort_values('rank'), missing ranks last
        assert [r["driver"] for r in ranked(ctx.rows, rid)] == list(ev[ev["response"] == rid].sort_values("rank")["driver"])
    want = []  # the formula the report used before: lag present, by rank, report.top per response
    for rid in ctx.study.response_ids:
        want += ev[(ev["response"] == rid) & ev["lag"].notna()].sort_values("rank").head(2).to_dict("records")
    got = top_rows(ctx)
    assert _same(got, want)
    got[0]["grade"] = "changed"  # a copy: the context's rows are not changed
    assert ctx.rows[4]["grade"] == "strong"
    groups: dict = {}  # the former formula, over pandas' records
    for row in ev[ev["grade"] == "insufficient-data"].to_dict("records"):
        groups.setdefault(not_computed_reason(row, 10), []).append(f"{ctx.label(row['response'])} \u00d7 "
                                                                    f"{ctx.label(row['driver'])}")
    assert not_computed(ctx) == list(groups.items())
    assert not_computed(ctx)[0] == ("12 overlapping years", ["B \u00d7 D two"])


def test_annex_frame_in_study_order_and_made_once():
    ev = _evidence()
    ctx = _context(ev)
    order = {"b": 0, "a": 1}  # pandas: the former sort over (study's order, rank), missing last
    want = ev.assign(_o=ev["response"].map(order)).sort_values(["_o", "rank"])
    frame = annex_frame(ctx)
    assert list(zip(frame["response"], frame["driver"])) == list(zip(want["response"], want["driver"]))
    assert annex_frame(ctx) is frame and section(ctx) is section(ctx)
    assert [r["driver"] for r in section(ctx)["responses"][0]["rows"]] == ["d1"]  # b: strong only in the table


def test_document_styles_are_python_docx_own():
    docx = pytest.importorskip("docx")  # python-docx, the reference (optional: the document needs it)
    from lagsieve.report.document import STYLES, _heading, _paragraph

    ours, theirs = docx.Document(), docx.Document()
    for level in (0, 1, 2):
        _heading(ours, f"heading {level}", level)
        theirs.add_heading(f"heading {level}", level)
    for style in ("List Bullet", "Caption"):
        _paragraph(ours, "words", style)
        theirs.add_paragraph("words", style=style)
    _paragraph(ours, style="List Bullet")
    theirs.add_paragraph(style="List Bullet")
    assert [p._p.xml for p in ours.paragraphs] == [p._p.xml for p in theirs.paragraphs]
    assert [p.style.name for p in ours.paragraphs] == ["Title", "Heading 1", "Heading 2", "List Bullet",
                                                      "Caption", "List Bullet"]
    assert set(STYLES) == {p.style.name for p in ours.paragraphs}


def test_package_versions_are_the_installed_ones():
    got = package_versions("pillow", "no-such-package-lagsieve-test")
    assert list(got) == ["python", *PACKAGES, "pillow", "no-such-package-lagsieve-test"]
    for name in (*PACKAGES, "pillow"):
        try:
            want = md.version(name)  # importlib.metadata, the reference
        except md.PackageNotFoundError:
            want = "not installed"
        assert got[name] == want
    assert got["no-such-package-lagsieve-test"] == "not installed"
    got["numpy"] = "changed"  # a new dict every call
    assert package_versions()["numpy"] == md.version("numpy")
    assert tool_version() == md.version("lagsieve")
