"""Tests of lagsieve.ledger: the forecast ledger over simulated yearly deliveries.

The invented demo data (lagsieve.demo) are delivered as they would arrive: first every series
up to 2022, then up to 2023, then up to 2024, and every delivery runs the stages (align,
screen, evidence) and the ledger update directly (no Snakemake, 99 surrogates, linear models).
The 2024 delivery also restates one past value of a response (M of ages 3-4 in 2010, as a new
assessment would), so the forecasts trained on the old value must be superseded, not scored,
while those of the other responses are scored.

Independent checks: the forecast and its 80 % prediction interval against statsmodels OLS
(``get_prediction(...).summary_frame(alpha=0.2)``, columns ``obs_ci_lower/upper``), the WLS
variant against statsmodels WLS, observed values and errors against the delivered files.
"""
from __future__ import annotations

import json
import shutil
import sqlite3
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import yaml
from scipy import stats

from lagsieve.errors import InputErrors
from lagsieve.ledger import store as ledger_store
from lagsieve.ledger import update as ledger_update
from lagsieve.ledger.fingerprint import fingerprints
from lagsieve.ledger.forecast import next_year_forecast
from lagsieve.ledger.store import connect, open_readonly, resolve_ledger_path
from lagsieve.ledger.revisions import tolerance_of
from lagsieve.ledger.study_data import StudyData
from lagsieve.ledger.track import data_changes, scores_by_grade, since_previous_run, track_record
from lagsieve.ledger.update import grade_rows, update_ledger, write_run
from lagsieve.ledger.section import Block, LedgerSection
from lagsieve.report.render import ledger_section_html, render_ledger_section
from lagsieve.stats.backtest import BASELINES

from lagsieve import pipeline as stages
from lagsieve.cli import main
from lagsieve.io.config import load_study
from lagsieve.io.names import slug
from lagsieve.demo import demo_config_text, write_demo
from lagsieve.prep.align import process_variance

STUDY = "caldrin_shelf_demo"
FILES = ("mortality_by_age.csv", "surveys_annual.csv", "indices_long.csv", "bottom_temperature_monthly.csv")
# series id, its group in mortality_by_age.csv, year, factor applied in the 2024 delivery
RESTATED = ("m:age3-4", "age3-4", 2010, 1.25)
CONDITION_SERIES = ("kn:", "below:")  # made by the demo's condition section from per-fish samples


def dump(db) -> list[str]:
    """The whole database as SQL text (tables and rows), to compare states exactly."""
    con = sqlite3.connect(str(db))
    try:
        return list(con.iterdump())
    finally:
        con.close()


class Deliveries:
    """A study folder that receives the demo data year by year."""

    def __init__(self, root):
        self.root = root
        self.full = root / "full"
        write_demo(self.full)
        cfg = yaml.safe_load(demo_config_text("data"))
        cfg["screen"].update(surrogates=99, models=["linear"])
        # the ledger is tested on the delivered files below; series made from per-fish samples stay out
        cfg.pop("condition", None)
        cfg["responses"] = [r for r in cfg["responses"] if not r["id"].startswith(CONDITION_SERIES)]
        cfg["drivers"] = [d for d in cfg["drivers"] if not d["id"].startswith(CONDITION_SERIES)]
        for d in cfg["drivers"]:  # signs stated for the condition series that left the study
            d.pop("expected_sign_by_response", None)
        for r in cfg["responses"]:  # draws and vintages are not delivered year by year here
            r.pop("draws", None)
            r.pop("vintages", None)
        cfg["screen"].pop("real_time", None)
        self.config = root / "config.yaml"
        self.config.write_text(yaml.safe_dump(cfg, sort_keys=False))
        self.out = root / "results" / STUDY
        self.work = self.out / "work"
        self.db = self.out / "ledger.sqlite"
        self.summary = self.work / "ledger_update.json"

    def deliver(self, last_year: int, restate: bool = False) -> None:
        data = self.root / "data"
        data.mkdir(exist_ok=True)
        for name in FILES:
            df = pd.read_csv(self.full / name)
            df = df[df["year"] <= last_year].copy()
            if restate and name == "mortality_by_age.csv":
                _, group, y, k = RESTATED
                at = (df["group"] == group) & (df["year"] == y)
                df.loc[at, "value"] = np.round(df.loc[at, "value"] * k, 4)
            df.to_csv(data / name, index=False, lineterminator="\n", float_format="%.10g")

    def stages(self) -> None:
        study = load_study(self.config)
        stages.run_align(self.config, self.work / "annual.csv", self.work / "notes.csv")
        for r in study.response_ids:
            stages.run_screen(self.config, self.work / "annual.csv", slug(r), self.work / "responses" / slug(r))
        stages.run_evidence(self.config, self.work / "annual.csv", self.work, self.out / "screen.csv",
                            self.out / "evidence.csv")

    def update(self) -> dict:
        return update_ledger(self.config, self.work / "annual.csv", self.out / "evidence.csv", self.out,
                                    self.summary)

    def keep(self, tag: str) -> dict:
        """Copies of this run's evidence and annual table, for the checks."""
        snap = self.root / "snap" / tag
        snap.mkdir(parents=True)
        for src in (self.out / "evidence.csv", self.work / "annual.csv"):
            shutil.copy(src, snap / src.name)
        return {"evidence": pd.read_csv(snap / "evidence.csv"), "annual": snap / "annual.csv", "dump": dump(self.db)}


@pytest.fixture(scope="module")
def history(tmp_path_factory):
    """Run the three deliveries (plus a rerun, a killed run and a rerun after the last one)."""
    d = Deliveries(tmp_path_factory.mktemp("ledger"))
    h = {"d": d}
    d.deliver(2022)
    d.stages()
    h["s2022"] = d.update()
    h["r2022"] = d.keep("2022")
    h["s2022_again"] = d.update()  # same data: nothing may be added
    h["dump_2022_again"] = dump(d.db)
    d.deliver(2023)
    d.stages()
    h["s2023"] = d.update()
    h["r2023"] = d.keep("2023")
    d.deliver(2024, restate=True)
    d.stages()
    summary_before = d.summary.read_text()
    dump_before = dump(d.db)
    calls = []
    real = ledger_update._score_open

    def killed(*args, **kwargs):
        real(*args, **kwargs)  # the scores are written, then the process "dies"
        calls.append(1)
        raise KeyboardInterrupt("killed while writing the ledger")

    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(ledger_update, "_score_open", killed)
        with pytest.raises(KeyboardInterrupt):
            d.update()
    h["kill"] = {"calls": len(calls), "dump_before": dump_before, "dump_after": dump(d.db),
                 "summary_before": summary_before, "summary_after": d.summary.read_text()}
    h["s2024"] = d.update()
    h["r2024"] = d.keep("2024")
    h["s2024_again"] = d.update()
    h["dump_2024_again"] = dump(d.db)
    return h


def q(db, sql, args=()):
    con = sqlite3.connect(str(db))
    con.row_factory = sqlite3.Row
    try:
        return [dict(r) for r in con.execute(sql, args).fetchall()]
    finally:
        con.close()


def forecastable(ev: pd.DataFrame) -> set[tuple[str, str]]:
    """Hypotheses of every grade whose driver is needed no later than the last year (lag >= 1)
    and that have a candidate baseline."""
    g = ev[(ev["lag"] >= 1) & ev["oos_baseline"].notna()]
    return set(zip(g["response"], g["driver"]))


def observed(d: Deliveries, response: str, year: int) -> float:
    m = pd.read_csv(d.full / "mortality_by_age.csv")
    group = response.split(":")[1]
    return float(m.loc[(m["group"] == group) & (m["year"] == year), "value"].iloc[0])


# ---------------------------------------------------------------- the forecast itself
def ar1_interval(fit, x0, alpha: float = 0.2) -> tuple[float, float, float]:
    """(mean, lower, upper) of a statsmodels OLS/WLS fit's prediction at ``x0``, the parameter
    part of the variance inflated by (1 + rho) / (1 - rho) with rho the lag-1 autocorrelation of
    the (consecutive-year) residuals from statsmodels' acovf (no demeaning, clipped to [0, 0.9]):
    se^2 = scale + k * mean_se^2, the ledger's interval (lagsieve.ledger.forecast docstring)."""
    from statsmodels.tsa.stattools import acovf  # statsmodels is a test extra: only where the caller skipped without it
    g = acovf(fit.wresid, adjusted=False, demean=False, fft=False, nlag=1)
    rho = float(np.clip(g[1] / g[0], 0.0, 0.9))
    k = (1 + rho) / (1 - rho)
    pr = fit.get_prediction(x0).summary_frame(alpha=alpha)
    mean, mse = float(pr["mean"].iloc[0]), float(pr["mean_se"].iloc[0])
    half = stats.t.ppf(1 - alpha / 2, fit.df_resid) * np.sqrt(fit.scale + k * mse ** 2)
    return mean, mean - half, mean + half


def _synthetic(n=30, seed=3):
    rng = np.random.default_rng(seed)
    years = np.arange(1990, 1990 + n)
    x = rng.normal(size=n + 1)
    y = 0.5 + 0.02 * (years - 1990) + 0.8 * x[:-1] + rng.normal(0, 0.3, n)  # driver leads by one year
    table = pd.DataFrame({"r": y, "d": x[1:]}, index=pd.Index(years, name="year"))
    table.loc[1990 + n - 1, "d"] = x[-1]
    return table


def test_forecast_matches_statsmodels_ols():
    sm = pytest.importorskip("statsmodels.api")
    table = _synthetic()
    f, why = next_year_forecast(table, table, {}, "r", "d", 1, "trend")
    assert why == "" and f is not None
    T = int(table.index.max())
    assert (f.origin_year, f.target_year, f.driver_year) == (T, T + 1, T)
    yrs = table.index.to_numpy()
    rows = yrs[1:]  # the first year has neither the previous response nor the lagged driver
    X = np.column_stack([np.ones(len(rows)), rows.astype(float), table["d"].shift(1).loc[rows].to_numpy()])
    fit = sm.OLS(table["r"].loc[rows].to_numpy(), X).fit()
    want = ar1_interval(fit, np.array([[1.0, T + 1.0, table["d"].loc[T]]]))
    assert f.n_train == len(rows) == 29
    assert (f.forecast, f.lower, f.upper) == pytest.approx(want, rel=1e-10)
    assert f.resid_sd == pytest.approx(np.sqrt(fit.scale), rel=1e-10)
    # baselines fitted on the same years: persistence is y_t = a + phi y_{t-1}
    Xp = np.column_stack([np.ones(len(rows)), table["r"].shift(1).loc[rows].to_numpy()])
    pp = ar1_interval(sm.OLS(table["r"].loc[rows].to_numpy(), Xp).fit(), np.array([[1.0, table["r"].loc[T]]]))
    assert f.baselines["persistence"] == pytest.approx(pp, rel=1e-10)
    assert f.baselines["climatology"][0] == pytest.approx(table["r"].loc[rows].mean(), rel=1e-12)


def test_weighted_forecast_matches_statsmodels_wls():
    sm = pytest.importorskip("statsmodels.api")
    table = _synthetic(seed=5)
    se = pd.DataFrame({"r": np.linspace(0.1, 0.4, len(table)), "d": np.nan}, index=table.index)
    f, _ = next_year_forecast(table, table, {}, "r", "d", 1, "climatology", se=se, raw_se=se)
    rows = table.index.to_numpy()[1:]
    # weights 1 / (process variance + se^2), the process variance by the method of moments on
    # the training years (prep.align.process_variance, itself checked in tests/test_weights.py)
    tau2 = process_variance(table["r"].loc[rows].to_numpy(), se["r"].loc[rows].to_numpy())
    w = 1 / (tau2 + se["r"].loc[rows].to_numpy() ** 2)
    w = w / w.mean()
    X = np.column_stack([np.ones(len(rows)), table["d"].shift(1).loc[rows].to_numpy()])
    fit = sm.WLS(table["r"].loc[rows].to_numpy(), X, weights=w).fit()
    T = int(table.index.max())
    want = ar1_interval(fit, np.array([[1.0, table["d"].loc[T]]]))  # the new year has weight 1
    assert (f.forecast, f.lower, f.upper) == pytest.approx(want, rel=1e-10)
    # the se of the response are part of the training data
    f2, _ = next_year_forecast(table, table, {}, "r", "d", 1, "climatology", se=se * 1.5, raw_se=se * 1.5)
    assert f2.training_sha256 != f.training_sha256


def test_lag_zero_needs_the_driver_of_the_target_year():
    table = _synthetic()
    T = int(table.index.max())
    f, why = next_year_forecast(table, table, {}, "r", "d", 0, "trend")
    assert f is None and why == f"no forecast: lag 0 needs d in {T + 1}, not yet observed"
    ahead = table.reindex(list(table.index) + [T + 1])
    ahead.loc[T + 1, "d"] = 0.7  # the driver is delivered before the response
    f, why = next_year_forecast(ahead, ahead, {}, "r", "d", 0, "trend")
    assert why == "" and (f.target_year, f.driver_year, f.driver_value) == (T + 1, T + 1, 0.7)


def test_training_hash_changes_with_a_used_value_only():
    table = _synthetic()
    f, _ = next_year_forecast(table, table, {}, "r", "d", 1, "trend")
    restated = table.copy()
    restated.loc[2000, "d"] += 0.1
    g, _ = next_year_forecast(restated, restated, {}, "r", "d", 1, "trend")
    assert g.training_sha256 != f.training_sha256
    unused = table.copy()
    unused.loc[int(table.index.max()), "d"] += 0.1  # lag 1: the last driver year is the forecast's input...
    h, _ = next_year_forecast(unused, unused, {}, "r", "d", 1, "trend")
    assert h.training_sha256 != f.training_sha256
    first = table.copy()
    first.loc[1990, "r"] += 0.1  # 1990 is no fitted year, but the response one year before 1991
    m, _ = next_year_forecast(first, first, {}, "r", "d", 1, "trend")
    assert m.forecast == f.forecast and m.training_sha256 != f.training_sha256
    other = table.assign(e=1.0)  # ...but another series is not
    k, _ = next_year_forecast(other, other, {}, "r", "d", 1, "trend")
    assert k.training_sha256 == f.training_sha256


def test_a_fit_that_cannot_be_made_gives_a_reason_not_a_crash():
    table = _synthetic()
    table["d"] = 1.0  # a constant driver: the candidate's design is singular
    f, why = next_year_forecast(table, table, {}, "r", "d", 1, "trend")
    assert f is None and why.startswith("no forecast: the least-squares fit failed")
    short = _synthetic(n=6)  # 5 usable years, 3 parameters of trend + driver: too few
    f, why = next_year_forecast(short, short, {}, "r", "d", 1, "trend")
    assert f is None and why == "no forecast: 5 usable years are too few for the candidate model"


def test_ledger_in_a_folder_with_uri_characters(tmp_path):
    db = tmp_path / "we#ird?%dir" / "l.sqlite"
    s1, _ = _record(db, _synthetic(), "k1", "t1")
    assert s1["status"] == "recorded"
    html = ledger_section_html(db, "syn", None)
    assert "the first run of this study in the ledger" in html and "cannot be read" not in html


def test_resolve_ledger_path(tmp_path):
    cfg = yaml.safe_load(demo_config_text("data"))
    p = tmp_path / "c.yaml"
    p.write_text(yaml.safe_dump(cfg))
    assert resolve_ledger_path(load_study(p), tmp_path / "o") == tmp_path / "o" / "ledger.sqlite"
    cfg["ledger"] = {"path": "books/track.sqlite"}
    p.write_text(yaml.safe_dump(cfg))
    assert resolve_ledger_path(load_study(p), tmp_path / "o") == tmp_path / "o" / "books" / "track.sqlite"
    cfg["ledger"] = {"path": str(tmp_path / "abs.sqlite")}
    p.write_text(yaml.safe_dump(cfg))
    assert resolve_ledger_path(load_study(p), tmp_path / "o") == tmp_path / "abs.sqlite"


def _tidy(table: pd.DataFrame) -> pd.DataFrame:
    t = table.reset_index().melt(id_vars="year", var_name="series", value_name="value").dropna()
    return t[["series", "year", "value"]]


def _write_synthetic(db, table: pd.DataFrame, key: str, now: str, tidy: pd.DataFrame, tol):
    """One run of a synthetic study (response r, driver d, strong at lag 1) written to ``db``,
    with ``tidy`` as the run's data fingerprints and ``tol`` as the restatement tolerance."""
    data = StudyData(table=table, raw=table, transforms={})
    f, _ = data.forecast("r", "d", 1, "trend")
    f.grade = "strong"
    grades = grade_rows(pd.DataFrame([{"response": "r", "driver": "d", "grade": "strong", "model": "linear",
                                       "lag": 1, "oos_baseline": "trend"}]))
    run = {"study": "syn", "run_key": key, "data_sha256": key, "inputs_sha256": "{}", "tool_version": "test",
           "config_sha256": "-", "created_utc": now, "screen_json": "{}"}
    con = connect(db)
    try:
        return write_run(con, run, fingerprints(tidy), grades, {}, [f], data, tol), f
    finally:
        con.close()


def _record(db, table: pd.DataFrame, key: str, now: str):
    """One run of the synthetic study written to ``db`` (no se, the default tolerance)."""
    return _write_synthetic(db, table, key, now, _tidy(table), tolerance_of({}))


@pytest.mark.parametrize("where, inside", [("above", 0), ("middle", 1), ("below", 0)])
def test_scoring_inside_and_outside_the_interval(tmp_path, where, inside):
    db = tmp_path / "l.sqlite"
    table = _synthetic()
    s1, f = _record(db, table, "k1", "t1")
    assert (s1["status"], s1["new"], s1["scored"]) == ("recorded", 1, 0)
    obs = {"above": f.upper + 0.01, "middle": (f.lower + f.upper) / 2, "below": f.lower - 0.01}[where]
    later = table.reindex(list(table.index) + [f.target_year])
    later.loc[f.target_year, ["r", "d"]] = [obs, 0.0]
    s2, _ = _record(db, later, "k2", "t2")
    assert (s2["new"], s2["scored"], s2["superseded"]) == (1, 1, 0)
    sc = q(db, "SELECT * FROM scores")
    assert len(sc) == 1 and sc[0]["inside"] == inside and sc[0]["run_id"] == 2
    assert sc[0]["observed"] == obs and sc[0]["error"] == pytest.approx(obs - f.forecast, abs=1e-15)
    con = open_readonly(db)
    tr = track_record(con, "syn").iloc[0]
    con.close()
    assert (tr["made"], tr["scored"], tr["open"], tr["inside"]) == (2, 1, 1, inside)
    e_trend = obs - f.baselines["trend"][0]
    assert tr["skill_trend"] == pytest.approx(1 - (obs - f.forecast) ** 2 / e_trend ** 2, rel=1e-12)
    assert tr["beat_hardest"] == int((obs - f.forecast) ** 2 < e_trend ** 2)


# ---------------------------------------------------------------- three deliveries
def test_first_delivery_records_forecasts_for_2023(history):
    d, ev = history["d"], history["r2022"]["evidence"]
    assert history["s2022"]["status"] == "recorded" and history["s2022"]["run_id"] == 1
    fc = q(d.db, "SELECT * FROM forecasts WHERE run_id = 1")
    assert {(f["response"], f["driver"]) for f in fc} == forecastable(ev)
    assert len(fc) == history["s2022"]["new"] >= 2
    for f in fc:  # (the checks below look at the ledger after all deliveries)
        e = ev[(ev.response == f["response"]) & (ev.driver == f["driver"])].iloc[0]
        assert (f["origin_year"], f["target_year"], f["driver_year"]) == (2022, 2023, 2023 - e["lag"])
        # the forecast is the baseline the candidate used most often plus the driver at its lag
        assert f["lag"] == e["lag"] and f["baseline"] == e["oos_baseline"] and f["grade"] == e["grade"]
        assert f["status"] == "scored" and f["level"] == 0.8 and f["lower"] < f["forecast"] < f["upper"]
        assert json.loads(f["inputs_sha256"]).keys() == {f"data/{n}" for n in FILES}
        assert len(q(d.db, "SELECT * FROM baseline_forecasts WHERE forecast_id = ?", (f["forecast_id"],))) == \
            len(BASELINES)
    assert q(d.db, "SELECT count(*) AS n FROM scores WHERE run_id = 1")[0]["n"] == 0
    assert any("'open'" in line and "INSERT INTO \"forecasts\"" in line for line in history["r2022"]["dump"])
    assert not any("INSERT INTO \"scores\"" in line for line in history["r2022"]["dump"])
    grades = q(d.db, "SELECT response, driver, grade, note FROM grades WHERE run_id = 1")
    assert sorted((g["response"], g["driver"], g["grade"]) for g in grades) == \
        sorted(zip(ev["response"], ev["driver"], ev["grade"]))
    lag0 = ev[ev["grade"].isin(["strong", "moderate"]) & (ev["lag"] == 0)]
    notes = {(g["response"], g["driver"]): g["note"] for g in grades}
    for r, dr in zip(lag0["response"], lag0["driver"]):
        assert notes[(r, dr)] == f"no forecast: lag 0 needs {dr} in 2023, not yet observed"


def test_forecast_in_the_ledger_is_the_candidate_fitted_on_all_years(history):
    """Recompute one recorded forecast from the 2022 annual table with statsmodels."""
    sm = pytest.importorskip("statsmodels.api")
    d = history["d"]
    f = q(d.db, "SELECT * FROM forecasts WHERE run_id = 1 ORDER BY forecast_id LIMIT 1")[0]
    study = load_study(d.config)
    table = stages.load_table(study, history["r2022"]["annual"])
    y, x = table[f["response"]], table[f["driver"]].shift(f["lag"])
    ok = y.notna() & y.shift(1).notna() & x.notna() & (table.index <= 2022)
    yrs = table.index[ok].to_numpy(float)
    design = {"trend": lambda t, yl: [np.ones_like(t), t], "climatology": lambda t, yl: [np.ones_like(t)],
              "persistence": lambda t, yl: [np.ones_like(t), yl]}[f["baseline"]]
    X = np.column_stack(design(yrs, y.shift(1)[ok].to_numpy()) + [x[ok].to_numpy()])
    x0 = np.array(design(np.array([2023.0]), np.array([y.loc[2022]])) + [np.array([table[f["driver"]].loc[f["driver_year"]]])]).T
    assert np.all(np.diff(yrs) == 1)  # consecutive years: statsmodels' acovf sees the same pairs
    want = ar1_interval(sm.OLS(y[ok].to_numpy(), X).fit(), x0)
    assert f["n_train"] == int(ok.sum())
    assert (f["forecast"], f["lower"], f["upper"]) == pytest.approx(want, rel=1e-9)


def test_rerun_on_unchanged_data_adds_nothing(history):
    s = history["s2022_again"]
    assert s["status"] == "unchanged" and (s["new"], s["scored"], s["superseded"]) == (0, 0, 0)
    assert history["dump_2022_again"] == history["r2022"]["dump"]
    s = history["s2024_again"]
    assert s["status"] == "unchanged" and history["dump_2024_again"] == history["r2024"]["dump"]


def test_second_delivery_scores_the_2023_forecasts(history):
    d = history["d"]
    made = q(d.db, "SELECT f.*, s.observed, s.error, s.inside, s.run_id AS scored_run FROM forecasts f "
                   "JOIN scores s USING (forecast_id) WHERE f.target_year = 2023")
    assert len(made) == history["s2022"]["new"] == history["s2023"]["scored"]
    for f in made:
        obs = observed(d, f["response"], 2023)  # the response has no transform in the demo
        assert f["status"] == "scored" and f["scored_run"] == 2
        assert f["observed"] == pytest.approx(obs, abs=1e-12)
        assert f["error"] == pytest.approx(obs - f["forecast"], abs=1e-12)
        assert f["inside"] == int(f["lower"] <= obs <= f["upper"])
    # the 2024 forecasts are made from the 2023 delivery
    fc24 = q(d.db, "SELECT * FROM forecasts WHERE target_year = 2024")
    assert {(f["response"], f["driver"]) for f in fc24} == forecastable(history["r2023"]["evidence"])
    assert all(f["run_id"] == 2 and f["origin_year"] == 2023 for f in fc24)


def test_restated_value_supersedes_instead_of_scoring(history):
    d = history["d"]
    series, _, year, _ = RESTATED
    fc24 = q(d.db, "SELECT f.*, s.forecast_id AS scored FROM forecasts f LEFT JOIN scores s USING (forecast_id) "
                   "WHERE f.target_year = 2024")
    uses = [f for f in fc24 if f["response"] == series]
    others = [f for f in fc24 if f["response"] != series]
    assert uses and others, "the demo should give forecasts with and without the restated response"
    for f in uses:
        assert f["status"] == "superseded" and f["scored"] is None and f["superseded_run"] == 3
        assert f["superseded_reason"].startswith(
            f"training data restated beyond the tolerance: {series} {year} restated by +")
        assert f["superseded_reason"].endswith("(+25%, 2.9 se), tolerance 0.5 se")  # M has se in the demo
    for f in others:
        assert f["status"] == "scored" and f["scored"] is not None
        assert q(d.db, "SELECT observed FROM scores WHERE forecast_id = ?", (f["forecast_id"],))[0]["observed"] == \
            pytest.approx(observed(d, f["response"], 2024), abs=1e-12)
    assert history["s2024"]["superseded"] == len(uses) and history["s2024"]["scored"] == len(others)
    # new forecasts for 2025 are made from the restated data
    fc25 = q(d.db, "SELECT * FROM forecasts WHERE target_year = 2025")
    assert {(f["response"], f["driver"]) for f in fc25} == forecastable(history["r2024"]["evidence"])
    assert all(f["status"] == "open" and f["run_id"] == 3 for f in fc25)
    # the fingerprints of run 3 record exactly one restated cell against run 2
    con = open_readonly(d.db)
    ch = data_changes(con, 3, 2).set_index("series")
    con.close()
    assert ch.loc[series, "restated"] == [year]
    assert sum(len(v) for v in ch["restated"]) == 1
    assert all(v == [2024] for v in ch["added"])


def test_track_record_scores_against_the_baselines_made_at_the_same_time(history):
    d = history["d"]
    con = open_readonly(d.db)
    tr = track_record(con, STUDY).set_index(["response", "driver"])
    con.close()
    rows = q(d.db, "SELECT f.response, f.driver, f.baseline, s.error, s.observed, s.inside, b.baseline AS b, "
                   "b.forecast AS fb FROM forecasts f JOIN scores s USING (forecast_id) "
                   "JOIN baseline_forecasts b USING (forecast_id)")
    df = pd.DataFrame(rows)
    for (r, dr), g in df.groupby(["response", "driver"]):
        for b in ("climatology", "persistence", "trend"):
            gb = g[g["b"] == b]
            want = 1 - (gb["error"] ** 2).sum() / ((gb["observed"] - gb["fb"]) ** 2).sum()
            assert tr.loc[(r, dr), f"skill_{b}"] == pytest.approx(want, rel=1e-12)
        one = g.drop_duplicates("error")
        assert tr.loc[(r, dr), "scored"] == len(one)
        assert tr.loc[(r, dr), "inside"] == one["inside"].sum()
        assert tr.loc[(r, dr), "mae"] == pytest.approx(one["error"].abs().mean(), rel=1e-12)
    totals = q(d.db, "SELECT status, count(*) AS n FROM forecasts GROUP BY status")
    by = {t["status"]: t["n"] for t in totals}
    assert tr["superseded"].sum() == by["superseded"] and tr["open"].sum() == by["open"]
    assert tr["made"].sum() == sum(by.values())


def test_unique_constraints_forbid_duplicates(history):
    d = history["d"]
    n = q(d.db, "SELECT count(*) AS n, count(DISTINCT response || driver || target_year || training_sha256) AS k "
                "FROM forecasts")[0]
    assert n["n"] == n["k"]
    f = q(d.db, "SELECT * FROM forecasts LIMIT 1")[0]
    con = sqlite3.connect(str(d.db))
    try:
        cols = [c for c in f if c != "forecast_id"]
        with pytest.raises(sqlite3.IntegrityError):
            con.execute(f"INSERT INTO forecasts({', '.join(cols)}) VALUES ({', '.join('?' * len(cols))})",
                        [f[c] for c in cols])
        with pytest.raises(sqlite3.IntegrityError):
            con.execute("INSERT INTO scores(forecast_id, run_id, observed, error, inside) "
                        "SELECT forecast_id, run_id, observed, error, inside FROM scores LIMIT 1")
        with pytest.raises(sqlite3.IntegrityError):
            con.execute("INSERT INTO series_years SELECT * FROM series_years LIMIT 1")
        con.rollback()
    finally:
        con.close()
    runs = q(d.db, "SELECT run_id, run_key FROM runs ORDER BY run_id")
    assert [r["run_id"] for r in runs] == [1, 2, 3] and len({r["run_key"] for r in runs}) == 3


def test_killed_run_leaves_the_ledger_intact_and_the_next_run_completes(history):
    k = history["kill"]
    assert k["calls"] == 1  # the interruption came after scores had been written inside the transaction
    assert k["dump_after"] == k["dump_before"]
    assert k["summary_after"] == k["summary_before"]  # the summary is written only after the commit
    s = history["s2024"]
    assert s["status"] == "recorded" and s["run_id"] == 3 and s["new"] > 0
    assert json.loads(history["d"].summary.read_text())["run_id"] == 3


def test_since_previous_run_lists_data_grades_and_outcomes(history):
    d = history["d"]
    con = open_readonly(d.db)
    try:
        s2 = since_previous_run(con, STUDY, 2)
        s3 = since_previous_run(con, STUDY)
    finally:
        con.close()
    assert s2.previous["run_id"] == 1 and s3.run["run_id"] == 3
    ev1, ev2 = history["r2022"]["evidence"], history["r2023"]["evidence"]
    g1 = dict(zip(zip(ev1.response, ev1.driver), ev1.grade))
    g2 = dict(zip(zip(ev2.response, ev2.driver), ev2.grade))
    want = {k for k in g2 if g1.get(k) != g2[k]}
    assert {(r, dr) for r, dr in zip(s2.grade_changes.response, s2.grade_changes.driver)} == want
    scored_keys = set(zip(s2.scored.response, s2.scored.driver))
    for c in s2.grade_changes.itertuples():
        assert f"{c.before}" == g1[(c.response, c.driver)] and c.after == g2[(c.response, c.driver)]
        if (c.response, c.driver) in scored_keys:
            assert "the 2023 forecast " in c.reason and ("hit" in c.reason or "missed" in c.reason)
        assert c.reason
    html = ledger_section_html(d.db, STUDY, history["r2024"]["evidence"])
    assert html.startswith('<section id="since-previous-run">') and html.rstrip().endswith("</section>")
    assert "<h2>Since the previous run</h2>" in html
    assert "run 3 recorded" in html and "compared with run 2" in html
    assert "<td>m:age3-4</td><td>2024</td><td></td><td>2010</td>" in html
    assert "training data restated beyond the tolerance: m:age3-4 2010 restated by +" in html
    assert "does not match" not in html
    stale = ledger_section_html(d.db, STUDY, history["r2022"]["evidence"])
    assert "does not match the grades of this report" in stale


def test_since_previous_run_reads_the_forecasts_once_and_agrees_with_the_readers_alone(history, monkeypatch):
    """The track record and the scores by grade of the section come from the one scored frame read
    for the run's outcomes: the same frames as track_record and scores_by_grade read on their own
    (the section's former path), and the forecasts table read once."""
    from lagsieve.ledger import track

    con = open_readonly(history["d"].db)
    try:
        alone = track_record(con, STUDY), scores_by_grade(con, STUDY)
        reads = []
        real = track.forecasts_frame
        monkeypatch.setattr(track, "forecasts_frame", lambda *a: reads.append(a) or real(*a))
        s = since_previous_run(con, STUDY)
    finally:
        con.close()
    assert len(reads) == 1
    assert len(alone[0]) and alone[1]["scored"].sum() > 0  # a history with scored forecasts
    pd.testing.assert_frame_equal(s.track, alone[0])
    pd.testing.assert_frame_equal(s.by_grade, alone[1])


def test_track_row_without_scores_is_the_general_row_and_err_baseline_the_own_baselines_error(history):
    """A hypothesis with no scored forecast gets its row by a short path (counts 0, scores missing):
    the same values as the general path given no scored forecast; err_baseline is the err_<b>
    column of each forecast's own baseline b (the former code took it row by row)."""
    from lagsieve.ledger import track

    con = open_readonly(history["d"].db)
    try:
        f = track.scored_frame(con, STUDY)
    finally:
        con.close()
    assert f["baseline"].nunique() > 1 and (f["status"] == "scored").any()
    own = [r[f"err_{r['baseline']}"] for _, r in f.iterrows()]
    np.testing.assert_array_equal(f["err_baseline"].to_numpy(float), np.array(own, float))
    checked = 0
    for (r, d), g in f.groupby(["response", "driver"], sort=True):
        unscored = g[g["status"] != "scored"]
        if unscored.empty:
            continue
        short, general = track._unscored_row(r, d, unscored), track._scored_row(r, d, unscored, unscored.iloc[0:0])
        assert list(short) == track.TRACK_COLUMNS and set(general) == set(short)
        assert all(short[k] == general[k] or (pd.isna(short[k]) and pd.isna(general[k])) for k in short), (short, general)
        assert all(type(short[k]) is type(general[k]) for k in short if not pd.isna(short[k]))
        checked += 1
    assert checked
    by = track.scores_by_grade(None, STUDY, f.assign(status="open"))  # no forecast scored: the short path
    assert by["made"].sum() == len(f) and by["scored"].eq(0).all()
    assert by[track.BY_GRADE_COLUMNS[3:]].isna().all().all() and by["mae"].dtype == float


def test_section_html_is_escaped_and_never_raises(tmp_path):
    odd = tmp_path / "a<b&c" / "ledger.sqlite"
    html = ledger_section_html(odd, STUDY, None)
    assert "a&lt;b&amp;c" in html and "a<b" not in html and "No forecast ledger" in html
    bad = tmp_path / "junk.sqlite"
    bad.write_bytes(b"not a database at all" * 100)
    assert "cannot be read" in ledger_section_html(bad, STUDY, None)
    change = render_ledger_section(LedgerSection("read", "p", STUDY, blocks=[
        Block("table", header=["x"], rows=[["moderate -> weak: <b>"]])]))
    assert "moderate -&gt; weak: &lt;b&gt;" in change


def test_cli_prints_the_track_record(history, capsys):
    d = history["d"]
    assert main(["ledger", str(d.config), "--out", str(d.root / "results")]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0].startswith(f"forecast track record of study '{STUDY}': 3 runs recorded")
    con = open_readonly(d.db)
    tr = track_record(con, STUDY)
    con.close()
    con = open_readonly(d.db)
    by_grade = scores_by_grade(con, STUDY)
    n_rev = len(q(d.db, "SELECT DISTINCT series FROM revisions WHERE run_id = 3"))
    con.close()
    # header, track, by-grade heading + header + groups, revisions heading + one line per series
    assert len(out) == 2 + len(tr) + 2 + len(by_grade) + 1 + n_rev
    for t in tr.itertuples():
        line = next(x for x in out if f"{t.response} <- {t.driver} " in x)
        assert line.split()[3:7] == [str(t.made), str(t.open), str(t.scored), str(t.superseded)]
        # skill against the baseline each forecast was built on
        assert line.split()[11] == (f"{t.skill_hardest:+.2f}" if t.scored else "-")
    assert out[1].split() == ["hypothesis", "made", "open", "scored", "superseded", "inside", "mae", "crps",
                              "interval_score", "skill_own_baseline"] + [f"skill_{b}" for b in BASELINES] + ["last"]
    at = out.index("scores by the grade each forecast had when made:")
    assert out[at + 1].split()[:3] == ["grade", "made", "scored"]
    assert [x.split()[0] for x in out[at + 2: at + 2 + len(by_grade)]] == \
        [g.replace(" ", "-") for g in by_grade["grade"]]
    assert out[at + 2 + len(by_grade)] == "values restated at the latest run (1):"
    assert out[-1].startswith("  m:age3-4: 1 value restated, median change 25%, largest 25% (2.9 se)")
    # the default results folder is results/ beside the config, as for `lagsieve run`
    assert main(["ledger", str(d.config)]) == 0


def test_cli_without_a_ledger_prints_one_line_and_exits_2(tmp_path, capsys):
    cfg = tmp_path / "config.yaml"
    cfg.write_text(demo_config_text("data"))
    assert main(["ledger", str(cfg), "--out", str(tmp_path / "nowhere")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "no forecast ledger" in err[0] and str(tmp_path / "nowhere") in err[0]


def test_gam_form_forecast_follows_the_curve():
    """With model='gam' the next-year forecast uses the penalised spline the screen chose:
    on a hockey-stick truth it lands nearer the truth than the straight line, and its
    interval (approximate, t on n - edf df) contains its point forecast."""

    errs = {"linear": [], "gam": []}
    for seed in range(6):
        rng = np.random.default_rng(seed)
        years = np.arange(1980, 2021)
        x = rng.normal(size=len(years))
        x[-2] = -2.0  # a prey collapse in 2019; M of 2020 (not yet observed) is forecast from it
        y = np.r_[np.nan, 1.0 + 1.5 * np.maximum(0.0, -0.3 - x[:-1])] + 0.1 * rng.normal(size=len(years))
        y[-1] = np.nan  # the target year 2020 is not observed yet
        table = pd.DataFrame({"m": y, "prey": x}, index=pd.Index(years, name="year"))
        truth = 1.0 + 1.5 * (2.0 - 0.3)
        for model in ("linear", "gam"):
            f, why = next_year_forecast(table, table, {}, "m", "prey", 1, "climatology", model=model)
            assert f is not None, why
            assert f.lower < f.forecast < f.upper
            errs[model].append(abs(f.forecast - truth))
    assert np.mean(errs["gam"]) < 0.5 * np.mean(errs["linear"]), errs


# ---------------------------------------------------------------- the baseline a forecast is built on
def test_grades_keep_the_baseline_the_candidate_used_most_often(history):
    """``grades.baseline`` is evidence.csv's ``oos_baseline`` (not ``oos_hardest``), for every
    hypothesis of every run."""
    d = history["d"]
    for run_id, tag in ((1, "r2022"), (2, "r2023"), (3, "r2024")):
        ev = history[tag]["evidence"]
        want = {(r, dr): ("" if pd.isna(b) else b) for r, dr, b in zip(ev.response, ev.driver, ev.oos_baseline)}
        got = {(g["response"], g["driver"]): g["baseline"] or ""
               for g in q(d.db, "SELECT response, driver, baseline FROM grades WHERE run_id = ?", (run_id,))}
        assert got == want


def _evidence_two_rows() -> pd.DataFrame:
    """Two hypotheses whose hardest baseline differs from the baseline their candidate used."""
    return pd.DataFrame([
        {"response": "r", "driver": "d", "grade": "strong", "model": "linear", "lag": 1, "oos_hardest": "trend",
         "oos_baseline": "climatology", "q_value": 0.01, "p_surrogate": 0.002, "oos_skill": 0.3,
         "oos_p_surrogate": 0.01, "retest_skill": 0.2, "flags": "", "last_year": 2020},
        {"response": "r", "driver": "a", "grade": "weak", "model": "gam", "lag": 0, "oos_hardest": "persistence",
         "oos_baseline": np.nan, "q_value": 0.5, "p_surrogate": 0.4, "oos_skill": -0.1, "oos_p_surrogate": 0.6,
         "retest_skill": np.nan, "flags": "short-overlap", "last_year": 2020}])


def test_the_forecast_is_built_on_the_candidates_baseline_not_the_hardest():
    grades = grade_rows(_evidence_two_rows())
    assert grades["baseline"].tolist() == ["", "climatology"] and "hardest" not in grades.columns
    table = _synthetic()
    data = StudyData(table=table, raw=table, transforms={})
    made, notes = ledger_update.forecasts_of(grades, data)
    assert len(made) == 1 and notes == {("r", "a"): "no forecast: no selected lag or candidate baseline"}
    want, _ = next_year_forecast(table, table, {}, "r", "d", 1, "climatology")
    hardest, _ = next_year_forecast(table, table, {}, "r", "d", 1, "trend")
    assert made[0].baseline == "climatology" and made[0].forecast == want.forecast != hardest.forecast
    assert made[0].training_sha256 == want.training_sha256


def test_run_key_is_the_same_as_under_schema_1():
    """The run key of these grade rows as the schema-1 code computed it (column ``hardest``):
    a ledger upgraded from schema 1 must recognise a rerun on unchanged data and grades."""
    key = ledger_update.run_key("abc", grade_rows(_evidence_two_rows()))
    assert key == "28abd623c2f45ea4367ea89e226dbef7a94a364c875c57556dd8c7b36c341550"


# ---------------------------------------------------------------- a ledger written by schema 1
# made by the schema-1 code (commit 88b940f): two runs of _record on _synthetic(), the second
# observing 2020 in the middle of the first forecast's interval; VACUUMed with page_size 1024 (26 kB)
OLD_LEDGER = Path(__file__).parent / "data" / "ledger_schema1.sqlite"


def _rows(db) -> dict[str, list[tuple]]:
    con = sqlite3.connect(str(db))
    try:
        names = [r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type='table' ORDER BY name")]
        return {n: con.execute(f'SELECT * FROM "{n}" ORDER BY rowid').fetchall() for n in names}
    finally:
        con.close()


def _columns(db, table: str) -> list[str]:
    return [r["name"] for r in q(db, f"PRAGMA table_info({table})")]


def test_a_schema_1_ledger_is_upgraded_on_open(tmp_path):
    db = tmp_path / "old.sqlite"
    shutil.copy(OLD_LEDGER, db)
    assert q(db, "SELECT value FROM meta")[0]["value"] == "1" and "hardest" in _columns(db, "grades")
    before = _rows(db)
    con = open_readonly(db)  # the readers work on the old schema, and never change it
    track_before = track_record(con, "syn")
    con.close()
    assert dump(db) == dump(OLD_LEDGER)
    assert (track_before["made"].iloc[0], track_before["scored"].iloc[0]) == (2, 1)
    connect(db).close()
    assert q(db, "SELECT value FROM meta WHERE key = 'schema_version'")[0]["value"] == "3"
    assert q(db, "PRAGMA user_version")[0]["user_version"] == 3
    cols = _columns(db, "grades")
    assert "baseline" in cols and "hardest" not in cols and cols.index("baseline") == 6
    after = _rows(db)
    before["meta"] = [("schema_version", "3")]
    # schema 3 adds columns at the end (se, ledger_json, settings_sha256) and two empty tables
    before["series_years"] = [r + (None,) for r in before["series_years"]]
    before["runs"] = [r + ("{}",) for r in before["runs"]]
    before["forecasts"] = [r + (None,) for r in before["forecasts"]]
    before["revisions"] = before["rescores"] = []
    assert after == before  # every row kept as it was
    assert q(db, "SELECT DISTINCT baseline FROM grades") == [{"baseline": "trend"}]
    con = open_readonly(db)
    pd.testing.assert_frame_equal(track_record(con, "syn"), track_before)
    con.close()
    # the upgraded ledger takes the next run: the open forecast is scored, a new one is made
    table = _synthetic()
    later = table.reindex(list(table.index) + [2020, 2021])
    later.loc[2020, ["r", "d"]] = [q(db, "SELECT observed FROM scores")[0]["observed"], 0.0]  # as in run 2
    later.loc[2021, ["r", "d"]] = [1.1, 0.1]
    s3, _ = _record(db, later, "k3", "t3")
    assert (s3["run_id"], s3["new"], s3["scored"], s3["superseded"]) == (3, 1, 1, 0)
    assert q(db, "SELECT baseline FROM grades WHERE run_id = 3") == [{"baseline": "trend"}]
    connect(db).close()  # opening a current ledger changes nothing
    assert q(db, "SELECT value FROM meta WHERE key = 'schema_version'")[0]["value"] == "3"


def test_a_failed_upgrade_leaves_the_old_ledger_as_it_was(tmp_path, monkeypatch):
    db = tmp_path / "old.sqlite"
    shutil.copy(OLD_LEDGER, db)
    raw = db.read_bytes()
    broken = {"1": ("2", ("ALTER TABLE grades RENAME COLUMN hardest TO baseline", "UPDATE no_such_table SET x = 1"))}
    monkeypatch.setattr(ledger_store, "MIGRATIONS", broken)
    with pytest.raises(sqlite3.OperationalError, match="no_such_table"):
        connect(db)
    assert db.read_bytes() == raw and "hardest" in _columns(db, "grades")
    assert not (tmp_path / "old.sqlite-journal").exists()


def test_a_ledger_from_a_newer_lagsieve_is_one_clear_error(tmp_path):
    db = tmp_path / "new.sqlite"
    connect(db).close()
    con = sqlite3.connect(str(db))
    con.execute("UPDATE meta SET value = '9' WHERE key = 'schema_version'")
    con.commit()
    con.close()
    raw = db.read_bytes()
    with pytest.raises(InputErrors) as exc:
        connect(db)
    assert db.read_bytes() == raw  # never overwritten
    line = str(exc.value)
    assert "\n" not in line and str(db) in line and "schema version 9" in line and "update lagsieve" in line


# ---------------------------------------------------------------- restatements (issue 17, item 1)
def _tidy_se(table: pd.DataFrame, se_share: float | None) -> pd.DataFrame:
    """The tidy table with an se of ``se_share`` x |value| for the response r (None: no se)."""
    t = _tidy(table)
    t["se"] = np.where(t["series"] == "r", se_share * t["value"].abs(), np.nan) if se_share else np.nan
    return t


def _run(db, table: pd.DataFrame, key: str, se_share: float | None, tol=None):
    """One run of the synthetic study of :func:`_record`, with se and a chosen tolerance."""
    return _write_synthetic(db, table, key, key, _tidy_se(table, se_share), tol or tolerance_of({}))


def _next_delivery(table: pd.DataFrame, factor: float, obs: float) -> pd.DataFrame:
    """Every earlier response value restated by ``factor``, and the next year delivered."""
    T = int(table.index.max())
    later = table.reindex(list(table.index) + [T + 1])
    later["r"] = later["r"] * factor
    later.loc[T + 1, ["r", "d"]] = [obs, 0.2]
    return later


@pytest.mark.parametrize("se_share", [None, 0.05])
def test_a_small_restatement_of_every_value_is_recorded_and_the_forecast_scored(tmp_path, se_share):
    """Done when (issue 17): two deliveries with a 0.5 % restatement of every earlier response
    value in between give a scored forecast and recorded revisions, nothing superseded. With
    se = 5 % of the value the change is 0.1 se (< 0.5 se); without se it is 0.5 % (< 2 %)."""
    db = tmp_path / "l.sqlite"
    table = _synthetic()
    _, f = _run(db, table, "k1", se_share)
    later = _next_delivery(table, 1.005, obs=f.forecast + 0.05)
    s2, _ = _run(db, later, "k2", se_share)
    assert (s2["scored"], s2["superseded"], s2["revised"]) == (1, 0, len(table))
    sc = q(db, "SELECT * FROM scores")[0]
    assert sc["observed"] == pytest.approx(f.forecast + 0.05) and sc["error"] == pytest.approx(0.05)
    rev = pd.DataFrame(q(db, "SELECT * FROM revisions ORDER BY year"))
    assert set(rev["series"]) == {"r"} and (rev["run_id"] == 2).all() and (rev["previous_run"] == 1).all()
    np.testing.assert_allclose(rev["new_value"], table["r"].to_numpy() * 1.005, rtol=1e-15)
    np.testing.assert_allclose(rev["abs_change"], table["r"].to_numpy() * 0.005, rtol=1e-9)
    np.testing.assert_allclose(rev["rel_change"], 0.005 * np.sign(table["r"].to_numpy()), rtol=1e-9)
    if se_share:  # se of the old value: 0.05 |old|, the change 0.005 |old|: 0.1 se
        np.testing.assert_allclose(rev["se_units"], 0.1, rtol=1e-9)
    else:
        assert rev["se_units"].isna().all()
    # the revisions are shown by `since_previous_run` and the report's section
    html = ledger_section_html(db, "syn", None)
    assert "Values restated since the previous run" in html and "+0.5%" in html


@pytest.mark.parametrize("se_share, factor, words", [
    (None, 1.03, "(+3%), tolerance 2%"), (0.05, 1.03, "(+3%, 0.6 se), tolerance 0.5 se")])
def test_a_restatement_beyond_the_tolerance_supersedes_with_the_reason(tmp_path, se_share, factor, words):
    db = tmp_path / "l.sqlite"
    table = _synthetic()
    _run(db, table, "k1", se_share)
    later = table.copy()
    later.loc[2005, "r"] *= factor
    later = _next_delivery(later, 1.0, obs=1.0)
    s2, _ = _run(db, later, "k2", se_share)
    assert (s2["scored"], s2["superseded"]) == (0, 1)
    why = q(db, "SELECT superseded_reason FROM forecasts WHERE forecast_id = 1")[0]["superseded_reason"]
    assert why.startswith("training data restated beyond the tolerance: r 2005 restated by +") and why.endswith(words)
    # a looser tolerance from the config keeps it open: it is scored
    db2 = tmp_path / "l2.sqlite"
    loose = tolerance_of({"ledger": {"restatement_tolerance": {"relative": 0.05, "se": 1.0}}})
    _run(db2, table, "k1", se_share, loose)
    s2, _ = _run(db2, later, "k2", se_share, loose)
    assert (s2["scored"], s2["superseded"], s2["revised"]) == (1, 0, 1)


def test_a_restated_target_year_is_scored_again_and_the_first_score_kept(tmp_path):
    db = tmp_path / "l.sqlite"
    table = _synthetic()
    _, f = _run(db, table, "k1", None)
    later = _next_delivery(table, 1.0, obs=f.upper + 0.1)  # first release: outside the interval
    _run(db, later, "k2", None)
    again = later.copy()
    again.loc[f.target_year, "r"] = f.forecast  # the next assessment restates it onto the forecast
    s3, _ = _run(db, again, "k3", None)
    assert s3["revised"] == 1 and s3["scored"] == 0
    sc = q(db, "SELECT * FROM scores WHERE forecast_id = 1")[0]
    assert (sc["observed"], sc["inside"], sc["run_id"]) == (pytest.approx(f.upper + 0.1), 0, 2)
    re = q(db, "SELECT * FROM rescores WHERE forecast_id = 1")
    assert len(re) == 1 and re[0]["run_id"] == 3 and re[0]["inside"] == 1 and re[0]["error"] == pytest.approx(0)
    s4, _ = _run(db, again.assign(d=again["d"]), "k4", None)  # nothing restated: no new rescore
    assert len(q(db, "SELECT * FROM rescores")) == 1


def test_a_schema_2_ledger_is_upgraded_and_survives_restatements(tmp_path, monkeypatch):
    """A ledger written by the schema-2 code path (the schema-1 file upgraded with the migrations
    of schema 2 only) opens under schema 3, keeps every row, and the next delivery with a 0.5 %
    restatement scores its open forecast."""
    db = tmp_path / "v2.sqlite"
    shutil.copy(OLD_LEDGER, db)
    with monkeypatch.context() as mp:
        mp.setattr(ledger_store, "SCHEMA_VERSION", "2")
        mp.setattr(ledger_store, "MIGRATIONS", {"1": ledger_store.MIGRATIONS["1"]})
        connect(db).close()
    assert q(db, "SELECT value FROM meta")[0]["value"] == "2" and "se" not in _columns(db, "series_years")
    v2 = _rows(db)
    connect(db).close()
    assert q(db, "SELECT value FROM meta")[0]["value"] == "3" and "se" in _columns(db, "series_years")
    v3 = _rows(db)
    assert v3["scores"] == v2["scores"] and v3["grades"] == v2["grades"]
    assert [r[:-1] for r in v3["forecasts"]] == v2["forecasts"]
    open_f = q(db, "SELECT * FROM forecasts WHERE status = 'open'")
    assert len(open_f) == 1 and open_f[0]["target_year"] == 2021 and open_f[0]["settings_sha256"] is None
    table = _synthetic()
    later = table.reindex(list(table.index) + [2020])
    later.loc[2020, ["r", "d"]] = [q(db, "SELECT observed FROM scores")[0]["observed"], 0.0]
    later["r"] *= 1.005
    later = _next_delivery(later, 1.0, obs=1.2)
    s3, _ = _run(db, later, "k3", None)
    assert (s3["scored"], s3["superseded"]) == (1, 0) and s3["revised"] == 31


def test_ledger_tolerance_out_of_range_is_one_line_naming_the_key(tmp_path):
    cfg = yaml.safe_load(demo_config_text("data"))
    cfg["ledger"] = {"restatement_tolerance": {"relative": 1.5}}
    p = tmp_path / "c.yaml"
    p.write_text(yaml.safe_dump(cfg))
    with pytest.raises(InputErrors) as exc:
        load_study(p)
    line = str(exc.value)
    assert "\n" not in line and "ledger.restatement_tolerance.relative" in line and "maximum of 1" in line
    assert tolerance_of(cfg | {"ledger": {}}) == tolerance_of({})  # defaults from the schema
    assert (tolerance_of({}).se, tolerance_of({}).relative) == (0.5, 0.02)


def test_scores_by_grade_are_the_proper_scores_of_the_forecasts_of_each_grade(history):
    """Recompute the by-grade table from the ledger's rows: the Gaussian forecast's sd from the
    interval (scipy.stats.norm.ppf), the CRPS by quadrature of its definition (scipy.integrate),
    the interval score by its formula (Gneiting & Raftery 2007, eq. 43)."""
    from scipy import integrate  # only here: the quadrature reference of this one test
    d = history["d"]
    rows = pd.DataFrame(q(d.db, "SELECT f.grade, f.forecast, f.lower, f.upper, f.level, s.observed, s.error, "
                                "s.inside FROM forecasts f JOIN scores s USING (forecast_id)"))
    assert len(rows) and set(rows["grade"]) - {"strong", "moderate"}, "forecasts of other grades are scored too"
    sd = (rows["upper"] - rows["lower"]) / (2 * stats.norm.ppf(0.9))

    def crps(mu, s, y):
        F = stats.norm(mu, s).cdf
        return (integrate.quad(lambda x: F(x) ** 2, -np.inf, y)[0]
                + integrate.quad(lambda x: (1 - F(x)) ** 2, y, np.inf)[0])

    rows["crps"] = [crps(m, s_, y) for m, s_, y in zip(rows["forecast"], sd, rows["observed"])]
    rows["is"] = (rows["upper"] - rows["lower"]) + 10 * ((rows["lower"] - rows["observed"]).clip(lower=0)
                                                         + (rows["observed"] - rows["upper"]).clip(lower=0))
    rows["group"] = rows["grade"].where(rows["grade"].isin(["strong", "moderate"]), "other grades")
    con = open_readonly(d.db)
    got = scores_by_grade(con, STUDY).set_index("grade")
    con.close()
    for name, g in rows.groupby("group"):
        assert got.loc[name, "scored"] == len(g)
        assert got.loc[name, "mae"] == pytest.approx(g["error"].abs().mean(), rel=1e-12)
        assert got.loc[name, "coverage"] == pytest.approx(g["inside"].mean(), rel=1e-12)
        assert got.loc[name, "crps"] == pytest.approx(g["crps"].mean(), rel=1e-6)
        assert got.loc[name, "interval_score"] == pytest.approx(g["is"].mean(), rel=1e-12)
    html = ledger_section_html(d.db, STUDY, history["r2024"]["evidence"])
    assert "Scores by grade when the forecast was made" in html and "<td>other grades</td>" in html


def test_lagsieve_ledger_with_a_wrong_tolerance_is_one_line_and_exit_2(tmp_path, capsys):
    cfg = yaml.safe_load(demo_config_text("data"))
    cfg["ledger"] = {"restatement_tolerance": {"se": -0.5}}
    p = tmp_path / "config.yaml"
    p.write_text(yaml.safe_dump(cfg))
    assert main(["ledger", str(p), "--out", str(tmp_path / "results")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "ledger.restatement_tolerance.se" in err[0] and "minimum of 0" in err[0]
