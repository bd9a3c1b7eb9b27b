"""The screen job's per-response cache (lagsieve.stages.screen_cache, stages.screen.run_screens).

What a content key must do is the project's own rule (DEVELOPERS.md, "The screen job"): a
response's key changes with what its screen reads (its settings, the bytes of its input files
and of its rows of condition.csv) and with the code, and not with another driver's file, a
label or another series' condition rows. Reuse is checked against the per-response stage
(``run_screen``, one response as the workflow's jobs ran it before): the tables a study's job
writes, computed or copied from the cache, are byte-identical to it. SHA-256 is hashlib's.
"""
from __future__ import annotations

import gc
import os
import re
import signal

import numpy as np
import pytest
import yaml

from lagsieve.io.config import load_study
from lagsieve.stages import screen as screen_stage
from lagsieve.stages import screen_cache
from lagsieve.stages.plan import plan_studies
from lagsieve.stages.screen import run_screen, run_screens, wanted_series
from lagsieve.stages.screen_cache import TABLES, condition_digest, response_key, sources_digest

from helpers import REPO

RESPONSES = ("m--age2", "m--age5plus")


def _study(root):
    """Two responses of the demo data, one driver of both, one (local_index, its own file) of
    m:age2 only; 19 surrogates, linear models, so that a screen takes about a second."""
    demo = REPO / "resources" / "demo"
    rng = np.random.default_rng(3)
    (root / "local.csv").write_text(
        "series,year,value\n" + "".join(f"local_index,{y},{rng.normal():.3f}\n" for y in range(1984, 2023)))
    raw = {"study": "cache_check", "invented": True,
           "inputs": [str(demo / "mortality_by_age.csv"), str(demo / "surveys_annual.csv"), "local.csv"],
           "responses": [{"id": "m:age2", "label": "M age 2"}, {"id": "m:age5plus"}],
           "drivers": [{"id": "forage_biomass", "transform": "log", "category": "prey", "label": "Forage"},
                       {"id": "local_index", "category": "other", "responses": ["m:age2"], "lags": [1]}],
           "screen": {"lags": [0, 1], "models": ["linear"], "surrogates": 19, "seed": 11,
                      "validation": {"initial_years": 15, "holdout_years": 5}}}
    cfg = root / "config.yaml"
    cfg.write_text(yaml.safe_dump(raw, sort_keys=False))
    return cfg


def _reads(cfg) -> dict:
    """What the Snakefile hands the screen job (rules/common.smk, screen_reads)."""
    planned = plan_studies({"studies": [str(cfg)]})["cache_check"]
    return {r: {"inputs": planned.response_inputs[r], "condition": []} for r in planned.response_slugs}


def _keys(cfg) -> dict:
    study, reads = load_study(cfg), _reads(cfg)
    rid = {"m--age2": "m:age2", "m--age5plus": "m:age5plus"}
    return {r: response_key(study, r, reads[r]["inputs"], [], wanted_series(study, rid[r])) for r in RESPONSES}


def _edit(cfg, change) -> None:
    raw = yaml.safe_load(cfg.read_text())
    change(raw)
    cfg.write_text(yaml.safe_dump(raw, sort_keys=False))


@pytest.fixture
def study(tmp_path):
    return _study(tmp_path)


def test_plan_gives_each_response_only_its_own_files(study):
    reads = _reads(study)
    assert any(f.endswith("local.csv") for f in reads["m--age2"]["inputs"])
    assert not any(f.endswith("local.csv") for f in reads["m--age5plus"]["inputs"])


def test_key_follows_the_responses_own_inputs_and_settings(study):
    before = _keys(study)
    assert before == _keys(study)  # the same files and config: the same keys
    with open(study.parent / "local.csv", "a") as fh:
        fh.write("local_index,2023,0.250\n")  # a year of a driver of m:age2 only
    appended = _keys(study)
    assert appended["m--age2"] != before["m--age2"]
    assert appended["m--age5plus"] == before["m--age5plus"]  # another driver's file
    _edit(study, lambda raw: raw["drivers"][0].update(label="Forage fish biomass"))
    assert _keys(study) == appended  # a label
    _edit(study, lambda raw: raw["drivers"][1].update(lags=[1, 2]))
    lags = _keys(study)
    assert lags["m--age2"] != appended["m--age2"] and lags["m--age5plus"] == appended["m--age5plus"]
    _edit(study, lambda raw: raw["screen"].update(seed=12))
    seed = _keys(study)
    assert all(seed[r] != lags[r] for r in RESPONSES)  # a screen setting: every response


def test_key_follows_the_code(study, monkeypatch):
    before = _keys(study)
    monkeypatch.setattr(screen_cache, "code_digest", lambda: "another version of the code")
    after = _keys(study)
    assert all(after[r] != before[r] for r in RESPONSES)
    assert {k: v for k, v in after["m--age2"].items() if k != "code"} == \
        {k: v for k, v in before["m--age2"].items() if k != "code"}


def test_sources_digest_changes_with_one_byte_of_one_file(tmp_path):
    (tmp_path / "pkg" / "sub").mkdir(parents=True)
    (tmp_path / "pkg" / "a.py").write_text("x = 1\n")
    (tmp_path / "pkg" / "sub" / "b.py").write_text("y = 2\n")
    (tmp_path / "pkg" / "notes.txt").write_text("not code")
    first = sources_digest(tmp_path / "pkg")
    (tmp_path / "pkg" / "notes.txt").write_text("other words")
    assert sources_digest(tmp_path / "pkg") == first  # only .py sources count
    (tmp_path / "pkg" / "sub" / "b.py").write_text("y = 3\n")
    assert sources_digest(tmp_path / "pkg") != first
    assert re.fullmatch(r"[0-9a-f]{64}", first)


def test_condition_key_reads_only_the_responses_own_rows(tmp_path):
    path = tmp_path / "condition.csv"
    rows = {"kn:young": [0.98, 1.01], "kn:old": [1.02, 0.97]}

    def write():
        path.write_text("series,year,value,se\n" + "".join(
            f"{s},{2000 + i},{v},0.01\n" for s, vals in rows.items() for i, v in enumerate(vals)))

    write()
    before = condition_digest([str(path)], {"kn:young", "bottom_temp"})
    rows["kn:old"][1] = 0.95  # another series' row
    write()
    assert condition_digest([str(path)], {"kn:young", "bottom_temp"}) == before
    rows["kn:young"][0] = 0.99  # its own
    write()
    assert condition_digest([str(path)], {"kn:young", "bottom_temp"}) != before
    assert condition_digest([], {"kn:young"}) is None


def _tables(folder) -> dict:
    return {r: {t: (folder / r / t).read_bytes() for t in TABLES} for r in RESPONSES}


def test_a_second_call_reuses_every_response_without_a_worker(study, tmp_path, monkeypatch):
    reads, out, logs = _reads(study), tmp_path / "work" / "responses", tmp_path / "logs" / "screen"
    assert run_screens(study, reads, out, logs, threads=2) == {r: "computed" for r in RESPONSES}
    first = _tables(out)
    # the per-response stage as the workflow's jobs ran it before: the same bytes
    for r in RESPONSES:
        run_screen(study, None, r, tmp_path / "alone" / r, files=reads[r]["inputs"], condition=[])
    assert _tables(tmp_path / "alone") == first
    assert "screened in" in (logs / "m--age2.log").read_text()

    def refuse(*args, **kwargs):
        raise AssertionError("a worker was started or a response screened")

    monkeypatch.setattr(screen_stage, "_screen_to_cache", refuse)
    monkeypatch.setattr(os, "fork", refuse)
    for r in RESPONSES:
        (out / r / "screen.csv").unlink()  # Snakemake removes a job's outputs before it runs
    assert run_screens(study, reads, out, logs, threads=2) == {r: "reused" for r in RESPONSES}
    assert _tables(out) == first


def test_only_the_changed_response_is_screened_again(study, tmp_path):
    reads, out, logs = _reads(study), tmp_path / "responses", tmp_path / "logs"
    run_screens(study, reads, out, logs, threads=1)
    first = _tables(out)
    with open(study.parent / "local.csv", "a") as fh:
        fh.write("local_index,2023,0.250\n")
    assert run_screens(study, reads, out, logs, threads=2) == {"m--age2": "computed", "m--age5plus": "reused"}
    again = _tables(out)
    assert again["m--age5plus"] == first["m--age5plus"]
    assert again["m--age2"]["forecasts.csv"] != first["m--age2"]["forecasts.csv"]  # a year more of the driver
    cache = tmp_path / "cache" / "screen"
    assert sorted(p.name for p in cache.iterdir()) == sorted(RESPONSES)  # one entry per response, no leftovers
    (cache / ".m--age2.x.tmp").mkdir()  # what a killed screen leaves
    del reads["m--age5plus"]  # a response taken out of the study
    assert run_screens(study, reads, out, logs, threads=2) == {"m--age2": "reused"}
    assert sorted(p.name for p in cache.iterdir()) == ["m--age2"]


@pytest.mark.parametrize("threads", [1, 2])  # in the job's process; in forked workers
def test_a_failed_response_writes_nothing_and_the_job_says_one_line(study, tmp_path, monkeypatch, capfd, threads):
    reads, out, logs = _reads(study), tmp_path / "responses", tmp_path / "logs"
    real = screen_stage.screen_into

    def fail_age2(st, annual, response, *args, **kwargs):
        if response == "m--age2":
            raise ValueError("made to fail")
        return real(st, annual, response, *args, **kwargs)

    monkeypatch.setattr(screen_stage, "screen_into", fail_age2)
    gc.unfreeze()
    with pytest.raises(SystemExit) as exc:
        run_screens(study, reads, out, logs, threads=threads)
    assert exc.value.code == 1
    assert gc.get_freeze_count() == 0  # the workers' gc.freeze undone: the caller's process goes on
    err = capfd.readouterr().err.strip().splitlines()
    assert err == [f"lagsieve: job failed; see {logs / 'm--age2.log'}"]
    assert "Traceback" in (logs / "m--age2.log").read_text() and "made to fail" in (logs / "m--age2.log").read_text()
    assert not (out / "m--age2").exists()
    cache = tmp_path / "cache" / "screen"
    assert sorted(p.name for p in cache.iterdir()) == ["m--age5plus"]  # the other response is kept
    assert all((out / "m--age5plus" / t).is_file() for t in TABLES)


def test_a_worker_killed_by_a_signal_fails_its_response_instead_of_hanging(study, tmp_path, monkeypatch, capfd, caplog):
    """Our own rule (a multiprocessing.Pool waited forever for the response of a worker the
    out-of-memory killer ended): a worker that dies by SIGKILL fails the responses it had not
    returned, in words, and the job ends with its one line and status 1, having written nothing
    for them. The alarm bounds the wait (a hang fails the test; it is not a timing)."""
    reads, out, logs = _reads(study), tmp_path / "responses", tmp_path / "logs"
    real = screen_stage.screen_into

    def killed_age2(st, annual, response, *args, **kwargs):
        if response == "m--age2":
            os.kill(os.getpid(), signal.SIGKILL)
        return real(st, annual, response, *args, **kwargs)

    monkeypatch.setattr(screen_stage, "screen_into", killed_age2)
    previous = signal.signal(signal.SIGALRM, lambda *_: pytest.fail("the screen job waited for a dead worker"))
    signal.alarm(300)
    try:
        with pytest.raises(SystemExit) as exc:
            run_screens(study, reads, out, logs, threads=2)
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)
    assert exc.value.code == 1
    assert any("m--age2: failed" in r.getMessage() and screen_stage.WORKER_LOST in r.getMessage()
               for r in caplog.records)
    assert capfd.readouterr().err.strip().splitlines()[-1].startswith("lagsieve: job failed; see ")
    assert not (out / "m--age2").exists() and not (tmp_path / "cache" / "screen" / "m--age2").exists()


def test_code_digest_follows_the_schemas_defaults(tmp_path, monkeypatch):
    """The settings digest is of the config as written, and the schema fills what it leaves out
    (workflow/schemas/config.schema.yaml): a changed default (here the surrogates' number) must
    change the key, or a rerun would copy tables screened under the old default."""
    changed = tmp_path / "config.schema.yaml"
    text = screen_cache.SCHEMA_FILE.read_text(encoding="utf-8")
    assert "default: 999" in text  # screen.surrogates
    changed.write_text(text.replace("default: 999", "default: 5", 1), encoding="utf-8")
    screen_cache.code_digest.cache_clear()
    try:
        before = screen_cache.code_digest()
        monkeypatch.setattr(screen_cache, "SCHEMA_FILE", changed)
        screen_cache.code_digest.cache_clear()
        assert screen_cache.code_digest() != before
    finally:
        screen_cache.code_digest.cache_clear()
