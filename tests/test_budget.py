"""Bounded resources (issue 14, deliverable 2): the report's caps and summary forms for large
studies, and the plan budget that `lagsieve check` enforces.

The large studies here are invented in memory (a 300-driver table of AR(1)-like noise with planted
collinear pairs); no screen runs: the report's plan is built from a made-up evidence table, which
is all the study-wide figures need.
"""
from __future__ import annotations

import pickle
import subprocess
import sys
import textwrap

import numpy as np
import pandas as pd
import pytest

from lagsieve import pipeline as stages
from lagsieve.errors import InputErrors
from lagsieve.evidence.vocabulary import COLLINEAR_R
from lagsieve.io.config import load_study
from lagsieve.prep.budget import (MAX_HYPOTHESES, MAX_HYPOTHESES_PER_RESPONSE, MAX_HYPOTHESES_WITH_PDF,
                                  MAX_SCREEN_ROWS, MAX_SURROGATE_VALUES, budget_problems, plan_size)
from lagsieve.report import figures as fg
from lagsieve.report import plan as rp
from lagsieve.report.context import Context
from lagsieve.report.html import render_page

from helpers import REPO, lagsieve, write_config

YEARS = np.arange(1981, 2021)
PROV = {"tool_version": "t", "versions": {}, "config": {}}


def _raw(n_drivers: int, n_responses: int = 3, **screen) -> dict:
    return {"study": "big", "invented": True, "inputs": ["data.csv"],
            "responses": [{"id": f"m{i}"} for i in range(n_responses)],
            "drivers": [{"id": f"d{k:04d}"} for k in range(n_drivers)],
            "screen": {"surrogates": 19, "models": ["linear"], **screen}, "report": {"top": 3, "pdf": False}}


def _table(n_drivers: int, n_responses: int = 3, seed: int = 3) -> pd.DataFrame:
    """Wide annual table: every tenth driver a near copy of the one before (|r| about 0.98)."""
    rng = np.random.default_rng(seed)
    cols = {f"m{i}": rng.normal(size=len(YEARS)) for i in range(n_responses)}
    for k in range(n_drivers):
        prev = cols.get(f"d{k - 1:04d}")
        cols[f"d{k:04d}"] = prev + 0.2 * rng.normal(size=len(YEARS)) if k % 10 == 9 else rng.normal(size=len(YEARS))
    cols["d0005"] = np.where(YEARS < 2000, np.nan, cols["d0005"])  # one driver with half the years
    return pd.DataFrame(cols, index=pd.Index(YEARS, name="year"))


def _evidence(study, seed: int = 4) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    rows = []
    for rid in study.response_ids:
        ranks = rng.permutation(len(study.driver_ids)) + 1
        rows += [{"response": rid, "driver": d, "lag": 1, "rank": int(r), "grade": "none"}
                 for d, r in zip(study.driver_ids, ranks)]
    return pd.DataFrame(rows)


def _context(tmp_path, n_drivers: int, n_responses: int = 3, **report) -> Context:
    raw = _raw(n_drivers, n_responses)
    raw["report"].update(report)
    (tmp_path / "data.csv").write_text("series,year,value\n")
    study = load_study(write_config(tmp_path / "config.yaml", raw))
    return Context.of(study, _table(n_drivers, n_responses), pd.DataFrame(), _evidence(study), pd.DataFrame(),
                      pd.DataFrame(), pd.DataFrame(), PROV)


def _job(plan, name):
    return next(j for j in plan.jobs if j.name == name)


@pytest.fixture(scope="module")
def big(tmp_path_factory):
    """A 300-driver, 3-response study's context and plan."""
    ctx = _context(tmp_path_factory.mktemp("big"), 300)
    return ctx, rp.plan_figures(ctx)


# ----------------------------------------------------------------------------- caps of the figures
def test_capped_size_clips_each_side():
    assert fg.capped_size(5, 3) == (5.0, 3.0)
    assert fg.capped_size(152.0, 150.8) == fg.MAX_FIGURE_INCHES
    assert fg.capped_size(8.2, 91.0) == (8.2, fg.MAX_FIGURE_INCHES[1])


def test_heatmap_of_300_drivers_shows_the_most_correlated_25(big):
    ctx, plan = big
    job = _job(plan, "driver_correlation")
    labels = job.kwargs["labels"]
    assert len(labels) == rp.HEATMAP_MAX_DRIVERS == job.kwargs["corr"].shape[0]
    # independently: the 25 drivers whose largest |r| with another driver is largest
    corr = ctx.table[ctx.study.driver_ids].corr(min_periods=10).abs().to_numpy(copy=True)
    np.fill_diagonal(corr, 0.0)
    strongest = pd.Series(np.nan_to_num(corr).max(axis=1), index=ctx.study.driver_ids)
    assert set(labels) == set(strongest.sort_values(ascending=False, kind="stable").index[:rp.HEATMAP_MAX_DRIVERS])
    assert labels == [d for d in ctx.study.driver_ids if d in labels]  # in the study's order
    # the planted near copies (d0008, d0009), (d0018, d0019), ... are what it shows
    assert sum(int(d[1:]) % 10 in (8, 9) for d in labels) >= 22


def test_collinear_pairs_listed_and_exported_in_long_form(big):
    ctx, plan = big
    short = plan.shortened["driver_correlation"]
    corr = ctx.table[ctx.study.driver_ids].corr(min_periods=10).to_numpy()
    iu = np.triu_indices(300, k=1)
    over = int((np.abs(corr[iu]) > COLLINEAR_R).sum())
    assert short["all_drivers"] == 300 and short["pairs_over"] == over and over >= 30
    assert len(short["listed"]) == min(over, rp.PAIR_LIST_MAX)
    table = plan.tables["driver_correlations"]
    assert list(table.columns) == ["driver", "other", "r"] and len(table) == 300 * 299 // 2
    assert np.all(np.diff(np.abs(table["r"].to_numpy())) <= 1e-12)  # strongest first
    a, b, v = table.iloc[0]
    assert v == pytest.approx(corr[ctx.study.driver_ids.index(a), ctx.study.driver_ids.index(b)], rel=1e-12)


def test_evidence_map_and_coverage_switch_to_summary_forms(big):
    ctx, plan = big
    grid = _job(plan, "evidence_map").kwargs
    assert grid["grades"].shape == (3, rp.MAP_MAX_DRIVERS)
    best = ctx.evidence.groupby("driver")["rank"].min().sort_values(kind="stable")
    assert set(grid["col_labels"]) == set(best.index[:rp.MAP_MAX_DRIVERS])
    assert plan.shortened["evidence_map"] == {"responses": 3, "all_responses": 3, "drivers": rp.MAP_MAX_DRIVERS,
                                              "all_drivers": 300}
    # the export keeps every hypothesis, four columns wide instead of one column per driver
    assert plan.tables["evidence_map"].reset_index().shape == (900, 4)
    cov = _job(plan, "coverage").kwargs
    assert len(cov["series"]) == rp.COVERAGE_MAX_SERIES
    assert {"m0", "m1", "m2", "d0005"} <= set(cov["series"])  # responses and the least covered driver
    assert len(plan.tables["coverage"]) == 303


def test_figures_of_a_large_study_stay_inside_the_cap(big, tmp_path):
    """Every study-wide figure drawn for 300 drivers is at most 16 x 16 inches (4800 px at 300 dpi)."""
    _, plan = big
    jobs = [j for j in plan.jobs if j.name in ("driver_correlation", "coverage", "evidence_map")]
    fg.render_jobs(jobs, tmp_path, workers=1)
    from PIL import Image  # only here: the pixel size of the written files

    for j in jobs:
        with Image.open(tmp_path / f"{j.name}.png") as im:
            w, h = im.size
        assert w <= 4800 and h <= 4800, (j.name, w, h)


def test_heatmap_of_300_drivers_takes_little_memory(big, tmp_path):
    """The heatmap job the plan makes for 300 drivers, drawn in a fresh process (PNG at 300 dpi
    and SVG): its peak RSS stays under 700 MB. Uncapped, the figure was 0.5 inch per driver
    (152 x 150 inches, 45,600 px square at 300 dpi: over 8 GB of raster)."""
    _, plan = big
    (tmp_path / "job.pkl").write_bytes(pickle.dumps(_job(plan, "driver_correlation")))
    code = textwrap.dedent(f"""
        import pickle, resource
        from lagsieve.report import figures as fg
        job = pickle.loads(open({str(tmp_path / "job.pkl")!r}, "rb").read())
        fg.render_jobs([job], {str(tmp_path)!r})
        print(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss // 1024)
    """)
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=300)
    assert out.returncode == 0, out.stderr
    assert int(out.stdout) < 700
    assert (tmp_path / "driver_correlation.svg").is_file()


def test_panels_capped_over_many_responses(tmp_path):
    ctx = _context(tmp_path, 12, n_responses=30, top=3)
    plan = rp.plan_figures(ctx)
    per = rp.PANEL_MAX_HYPOTHESES // 30
    assert plan.shortened["hypotheses"] == {"per_response": per, "top": 3, "shown": 30 * per, "all": 90}
    assert len(plan.panels) == 30 * per
    # the evidence map keeps its first 22 responses (all 12 drivers), and says so
    assert _job(plan, "evidence_map").kwargs["grades"].shape == (rp.MAP_MAX_RESPONSES, 12)
    assert plan.shortened["evidence_map"] == {"responses": rp.MAP_MAX_RESPONSES, "all_responses": 30,
                                              "drivers": 12, "all_drivers": 12}
    page = render_page(ctx, {"evidence_map": ("", (1, 1))}, plan)
    assert f"each response shows its {per} best-ranked ({30 * per} in all)" in page
    for rid in ctx.study.response_ids:  # each response keeps its best-ranked hypotheses
        keys = [k for k, info in plan.panels.items() if info["row"]["response"] == rid]
        ranks = sorted(info["row"]["rank"] for k, info in plan.panels.items() if k in keys)
        assert ranks == list(range(1, per + 1))


def test_page_says_in_words_when_a_summary_form_replaced_the_full_one(big):
    ctx, plan = big
    page = render_page(ctx, {"driver_correlation": ("", (1, 1)), "coverage": ("", (1, 1)),
                             "evidence_map": ("", (1, 1))}, plan)
    assert f"shows 3 of 3 responses and the {rp.MAP_MAX_DRIVERS} of 300 drivers with the best rank" in page
    assert f"{rp.COVERAGE_MAX_SERIES} of 303 series are drawn" in page
    over = plan.shortened["driver_correlation"]["pairs_over"]
    assert f"with 300 drivers the full heatmap would be unreadable" in page and f"{over} pairs of drivers" in page


def test_small_study_keeps_its_full_forms(tmp_path):
    """The demo's size (3 responses, 12 drivers) is below every cap: full figures, wide tables, no note."""
    ctx = _context(tmp_path, 12)
    plan = rp.plan_figures(ctx)
    assert plan.shortened == {}
    assert len(_job(plan, "driver_correlation").kwargs["labels"]) == 12
    assert plan.tables["evidence_map"].shape == (3, 12)
    assert plan.tables["driver_correlations"].shape == (12, 13)
    assert "Summary form" not in render_page(ctx, {}, plan)


# ----------------------------------------------------------------------------- the plan budget
def test_plan_size_counts_rows_hypotheses_and_surrogate_values(tmp_path):
    raw = _raw(10, 2, lags=[0, 1, 2], models=["linear", "gam"], surrogates=99)
    raw["drivers"][0]["lags"] = [0]                  # 1 lag instead of 3
    raw["drivers"][1]["responses"] = ["m0"]          # one response only
    (tmp_path / "data.csv").write_text("series,year,value\n")
    size = plan_size(load_study(write_config(tmp_path / "config.yaml", raw)))
    hyps = 2 * 10 - 1
    assert size.hypotheses == hyps and size.largest_response == 10
    assert size.screen_rows == 2 * (hyps * 3 - 2 * 2)  # models x (lags of every hypothesis)
    assert size.surrogate_values == 2 * hyps * 99


def test_demo_is_far_inside_the_budget():
    size = plan_size(load_study(REPO / "config" / "config.yaml"))
    assert budget_problems(load_study(REPO / "config" / "config.yaml")) == []
    assert size.screen_rows * 10 < MAX_SCREEN_ROWS and size.surrogate_values * 10 < MAX_SURROGATE_VALUES


def test_check_refuses_too_many_screen_rows_with_one_line(tmp_path):
    n = MAX_HYPOTHESES_PER_RESPONSE  # per response at its limit: only the screen rows are over
    raw = _raw(n, 5, lags=list(range(11)), models=["linear", "gam"], surrogates=99)
    (tmp_path / "data.csv").write_text("series,year,value\n")
    cfg = write_config(tmp_path / "config.yaml", raw)
    proc = lagsieve("check", cfg)
    assert proc.returncode == 2, proc.stderr
    lines = proc.stderr.strip().splitlines()
    assert lines == [f"{cfg}: study has {5 * n * 22:,} screen rows (responses x drivers x lags x models) "
                     f"(limit {MAX_SCREEN_ROWS:,}); split the drivers across several study configs, "
                     f"or screen fewer lags or models"]
    assert "Traceback" not in proc.stderr and not (tmp_path / "results").exists()


def test_check_refuses_too_many_surrogate_values(tmp_path):
    raw = _raw(20, 1, surrogates=100_000)
    (tmp_path / "data.csv").write_text("series,year,value\n")
    cfg = write_config(tmp_path / "config.yaml", raw)
    with pytest.raises(InputErrors) as exc:
        stages.check_study(cfg)
    (line,) = [p.line() for p in exc.value.problems]
    assert "study has 4,000,000 stored surrogate values" in line and "limit 3,000,000" in line
    assert "lower screen.surrogates" in line


def test_check_refuses_too_many_drivers_for_one_response(tmp_path):
    n = MAX_HYPOTHESES_PER_RESPONSE + 1
    (tmp_path / "data.csv").write_text("series,year,value\n")
    cfg = write_config(tmp_path / "config.yaml", _raw(n, 1, lags=[0]))
    proc = lagsieve("check", cfg)
    assert proc.returncode == 2
    assert proc.stderr.strip() == (f"{cfg}: study has {n:,} drivers for one response (limit "
                                   f"{MAX_HYPOTHESES_PER_RESPONSE:,}); split the drivers across several study "
                                   "configs (each with part of the drivers)")


def test_the_500_driver_study_fits_the_budget_even_with_999_surrogates(tmp_path):
    """The study of the issue (500 drivers x 3 responses, lags 0-3, linear) is allowed: its report
    is bounded by the caps, not refused; at the default 999 surrogates it is just inside."""
    (tmp_path / "data.csv").write_text("series,year,value\n")
    study = load_study(write_config(tmp_path / "config.yaml", _raw(500, 3, surrogates=999)))
    size = plan_size(study)
    assert (size.screen_rows, size.hypotheses, size.surrogate_values) == (6_000, 1_500, 2_997_000)
    assert budget_problems(study) == []


def test_a_pdf_report_has_a_lower_hypothesis_limit(tmp_path):
    (tmp_path / "data.csv").write_text("series,year,value\n")
    n = MAX_HYPOTHESES_WITH_PDF // 2 + 50  # per response under its limit, the study over the PDF's
    raw = _raw(n, 2)
    del raw["report"]["pdf"]  # the default: a PDF copy
    cfg = write_config(tmp_path / "config.yaml", raw)
    (line,) = [p.line() for p in budget_problems(load_study(cfg))]
    assert line == (f"{cfg}: study has {2 * n:,} hypotheses (responses x drivers) with a PDF report (limit "
                    f"{MAX_HYPOTHESES_WITH_PDF:,}); set report.pdf: false (the HTML report holds them all) or split "
                    "the drivers across several study configs")
    raw["report"]["pdf"] = False
    assert budget_problems(load_study(write_config(tmp_path / "config.yaml", raw))) == []
    assert 2 * n < MAX_HYPOTHESES
