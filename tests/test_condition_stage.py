"""The condition stage wired into the tool (issue 18): `lagsieve check` on a `condition:`
section, the stage's files, its series entering the annual table with their se, and the demo's
planted effect recovered through the screen (slow)."""
from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import yaml

from helpers import lagsieve, write_config
from lagsieve import pipeline
from lagsieve.condition.series import OUTPUT_COLUMNS
from lagsieve.demo.fish import PREY_BETA


def _edit(cfg, **condition):
    raw = yaml.safe_load(cfg.read_text(encoding="utf-8"))
    raw["condition"].update(condition)
    return write_config(cfg, raw)


def _files(folder):
    return sorted((p.relative_to(folder), p.stat().st_mtime_ns) for p in folder.rglob("*"))


def test_check_reports_every_condition_problem_once_exit_2_nothing_written(new_study):
    fish = new_study.parent / "data" / "fish_samples.csv"
    lines = fish.read_text(encoding="utf-8").splitlines()
    lines[4] = "1990,13," + lines[4].split(",", 2)[2]  # month 13 on row 5
    fish.write_text("\n".join(lines) + "\n", encoding="utf-8")
    _edit(new_study, threshold=3, age_groups={"young": [1, 2], "old": [2, 99]})
    before = _files(new_study.parent)
    proc = lagsieve("check", new_study)
    assert proc.returncode == 2
    problems = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert any("condition.threshold" in ln for ln in problems), proc.stderr
    assert any("condition.age_groups.old" in ln for ln in problems), proc.stderr
    assert len(problems) == 2, proc.stderr  # the config's two problems; the samples wait for a valid section
    assert _files(new_study.parent) == before


def test_check_reports_sample_problems_with_file_row_and_column(new_study):
    fish = new_study.parent / "data" / "fish_samples.csv"
    lines = fish.read_text(encoding="utf-8").splitlines()
    lines[4] = "1990,13," + lines[4].split(",", 2)[2]
    fish.write_text("\n".join(lines) + "\n", encoding="utf-8")
    proc = lagsieve("check", new_study)
    assert proc.returncode == 2
    problems = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert len(problems) == 1 and "fish_samples.csv" in problems[0] and "5" in problems[0], proc.stderr


def test_a_misspelt_condition_series_is_refused_with_the_nearest_id(new_study):
    raw = yaml.safe_load(new_study.read_text(encoding="utf-8"))
    raw["responses"][3]["id"] = "below:olde"
    write_config(new_study, raw)
    proc = lagsieve("check", new_study)
    assert proc.returncode == 2
    problems = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert len(problems) == 1 and "below:olde" in problems[0] and "below:old" in problems[0], proc.stderr


def test_condition_stage_writes_its_table_and_the_series_enter_the_annual_table(new_study, tmp_path):
    out = [tmp_path / "condition.csv", tmp_path / "condition_sensitivity.csv", tmp_path / "fish.csv",
           tmp_path / "fit.json"]
    pipeline.run_condition(new_study, *out)
    table = pd.read_csv(out[0])
    assert list(table.columns) == OUTPUT_COLUMNS
    assert {"below:old", "kn:young", "kn:old-spring", "below:mid-winter"} <= set(table["series"])
    sens = pd.read_csv(out[1])
    assert sorted(sens["threshold"].unique()) == [0.75, 0.8, 0.85, 0.9, 0.95]  # the schema's default grid
    _, annual, _, _ = pipeline.check_study(new_study, out[0])
    got = annual[annual["series"] == "below:old"].set_index("year").sort_index()
    want = table[table["series"] == "below:old"].set_index("year").sort_index()
    assert np.allclose(got["value"], want["value"]) and np.allclose(got["se"], want["se"])
    assert (got["se"] > 0).all()
    # the haul effect: Kish's design effect of the old fish's annual index is well above 1
    assert table[table["series"] == "kn:old"]["design_effect"].median() > 1.5


def test_align_takes_the_samples_warnings_from_the_condition_stage_without_reading_the_samples(new_study, tmp_path,
                                                                                               monkeypatch):
    # two warnings of the samples (a fish without a weight, a column not used): align's notes.csv
    # holds them as before, when the samples were read again by the input check
    fish = new_study.parent / "data" / "fish_samples.csv"
    lines = fish.read_text(encoding="utf-8").splitlines()
    lines = [lines[0] + ",observer"] + [ln + ",x" for ln in lines[1:]]
    lines[7] = ",".join(lines[7].split(",")[:4] + ["", *lines[7].split(",")[5:]])  # no weight on row 8
    fish.write_text("\n".join(lines) + "\n", encoding="utf-8")
    d = tmp_path / "res"
    (d / "work").mkdir(parents=True)
    pipeline.run_condition(new_study, d / "condition.csv", d / "condition_sensitivity.csv",
                           d / "work" / "condition_fish.csv", d / "work" / "condition_fit.json")
    from lagsieve.stages import check
    with monkeypatch.context() as m:  # the samples are not read again
        m.setattr(check, "read_samples", lambda *a, **k: pytest.fail("samples read again"))
        pipeline.run_align(new_study, d / "annual.csv", d / "notes.csv", condition=[d / "condition.csv"])
    record = d / "work" / "condition_fit.json"
    fit = json.loads(record.read_text(encoding="utf-8"))
    del fit["sample_warnings"]  # a record of an earlier version: the samples are read again
    record.write_text(json.dumps(fit), encoding="utf-8")
    pipeline.run_align(new_study, d / "annual2.csv", d / "notes2.csv", condition=[d / "condition.csv"])
    assert (d / "notes.csv").read_bytes() == (d / "notes2.csv").read_bytes()
    assert (d / "annual.csv").read_bytes() == (d / "annual2.csv").read_bytes()
    notes = pd.read_csv(d / "notes.csv")
    reasons = notes.loc[notes["action"] == "warning", "reason"].tolist()
    assert sum("without a weight" in r for r in reasons) == 1 and sum("not used" in r for r in reasons) == 1, reasons


def test_plan_knows_which_responses_read_the_condition_table(new_study):
    planned = pipeline.plan_studies({"studies": [str(new_study)]})["caldrin_shelf_demo"]
    assert planned.condition_responses == {"below--old", "kn--old", "kn--young"}
    assert [p.endswith("fish_samples.csv") for p in planned.sample_paths] == [True]


def test_a_study_without_condition_plans_as_before(new_study):
    raw = yaml.safe_load(new_study.read_text(encoding="utf-8"))
    del raw["condition"]
    raw["responses"] = [r for r in raw["responses"] if not r["id"].startswith(("below:", "kn:"))]
    for d in raw["drivers"]:
        d.pop("expected_sign_by_response", None)
    write_config(new_study, raw)
    planned = pipeline.plan_studies({"studies": [str(new_study)]})["caldrin_shelf_demo"]
    assert planned.condition is None and not planned.condition_responses and not planned.sample_paths


@pytest.mark.slow
def test_demo_condition_recovers_the_planted_prey_effect(demo_run):
    """TRUTH.md: the share of old fish in poor condition and their relative condition follow
    forage biomass one year earlier (the share falls, Kn rises with more prey: the config states
    the sign per response); the youngest group's condition follows nothing."""
    assert PREY_BETA["old"] > 0 and PREY_BETA["young"] == 0
    _, res = demo_run
    ev = pd.read_csv(res / "evidence.csv").set_index(["response", "driver"])
    old = ev.loc[("below:old", "forage_biomass")]
    assert old["grade"] in ("strong", "moderate") and int(old["lag"]) == 1 and old["r"] < 0
    kn_old = ev.loc[("kn:old", "forage_biomass")]
    assert kn_old["expected_sign"] == "positive" and kn_old["r"] > 0
    assert kn_old["grade"] in ("strong", "moderate") and int(kn_old["lag"]) == 1
    young = ev.xs("kn:young", level="response")
    assert not young["grade"].isin(["strong", "moderate"]).any(), young["grade"]
    assert (res / "condition.csv").is_file() and (res / "condition_sensitivity.csv").is_file()
