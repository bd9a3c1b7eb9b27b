"""Seasons kept apart (config ``by_season``): seasons of monthly rows, lags in seasons across the
year end, the harmonic baselines, the config's and the data's one-line problems, and a small
study through the stage functions with a planted spring-only effect.

Outside sources: the harmonic fit against statsmodels (OLS on the Fourier terms of
``statsmodels.tsa.deterministic.DeterministicProcess``), the study-wide q-values against
``statsmodels.stats.multitest.multipletests(method="fdr_bh")`` (Benjamini & Hochberg 1995). The
season means and lags are hand computations. The data are invented.
"""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import yaml
from statsmodels.stats.multitest import multipletests
from statsmodels.tsa.deterministic import DeterministicProcess, Fourier

from helpers import lagsieve, run_study
from lagsieve.evidence.seasons import SeasonView, alias, season_view
from lagsieve.io.config import load_study
from lagsieve.io.tables import FRAME_COLUMNS
from lagsieve.ledger.update import grade_rows
from lagsieve.prep.seasons import Seasons, season_axis, season_frame, season_lagged
from lagsieve.report.context import row_lead
from lagsieve.report.render import render
from lagsieve.stages.digest import settings_digest
from lagsieve.stats.harmonic import fourier_design, harmonic_forecasts, harmonic_order

FOUR = {"winter": [12, 1, 2], "spring": [3, 4, 5], "summer": [6, 7, 8], "autumn": [9, 10, 11]}


def monthly_rows(series: str, values: dict[tuple[int, int], float]) -> pd.DataFrame:
    """The tidy frame of the readers for one monthly series: (year, month) -> value."""
    keys = sorted(values)
    return pd.DataFrame({"series": series, "year": [y for y, _ in keys], "month": [m for _, m in keys],
                         "value": [values[k] for k in keys], "se": np.nan, "unit": None, "file": "x.csv",
                         "row": np.arange(len(keys)) + 2})[FRAME_COLUMNS]


# ----------------------------------------------------------------------------- season values and lags

def test_seasons_in_the_order_of_the_year_by_their_last_month():
    s = Seasons.of({"autumn": [9, 10, 11], "spring": [3, 4, 5], "winter": [12, 1, 2], "summer": [6, 7, 8]})
    assert s.names == ("winter", "spring", "summer", "autumn")
    assert s.mid_month("winter") == 1.0  # Dec, Jan, Feb: January in the middle (hand)
    assert s.mid_month("spring") == 4.0


def test_season_values_put_december_in_the_next_years_winter():
    # hand computation: winter 2001 = mean(Dec 2000, Jan 2001, Feb 2001) = (1 + 2 + 3) / 3
    vals = {(2000, 12): 1.0, (2001, 1): 2.0, (2001, 2): 3.0, (2001, 3): 10.0, (2001, 4): 11.0, (2001, 5): 15.0}
    frame = season_frame(monthly_rows("sst", vals), "sst", Seasons.of(FOUR))
    got = {(int(y), s): v for y, s, v in zip(frame["year"], frame["season"], frame["value"])}
    assert got == {(2001, "winter"): pytest.approx(2.0), (2001, "spring"): pytest.approx(12.0)}


def test_lags_in_seasons_cross_the_year_end():
    seasons = Seasons.of(FOUR)
    # a driver with the value 10 * year + season index on the season axis, 1990 winter .. 1993 autumn
    frame = pd.DataFrame([(y, s, 10 * (y - 1990) + i) for y in range(1990, 1994)
                          for i, s in enumerate(seasons.names)], columns=["year", "season", "value"])
    first, x = season_axis(frame, seasons)
    assert first == 1990 * 4 and len(x) == 16
    years = np.array([1991, 1992, 1993])
    out = season_lagged(x[None, :], first, years, seasons.index("spring"), 4, [0, 1, 2, 5])[0]
    # spring (index 1) of year t: lag 0 spring t, lag 1 winter t, lag 2 autumn t - 1, lag 5 winter t - 1 (hand)
    np.testing.assert_array_equal(out[0], [11, 21, 31])
    np.testing.assert_array_equal(out[1], [10, 20, 30])
    np.testing.assert_array_equal(out[2], [3, 13, 23])
    np.testing.assert_array_equal(out[3], [0, 10, 20])
    early = season_lagged(x[None, :], first, np.array([1990]), 1, 4, [2])[0]
    assert np.isnan(early[0, 0])  # autumn 1989 is off the axis


# ----------------------------------------------------------------------------- harmonic baselines

def test_harmonic_baseline_equals_statsmodels_ols_on_fourier_terms():
    rng = np.random.default_rng(4)
    n = 72
    months = (np.arange(n) % 12) + 1
    y = 5 + 2 * np.sin(2 * np.pi * months / 12) + np.cos(4 * np.pi * months / 12) + rng.normal(0, 0.3, n)
    y[[10, 30]] = np.nan
    targets = np.arange(24, n)
    got = harmonic_forecasts(y, months, targets, order=2)
    # statsmodels: constant plus Fourier(period 12, order 2) on the time index (t = 0..n-1, so
    # month m = t + 1: the same column space as sin/cos of 2 pi k m / 12), OLS on the earlier values
    design = DeterministicProcess(pd.RangeIndex(n), constant=True, additional_terms=[Fourier(12, 2)]).in_sample()
    X = design.to_numpy()
    for j, t in enumerate(targets):
        past = np.flatnonzero(np.isfinite(y[:t]))
        fit = sm.OLS(y[past], X[past]).fit()
        assert got.harmonic[j] == pytest.approx(float(fit.predict(X[t:t + 1])[0]), abs=1e-9)
        last = past[-1]
        assert got.harmonic_persistence[j] == pytest.approx(
            float(fit.predict(X[t:t + 1])[0] + fit.resid[-1]), abs=1e-9)
        assert fit.resid[-1] == pytest.approx(y[last] - float(fit.predict(X[last:last + 1])[0]))


def test_harmonic_order_and_design():
    assert harmonic_order(np.arange(1, 13)) == 2
    assert harmonic_order([1.0, 4.0, 7.0, 10.0]) == 1  # four seasons identify one harmonic
    X = fourier_design(np.array([3.0]), 1)
    np.testing.assert_allclose(X, [[1.0, 1.0, 0.0]], atol=1e-12)  # sin(pi/2), cos(pi/2)


# ----------------------------------------------------------------------------- a study with seasons

def write_study(folder: Path, seed: int = 5, years: int = 42, **changes) -> Path:
    """An invented study: a monthly condition index whose spring (March-May) follows the prey
    of the previous autumn (September-November), a monthly temperature without effect."""
    rng = np.random.default_rng(seed)
    yrs = np.arange(1980, 1980 + years)
    m = np.arange(1, 13)
    prey = np.empty((years, 12))
    level = 0.0
    for i in range(years):
        for k in range(12):
            level = 0.5 * level + rng.normal()
            prey[i, k] = 10 + 3 * np.sin(2 * np.pi * m[k] / 12) + level
    temp = 8 + 4 * np.cos(2 * np.pi * m / 12)[None, :] + rng.normal(size=(years, 12))
    cond = 1 + 0.05 * np.sin(2 * np.pi * m / 12)[None, :] + 0.02 * rng.normal(size=(years, 12))
    autumn = prey[:, 8:11].mean(1)
    cond[1:, 2:5] += 0.03 * (autumn[:-1, None] - autumn.mean())
    rows = [(sid, y, k + 1, v[i, k]) for sid, v in (("cond", cond), ("prey", prey), ("temp", temp))
            for i, y in enumerate(yrs) for k in range(12)]
    folder.mkdir(parents=True, exist_ok=True)
    pd.DataFrame(rows, columns=["series", "year", "month", "value"]).to_csv(folder / "data.csv", index=False)
    pd.DataFrame({"series": "effort", "year": yrs, "value": rng.normal(size=years)}).to_csv(folder / "annual.csv",
                                                                                         index=False)
    every = {"months": list(range(1, 13))}
    cfg = {"study": "seasons_test", "invented": True, "inputs": ["data.csv", "annual.csv"], "seasons": FOUR,
           "responses": [{"id": "cond", "kind": "condition", "by_season": True, "aggregate": every}],
           "drivers": [{"id": "prey", "expected_sign": "positive", "aggregate": every},
                       {"id": "temp", "aggregate": every}, {"id": "effort", "lags": [0, 1]}],
           "screen": {"surrogates": 199, "seed": 3}}
    cfg.update(changes)
    (folder / "config.yaml").write_text(yaml.safe_dump(cfg, sort_keys=False))
    return folder / "config.yaml"


def test_by_season_makes_one_response_per_season(tmp_path):
    study = load_study(write_study(tmp_path))
    assert study.response_ids == ["cond", "cond-winter", "cond-spring", "cond-summer", "cond-autumn"]
    spring = study.responses[2]
    assert (spring["season"], spring["season_of"], spring["season_months"]["months"]) == ("spring", "cond", [3, 4, 5])
    assert [d["id"] for d in study.drivers_for("cond-spring")] == ["prey", "temp", "effort"]
    assert study.joint_groups() == {}


def test_a_season_screen_reruns_when_its_response_changes(tmp_path):
    cfg = write_study(tmp_path)
    before = settings_digest(load_study(cfg), "screen", "cond-spring")
    data = yaml.safe_load(cfg.read_text())
    data["responses"][0]["transform"] = "log"
    cfg.write_text(yaml.safe_dump(data))
    assert settings_digest(load_study(cfg), "screen", "cond-spring") != before


def _one_line(proc) -> str:
    assert proc.returncode == 2, proc.stdout + proc.stderr
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert len(lines) == 1, proc.stderr
    return lines[0]


def test_by_season_without_seasons_is_one_line(tmp_path):
    cfg = write_study(tmp_path)
    data = yaml.safe_load(cfg.read_text())
    del data["seasons"]
    cfg.write_text(yaml.safe_dump(data))
    line = _one_line(lagsieve("check", cfg))
    assert "by_season is true but the study has no seasons" in line and "responses[1] (id 'cond').by_season" in line


def test_seasons_sharing_a_month_is_one_line(tmp_path):
    cfg = write_study(tmp_path, seasons={"winter": [12, 1, 2, 3], "spring": [3, 4, 5], "summer": [6, 7, 8],
                                         "autumn": [9, 10, 11]})
    line = _one_line(lagsieve("check", cfg))
    assert "seasons 'winter' and 'spring' share a month" in line


def test_seasons_that_miss_months_of_the_data_is_one_line_per_series(tmp_path):
    cfg = write_study(tmp_path, seasons={"spring": [3, 4, 5], "autumn": [9, 10, 11]},
                      drivers=[{"id": "prey", "aggregate": {"months": list(range(1, 13))}}])
    proc = lagsieve("check", cfg)
    assert proc.returncode == 2
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert len(lines) == 2, proc.stderr  # the response's months and the driver's
    assert all("the data have months 1, 2, 6, 7, 8, 12, which no season holds" in ln for ln in lines)
    assert "series 'cond'" in lines[0] and "series 'prey'" in lines[1]


def test_by_season_without_season_series_is_one_line(tmp_path):
    cfg = write_study(tmp_path)
    annual = pd.DataFrame({"series": "cpue", "year": np.arange(1980, 2022), "value": np.linspace(1, 2, 42)})
    annual.to_csv(tmp_path / "cpue.csv", index=False)
    data = yaml.safe_load(cfg.read_text())
    data["inputs"].append("cpue.csv")
    data["responses"] = [{"id": "cpue", "by_season": True}]
    cfg.write_text(yaml.safe_dump(data))
    line = _one_line(lagsieve("check", cfg))
    assert "by_season needs per-season series such as 'cpue-winter'" in line
    assert "responses[1] (id 'cpue').by_season" in line


def test_season_response_ids_that_clash_are_one_line(tmp_path):
    cfg = write_study(tmp_path)
    data = yaml.safe_load(cfg.read_text())
    data["responses"].append({"id": "cond-spring"})
    cfg.write_text(yaml.safe_dump(data))
    line = _one_line(lagsieve("check", cfg))
    assert "by_season makes the response 'cond-spring', which is already listed" in line


@pytest.fixture(scope="module")
def season_run(tmp_path_factory):
    root = tmp_path_factory.mktemp("seasons")
    cfg = write_study(root / "study")
    return cfg, run_study(cfg, root / "out", parallel=False)


def test_a_spring_only_effect_is_found_in_spring_and_not_in_other_seasons(season_run):
    _, res = season_run
    ev = pd.read_csv(res / "evidence.csv", keep_default_na=False, na_values=[""])
    seasonal = ev[ev["season"].notna()].set_index(["season", "driver"])
    spring = seasonal.loc[("spring", "prey")]
    assert spring["grade"] in ("strong", "moderate")
    assert (spring["lag"], spring["lag_unit"]) == (2, "season")  # the autumn before (planted)
    assert spring["summary"].startswith("2-season lead, positive")
    others = seasonal.drop(index="spring", level="season")
    assert not others["grade"].isin(["strong", "moderate"]).any()
    assert set(ev.loc[ev["season"].isna(), "response"]) == {"cond"}  # the annual response, no season


def test_season_hypotheses_are_in_the_study_family(season_run):
    _, res = season_run
    ev = pd.read_csv(res / "evidence.csv")
    # Benjamini-Hochberg over every hypothesis of the study, seasons included (statsmodels)
    q_ref = multipletests(ev["p_surrogate"], method="fdr_bh")[1]
    np.testing.assert_allclose(ev["q_value"], q_ref)
    assert len(ev) == 15  # 3 drivers x (the annual response + 4 seasons)


def test_season_rows_carry_the_harmonic_baselines_and_real_driver_ids(season_run):
    _, res = season_run
    ev = pd.read_csv(res / "evidence.csv")
    seasonal = ev[ev["season"].notna()]
    assert seasonal["oos_skill_harmonic"].notna().all() and seasonal["oos_skill_harmonic_persistence"].notna().all()
    assert (seasonal["oos_skill"] <= seasonal[["oos_skill_harmonic", "oos_skill_harmonic_persistence"]].min(axis=1) + 1e-12).all()
    for name in ("evidence.csv", "screen.csv", "conditional.csv", "windows.csv", "models.csv"):
        assert "@" not in (res / name).read_text(), name
    scr = pd.read_csv(res / "screen.csv")
    assert set(scr.loc[(scr["response"] == "cond-spring") & (scr["driver"] != "effort"), "lag_unit"]) == {"season"}
    spring = scr[scr["response"] == "cond-spring"]
    assert set(spring.loc[spring["driver"] == "prey", "lag"]) == {0, 1, 2, 3}
    annual = spring[spring["driver"] == "effort"]  # an annual driver keeps its lags in years
    assert set(annual["lag_unit"]) == {"year"} and set(annual["lag"]) == {0, 1}
    fc = pd.read_csv(res / "work" / "responses" / "cond-spring" / "forecasts.csv")
    assert {"baseline_harmonic", "baseline_harmonic_persistence"} <= set(fc.columns)


def test_the_season_view_pairs_the_chosen_lag_and_gives_it_back():
    table = pd.DataFrame({"r-spring": [1.0, 2.0, 3.0], "d": [0.0, 0.0, 0.0]}, index=[2000, 2001, 2002])
    hyps = pd.DataFrame({"response": ["r-spring"], "driver": ["d"], "lag": [2], "lag_unit": ["season"]})
    paired = pd.DataFrame({"response": "r-spring", "driver": "d", "lag": 2, "year": [2000, 2001, 2002],
                           "value": [7.0, 8.0, 9.0]})
    view = season_view(hyps, paired, table, [{"id": "d"}], {"d": [0, 1]}, [])
    a = alias("d", "r-spring")
    assert view.hypotheses.loc[0, ["driver", "lag"]].tolist() == [a, 0]
    assert view.table[a].tolist() == [7.0, 8.0, 9.0] and view.lags[a] == [0]
    back = view.restore(pd.DataFrame({"drivers": [f"{a};x"], "lags": ["0;1"], "rival": [a]}), {"lags": "drivers"})
    assert back.iloc[0].tolist() == ["d;x", "2;1", "d"]
    assert isinstance(view, SeasonView)


def test_the_summary_says_in_which_seasons_an_effect_is_found():
    def said(found):
        r = {"id": "cond", "label": "Condition", "supported": [], "aside": [],
             "by_season": {"seasons": ["winter", "spring", "summer", "autumn"],
                           "drivers": [{"driver": "Prey", "found": found,
                                        "where": [{"season": s, "grade": "strong", "lead": "2-season lead",
                                                   "summary": ""} for s in found]},
                                       {"driver": "Temperature", "found": [], "where": []}]}}
        html = render("summary.html", summary={"n_responses": 1, "n_drivers": 2, "n_hypotheses": 8, "first_year": 1980,
                                               "last_year": 2021, "counts": [], "none_supported": False,
                                               "not_computed": [], "responses": [r]})
        return " ".join(html.split())
    assert "found in spring only" in said(["spring"])
    assert "found in all seasons" in said(["winter", "spring", "summer", "autumn"])
    assert "found in spring, summer and autumn" in said(["spring", "summer", "autumn"])
    assert "Found in no season: Temperature." in said(["spring"])


def test_the_ledger_makes_no_next_year_forecast_from_a_lag_in_seasons():
    ev = pd.DataFrame({"response": ["cond", "cond-spring"], "driver": ["prey", "prey"], "lag": [1, 2],
                       "lag_unit": [None, "season"], "grade": ["moderate", "strong"]})
    rows = grade_rows(ev).set_index("response")
    assert rows.loc["cond", "lag"] == 1 and pd.isna(rows.loc["cond-spring", "lag"])


def test_leads_are_said_in_the_unit_of_the_lag():
    assert row_lead({"lag": 2, "lag_unit": "season"}) == "2-season lead"
    assert row_lead({"lag": 0, "lag_unit": "season"}) == "same season"
    assert row_lead({"lag": 1, "lag_unit": float("nan")}) == "1-year lead"  # an annual response (CSV: empty)
    assert row_lead({"lag": 1}) == "1-year lead"


def test_forecast_panel_of_a_harmonic_hardest_draws_the_candidate():
    """Where a harmonic baseline is the hardest (no driver model is built on it), the forecast panel
    draws the candidate chosen in each window, named by its most frequent baseline (common practice:
    a panel shows what was scored)."""
    from lagsieve.report.plan import _forecast_model
    fc = pd.DataFrame({"year": [2001, 2002, 2003], "candidate": [1.0, 2.0, 3.0],
                       "candidate_baseline": ["trend", "persistence", "trend"],
                       "model_trend": [9.0, 9.0, 9.0]})
    model, on = _forecast_model(fc, "harmonic_persistence")
    np.testing.assert_array_equal(model, [1.0, 2.0, 3.0])
    assert on == "trend"
    model, on = _forecast_model(fc, "trend")  # an ordinary hardest baseline: its own model column
    np.testing.assert_array_equal(model, [9.0, 9.0, 9.0])
    assert _forecast_model(fc.drop(columns=["candidate"]), "harmonic")[0] is None
