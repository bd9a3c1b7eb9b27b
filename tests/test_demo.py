"""The invented demo study (lagsieve.demo): its data, its files, its config text and TRUTH.md.

The data are invented (a fictional stock on a fictional shelf); these tests check that the
generator is deterministic, that the truth it states is the truth it used, and that the
demo files committed in the repository are exactly what the generator writes.
"""
from __future__ import annotations

import subprocess
import sys

import numpy as np
import pandas as pd
import pytest
import yaml
from helpers import REPO
from scipy import stats

from lagsieve.demo import world
from lagsieve.demo.check import annual_as_written, association_check
from lagsieve.demo.texts import DEMO_CONFIG_TEXT, demo_config_text, truth_markdown
from lagsieve.demo.write import DEMO_FILES, write_demo

DEMO_DIR = REPO / "resources" / "demo"


@pytest.fixture(scope="module")
def data():
    return world.simulate_demo()


@pytest.fixture(scope="module")
def written(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    return out, write_demo(out)


# ----------------------------------------------------------------------------- committed files

@pytest.mark.parametrize("name", DEMO_FILES)
def test_committed_demo_files_equal_the_generator(written, name):
    out, _ = written
    assert (DEMO_DIR / name).read_bytes() == (out / name).read_bytes(), (
        f"resources/demo/{name} is stale: run python resources/demo/generate.py")


def test_committed_config_equals_the_generator():
    assert (REPO / "config" / "config.yaml").read_text(encoding="utf-8") == demo_config_text("../resources/demo")


def test_write_demo_paths_and_no_leftovers(written):
    out, paths = written
    assert [p.name for p in paths] == list(DEMO_FILES)
    assert sorted(p.name for p in out.iterdir()) == sorted(DEMO_FILES)  # no temporary files


def test_generate_script(tmp_path):
    script = DEMO_DIR / "generate.py"
    proc = subprocess.run([sys.executable, str(script), str(tmp_path / "x")], check=False, capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.split() == [str(tmp_path / "x" / n) for n in DEMO_FILES]
    for name in DEMO_FILES:
        assert (tmp_path / "x" / name).read_bytes() == (DEMO_DIR / name).read_bytes()
    bad = subprocess.run([sys.executable, str(script), "a", "b"], check=False, capture_output=True, text=True)
    assert bad.returncode == 2 and bad.stderr.startswith("usage:")


# ----------------------------------------------------------------------------- the config text

def test_config_text_data_dir():
    assert DEMO_CONFIG_TEXT == demo_config_text("resources/demo")
    cfg = yaml.safe_load(demo_config_text("a\\b/"))
    assert cfg["inputs"] == [f"a/b/{n}" for n in DEMO_FILES[:4]]
    assert yaml.safe_load(demo_config_text(""))["inputs"][0] == "./mortality_by_age.csv"
    assert demo_config_text("data").endswith("  top: 3                           # hypotheses per response shown in detail\n")


def test_config_agrees_with_the_world():
    cfg = yaml.safe_load(demo_config_text("data"))
    assert cfg["invented"] is True and "invented" in cfg["title"]
    assert cfg["screen"]["seed"] == world.DEFAULT_SEED
    assert [r["id"] for r in cfg["responses"]] == list(world.RESPONSE_IDS) + ["below:old", "kn:old", "kn:young"]
    by_id = {d["id"]: d for d in cfg["drivers"]}
    assert set(by_id) == set(world.DRIVER_IDS)
    for d_id, category, sign, transform, _file, label, unit in world.DRIVERS:
        got = by_id[d_id]
        assert (got["category"], got["expected_sign"], got["transform"], got["label"], got["unit"]) == (
            category, sign, transform, label, unit), d_id
    assert f"(starts {world.CLIMATE_YEARS[0]})" in demo_config_text()
    assert cfg["screen"]["validation"]["holdout_years"] == world.HOLDOUT_YEARS


# ----------------------------------------------------------------------------- the data

def test_deterministic_and_seeded(data):
    again = world.simulate_demo(world.DEFAULT_SEED)
    pd.testing.assert_frame_equal(again.mortality, data.mortality, check_exact=True)
    pd.testing.assert_frame_equal(again.bottom_temperature_monthly, data.bottom_temperature_monthly,
                                  check_exact=True)
    other = world.simulate_demo(7)
    assert not np.array_equal(other.mortality["value"], data.mortality["value"])


def test_streams_are_independent(monkeypatch, data):
    """Changing one component's parameters leaves every other component's draws alone."""
    params = {k: dict(v) for k, v in world.PARAMETERS.items()}
    params["jellyfish"]["rise"] = 0.0
    monkeypatch.setattr(world, "PARAMETERS", params)
    changed = world.simulate_demo()
    assert not np.array_equal(changed.drivers["jellyfish_index"], data.drivers["jellyfish_index"])
    others = [c for c in data.drivers.columns if c != "jellyfish_index"]
    pd.testing.assert_frame_equal(changed.drivers[others], data.drivers[others], check_exact=True)
    pd.testing.assert_frame_equal(changed.mortality, data.mortality, check_exact=True)


def test_written_values_are_the_sum_of_the_parts(data):
    c = data.components
    parts = c["baseline"] + c["trend"] + c["prey"] + c["temperature"] + c["cold_pool"] + c["noise"]
    np.testing.assert_array_equal(np.round(parts.to_numpy(), 4), c["value"].to_numpy())
    np.testing.assert_array_equal(c["value"].to_numpy(), data.mortality["value"].to_numpy())
    assert (data.mortality["value"] > 0).all()
    cv = data.mortality["se"] / data.mortality["value"]
    assert cv.between(0.07 - 1e-3, 0.13 + 1e-3).all()


def test_prey_effect_is_the_stated_hockey_stick(data):
    """prey part = beta * max(0, log 85 - log forage[t-1]) on the written forage values."""
    forage = data.drivers.set_index("year")["forage_biomass"]
    shortfall = np.maximum(0.0, np.log(85.0) - np.log(forage.reindex(world.RESPONSE_YEARS - 1).to_numpy()))
    assert shortfall.max() > 0.3 and (shortfall == 0).sum() > 10  # both arms of the stick occur
    for rid, beta in (("m:age2", 0.0), ("m:age3-4", 0.12), ("m:age5plus", 0.32)):
        prey = data.components.loc[data.components["response"] == rid, "prey"].to_numpy()
        np.testing.assert_allclose(prey, beta * shortfall, rtol=1e-12, atol=0)


def test_cold_pool_effect_switches_off_after_the_regime_shift(data):
    """cold part = delta * (cold pool - its mean over the driver years) up to 2004, exactly 0
    from 2005 on, and 0 in every year for the two younger groups (TRUTH.md's equation)."""
    cold = data.drivers.set_index("year")["cold_pool_extent"]
    dev = cold.reindex(world.RESPONSE_YEARS).to_numpy() - cold.mean()
    before = world.RESPONSE_YEARS <= 2004
    assert before.sum() == 20 and world.PARAMETERS["cold_pool"]["last_year"] == 2004
    for rid, delta in (("m:age2", 0.0), ("m:age3-4", 0.0), ("m:age5plus", 0.013)):
        part = data.components.loc[data.components["response"] == rid, "cold_pool"].to_numpy()
        np.testing.assert_allclose(part, np.where(before, delta * dev, 0.0), rtol=1e-12, atol=0)
    part = data.components.loc[data.components["response"] == "m:age5plus", "cold_pool"].to_numpy()
    assert np.all(part[~before] == 0.0) and part[before].std() > 0.08  # about 4.5 times the noise sd (0.022)


def test_cold_pool_stream_leaves_everything_else_alone(monkeypatch, data):
    """The cold pool was added later from a stream of its own: another draw of it changes the
    cold pool and M of ages 5+ in 1985-2004 only (every other driver, every other group and the
    later years of ages 5+ are as they were)."""
    params = {k: dict(v) for k, v in world.PARAMETERS.items()}
    params["cold_pool"]["innov_sd"] = 4.0
    monkeypatch.setattr(world, "PARAMETERS", params)
    changed = world.simulate_demo()
    others = [c for c in data.drivers.columns if c != "cold_pool_extent"]
    pd.testing.assert_frame_equal(changed.drivers[others], data.drivers[others], check_exact=True)
    assert not np.array_equal(changed.drivers["cold_pool_extent"], data.drivers["cold_pool_extent"])
    old, new = (d.mortality.set_index(["group", "year"])["value"] for d in (data, changed))
    moved = old.index[old.to_numpy() != new.to_numpy()]
    assert set(moved.get_level_values("group")) == {"age5plus"}
    assert moved.get_level_values("year").max() <= 2004 and len(moved) >= 15


def test_late_collapse_reaches_the_retest_years(data):
    """The late forage collapse lies in the forage years the re-test reads at lag 1 (the last
    HOLDOUT_YEARS response years, one year earlier), so there the prey effect is planted: forage
    below the 85 kt threshold and a positive prey part of M for ages 3-4 and 5+ (TRUTH.md)."""
    last = int(world.RESPONSE_YEARS[-1])
    retest = np.arange(last - world.HOLDOUT_YEARS + 1, last + 1)
    forage = data.drivers.set_index("year")["forage_biomass"]
    start, stop = world.LATE_DIP_WINDOW
    y0 = data.parameters["derived"]["forage_dips"][-1][0]
    assert start <= y0 <= stop and retest[0] - 1 <= y0 <= retest[-1] - 1
    assert forage.loc[y0] < 85.0 and forage.loc[y0] == forage.loc[retest - 1].min()
    for rid in ("m:age3-4", "m:age5plus"):  # forage fell to 44.8 kt in 2020: a shortfall of 0.64 log units
        prey = data.components.set_index(["response", "year"]).loc[rid, "prey"]
        assert prey.loc[retest].max() > 0.5 * world.PARAMETERS[rid]["prey_beta"] > 0


def test_late_collapse_stream_leaves_everything_else_alone(monkeypatch, data):
    """The late collapse came last, from a stream of its own: moving its window changes the forage
    index only from the window's first year on, M only from the year after (lag 1) and only for
    the two older groups, and no driver but forage and the shrimp index that echoes it."""
    monkeypatch.setattr(world, "LATE_DIP_WINDOW", (2022, 2023))
    changed = world.simulate_demo()
    old, new = data.drivers.set_index("year"), changed.drivers.set_index("year")
    moved = old.index[old["forage_biomass"] != new["forage_biomass"]]
    assert len(moved) >= 2 and moved.min() >= 2020
    others = [c for c in old.columns if c not in ("forage_biomass", "shrimp_index")]
    pd.testing.assert_frame_equal(new[others], old[others], check_exact=True)
    old_m, new_m = (d.mortality.set_index(["group", "year"])["value"] for d in (data, changed))
    moved_m = old_m.index[old_m.to_numpy() != new_m.to_numpy()]
    assert set(moved_m.get_level_values("group")) == {"age3-4", "age5plus"}
    assert moved_m.get_level_values("year").min() >= 2021


def test_truth_table(data):
    tt = data.truth
    effects = tt[tt["true_effect"]]
    assert sorted(zip(effects["driver"], effects["response"], effects["lag"])) == [
        ("bottom_temp", "m:age2", 0), ("cold_pool_extent", "m:age5plus", 0), ("forage_biomass", "m:age3-4", 1),
        ("forage_biomass", "m:age5plus", 1)]
    assert effects.set_index("driver").loc["cold_pool_extent", "shape"] == "linear up to 2004, none after"
    assert len(tt) == len(world.RESPONSE_IDS) * len(world.DRIVER_IDS)


def test_gaps_and_missing_months(data):
    s = data.surveys_annual.set_index("year")
    assert s["shrimp_index"].isna().sum() == 2 and s.loc[[1991, 2009], "shrimp_index"].isna().all()
    assert s["jellyfish_index"].isna().sum() == 1 and np.isnan(s.loc[1996, "jellyfish_index"])
    m = data.bottom_temperature_monthly
    assert len(m) == 12 * world.DRIVER_YEARS.size - 2
    assert not ((m["year"] == 1993) & (m["month"] == 4)).any()


# ----------------------------------------------------------------------------- check and TRUTH.md

def test_association_check_against_scipy(data):
    """Detrended r recomputed independently: scipy.stats.pearsonr of the residuals of
    np.polyfit(deg=1) fits (reference: SciPy and NumPy)."""
    chk = association_check(data).set_index(["response", "driver"])
    table = annual_as_written(data)
    y_all = data.mortality[data.mortality["group"] == "age5plus"].set_index("year")["value"]
    row = chk.loc[("m:age5plus", "forage_biomass")]
    # -0.80 before the cold pool's effect (1985-2004) entered M of ages 5+; -0.53 with it; -0.54
    # with the late forage collapse (2020-2021)
    assert row["detrended_lag"] == 1 and row["detrended_r"] < -0.5
    x = table["forage_biomass"].reindex(y_all.index - 1).to_numpy()
    ok = np.isfinite(x)
    t, y, x = y_all.index.to_numpy()[ok].astype(float), y_all.to_numpy()[ok], x[ok]
    ry = y - np.polyval(np.polyfit(t, y, 1), t)
    rx = x - np.polyval(np.polyfit(t, x, 1), t)
    assert row["detrended_r"] == pytest.approx(stats.pearsonr(ry, rx)[0], rel=1e-10)
    assert row["naive_r"] == pytest.approx(stats.pearsonr(y, x)[0], rel=1e-10)
    # the trend-only decoy: large naive r, small detrended r
    jelly = chk.loc[("m:age3-4", "jellyfish_index")]
    assert jelly["naive_r"] > 0.6 and abs(jelly["detrended_r"]) < 0.3


def test_truth_markdown_states_the_truth(data):
    text = truth_markdown(data)
    assert "**All data in this folder are INVENTED.**" in text
    assert f"default_rng({data.seed})" in text
    assert "| `forage_biomass` | prey | none | **threshold (hockey stick), lag 1** | " \
           "**threshold (hockey stick), lag 1** | true effect (older ages) |" in text
    chk = association_check(data).set_index(["response", "driver"])
    r = chk.loc[("m:age2", "bottom_temp")]
    assert f"| `bottom_temp` | {r['naive_r']:+.2f} ({int(r['naive_lag'])}) |" in text
    assert r["detrended_r"] > 0.8 and f"{r['detrended_r']:+.2f} (0)" in text
    der = data.parameters["derived"]
    assert f"mean(spring_temp) = {der['spring_temperature_mean']:.4f} deg C" in text
    assert "it should rank below `forage_biomass`.\n" in text and "for `kn:young` (ages 1-2), no driver." in text
    # the switch and what the joint screen should say
    assert "* [t <= 2004]" in text and "| `m:age5plus` | 0.24 | +0.20 | 0.32 | 0.000 | 0.013 |" in text
    assert "break year within a few years of 2005" in text
    assert "one late collapse at a random year of 2020-2022" in text and "2020 (depth 1.21, 2 yr)." in text
    assert "built to show the tool's verdicts" in text
    older = chk.xs("m:age5plus", level="response").loc[["jellyfish_index", "zooplankton_index", "pinniped_abundance",
                                                         "fishing_mortality", "shelf_climate_index"], "detrended_r"]
    assert f"is now {older.loc[older.abs().idxmax()]:+.2f}, `{older.abs().idxmax()}`" in text
    assert '`forage_biomass` as "stronger in older fish"' in text and '`bottom_temp` as "age2 only"' in text
