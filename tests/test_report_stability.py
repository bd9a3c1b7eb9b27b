"""Tests for the report's block on relationships that change (lagsieve.report.stability,
templates/stability.html) on small invented tables: no Snakemake run, no demo.

The numbers shown come from evidence.csv and windows.csv unchanged; the checks here are on
selection, wording and escaping (our own rules, no outside source)."""
from __future__ import annotations

import numpy as np
import pandas as pd

from lagsieve.evidence import stability
from lagsieve.report import figures as fg
from lagsieve.report import stability as rs
from lagsieve.report.render import render

LABELS = {"y": "share <old>", "x": "forage fish", "z": "spring temperature"}


def label(s):
    return LABELS.get(s, s)


def _run():
    """Evidence of two invented hypotheses after the break test: x switches off half-way, z is steady."""
    rng = np.random.default_rng(21)
    n = 40
    x, z = rng.normal(size=(2, n + 1))
    half = np.arange(n) < n // 2
    y = np.r_[np.nan, np.where(half, 1.0, 0.0) * x[:-1] + 0.8 * z[:-1] + 0.4 * rng.normal(size=n)]
    table = pd.DataFrame({"y": y, "x": x, "z": z}, index=pd.Index(np.arange(1971, 1972 + n), name="year"))
    ev = pd.DataFrame([{"response": "y", "driver": "x", "lag": 1, "grade": "weak", "flags": "", "rank": 2},
                       {"response": "y", "driver": "z", "lag": 1, "grade": "moderate", "flags": "", "rank": 1},
                       {"response": "y", "driver": "q", "lag": 1, "grade": "none", "flags": "", "rank": 3}])
    screen = {"surrogates": 99, "surrogate_method": "phase", "seed": 5, "alpha": 0.05}
    table["q"] = rng.normal(size=len(table))
    return stability.add_stability(ev, table, screen)


def test_section_lists_tested_hypotheses_flagged_first():
    ev, win = _run()
    sec = rs.section(ev, win, label)
    assert [r["driver"] for r in sec["rows"]] == ["forage fish", "spring temperature"]
    first, second = sec["rows"]
    assert first["flagged"] and not second["flagged"] and sec["n_flagged"] == 1
    assert first["year"].startswith(str(int(ev.loc[0, "break_year"])))
    assert first["figure"] == rs.figure_name("y", "x") and second["figure"] is None
    assert sec["skipped"] == []


def test_plan_draws_only_flagged_and_figure_builds():
    ev, win = _run()
    jobs = rs.plan_stability(ev, win, label, invented=True)
    assert [j.name for j in jobs] == [rs.figure_name("y", "x")]
    fig = fg.BUILDERS[jobs[0].builder](**jobs[0].kwargs)
    ax = fig.axes[0]
    assert len(ax.lines[0].get_xdata()) == 40 - 15 + 1  # one point per window
    assert any("1991" in t.get_text() or "199" in t.get_text() for t in ax.get_legend().get_texts())
    fg.plt.close(fig)


def test_template_escapes_labels_and_shows_notes():
    ev, win = _run()
    ev.loc[2, "break_note"] = "break test skipped: 12 overlapping years, fewer than 20"
    html = render("stability.html", stability=rs.section(ev, win, label), figs={})
    assert "share &lt;old&gt;" in html and "<old>" not in html
    assert "unstable" in html and "fewer than 20" in html


def test_no_section_without_break_columns():
    assert rs.section(pd.DataFrame({"response": ["y"], "driver": ["x"]}), None, label) is None
    assert rs.read_windows("/nonexistent/evidence.csv") is None


def test_flagged_rows_in_the_order_of_the_former_frame_sort():
    """The flagged hypotheses come from the evidence rows as dicts (the report's Context.rows), in the
    order the former code gave: pandas' stable sort_values on rank, missing ranks last, missing flags
    read as none; section and plan give the same with the rows handed over or made here."""
    from lagsieve.report.context import records

    ev = pd.DataFrame({"response": "y", "driver": list("abcdef"), "rank": [3, np.nan, 1, 3, 2, np.nan],
                       "flags": ["unstable", "collinear;unstable", np.nan, "unstable;x", "lag-selected", "unstable"]})
    hit = ev["flags"].fillna("").astype(str).str.split(";").map(lambda f: "unstable" in f)
    former = ev[hit].sort_values("rank", kind="mergesort")["driver"].tolist()
    assert former == ["a", "d", "b", "f"]
    assert [r["driver"] for r in rs._flagged(ev, records(ev))] == former
    ev2, win = _run()
    assert rs.section(ev2, win, label, records(ev2)) == rs.section(ev2, win, label)
    assert ([j.name for j in rs.plan_stability(ev2, win, label, True, records(ev2))]
            == [j.name for j in rs.plan_stability(ev2, win, label, True)])
