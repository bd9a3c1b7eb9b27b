"""The workflow's plan at parse time (lagsieve.stages.plan): the check that `lagsieve run` has
just made is handed to the Snakefile in the run config and taken in place of a second check
while the files it read are unchanged (a cache keyed by a digest of the files' bytes: common
practice, no outside source; the digest is the one batches use for their study stamps)."""
from __future__ import annotations

import pytest

from lagsieve.stages import check, plan
from lagsieve.stages.check import check_study


def _handed(cfg, tmp_path) -> dict:
    """The run config `lagsieve run` writes after checking ``cfg``, read the way Snakemake reads it."""
    from snakemake.common.configfile import load_configfile  # how Snakemake reads --configfile

    study, annual, _, _ = check_study(cfg)
    entry = plan.checked_entry(study, annual)
    path = plan.write_run_config([cfg], tmp_path / "out", tmp_path / "run.yaml", checked={str(cfg): entry})
    return load_configfile(str(path))


def test_a_study_just_checked_is_planned_without_a_second_check(new_study, tmp_path, monkeypatch, capsys):
    config = _handed(new_study, tmp_path)
    checked = config["checked"][str(new_study)]
    calls = []
    # the plan imports the check only when it needs it (it reads the inputs with pandas)
    monkeypatch.setattr(check, "check_study", lambda path: calls.append(path) or check_study(path))
    planned = plan.plan_studies(config)["caldrin_shelf_demo"]
    assert calls == []
    # the demo's responses read different files (the condition series no mortality table)
    assert planned.response_inputs == checked["response_inputs"]
    assert planned.response_inputs["kn--old"] != planned.response_inputs["m--age2"]
    # an input changed after the check: the plan checks the study itself, and a bad value is refused
    table = new_study.parent / "data" / "mortality_by_age.csv"
    lines = table.read_text().splitlines()
    table.write_text("\n".join([lines[0], lines[1].rsplit(",", 1)[0] + ",-1", *lines[2:]]) + "\n")
    with pytest.raises(SystemExit) as exc:
        plan.plan_studies(config)
    assert exc.value.code == 2 and calls == [str(new_study)]
    lines = capsys.readouterr().err.strip().splitlines()
    assert lines == ["data/mortality_by_age.csv:2: series 'm:age2': se -1 is negative; an se must be 0 or more; "
                     "check the sign or leave the cell empty"]


def test_the_stamp_follows_the_bytes_of_every_file(new_study):
    study = plan.load_study(new_study)
    files = plan.study_files(study)
    assert files[0] == str(new_study.resolve()) and len(files) == 1 + len(study.inputs) + 1  # the samples
    before = plan.files_stamp(files)
    assert plan.files_stamp(files) == before
    sample = new_study.parent / "data" / "fish_samples.csv"
    sample.write_bytes(sample.read_bytes() + b"\n")
    assert plan.files_stamp(files) != before
