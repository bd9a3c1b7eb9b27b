"""File names built from series ids (lagsieve.io.names) and the config path handed to the workflow:
ids designed to collide get different names; ids the workflow engine would misread run; a study in a
folder with a comma, a space and a non-ASCII letter runs."""
from __future__ import annotations

import re
import shutil

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from helpers import lagsieve, write_config
from lagsieve import pipeline as stages
from lagsieve.errors import InputErrors
from lagsieve.io.config import load_study
from lagsieve.io.names import SAFE_ID, name_key, pair_slug, periodic, slug
from lagsieve.report.context import Context
from lagsieve.report.plan import plan_figures

HASHED = re.compile(r"~[0-9a-f]{10}\Z")


# ----------------------------------------------------------------------------- the names themselves
@pytest.mark.parametrize("sid, name", [
    ("velk_m", "velk_m"), ("m:age2", "m--age2"), ("m:age3-4", "m--age3-4"), ("sst.jja", "sst.jja"),
])
def test_plain_ids_keep_their_form(sid, name):
    assert slug(sid) == name  # the demo's figure and folder names do not change


@pytest.mark.parametrize("sid, readable", [
    ("Temp", "Temp"), ("m--age2", "m--age2"), ("b__c", "b_c"), ("a.", "a"), ("nul", "nul"),
    ("station_00000000000000000000", "station_00000000000000000000"),
])
def test_other_ids_get_a_hash_of_the_exact_id(sid, readable):
    name = slug(sid)
    assert HASHED.search(name), name
    assert name.startswith(readable + "~")
    assert "__" not in name and ":" not in name


@pytest.mark.parametrize("first, second", [
    (("a", "b__c"), ("a__b", "c")),          # join to the same 'a__b__c' with the old names
    (("m:age2", "x"), ("m--age2", "x")),     # ':' written '--' met the id written with '--'
    (("Temp", "x"), ("temp", "x")),          # one file on a case-insensitive file system
    (("x", "SST"), ("x", "sst")),
])
def test_pairs_designed_to_collide_get_different_figure_names(first, second):
    assert pair_slug(*first).casefold() != pair_slug(*second).casefold()


def test_the_old_names_did_collide():
    """The pairs above are real collisions of the former scheme (':' -> '--', joined by '__')."""
    old = lambda r, d: f"{r.replace(':', '--')}__{d.replace(':', '--')}"  # noqa: E731
    assert old("a", "b__c") == old("a__b", "c")
    assert old("m:age2", "x") == old("m--age2", "x")


ids = st.from_regex(SAFE_ID, fullmatch=True).filter(lambda s: len(s) <= 80)


@settings(max_examples=300, deadline=None)
@given(ids, ids, ids, ids)
def test_different_pairs_never_share_a_name(r1, d1, r2, d2):
    assume_different = (r1, d1) != (r2, d2)
    if assume_different:
        assert pair_slug(r1, d1).casefold() != pair_slug(r2, d2).casefold()
    # the separator splits the name back into exactly one response and one driver
    assert pair_slug(r1, d1).count("__") == 1


@settings(max_examples=300, deadline=None)
@given(ids)
def test_no_name_is_periodic_to_the_workflow_engine(sid):
    from snakemake.io import PeriodicityDetector  # the engine's own rule (snakemake.io, 9.x)

    assert PeriodicityDetector().is_periodic(slug(sid)) is None
    assert len(slug(sid)) <= 100


def test_periodic_agrees_with_the_engine():
    from snakemake.io import PeriodicityDetector  # the engine's own rule (snakemake.io, 9.x)

    for text in ("station_" + "0" * 20, "x" + "ab" * 20, "station_" + "0" * 19, "abc"):
        assert periodic(text) == (PeriodicityDetector().is_periodic(text) is not None), text


# ----------------------------------------------------------------------------- configs
def _wide_study(folder, responses, drivers, study="names_test", start=1970, n=40):
    rng = np.random.default_rng(3)
    data = {"year": np.arange(start, start + n)}
    for sid in responses + drivers:
        data[sid] = np.round(rng.normal(size=n), 4)
    folder.mkdir(parents=True, exist_ok=True)
    pd.DataFrame(data).to_csv(folder / "series.csv", index=False)
    raw = {"study": study, "inputs": ["series.csv"], "responses": [{"id": r} for r in responses],
           "drivers": [{"id": d} for d in drivers],
           "screen": {"lags": [0, 1], "surrogates": 19, "seed": 1}, "report": {"pdf": False, "top": 2}}
    return write_config(folder / "config.yaml", raw)


def test_ids_that_differ_only_in_case_or_form_are_accepted(tmp_path):
    cfg = _wide_study(tmp_path, ["Temp", "temp"], ["a__b", "a_b"])
    study = load_study(cfg)
    assert len({name_key(s) for s in study.response_ids + study.driver_ids}) == 4


def test_a_periodic_study_id_is_refused_with_one_line(tmp_path):
    cfg = _wide_study(tmp_path, ["r"], ["d"], study="s_" + "0" * 20)
    with pytest.raises(InputErrors) as exc:
        load_study(cfg)
    (line,) = [p.line() for p in exc.value.problems]
    assert "study id 's_00000000000000000000' ends in a piece repeated 20 times" in line
    assert "shorten the repeated end of the id" in line


def test_response_folders_are_distinct(tmp_path):
    cfg = _wide_study(tmp_path, ["a", "A", "m--age2"], ["d"])
    dirs = stages.response_dirs(tmp_path / "work", load_study(cfg))
    assert len({str(p).casefold() for p in dirs.values()}) == 3
    assert dirs["a"].name == "a" and HASHED.search(dirs["A"].name)


def test_figures_of_colliding_pairs_stay_apart(tmp_path):
    """The former names put the panels of a x b__c and a__b x c in one file; now each pair has
    its own figures and its own panel entry."""
    cfg = _wide_study(tmp_path, ["a", "a__b"], ["b__c", "c"])
    study = load_study(cfg)
    table = pd.read_csv(tmp_path / "series.csv").set_index("year")
    rows = [{"response": r, "driver": d, "lag": 0, "rank": k, "grade": "weak"}
            for r, d, k in (("a", "b__c", 1), ("a__b", "c", 1), ("a", "c", 2), ("a__b", "b__c", 2))]
    empty = pd.DataFrame()
    ctx = Context.of(study, table, empty, pd.DataFrame(rows), empty, empty, empty, {})
    plan = plan_figures(ctx)
    assert set(plan.panels) == {pair_slug(r["response"], r["driver"]) for r in rows}
    names = [j.name for j in plan.jobs]
    assert len(names) == len(set(n.casefold() for n in names))
    assert sum(n.endswith("__overlay") for n in names) == 4


# ----------------------------------------------------------------------------- the config path
def test_study_config_naming_a_file_is_not_cut_at_commas(tmp_path):
    cfg = _wide_study(tmp_path / "hake, 2024 ü", ["r"], ["d"])
    assert stages.study_configs({"study_config": str(cfg)}) == [str(cfg)]
    assert stages.study_configs({"study_config": "a.yaml,b.yaml"}) == ["a.yaml", "b.yaml"]


@pytest.mark.parametrize("folder", ["hake, 2024 ü", "a: b #c", "'quoted\"", "-x", "yes", "[1]"])
def test_run_config_gives_back_the_exact_paths(tmp_path, folder):
    from snakemake.common.configfile import load_configfile  # how Snakemake reads --configfile

    cfg = _wide_study(tmp_path / folder, ["r"], ["d"])
    out = tmp_path / folder / "results"
    path = stages.write_run_config(cfg, out, tmp_path / "run_config.yaml")
    config = load_configfile(str(path))
    assert stages.study_configs(config) == [str(cfg)]
    assert config["out"] == str(out)


# ----------------------------------------------------------------------------- through Snakemake
@pytest.mark.slow
def test_periodic_response_id_runs_through_the_workflow(tmp_path):
    """`station_00000000000000000000` as a response made Snakemake stop with a
    PeriodicWildcardError (its tail repeats 20 times); its folder now ends in a hash."""
    sid = "station_" + "0" * 20
    cfg = _wide_study(tmp_path / "st", [sid, "r2"], ["d"])
    proc = lagsieve("run", cfg, "-n")
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "PeriodicWildcardError" not in proc.stdout + proc.stderr
    # the study's screen job writes every response's folder (work/responses/<slug>/) inside its
    # output folder, so no response id is a wildcard of Snakemake's any more
    assert "work/responses" in proc.stdout and "rule screen:" in proc.stdout
    assert slug(sid) != sid and slug(sid).startswith("station_")  # the folder name the job will use


@pytest.mark.slow
def test_study_in_a_folder_with_comma_space_and_umlaut_runs(tmp_path, new_study):
    folder = tmp_path / "hake, 2024 ü"
    shutil.copytree(new_study.parent, folder / "study")
    cfg = folder / "study" / "config.yaml"
    assert lagsieve("check", cfg).returncode == 0
    proc = lagsieve("run", cfg, "-n")
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "This was a dry-run" in proc.stdout
    assert f"{folder}/study/results/caldrin_shelf_demo/report.html" in proc.stdout


def test_braces_in_a_path_are_refused_before_any_job_with_one_line(tmp_path, capsys):
    """Snakemake reads '{x}' in any tracked path as a placeholder and has no escape for it
    (tried with Snakemake 9: '{{x}}' is refused too), so such a study is refused in words."""
    cfg = _wide_study(tmp_path / "hake {2024}", ["r"], ["d"])
    with pytest.raises(SystemExit) as exc:
        stages.plan_studies({"study_config": str(cfg), "out": str(tmp_path / "out")})
    assert exc.value.code == 2
    (line,) = capsys.readouterr().err.strip().splitlines()
    assert line == (f"{cfg}: the path holds '{{' or '}}' (so do 1 more paths of the study), which the "
                    "workflow engine reads as a placeholder; rename the folder or file without braces "
                    "(or move the study)")
    assert stages.pattern_problems([str(cfg).replace("{", "(").replace("}", ")")]) == []
