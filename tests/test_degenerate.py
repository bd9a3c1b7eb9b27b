"""Degenerate but ordinary studies run to a report that says what could not be computed.

A study that passes `lagsieve check` finishes (issue 14): hypotheses that cannot be forecast out
of sample, constant responses and drivers, a driver with no value in the response's years, a
response with a single driver and a screen in which nothing is supported are each recorded with
their reason (status, grade insufficient-data) and named in the report; what cannot work at all
(a response that shares min_overlap years with none of its drivers, or has no driver) is refused
by the check with one line.

The stages are called directly (lagsieve.pipeline), without Snakemake; one slow test runs
`lagsieve run` on a degenerate study.
"""
from __future__ import annotations

import shutil

import numpy as np
import pandas as pd
import pytest

from helpers import REPO, lagsieve, make_report, run_study, tiny_config
from lagsieve import pipeline as stages
from lagsieve.errors import InputErrors
from lagsieve.evidence.grading import build_evidence, flags_for, insufficient_reason
from lagsieve.report import figures as fg
from lagsieve.screen import response as screen_response_module
from lagsieve.screen.hypothesis import constant_value, too_few_forecasts
from lagsieve.screen.response import screen_response
from lagsieve.stats.correlation import pearson_r

DEMO = REPO / "resources" / "demo"
FILES = ("mortality_by_age.csv", "surveys_annual.csv", "indices_long.csv")
FAST_SCREEN = {"lags": [0, 1], "models": ["linear", "gam"], "surrogates": 19, "seed": 7, "fdr": 0.1,
               "validation": {"initial_years": 15, "holdout_years": 5}}


def _data(folder, mortality=None, surveys=None, indices=None) -> list[str]:
    """The demo's input files copied into ``folder``, each changed by its function; their paths."""
    folder.mkdir(parents=True, exist_ok=True)
    for name, change in zip(FILES, (mortality, surveys, indices)):
        df = pd.read_csv(DEMO / name)
        (change(df) if change else df).to_csv(folder / name, index=False)
    return [str(folder / f) for f in FILES]


def _fix_m_age2(m):
    m.loc[m["group"] == "age2", "value"] = 0.2  # an assessment that fixes M in one age group
    return m


def _constant_oxygen(s):
    s["bottom_oxygen"] = 6.0
    return s


def _old_index(ix):
    """A driver observed only long before the responses (1900-1929): no overlap at any lag."""
    old = pd.DataFrame({"series": "old_index", "year": range(1900, 1930), "value": np.sin(np.arange(30.0))})
    return pd.concat([ix, old], ignore_index=True)


def _report_text(res) -> str:
    return (res / "report.html").read_text(encoding="utf-8")


@pytest.fixture(scope="module")
def degenerate(tmp_path_factory):
    """One study with a constant response (M age 2 fixed at 0.2), a constant driver, a driver
    with no value in the responses' years, and a response (ages 3-4) with a single driver;
    screened (that response with two worker processes), graded and reported."""
    root = tmp_path_factory.mktemp("degenerate")
    inputs = _data(root / "data", _fix_m_age2, _constant_oxygen, _old_index)
    main = ["m:age2", "m:age5plus"]
    cfg = tiny_config(root, study="degenerate", title="Degenerate study", description="", inputs=inputs,
                      responses=[{"id": "m:age2", "label": "M age 2"}, {"id": "m:age3-4", "label": "M ages 3-4"},
                                 {"id": "m:age5plus", "label": "M age 5+"}],
                      drivers=[{"id": "forage_biomass", "label": "Forage", "transform": "log", "responses": main},
                               {"id": "bottom_oxygen", "label": "Oxygen", "responses": main},
                               {"id": "old_index", "label": "Old index", "responses": main},
                               {"id": "pinniped_abundance", "label": "Pinnipeds", "transform": "log"}],
                      screen=FAST_SCREEN)
    out = root / "out"
    work = out / "degenerate" / "work"
    stages.run_align(cfg, work / "annual.csv", work / "notes.csv")
    for rid, slug_, threads in (("m:age2", "m--age2", 1), ("m:age3-4", "m--age3-4", 2),
                                ("m:age5plus", "m--age5plus", 1)):
        stages.run_screen(cfg, work / "annual.csv", rid, work / "responses" / slug_, threads=threads)
    res = out / "degenerate"
    stages.run_evidence(cfg, work / "annual.csv", work, res / "screen.csv", res / "evidence.csv")
    make_report(cfg, res)
    return cfg, res, pd.read_csv(res / "evidence.csv")


@pytest.fixture(scope="module")
def no_forecasts(tmp_path_factory):
    """The tiny study with a first training window of 36 of its 40 years: no hypothesis can be
    forecast out of sample."""
    root = tmp_path_factory.mktemp("no_forecasts")
    cfg = tiny_config(root, screen=dict(FAST_SCREEN, validation={"initial_years": 36, "holdout_years": 5}),
                      report={"top": 2, "pdf": False})
    res = run_study(cfg, root / "out", parallel=False)
    make_report(cfg, res)
    return cfg, res, pd.read_csv(res / "evidence.csv")


# ----------------------------------------------------------------------------- no out-of-sample forecasts
def test_no_forecasts_graded_insufficient_with_the_reason(no_forecasts):
    _, _, ev = no_forecasts
    assert len(ev) == 6
    assert set(ev["grade"]) == {"insufficient-data"}
    reason = ("no out-of-sample forecasts (the first training window of 36 years leaves 3 of 39 usable "
              "years to forecast; at least 5 are needed)")
    assert set(ev["status"]) == {f"insufficient: {reason}"}
    assert set(ev["summary"]) == {f"insufficient data: {reason}"}
    assert ev["oos_skill"].isna().all() and ev["oos_p_surrogate"].isna().all()
    # the in-sample screen was still done: r, its surrogate p and q are reported
    assert ev["r"].notna().all() and ev["p_surrogate"].between(0.05, 1).all() and ev["q_value"].notna().all()
    assert not ev["flags"].fillna("").str.contains("failed").any()
    assert list(ev.columns[:len(stages.EVIDENCE_COLUMNS)]) == stages.EVIDENCE_COLUMNS


def test_no_forecasts_report_says_what_was_not_computed(no_forecasts):
    _, res, _ = no_forecasts
    html = _report_text(res)
    assert "No hypothesis of this study reaches moderate or strong evidence." in html
    assert "Not computed" in html
    assert ("M age 2 \u00d7 " in html and "the first training window of 36 years leaves 3 of 39 usable years "
            "to forecast; at least 5 are needed" in html)
    assert not (res / "report.pdf").exists()


def test_check_warns_that_nothing_can_be_forecast(no_forecasts):
    cfg, res, _ = no_forecasts
    _, _, _, warnings = stages.check_study(cfg)
    (w,) = [w for w in warnings if "initial_years" in w.what]
    assert w.line() == (f"warning: {cfg}: screen.validation.initial_years = 36 leaves fewer than 5 years to "
                        "forecast for every hypothesis (at most 3), so none can be graded above "
                        "insufficient-data; a smaller first training window gives forecasts")
    assert "screen.validation.initial_years = 36 leaves fewer than 5 years" in _report_text(res)


def test_demo_settings_give_no_backtest_warning(new_study):
    _, _, _, warnings = stages.check_study(new_study)
    assert not [w for w in warnings if "initial_years" in w.what]


def test_insufficient_reason_words():
    assert insufficient_reason({"status": "ok", "n": 12}, 15) == "12 overlapping years, fewer than min_overlap 15"
    assert insufficient_reason({"status": "failed: singular matrix"}, 15) == \
        "the computation failed (singular matrix)"
    assert insufficient_reason({"status": "insufficient: x is constant"}, 15) == "x is constant"
    assert insufficient_reason({"status": "ok", "n": 30}, 15) == "no out-of-sample skill could be computed"


def test_too_few_forecasts_words():
    assert too_few_forecasts(12, 10) == ("no out-of-sample forecasts (the first training window of 10 years "
                                         "leaves 2 of 12 usable years to forecast; at least 5 are needed)")
    assert "leaves 0 of 8" in too_few_forecasts(8, 10)


def test_evidence_without_any_out_of_sample_column():
    """The evidence stage of a screen in which no hypothesis reached the backtest: before the
    fix this was KeyError: 'oos_p_surrogate'."""
    hyps = pd.DataFrame({"response": ["y", "y"], "driver": ["a", "b"], "lag": [0, 1], "n": [30, 30],
                         "r": [0.5, -0.1], "p_surrogate": [0.01, 0.6],
                         "status": ["insufficient: no out-of-sample forecasts (...)"] * 2})
    table = pd.DataFrame({"y": np.arange(30.0), "a": np.sin(np.arange(30.0)), "b": np.cos(np.arange(30.0))})
    ev = build_evidence(hyps, table, {"alpha": 0.05, "fdr": 0.1, "min_overlap": 15})
    assert list(ev["grade"]) == ["insufficient-data"] * 2
    assert list(ev["rank"]) == [1, 2] and list(ev["driver"]) == ["a", "b"]  # ranked by surrogate p
    np.testing.assert_allclose(ev["q_value"], [0.02, 0.6])


# ----------------------------------------------------------------------------- constant series
def test_constant_value_is_exact_where_the_mean_is_not():
    """Why the screen tests constancy itself: 30 years of 0.2 have a mean that is not 0.2 in
    floating point, so a correlation with them is noise, not NaN."""
    y = np.full(30, 0.2)
    assert y.mean() != 0.2 and np.isfinite(pearson_r(np.arange(30.0), y))
    assert constant_value(y) == 0.2
    assert constant_value(np.array([0.2, np.nan, 0.2])) == 0.2
    assert constant_value(np.array([0.2, 0.3])) is None and constant_value(np.array([0.2])) is None


def test_constant_response_recorded_and_the_rest_screened(degenerate):
    _, _, ev = degenerate
    m2 = ev[ev["response"] == "m:age2"]
    words = "m:age2 is constant (0.2 every year): correlations are undefined"
    assert set(m2["status"]) == {f"insufficient: {words}"}
    assert set(m2["grade"]) == {"insufficient-data"}
    assert m2["r"].isna().all() and m2["lag"].isna().all()
    # a hypothesis that never reached the stability checks carries none of their flags
    assert not m2["flags"].fillna("").str.contains("unstable|influential-year|failed").any()
    m5 = ev[(ev["response"] == "m:age5plus") & (ev["driver"] == "forage_biomass")].iloc[0]
    # screened and graded like any hypothesis (with this test's few surrogates and the demo's
    # cold-pool effect on ages 5+ the grade may be a set-aside one; what matters is that it ran)
    assert m5["status"] == "ok" and m5["grade"] != "insufficient-data" and np.isfinite(m5["p_surrogate"])
    assert abs(m5["r"]) > 0.3


def test_constant_driver_and_driver_without_overlap(degenerate):
    _, _, ev = degenerate
    by = {(r, d): row for r, d, row in zip(ev["response"], ev["driver"], ev.to_dict("records"))}
    ox = by[("m:age5plus", "bottom_oxygen")]
    assert ox["status"] == "insufficient: bottom_oxygen is constant (6 every year): correlations are undefined"
    old = by[("m:age5plus", "old_index")]
    assert old["status"] == "insufficient: old_index has no value in any year of m:age5plus at the lags tried (0, 1)"
    assert ox["grade"] == old["grade"] == "insufficient-data"
    screen = pd.read_csv(degenerate[1] / "screen.csv")
    skipped = screen[(screen["driver"] == "bottom_oxygen") & (screen["response"] == "m:age5plus")]
    assert set(skipped["status"]) == {"skipped: bottom_oxygen is constant over these years (6)"}


def test_single_driver_response_screened_in_workers(degenerate):
    _, _, ev = degenerate
    m34 = ev[ev["response"] == "m:age3-4"]
    assert list(m34["driver"]) == ["pinniped_abundance"] and list(m34["rank"]) == [1]
    assert m34["status"].iloc[0] == "ok" and m34["oos_n"].iloc[0] >= 20


def test_degenerate_report_names_each_reason(degenerate):
    _, res, ev = degenerate
    html = _report_text(res)
    assert "Not computed" in html
    assert ("M age 2 \u00d7 Forage; M age 2 \u00d7 Oxygen; M age 2 \u00d7 Old index; M age 2 \u00d7 Pinnipeds: "
            "m:age2 is constant (0.2 every year): correlations are undefined.") in html
    assert "M age 5+ \u00d7 Oxygen: bottom_oxygen is constant (6 every year): correlations are undefined." in html
    assert "old_index has no value in any year of m:age5plus" in html
    assert "Not computed: m:age2 is constant (0.2 every year)" in html  # the response's set-aside list
    # the check's warning about the constant series reaches the data section
    assert "all 40 values are 0.2; a constant series carries no signal" in html
    assert (res / "provenance.json").is_file()


# ----------------------------------------------------------------------------- one failure, not the stage
def test_any_failure_of_one_hypothesis_is_recorded(tmp_path, monkeypatch):
    """A hypothesis whose computation raises anything is a ``failed`` row with its reason; the
    other hypotheses of the response are screened."""
    real = screen_response_module.screen_hypothesis

    def flaky(table, response, driver, *args):
        if driver["id"] == "bottom_oxygen":
            raise KeyError("bottom_oxygen")
        return real(table, response, driver, *args)

    monkeypatch.setattr(screen_response_module, "screen_hypothesis", flaky)
    cfg = tiny_config(tmp_path, screen=dict(FAST_SCREEN, models=["linear"]))
    study, annual, _, _ = stages.check_study(cfg)
    table = stages.annual_table(annual, study.transforms())
    res = screen_response(table, study, "m:age5plus")
    hyps = res.hypotheses.set_index("driver")
    assert hyps.loc["bottom_oxygen", "status"] == "failed: KeyError: 'bottom_oxygen'"
    assert hyps.loc["forage_biomass", "status"] == "ok"
    ev = build_evidence(res.hypotheses, table, study.screen).set_index("driver")
    assert ev.loc["bottom_oxygen", "grade"] == "insufficient-data" and ev.loc["bottom_oxygen", "flags"] == "failed"
    assert ev.loc["bottom_oxygen", "summary"] == ("insufficient data: the computation failed "
                                                  "(KeyError: 'bottom_oxygen')")


def test_missing_yes_no_entries_raise_no_flag():
    row = {"status": "insufficient: x", "n": 40, "loo_sign_flip": np.nan, "window_sign_flip": np.nan}
    assert flags_for(row, 0.05, 0.1) == []
    assert flags_for(dict(row, loo_sign_flip=True), 0.05, 0.1) == ["influential-year"]


# ----------------------------------------------------------------------------- figures
def test_null_panel_with_an_undefined_statistic():
    """The report job died with 'Axis limits cannot be NaN or Inf' on such a panel."""
    assert fg.null_limits(np.array([1.0, 2.0]), np.nan) == pytest.approx((0.95, 2.05))
    assert fg.null_limits(np.array([np.inf, -np.inf]), np.nan) == (-0.05, 1.05)
    assert fg.null_limits(np.array([1.0, 3.0]), 0.0) == pytest.approx((-0.15, 3.15))
    fig = fg.null_distributions([{"values": [np.nan, -np.inf, 0.1, 0.2], "observed": np.nan, "label": "skill",
                                  "p": np.nan, "title": "Out of sample"}])
    assert len(fig.axes[0].lines) == 0  # no line for the real driver's missing value
    fg.plt.close(fig)


def test_a_figure_that_cannot_be_drawn_is_left_out(tmp_path, capsys):
    jobs = [fg.FigureJob("bad", "lag_profile", {"lags": [], "r": [], "r_crit": [], "chosen": 0}),
            fg.FigureJob("good", "overlay", {"years": np.arange(5), "y": np.arange(5.0), "x": np.ones(5), "lag": 0,
                                             "response": "y", "driver": "x"})]
    figs = fg.render_jobs(jobs, tmp_path, workers=1)
    assert set(figs) == {"good"} and (tmp_path / "good.png").is_file() and not (tmp_path / "bad.png").exists()
    assert "figure bad could not be drawn; left out of the report" in capsys.readouterr().err


# ----------------------------------------------------------------------------- refused by the check
def test_check_refuses_a_response_without_enough_overlap(tmp_path):
    inputs = _data(tmp_path / "data", mortality=lambda m: m[~((m["group"] == "age2") & (m["year"] < 2015))])
    cfg = tiny_config(tmp_path, inputs=inputs)
    with pytest.raises(InputErrors) as err:
        stages.check_study(cfg)
    (line,) = str(err.value).splitlines()
    assert line == (f"{cfg}: responses[1] (id 'm:age2'): shares fewer than screen.min_overlap = 15 years "
                    "with every one of its drivers at every lag (most: 10 with 'forage_biomass' at lag 0), so "
                    "nothing can be screened for it; extend the series, lower screen.min_overlap, or remove "
                    "the response")


def test_check_refuses_a_response_without_drivers(tmp_path):
    cfg = tiny_config(tmp_path, drivers=[{"id": "forage_biomass", "transform": "log", "responses": ["m:age5plus"]}])
    proc = lagsieve("check", cfg)
    assert proc.returncode == 2, proc.stdout + proc.stderr
    assert proc.stderr.strip() == (f"{cfg}: responses[1] (id 'm:age2'): no driver is screened against "
                                   "this response (every driver's responses list leaves it out); add the "
                                   "response to a driver's responses, or remove the response")
    assert "Traceback" not in proc.stderr


def test_check_passes_a_constant_response(tmp_path):
    """A constant response is reported, not refused: the rest of the study can be screened."""
    cfg = tiny_config(tmp_path, inputs=_data(tmp_path / "data", _fix_m_age2))
    _, _, _, warnings = stages.check_study(cfg)
    assert any(w.series == "m:age2" and "all 40 values are 0.2" in w.what for w in warnings)


# ----------------------------------------------------------------------------- the workflow
@pytest.mark.slow
def test_lagsieve_run_finishes_a_degenerate_study(tmp_path):
    """`lagsieve run` (Snakemake) on a study with a constant response and no out-of-sample
    forecasts: exit 0 and a report that says what could not be computed."""
    inputs = _data(tmp_path / "data", _fix_m_age2)
    cfg = tiny_config(tmp_path, inputs=inputs, report={"top": 2, "pdf": False},
                      screen=dict(FAST_SCREEN, validation={"initial_years": 36, "holdout_years": 5}))
    proc = lagsieve("run", cfg, "--cores", "2", cwd=tmp_path)
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-3000:]
    assert "Traceback" not in proc.stderr
    html = (tmp_path / "results" / "tiny_escape" / "report.html").read_text(encoding="utf-8")
    assert "Not computed" in html
    assert "m:age2 is constant (0.2 every year): correlations are undefined" in html
    assert "the first training window of 36 years leaves 3 of 39 usable years to forecast" in html
    assert not (tmp_path / "results" / "tiny_escape" / "report.pdf").exists()
    shutil.rmtree(tmp_path / "results")
