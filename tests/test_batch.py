"""Batches of studies (lagsieve.stages.batch): the `batch` option of Snakemake's config, its
chunks, and a batch run's outputs against the per-stage jobs' (common practice of batch
schedulers, no outside source: a chunk size from 1 to the number of items, the last chunk
holding the rest)."""
from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
import yaml
from helpers import lagsieve

from lagsieve.cli import main as cli_main
from lagsieve.stages.batch import batch_problems, plan_batches
from lagsieve.stages.plan import study_configs, write_run_config

REPO = Path(__file__).resolve().parents[1]


@pytest.mark.parametrize("value, words", [
    (0, "0 studies per job: a job must run at least one study"),
    ("0", "0 studies per job"),
    (6, "6 studies per job, but this run has 5"),
    (-1, "-1 is not a whole number of studies per job"),
    ("two", "two is not a whole number"),
    (2.5, "2.5 is not a whole number"),
    (True, "is not a whole number"),
    (None, "is not a whole number"),
])
def test_a_bad_batch_is_one_line_naming_the_key_and_the_range(value, words):
    problems = batch_problems(value, 5)
    assert len(problems) == 1
    line = problems[0].line()
    assert line.startswith("key 'batch': ") and words in line and "from 1 to 5" in line, line


@pytest.mark.parametrize("value", [1, 3, 5, "2"])
def test_a_batch_from_one_to_the_number_of_studies_is_accepted(value):
    assert batch_problems(value, 5) == []


def test_chunks_keep_the_order_and_the_last_holds_the_rest():
    studies = dict.fromkeys(["a", "b", "c", "d", "e"])
    assert plan_batches({"batch": 2}, studies) == {"0001": ["a", "b"], "0002": ["c", "d"], "0003": ["e"]}
    assert plan_batches({"batch": 5}, studies) == {"0001": list(studies)}
    assert plan_batches({}, studies) == {}


def test_a_bad_batch_exits_with_status_2(capsys):
    with pytest.raises(SystemExit) as exc:
        plan_batches({"batch": 0}, dict.fromkeys(["a", "b"]))
    assert exc.value.code == 2
    lines = capsys.readouterr().err.strip().splitlines()
    assert lines == ["key 'batch': 0 studies per job: a job must run at least one study; give a whole number "
                     "from 1 to 2 (this run's studies; each job runs that many)"]


@pytest.mark.parametrize("value, words", [("0", "0 studies per job"), ("3", "3 studies per job, but this run has 2"),
                                          ("two", "two is not a whole number"), ("-1", "-1 is not a whole number")])
def test_run_batch_option_bad_value_is_one_line_and_writes_nothing(new_study, tmp_path, capsys, value, words):
    shutil.copytree(new_study.parent, tmp_path / "s2")
    code = cli_main(["run", str(new_study), str(tmp_path / "s2"), "--batch", value, "--out", str(tmp_path / "res")])
    lines = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(lines) == 1, lines
    assert lines[0].startswith(f"--batch {value}: ") and words in lines[0] and "from 1 to 2" in lines[0], lines
    assert not (tmp_path / "res").exists()


def test_run_of_two_configs_with_one_study_id_is_one_line_and_writes_nothing(new_study, tmp_path, capsys):
    shutil.copytree(new_study.parent, tmp_path / "s2")
    code = cli_main(["run", str(new_study), str(tmp_path / "s2"), "--out", str(tmp_path / "res")])
    lines = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(lines) == 1 and "is used by two configs; give each study its own id" in lines[0], lines
    assert lines[0].startswith(str(tmp_path / "s2")) and not (tmp_path / "res").exists()


def test_run_config_carries_the_studies_and_the_batch_to_the_plan(tmp_path):
    from snakemake.common.configfile import load_configfile  # how Snakemake reads --configfile

    configs = [tmp_path / "a, b" / "config.yaml", tmp_path / "c" / "config.yaml"]
    config = load_configfile(str(write_run_config(configs, tmp_path / "out", tmp_path / "run.yaml", batch="1")))
    assert study_configs(config) == [str(c) for c in configs]
    assert plan_batches(config, dict.fromkeys(["x", "y"])) == {"0001": ["x"], "0002": ["y"]}
    assert "batch" not in load_configfile(str(write_run_config(configs, tmp_path, tmp_path / "plain.yaml")))


def _small_study(folder: Path, study_id: str) -> Path:
    """The demo study cut to one response and three drivers, 99 surrogates, linear, no PDF."""
    cfg = folder / "config.yaml"
    data = yaml.safe_load(cfg.read_text())
    data["study"] = study_id
    data.pop("condition", None)
    data.pop("joint", None)  # one response left: no groups to screen jointly
    data["responses"] = data["responses"][:1]
    data["drivers"] = [d for d in data["drivers"] if "expected_sign_by_response" not in d][:3]
    data["screen"].update(surrogates=99, models=["linear"])
    data["report"] = {"pdf": False, "docx": False}
    cfg.write_text(yaml.safe_dump(data, sort_keys=False))
    return cfg


def _snakemake(root: Path, results: str, studies: list[Path], **config) -> subprocess.CompletedProcess:
    batch = root / f"{results}.yaml"
    batch.write_text(yaml.safe_dump({"studies": [str(s) for s in studies], "out": str(root / results), **config}))
    return subprocess.run([sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--directory",
                           str(root / results), "--cores", "2", "--configfile", str(batch)],
                          capture_output=True, text=True)


@pytest.mark.slow
def test_a_batch_writes_what_the_stage_jobs_write_and_reruns_only_a_changed_study(new_study, tmp_path):
    shutil.copytree(new_study.parent, tmp_path / "s2")
    studies = [_small_study(new_study.parent, "one"), _small_study(tmp_path / "s2", "two")]
    proc = lagsieve("run", *studies, "--batch", "2", "--out", tmp_path / "batched", "--cores", "2")  # the CLI's option
    assert proc.returncode == 0, proc.stderr[-3000:]
    assert proc.stdout.count("results in ") == 2, proc.stdout
    record = tmp_path / "batched" / "batches" / "0001.json"
    assert [r["ran"] for r in yaml.safe_load(record.read_text())["studies"]] == [True, True]
    proc = _snakemake(tmp_path, "staged", studies)
    assert proc.returncode == 0, proc.stderr[-3000:]
    for sid in ("one", "two"):
        for name in ("screen.csv", "evidence.csv", "models.csv", "work/annual.csv"):
            pd.testing.assert_frame_equal(pd.read_csv(tmp_path / "batched" / sid / name),
                                          pd.read_csv(tmp_path / "staged" / sid / name), obj=f"{sid}/{name}")
        assert (tmp_path / "batched" / sid / "report.html").is_file()
        assert "stage took" in (tmp_path / "batched" / sid / "logs" / "screen" / "m--age2.log").read_text()
    # a new title for study two: its chunk reruns, but study one is left as it is
    kept = (tmp_path / "batched" / "one" / "report.html").stat().st_mtime_ns
    data = yaml.safe_load(studies[1].read_text())
    studies[1].write_text(yaml.safe_dump(dict(data, title="Another title (invented)"), sort_keys=False))
    proc = _snakemake(tmp_path, "batched", studies, batch=2)
    assert proc.returncode == 0, proc.stderr[-3000:]
    assert [r["ran"] for r in yaml.safe_load(record.read_text())["studies"]] == [False, True]
    assert (tmp_path / "batched" / "one" / "report.html").stat().st_mtime_ns == kept
    assert "Another title" in (tmp_path / "batched" / "two" / "report.html").read_text()


def test_a_failed_study_leaves_the_others_of_its_chunk_to_run(new_study, tmp_path, monkeypatch):
    """A stage that fails ends in SystemExit(1) (stages.common.logged); the chunk runs its other
    studies, names the failed one at the end, and gives the objects its stages froze for an
    exit back to the collector after each study (gc.unfreeze)."""
    import gc

    from lagsieve.stages import batch
    from lagsieve.stages.plan import plan_studies

    shutil.copytree(new_study.parent, tmp_path / "s2")
    cfg2 = tmp_path / "s2" / "config.yaml"
    cfg2.write_text(cfg2.read_text().replace("study: caldrin_shelf_demo", "study: second"))
    planned = list(plan_studies({"studies": [str(new_study), str(cfg2)]}, check=False).values())
    ran = []

    def fake_study(p, out, threads):
        ran.append((p.study.id, gc.get_freeze_count()))
        gc.freeze()  # as the stages' logs do
        if p.study.id == "caldrin_shelf_demo":
            raise SystemExit(1)
        (out / p.study.id).mkdir(parents=True)

    monkeypatch.setattr(batch, "run_study", fake_study)
    gc.unfreeze()  # an earlier test's in-process stage may have frozen the objects of this process
    with pytest.raises(RuntimeError, match="1 of 2 studies of this batch failed: caldrin_shelf_demo"):
        batch.run_batch(planned, tmp_path / "out", tmp_path / "out" / "batches" / "0001.json")
    assert ran == [("caldrin_shelf_demo", 0), ("second", 0)] and gc.get_freeze_count() == 0
    assert (tmp_path / "out" / "second" / "work" / "batch_stamp.json").is_file()
    monkeypatch.setattr(batch, "run_study", lambda p, out, threads: (_ for _ in ()).throw(SystemExit(130)))
    with pytest.raises(SystemExit):  # Ctrl-C stops the chunk
        batch.run_batch(planned[:1], tmp_path / "out", tmp_path / "out" / "batches" / "0001.json")


def test_a_batch_keeps_figures_set_aside_between_its_studies_and_lets_go_at_the_end(new_study, tmp_path, monkeypatch):
    """run_batch runs its studies inside figures.spares_kept: a study's renderer leaves its spare
    figures to the next study's; after the chunk, failed or stopped, none is kept."""
    from lagsieve.report import figures as fg
    from lagsieve.stages import batch
    from lagsieve.stages.plan import plan_studies

    shutil.copytree(new_study.parent, tmp_path / "s2")
    cfg2 = tmp_path / "s2" / "config.yaml"
    cfg2.write_text(cfg2.read_text().replace("study: caldrin_shelf_demo", "study: second"))
    planned = list(plan_studies({"studies": [str(new_study), str(cfg2)]}, check=False).values())
    monkeypatch.setattr(fg, "_SPARE", {})
    seen = []

    def fake_study(p, out, threads):
        seen.append((fg._KEPT[0], dict(fg._SPARE)))
        with fg.FigureRenderer(tmp_path / p.study.id, workers=1):
            fg._SPARE[(1.0, 1.0, 100.0)] = p.study.id  # what _draw_job sets aside
        if p.study.id == "second":
            raise SystemExit(1)
        (out / p.study.id).mkdir(parents=True)

    monkeypatch.setattr(batch, "run_study", fake_study)
    with pytest.raises(RuntimeError, match="1 of 2 studies"):
        batch.run_batch(planned, tmp_path / "out", tmp_path / "out" / "batches" / "0001.json")
    assert seen == [(1, {}), (1, {(1.0, 1.0, 100.0): "caldrin_shelf_demo"})]
    assert fg._KEPT[0] == 0 and fg._SPARE == {}
    monkeypatch.setattr(batch, "run_study", lambda p, out, threads: (_ for _ in ()).throw(SystemExit(130)))
    with pytest.raises(SystemExit):  # Ctrl-C
        batch.run_batch(planned[1:], tmp_path / "out", tmp_path / "out" / "batches" / "0001.json")
    assert fg._KEPT[0] == 0 and fg._SPARE == {}
