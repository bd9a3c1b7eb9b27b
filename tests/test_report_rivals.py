"""Tests for the report's competing explanations (lagsieve.report.rivals, templates/rivals.html,
figures.variance_fractions) on small invented tables: no Snakemake run, no demo.

The numbers shown come from conditional.csv and models.csv unchanged; the checks here are on
wording, selection and the size caps (our own rules, no outside source)."""
from __future__ import annotations

import numpy as np
import pandas as pd

from lagsieve.evidence.models import MODEL_COLUMNS
from lagsieve.evidence.rivals import CONDITIONAL_COLUMNS
from lagsieve.report import figures as fg
from lagsieve.report import rivals as rv
from lagsieve.report.methods import cited
from lagsieve.report.render import render

LABELS = {"temp": "spring temperature", "oxy": "bottom oxygen <O2>", "prey": "forage fish"}


def label(s):
    return LABELS.get(s, s)


def _cond(rows):
    base = {c: np.nan for c in CONDITIONAL_COLUMNS}
    return pd.DataFrame([{**base, "response": "m", "status": "ok", **r} for r in rows], columns=CONDITIONAL_COLUMNS)


def _models():
    rows = [dict(model="temp+oxy", drivers="temp;oxy", lags="0;0", n_drivers=2, weight=0.5, delta_aicc=0.0,
                 coefficients="0.1;0.01", coefficient_ses="0.01;0.02", unique_first=0.4, unique_second=0.01,
                 shared=0.2, residual=0.39),
            dict(model="temp", drivers="temp", lags="0", n_drivers=1, weight=0.45, delta_aicc=0.2,
                 coefficients="0.1", coefficient_ses="0.01"),
            dict(model="temp+prey", drivers="temp;prey", lags="0;1", n_drivers=2, weight=0.05, delta_aicc=4.4,
                 coefficients="0.1;0.0", coefficient_ses="0.01;0.05", unique_first=0.3, unique_second=0.0,
                 shared=0.0, residual=0.7)]
    return pd.DataFrame([{"response": "m", "n": 39, "status": "ok", **r} for r in rows], columns=MODEL_COLUMNS)


def test_sentences_say_what_a_driver_adds_given_its_rival():
    cond = _cond([dict(driver="oxy", competitor="temp", added_skill=-0.02, p_added_surrogate=0.61,
                       keeps_support=False),
                  dict(driver="temp", competitor="oxy", added_skill=0.30, p_added_surrogate=0.004, keeps_support=True),
                  dict(driver="prey", competitor="temp", added_skill=0.03, p_added_surrogate=0.30,
                       keeps_support=False)])
    said = [rv.sentence(r, label) for r in cond.to_dict("records")]
    assert said[0] == ("bottom oxygen <O2> adds nothing once spring temperature is in the model "
                       "(added skill -0.02, p = 0.610)")
    assert said[1].startswith("spring temperature still adds skill once bottom oxygen <O2> is in the model")
    assert "adds too little" in said[2]
    assert rv.mutual(cond, label) == []


def test_two_drivers_that_each_survive_the_other_are_named_together():
    cond = _cond([dict(driver="oxy", competitor="temp", added_skill=0.2, p_added_surrogate=0.01, keeps_support=True),
                  dict(driver="temp", competitor="oxy", added_skill=0.3, p_added_surrogate=0.01, keeps_support=True)])
    words = rv.mutual(cond, label)
    assert len(words) == 1 and "each keep their support given the other" in words[0]
    assert "bottom oxygen <O2>" in words[0] and "spring temperature" in words[0]
    cond["keeps_support"] = False
    assert rv.mutual(cond, label) == ["bottom oxygen <O2> and spring temperature carry the same signal: "
                                      "neither adds enough given the other"]


def test_matrix_full_and_in_summary_form():
    cond = _cond([dict(driver="oxy", competitor="temp", added_skill=-0.02, keeps_support=False),
                  dict(driver="temp", competitor="oxy", added_skill=0.3, keeps_support=True)])
    m = rv.matrix(cond, label)
    assert m["columns"] == ["bottom oxygen <O2>", "spring temperature"] and not m["summary"]
    assert m["rows"][0]["cells"][0] is None and m["rows"][0]["cells"][1]["text"] == "-0.02"
    many = _cond([dict(driver="temp", competitor=f"c{i}", added_skill=0.1 + i / 100, keeps_support=True)
                  for i in range(rv.MATRIX_MAX_COMPETITORS + 1)])
    m = rv.matrix(many, label)
    assert m["summary"] and m["columns"] == ["strongest rival"]
    assert m["rows"][0]["cells"][0]["who"] == "c0"  # the competitor given which it adds least


def test_matrix_cells_are_shaded_by_their_band_with_a_legend():
    """Each cell's class is the band of its added skill (edges belong to the lower band); a cell
    without a skill is not shaded; the legend names every band in order (our own bands)."""
    assert [rv.skill_band(v) for v in (-0.3, 0.0, 0.05, 0.10, 0.2, 0.25, 0.9, np.nan)] == [
        "sk-none", "sk-none", "sk-low", "sk-low", "sk-mid", "sk-mid", "sk-high", ""]
    cond = _cond([dict(driver="oxy", competitor="temp", added_skill=-0.02, keeps_support=False),
                  dict(driver="temp", competitor="oxy", added_skill=0.3, keeps_support=True),
                  dict(driver="prey", competitor="temp", added_skill=np.nan, keeps_support=True)])
    sec = rv.section({"conditional": cond, "models": _models()}, ["m"], label)
    html = render("rivals.html", rivals=sec, figs={})
    assert '<td class="sk-none"><b>-0.02</b>' in html and '<td class="sk-high"><b>+0.30</b>' in html
    assert "<td><b>n/a</b>" in html  # no skill, no shade
    legend = html[html.index("Shading:"):]
    assert [legend.index(f'swatch {c}') for _, c, _ in rv.SKILL_BANDS] == sorted(
        legend.index(f'swatch {c}') for _, c, _ in rv.SKILL_BANDS)


def test_top_pair_and_the_partition_figure():
    out = {"conditional": _cond([]), "models": _models()}
    assert rv.top_pair(out["models"])["model"] == "temp+oxy"
    jobs = rv.plan_rivals(out, label, invented=True)
    assert [j.name for j in jobs] == ["partition__m"]
    assert jobs[0].kwargs["fractions"] == [0.4, 0.2, 0.01, 0.39]
    fig = fg.BUILDERS[jobs[0].builder](**jobs[0].kwargs)
    bars = fig.axes[0].patches
    assert [round(b.get_width(), 2) for b in bars] == [0.4, 0.2, 0.01, 0.39]


def test_partition_figures_are_capped():
    models = pd.concat([_models().assign(response=f"r{i:02d}") for i in range(rv.PARTITION_MAX_FIGURES + 3)])
    out = {"conditional": _cond([]), "models": models}
    assert len(rv.plan_rivals(out, label, False)) == rv.PARTITION_MAX_FIGURES
    sec = rv.section(out, sorted(models["response"].unique()), label)
    assert sec["figures_capped"] and sec["n_pairs"] == rv.PARTITION_MAX_FIGURES + 3


def test_section_renders_escaped_with_skipped_model_sets():
    cond = _cond([dict(driver="oxy", competitor="temp", added_skill=-0.02, p_added_surrogate=0.61,
                       keeps_support=False)])
    skipped = pd.DataFrame([{"response": "k", "model": "", "status": "skipped: only 11 years shared by the "
                             "response and its drivers (15 needed)"}], columns=MODEL_COLUMNS)
    out = {"conditional": cond, "models": pd.concat([_models(), skipped], ignore_index=True)}
    sec = rv.section(out, ["m", "k"], label)
    html = render("rivals.html", rivals=sec, figs={})
    assert "Competing explanations" in html
    assert "bottom oxygen &lt;O2&gt; adds nothing once spring temperature is in the model" in html
    assert "No model set: only 11 years shared" in html
    assert "<O2>" not in html  # user labels escaped
    assert html.count("<tr>") >= 1 + 3 + 1  # matrix rows, model rows and their headers


def test_methods_cite_the_model_set_references_when_shown():
    facts = {"gam": False, "surrogate_method": "phase", "rivals": True}
    refs = cited(facts)
    for key in ("freedman", "anderson", "hurvich", "burnham", "borcard", "peresneto", "beach"):
        assert key in refs
    assert "hurvich" not in cited({**facts, "rivals": False})
