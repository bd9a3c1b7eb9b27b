"""The response as an estimate: draws (Rubin's rules, per-draw statistics, grades per draw)
and vintages (Mohn's rho, real-time forecasts), and their input tables."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
import yaml
from scipy import stats as sps
from statsmodels.imputation.mice import MICE

from lagsieve.errors import InputErrors
from lagsieve.evidence.draws import FRAGILE_SHARE, add_draws, draw_qvalues
from lagsieve.io.estimates import read_draws, read_vintages, wide
from lagsieve.stats.backtest import rolling_origin
from lagsieve.stats.draws import best_lag_stats, draw_skills, draw_slopes, pick_draws, rubin
from lagsieve.stats.retro import first_release, mohn_rho, realtime_forecasts


# ----------------------------------------------------------------------------- Rubin's rules
def test_rubin_by_hand():
    """Rubin (1987): Q = mean, W = mean U, B = var(Q) (divisor m - 1), T = W + (1 + 1/m) B;
    computed by hand for three draws."""
    p = rubin(np.array([1.0, 2.0, 4.0]), np.array([0.5, 0.25, 0.25]))
    # mean 7/3; W = 1/3; B = ((4/3)^2 + (1/3)^2 + (5/3)^2) / 2 = 42/18 = 7/3; T = 1/3 + 4/3 * 7/3 = 31/9
    assert p.estimate == pytest.approx(7 / 3)
    assert p.within == pytest.approx(1 / 3)
    assert p.between == pytest.approx(7 / 3)
    assert p.se == pytest.approx(np.sqrt(31 / 9))
    assert p.between_share == pytest.approx((4 / 3 * 7 / 3) / (31 / 9))


def test_rubin_equals_statsmodels_mice_combine():
    """statsmodels' MICE.combine pools OLS fits of imputed data sets by the same rules: the slope,
    its standard error and the fraction of missing information agree."""
    rng = np.random.default_rng(3)
    x = rng.normal(size=30)
    fits = [sm.OLS(0.5 * x + rng.normal(size=30), sm.add_constant(x)).fit() for _ in range(7)]
    mice = object.__new__(MICE)  # only the combining code is used: its inputs set by hand
    mice.results_list, mice.exog_names, mice.endog_names, mice.model_class = fits, ["c", "x"], "y", sm.OLS
    ref = MICE.combine(mice)
    p = rubin(np.array([f.params[1] for f in fits]), np.array([f.bse[1] ** 2 for f in fits]))
    assert p.estimate == pytest.approx(ref.params[1], rel=1e-12)
    assert p.se == pytest.approx(ref.bse[1], rel=1e-12)
    assert p.between_share == pytest.approx(ref.frac_miss_info[1], rel=1e-12)


def test_rubin_leaves_out_missing_draws_and_needs_two():
    p = rubin(np.array([1.0, np.nan, 3.0]), np.array([1.0, 1.0, 1.0]))
    assert p.m == 2 and p.estimate == pytest.approx(2.0)
    assert np.isnan(rubin(np.array([1.0]), np.array([1.0])).se)


# ----------------------------------------------------------------------------- per-draw statistics
def test_per_draw_slopes_equal_a_loop_of_statsmodels_ols_hac():
    """draw_slopes in one call equals statsmodels OLS with Newey-West errors fitted draw by draw."""
    rng = np.random.default_rng(5)
    x = rng.normal(size=28)
    Y = 0.3 * x + rng.normal(size=(6, 28))
    slope, se = draw_slopes(x, Y)
    L = int(np.floor(4 * (28 / 100) ** (2 / 9)))  # Newey-West lag rule as hac_slope uses it
    for d in range(6):
        ref = sm.OLS(Y[d], sm.add_constant(x)).fit(cov_type="HAC", cov_kwds={"maxlags": L, "use_correction": False})
        assert slope[d] == pytest.approx(ref.params[1], rel=1e-10)
        assert se[d] == pytest.approx(ref.bse[1], rel=1e-10)


def test_best_lag_statistic_equals_a_loop_of_ols_fits():
    """r at every lag = sign(OLS slope) sqrt(R^2) of statsmodels OLS on the complete years; the
    best lag's directed statistic is their maximum (negative expected sign: -r)."""
    rng = np.random.default_rng(7)
    T, lags = 30, [0, 1, 2]
    x = rng.normal(size=T)
    x[4] = np.nan
    Y = rng.normal(size=(4, T))
    x_lags = np.stack([np.r_[np.full(k, np.nan), x[:T - k]] for k in lags])
    r, best = best_lag_stats(x_lags, Y, "negative")
    for d in range(4):
        for li, k in enumerate(lags):
            ok = ~np.isnan(x_lags[li])
            fit = sm.OLS(Y[d, ok], sm.add_constant(x_lags[li, ok])).fit()
            assert r[d, li] == pytest.approx(np.sign(fit.params[1]) * np.sqrt(fit.rsquared), rel=1e-10)
        assert best[d] == pytest.approx(np.max(-r[d]))


def _draw_world(D=12, T=34, seed=3):
    """Draws of a trending response that follows a driver at lag 1 (invented, for the checks)."""
    rng = np.random.default_rng(seed)
    lags = np.array([0, 1, 2])
    x = np.cumsum(rng.normal(size=T + 2)) * 0.3 + rng.normal(size=T + 2)
    X = np.stack([x[2 - k: 2 - k + T] for k in lags])  # (L, T): row t holds x_{t - lag}
    mean = 0.6 * X[1] + np.linspace(0.0, 2.0, T + 1)[1:] + rng.normal(size=T)
    Yall = np.concatenate([rng.normal(size=(D, 1)), mean[None, :] + 0.4 * rng.normal(size=(D, T))], 1)
    return Yall[:, 1:], Yall[:, :-1], np.arange(T) + 1990.0, X, lags


@pytest.mark.parametrize("models", [("linear",), ("linear", "gam")])
def test_draw_skills_in_one_batch_equal_the_rolling_origin_draw_by_draw(models):
    """The batched rolling origin of all draws gives the skills of rolling_origin run on each
    draw alone (whose linear windows tests/test_backtest.py checks against statsmodels and
    scikit-learn), the spline's GCV choices included."""
    Y, Ylag, year, X, lags = _draw_world()
    got = draw_skills(Y, Ylag, year, X, lags, 15, models)
    for d in range(len(Y)):
        ro = rolling_origin(Y[d], Ylag[d], year, X[None], lags, 15, models=models)
        for b, s in ro.skill.items():
            assert got[b][d] == pytest.approx(float(s[0]), rel=1e-9, abs=1e-12)


def test_draw_qvalues_equal_statsmodels_fdr_bh_draw_by_draw():
    """Each draw's q-value of one hypothesis, the study's other p-values fixed (NaN among them
    left out), equals statsmodels' multipletests(method="fdr_bh") on that draw's p-values."""
    from statsmodels.stats.multitest import multipletests

    rng = np.random.default_rng(2)
    study_p = rng.uniform(0, 0.3, size=12)
    study_p[[2, 7]] = np.nan
    p_draws = np.r_[rng.uniform(0, 0.2, size=5), np.nan, study_p[4]]  # a tie with another p too
    q = draw_qvalues(study_p, 4, p_draws)
    assert np.isnan(q[5])
    for d in (0, 1, 2, 3, 4, 6):
        p = study_p.copy()
        p[4] = p_draws[d]
        ok = ~np.isnan(p)
        assert q[d] == pytest.approx(multipletests(p[ok], method="fdr_bh")[1][np.sum(ok[:4])], rel=1e-12)


def test_draws_are_chosen_from_the_seed():
    labels = np.arange(1, 501)
    a = pick_draws(labels, 100, 7, "m:age2")
    assert len(a) == 100 and np.array_equal(a, pick_draws(labels[::-1], 100, 7, "m:age2"))
    assert not np.array_equal(a, pick_draws(labels, 100, 8, "m:age2"))
    assert np.array_equal(pick_draws(labels[:50], 100, 7, "m:age2"), labels[:50])


# ----------------------------------------------------------------------------- grades draw by draw
def _study_frames(noise: float, seed: int = 11, models=("linear",)):
    """A response driven by a driver (slope 1 on standardised values, 40 years) and draws of it
    with a given spread; the hypothesis row and nulls as the screen writes them."""
    from lagsieve.screen.hypothesis import screen_hypothesis

    rng = np.random.default_rng(seed)
    years = np.arange(1980, 2020)
    x = rng.normal(size=40)
    y = 0.8 * x + 0.5 * rng.normal(size=40)
    table = pd.DataFrame({"m": y, "d": x}, index=pd.Index(years, name="year"))
    screen = {"models": list(models), "surrogates": 199, "gam_trend": True, "surrogate_method": "phase", "seed": 1,
              "lags": [0, 1], "alpha": 0.05, "fdr": 0.10, "min_overlap": 15, "validation": {}}
    _, hyp, _, nulls = screen_hypothesis(table, {"id": "m"}, {"id": "d", "expected_sign": "positive"}, [0, 1],
                                         screen)
    from lagsieve.evidence.grading import grade_hypotheses

    ev = grade_hypotheses(pd.DataFrame([hyp]), table, screen)
    Y = y[None, :] + noise * rng.normal(size=(30, 40))
    return ev, table, Y, nulls, screen


def test_a_grade_that_holds_in_every_draw_is_not_fragile():
    ev, table, Y, nulls, screen = _study_frames(noise=0.01)
    assert ev["grade"].iloc[0] == "strong"
    out = add_draws(ev, table, {"m": Y}, nulls, {"d": [0, 1]}, screen)
    row = out.iloc[0]
    assert row["draw_n"] == 30 and row["draw_grade_share"] == 1.0 and row["draw_fragile"] is False
    # Rubin's slope: draws barely differ, so the pooled slope is the response's HAC slope
    assert row["draw_slope"] == pytest.approx(ev["slope"].iloc[0], rel=0.02)
    assert row["draw_between_share"] < 0.05


def test_draws_are_judged_against_their_own_response_null_only():
    """The evidence job reads the nulls of every response: a null of another response with the
    same driver (here one that would make every draw insignificant) changes nothing."""
    ev, table, Y, nulls, screen = _study_frames(noise=0.3)
    other = nulls.assign(response="other", value=nulls["value"] + 100.0)
    alone = add_draws(ev, table, {"m": Y}, nulls, {"d": [0, 1]}, screen)
    mixed = add_draws(ev, table, {"m": Y}, pd.concat([other, nulls], ignore_index=True), {"d": [0, 1]}, screen)
    assert alone["draw_grade_share"].iloc[0] > 0
    assert mixed["draw_grade_share"].iloc[0] == alone["draw_grade_share"].iloc[0]


def test_a_grade_that_depends_on_the_draw_is_fragile():
    ev, table, Y, nulls, screen = _study_frames(noise=1.5)
    out = add_draws(ev, table, {"m": Y}, nulls, {"d": [0, 1]}, screen)
    row = out.iloc[0]
    assert row["draw_grade_share"] < FRAGILE_SHARE and row["draw_fragile"] is True
    assert row["draw_between_share"] > 0.3  # the draws disagree: most of Rubin's variance is between


# ----------------------------------------------------------------------------- Mohn's rho
def _vintages() -> tuple[pd.DataFrame, pd.Series]:
    latest = pd.Series([1.0, 2.0, 4.0, 5.0, 8.0], index=range(2000, 2005))
    frame = pd.DataFrame({"vintage": [2002] * 2 + [2003] * 3 + [2004] * 4,
                          "year": [2000, 2001, 2000, 2001, 2002, 2000, 2001, 2002, 2003],
                          "value": [1.0, 2.2, 1.0, 2.0, 4.4, 1.0, 2.0, 4.0, 4.0]})
    return wide(frame, "vintage"), latest


def test_mohn_rho_by_hand():
    """Mohn (1999): mean over peels of (X_peel(T) - X_latest(T)) / X_latest(T); by hand the peels
    end 2001 (2.2 vs 2: +0.1), 2002 (4.4 vs 4: +0.1) and 2003 (4 vs 5: -0.2): rho = 0."""
    w, latest = _vintages()
    m = mohn_rho(w, latest)
    assert m.n_peels == 3
    assert m.peels["relative"].tolist() == pytest.approx([0.1, 0.1, -0.2])
    assert m.rho == pytest.approx(0.0, abs=1e-15)
    assert mohn_rho(w, latest, peels=2).rho == pytest.approx(-0.05)  # the last two peels only


def test_first_release_is_the_oldest_vintage_holding_the_year():
    w, latest = _vintages()
    assert first_release(w, latest).tolist() == [1.0, 2.2, 4.4, 4.0, 8.0]


def test_realtime_forecasts_equal_a_hand_built_loop():
    """At each target year t: OLS on the vintage ending t - 1 of y on [1, year, x_t-1] (candidate
    trend + driver) and [1, year] (baseline), scored against the first published value of t."""
    rng = np.random.default_rng(2)
    years = np.arange(1990, 2016)
    x = pd.Series(rng.normal(size=26), index=years)
    truth = 0.05 * (years - 1990) + 0.5 * x.shift(1).fillna(0).to_numpy() + 0.2 * rng.normal(size=26)
    rows = []
    for v in range(2010, 2016):  # assessment v publishes up to v - 1, restating by 2% a year of age
        for yr in range(1990, v):
            rows.append({"vintage": v, "year": yr, "value": truth[yr - 1990] * (1 + 0.02 * (v - 2010))})
    w = wide(pd.DataFrame(rows), "vintage")
    latest = pd.Series(truth * 1.12, index=years)
    rt = realtime_forecasts(w, latest, x, 1, candidate="trend", baseline="trend")
    assert rt.table["year"].tolist() == list(range(2010, 2016))
    se_c, se_b = [], []
    for t in range(2010, 2016):
        s = w[t].dropna()  # vintage t ends at t - 1
        yrs = np.array([yr for yr in s.index if yr - 1 >= 1990 and yr - 1 in s.index])
        X = sm.add_constant(np.column_stack([yrs, x.reindex(yrs - 1).to_numpy()]))
        fit_c = sm.OLS(s.loc[yrs].to_numpy(), X).fit()
        fit_b = sm.OLS(s.loc[yrs].to_numpy(), sm.add_constant(yrs.astype(float))).fit()
        first = w.loc[t].dropna().iloc[0] if t in w.index else latest[t]  # the oldest vintage holding t
        se_c.append((first - fit_c.predict([[1.0, t, x[t - 1]]])[0]) ** 2)
        se_b.append((first - fit_b.predict([[1.0, t]])[0]) ** 2)
    assert ((rt.table["first_value"] - rt.table["forecast"]) ** 2).tolist() == pytest.approx(se_c, rel=1e-8)
    assert rt.skill == pytest.approx(1 - np.mean(se_c) / np.mean(se_b), rel=1e-8)


# ----------------------------------------------------------------------------- input tables
def _problems(reader, tmp_path, name: str, text: str, **kw) -> list[str]:
    """The lines of the problems ``reader`` raises for a file ``name`` holding ``text``."""
    (tmp_path / name).write_text(text)
    with pytest.raises(InputErrors) as e:
        reader(name, tmp_path, "m:age2", **kw)
    return [p.line() for p in e.value.problems]


def test_draws_table_is_read_and_checked(tmp_path):
    (tmp_path / "d.csv").write_text("draw,year,value\n1,2000,0.2\n1,2001,0.3\n2,2000,0.25\n2,2001,0.31\n")
    d = read_draws("d.csv", tmp_path, "m:age2")
    assert d.shape == (4, 3) and d["draw"].tolist() == [1, 1, 2, 2]
    (line,) = _problems(read_draws, tmp_path, "gap.csv", "draw,year,value\n1,2000,0.2\n1,2001,0.3\n2,2000,0.25\n")
    assert "draw 2 has no value for year 2001" in line and "gap.csv" in line
    (line,) = _problems(read_draws, tmp_path, "frac.csv", "draw,year,value\n1.5,2000,0.2\n2,2000,0.3\n")
    assert "frac.csv:2" in line and "not a whole number" in line
    lines = _problems(read_draws, tmp_path, "d2.csv", (tmp_path / "d.csv").read_text(), years=[2000, 2001, 2002])
    assert "for year 2002" in lines[0]  # a year of the response that the draws lack


def test_vintages_table_is_checked(tmp_path):
    (line,) = _problems(read_vintages, tmp_path, "v.csv", "vintage,year,value\n2003,2002,0.2\n2003,2004,0.3\n")
    assert "v.csv:3" in line and "vintage 2003 holds year 2004" in line
    (line,) = _problems(read_vintages, tmp_path, "new.csv", "vintage,year,value\n2031,2002,0.2\n", last_year=2024)
    assert "newer than the response's data" in line
    (line,) = _problems(read_vintages, tmp_path, "nocol.csv", "year,value\n2002,0.2\n")
    assert "no vintage column" in line


def test_pearson_reference_for_best_lag():
    """One more outside check of the batched r: scipy.stats.pearsonr on a single draw."""
    rng = np.random.default_rng(9)
    x, y = rng.normal(size=20), rng.normal(size=20)
    r, _ = best_lag_stats(x[None, :], y[None, :], "any")
    assert r[0, 0] == pytest.approx(sps.pearsonr(x, y)[0], rel=1e-12)


def test_draws_equal_to_the_response_reproduce_its_grade_with_the_spline():
    """Every draw equal to the response: the grade holds in all of them (the per-draw rules,
    the spline's held p and its min-p price included, give back the screen's grade), and Rubin's
    slope is the response's slope with no between-draw variance (common practice: a draw
    procedure must return the point estimate when the draws do not differ)."""
    ev, table, Y, nulls, screen = _study_frames(noise=0.0, seed=4, models=["linear", "gam"])
    out = add_draws(ev, table, {"m": Y[:3]}, nulls, {"d": [0, 1]}, screen)
    row = out.iloc[0]
    assert row["draw_grade_share"] == 1.0
    assert row["draw_slope"] == pytest.approx(ev["slope"].iloc[0], rel=1e-12)
    assert row["draw_slope_se"] == pytest.approx(ev["slope_se"].iloc[0], rel=1e-12)
    assert row["draw_between_share"] == pytest.approx(0.0, abs=1e-12)


def test_check_refuses_a_bad_draws_table_with_one_line(new_study):
    """`lagsieve check` on a draws table without a year of the response: one line, status 2."""
    from helpers import lagsieve

    data = new_study.parent / "data"
    (data / "draws.csv").write_text("draw,year,value\n1,1985,0.3\n2,1985,0.31\n")
    text = new_study.read_text().replace('  - id: "m:age2"', '  - id: "m:age2"\n    draws: data/draws.csv', 1)
    new_study.write_text(text)
    proc = lagsieve("check", new_study)
    assert proc.returncode == 2
    (line,) = [ln for ln in proc.stderr.splitlines() if "draws.csv" in ln]
    assert "draw 1 has no value for year 1986" in line and "m:age2" in line


def test_report_block_names_the_fragile_hypotheses():
    """The block's data: fragile hypotheses first and named; Mohn's rho as a percentage."""
    from lagsieve.report.estimates import section

    ev = pd.DataFrame({"response": ["m", "m", "k"], "driver": ["a", "b", "a"], "grade": ["weak", "strong", "none"],
                       "draw_n": [50, 50, np.nan], "draw_grade_share": [0.4, 1.0, np.nan],
                       "draw_fragile": [True, False, np.nan], "draw_slope": [0.1, 0.2, np.nan],
                       "draw_slope_se": [0.05, 0.05, np.nan], "draw_between_share": [0.3, 0.1, np.nan],
                       "mohn_rho": [0.061, 0.061, np.nan], "mohn_peels": [3, 3, np.nan],
                       "rt_mode": ["latest vintage", "latest vintage", np.nan], "rt_skill": [np.nan] * 3,
                       "rt_n": [np.nan] * 3, "oos_skill": [0.1, 0.5, 0.0]})
    s = section(ev, str)
    assert [r["driver"] for r in s["fragile"]] == ["a"] and s["draws"][0]["share"] == "40%"
    (v,) = s["vintages"]
    assert v["rho"] == "+6.1%" and v["peels"] == "3" and v["realtime"] == []
    assert section(ev.drop(columns=["draw_n", "mohn_peels"]), str) is None


def test_draw_and_vintage_keys_rerun_the_evidence_not_the_screens(new_study):
    """The screen's settings digest leaves out what only the evidence stage reads (a response's
    draws and vintages, screen.draws, screen.real_time); the evidence digest keeps them."""
    from lagsieve.io.config import load_study
    from lagsieve.stages.digest import settings_digest

    def digests():
        st = load_study(new_study)
        return settings_digest(st, "screen", "m:age3-4"), settings_digest(st, "evidence")

    screen0, evidence0 = digests()
    cfg = yaml.safe_load(new_study.read_text())
    next(r for r in cfg["responses"] if r["id"] == "m:age3-4")["vintages"] = "data/v.csv"
    cfg["screen"]["draws"] = 40
    cfg["screen"]["real_time"] = not cfg["screen"].get("real_time", False)
    new_study.write_text(yaml.safe_dump(cfg, sort_keys=False))
    assert load_study(new_study).screen["draws"] == 40
    screen1, evidence1 = digests()
    assert screen1 == screen0 and evidence1 != evidence0


def test_demo_judges_draws_and_vintages(demo_run):
    """The demo end to end: every hypothesis of m:age5plus judged on its 100 draws, Mohn's
    rho of its three vintages as the formula gives it on the demo's files (TRUTH.md: +0.063), the
    real-time mode said; the other responses without them; the report's block."""
    cfg, results = demo_run
    ev = pd.read_csv(results / "evidence.csv")
    mine = ev[ev["response"] == "m:age5plus"]
    assert (mine["draw_n"] == 100).all() and mine["draw_grade_share"].between(0, 1).all()
    assert ev.loc[ev["response"] != "m:age5plus", ["draw_n", "mohn_rho"]].isna().all().all()
    data = cfg.parent / "data"
    v = wide(pd.read_csv(data / "m_age5plus_vintages.csv"), "vintage")
    m = pd.read_csv(data / "mortality_by_age.csv").query("group == 'age5plus'")
    rho = mohn_rho(v, pd.Series(m["value"].to_numpy(), index=m["year"].to_numpy())).rho
    assert mine["mohn_rho"].to_numpy() == pytest.approx(rho) and 0.05 < rho < 0.08
    assert (mine["rt_mode"] == "latest vintage; real time beside").all() and (mine["rt_n"] == 3).all()
    html = (results / "report.html").read_text()
    assert 'id="estimates"' in html and "Mohn's rho +6.3%" in html
