"""The command line: init, check, run; a user's mistake gives one clear line and exit 2."""
from __future__ import annotations

import hashlib
import subprocess
import os
import sys
import threading
from importlib.metadata import version
from pathlib import Path

import pytest
import yaml

from helpers import REPO, lagsieve

from lagsieve import cli
from lagsieve.stages.engine import end_timers


@pytest.fixture()
def study(new_study):
    return new_study  # a copy of what `lagsieve init` wrote (conftest.py)


def _hashes(folder: Path) -> dict:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.glob("*")) if p.is_file()}


def test_init_then_check_ok(study):
    proc = lagsieve("check", study)
    assert proc.returncode == 0, proc.stderr
    assert "ok: study 'caldrin_shelf_demo': 6 responses, 10 drivers" in proc.stdout


def test_init_refuses_existing(study):
    """init into a study folder: one line listing what exists; nothing is replaced."""
    before = _hashes(study.parent / "data")
    config = study.read_bytes()
    proc = lagsieve("init", study.parent)
    line = _expect_one_line(proc, "exist already", "config.yaml", "data/mortality_by_age.csv", "never overwrites")
    assert line.startswith(f"{study.parent}: 9 of the files init writes")
    assert _hashes(study.parent / "data") == before and study.read_bytes() == config


def _set_value(path: Path, row: int, new: str) -> str:
    """Replace the last field of file row ``row`` (header = row 1); return the series id."""
    lines = path.read_text().splitlines()
    fields = lines[row - 1].split(",")
    fields[-1] = new
    lines[row - 1] = ",".join(fields)
    path.write_text("\n".join(lines) + "\n")
    return fields[0]


def _expect_one_line(proc, *needles):
    assert proc.returncode == 2, proc.stdout + proc.stderr
    assert "Traceback" not in proc.stderr
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip() and not ln.startswith("warning:")]
    assert len(lines) == 1, proc.stderr
    for n in needles:
        assert n in lines[0], (n, lines[0])
    assert "; " in lines[0]
    return lines[0]


def test_missing_file(study):
    data = yaml.safe_load(study.read_text())
    data["inputs"][1] = "data/nope.csv"
    study.write_text(yaml.safe_dump(data))
    _expect_one_line(lagsieve("check", study), "nope.csv")


def test_series_not_in_any_input(study):
    data = yaml.safe_load(study.read_text())
    data["drivers"][0]["id"] = "forage_biomas"
    study.write_text(yaml.safe_dump(data))
    line = _expect_one_line(lagsieve("check", study), "forage_biomas", "drivers[1] (id 'forage_biomas').id")
    assert "forage_biomass" in line  # the nearest id is suggested


def test_duplicate_series_year(study):
    f = study.parent / "data" / "indices_long.csv"
    lines = f.read_text().splitlines()
    f.write_text("\n".join(lines + [lines[3]]) + "\n")
    _expect_one_line(lagsieve("check", study), "indices_long.csv", f":{len(lines) + 1}", "zooplankton_index")


def test_non_numeric_value(study):
    sid = _set_value(study.parent / "data" / "indices_long.csv", 3, "17.9x")
    _expect_one_line(lagsieve("check", study), "indices_long.csv:3", f"series '{sid}'", "17.9x")


def test_non_positive_under_log(study):
    sid = _set_value(study.parent / "data" / "indices_long.csv", 4, "0")
    assert sid == "zooplankton_index"  # configured with transform: log
    _expect_one_line(lagsieve("check", study), "indices_long.csv:4", "zooplankton_index", "log")


def test_bad_config_key(study):
    text = study.read_text().replace("min_overlap: 15", "min_overlapp: 15")
    study.write_text(text)
    _expect_one_line(lagsieve("check", study), "min_overlapp")


def test_run_writes_nothing_on_bad_input(study):
    _set_value(study.parent / "data" / "indices_long.csv", 3, "abc")
    before = _hashes(study.parent / "data")
    proc = lagsieve("run", study, "--cores", "1")
    _expect_one_line(proc, "indices_long.csv:3")
    assert not (study.parent / "results").exists()
    assert _hashes(study.parent / "data") == before  # inputs never modified


@pytest.mark.slow
def test_snakemake_direct_bad_config_exits_2(study, tmp_path):
    """`snakemake` itself (not the CLI) refuses a bad study before any job runs."""
    _set_value(study.parent / "data" / "indices_long.csv", 3, "abc")
    out = tmp_path / "out"
    proc = subprocess.run([sys.executable, "-m", "snakemake", "--snakefile", str(REPO / "Snakefile"), "--cores", "1",
                           "--directory", str(tmp_path), "--config", f"study_config={study}", f"out={out}"],
                          capture_output=True, text=True)
    assert proc.returncode != 0
    assert "indices_long.csv:3: series 'zooplankton_index'" in proc.stderr + proc.stdout
    assert not out.exists()


# ----------------------------------------------------------------------------- a damaged installation
def test_missing_internal_file_is_one_line(study, monkeypatch, capsys):
    """A file the package ships (here the config schema) gone: one line naming it, advice to
    reinstall, exit 2. (tests/test_packaging.py does the same on a real installed wheel.)"""
    import lagsieve
    import lagsieve.io.config
    from lagsieve import cli

    gone = Path(lagsieve.__file__).parent / "workflow-gone" / "config.schema.yaml"
    monkeypatch.setattr(lagsieve.io.config, "SCHEMA_FILE", gone)
    for argv in (["check", str(study)], ["run", str(study), "--", "--dry-run"]):
        assert cli.main(argv) == 2
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and str(gone) in err[0] and "reinstall" in err[0], err


def test_missing_template_or_module_is_one_line(study, monkeypatch, capsys):
    from jinja2 import TemplateNotFound

    from lagsieve import cli

    for exc, needle in ((TemplateNotFound("report.html.j2"), "template 'report.html.j2'"),
                        (ModuleNotFoundError("gone", name="lagsieve.report.gone"), "lagsieve.report.gone")):
        def boom(config, exc=exc):
            raise exc
        monkeypatch.setattr(cli, "_check", boom)
        assert cli.main(["check", str(study)]) == 2
        err = capsys.readouterr().err.strip().splitlines()
        assert len(err) == 1 and needle in err[0] and "reinstall" in err[0], err


def test_other_missing_files_are_not_hidden(study, monkeypatch, tmp_path):
    """Only the package's own files get the reinstall line: any other FileNotFoundError is a
    fault that keeps its traceback (user files are reported as input problems before this)."""
    from lagsieve import cli

    def boom(config):
        raise FileNotFoundError(2, "No such file", str(tmp_path / "elsewhere.csv"))
    monkeypatch.setattr(cli, "_check", boom)
    with pytest.raises(FileNotFoundError):
        cli.main(["check", str(study)])
    monkeypatch.setattr(cli, "_check", lambda config: (_ for _ in ()).throw(ModuleNotFoundError("x", name="numpyy")))
    with pytest.raises(ModuleNotFoundError):
        cli.main(["check", str(study)])


def test_python_dash_m_lagsieve(tmp_path):
    proc = subprocess.run([sys.executable, "-m", "lagsieve", "--help"], capture_output=True, text=True, cwd=tmp_path)
    assert proc.returncode == 0 and "init" in proc.stdout and "ledger" in proc.stdout
    proc = subprocess.run([sys.executable, "-m", "lagsieve", "--version"], capture_output=True, text=True)
    assert proc.stdout.startswith("lagsieve ")


def test_the_ledger_check_of_run_imports_the_store_alone():
    """`lagsieve run` checks the ledger (lagsieve.ledger.store) before Snakemake starts; the
    package's entry points are imported on first use (PEP 562), not with the store."""
    code = ("import sys, lagsieve.ledger.store; print(sorted(m for m in ('lagsieve.ledger.cli', "
            "'lagsieve.ledger.update', 'scipy.stats') if m in sys.modules)); "
            "from lagsieve.ledger import print_track_record, update_ledger; print(update_ledger.__module__)")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert proc.stdout.split() == ["[]", "lagsieve.ledger.update"], proc.stderr


def test_ledger_before_any_run_is_one_line(study):
    proc = lagsieve("ledger", study)
    assert proc.returncode == 2 and "Traceback" not in proc.stderr
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "no forecast ledger" in lines[0] and "lagsieve run" in lines[0], proc.stderr


def test_check_and_ledger_accept_the_study_folder(study):
    """The folder `lagsieve init` wrote stands for its config.yaml; a folder without one is
    one line saying what to give."""
    proc = lagsieve("check", study.parent)
    assert proc.returncode == 0 and "ok: study 'caldrin_shelf_demo'" in proc.stdout, proc.stderr
    empty = study.parent / "empty"
    empty.mkdir()
    line = _expect_one_line(lagsieve("check", empty), "folder without config.yaml", "holds config.yaml")
    assert line.startswith(f"{empty}: ")


@pytest.mark.parametrize("command", [None, "init", "check", "run", "ledger"])
def test_help_has_examples_and_every_argument_explained(command):
    """Every argument has help text, each --help shows at least two examples, and run states
    its default number of cores (common practice of command-line tools)."""
    from lagsieve.cli import build_parser

    parser = build_parser()
    if command is not None:
        parser = next(a for a in parser._actions if a.dest == "command").choices[command]
    text = parser.format_help()
    examples = text.split("examples:\n", 1)[1].splitlines()
    assert sum(line.startswith("  lagsieve ") for line in examples) >= 2
    for action in parser._actions:
        assert action.help, (command, action.dest)
    if command == "run":
        assert "default: all" in " ".join(text.split()) and "cores of this machine" in " ".join(text.split())


# ----------------------------------------------------------------------------- the engine's process
def test_engine_left_without_arguments_is_stopped_and_reaped():
    """A refused run: the engine `lagsieve run` starts first is killed when the check fails and
    waited for (no process is left behind)."""
    with cli._Engine() as engine:
        proc = engine.proc
        assert proc.poll() is None  # still importing, waiting for its arguments
    assert proc.returncode is not None


def test_engine_with_empty_input_does_nothing():
    """An engine whose input closes empty (the run was refused) ends at once, status 0, silent."""
    proc = subprocess.run([sys.executable, "-m", "lagsieve.stages.engine"], input="", capture_output=True,
                          text=True)
    assert (proc.returncode, proc.stdout, proc.stderr) == (0, "", "")


def test_engine_without_snakemake_says_so_in_one_line(tmp_path):
    """A damaged installation (Snakemake's command line cannot be imported; here a stand-in
    package named snakemake first on the path): one line naming the reinstall command, status 2,
    no traceback."""
    (tmp_path / "snakemake").mkdir()
    (tmp_path / "snakemake" / "__init__.py").write_text("raise ImportError('no module named snakemake.cli')\n")
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(tmp_path), *sys.path])}
    proc = subprocess.run([sys.executable, "-m", "lagsieve.stages.engine"], input="", capture_output=True,
                          text=True, env=env)
    assert proc.returncode == 2 and "Traceback" not in proc.stderr
    assert proc.stderr.count("\n") == 1 and "pip install --force-reinstall lagsieve" in proc.stderr


def test_engine_cancels_the_timers_left_waiting():
    """Snakemake's scheduler leaves a non-daemon threading.Timer behind (DEVELOPERS.md, "Start-up
    and the allocator"); Python waits for it before the process ends unless it is cancelled.
    A 60 s timer here: end_timers cancels it, its thread ends at once and its function never runs."""
    fired = []
    timer = threading.Timer(60, fired.append, args=[1])
    timer.start()
    end_timers()
    timer.join(10)
    assert not timer.is_alive() and fired == []


@pytest.mark.slow
def test_engine_runs_snakemake_with_the_arguments_it_is_handed():
    """The JSON line is Snakemake's command line: `--version` prints the version of the
    snakemake package installed beside it; an option Snakemake refuses gives its message and
    status 2 (argparse's), which the engine's exit without teardown keeps."""
    proc = subprocess.run([sys.executable, "-m", "lagsieve.stages.engine"], input='["--version"]\n',
                          capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == version("snakemake")
    proc = subprocess.run([sys.executable, "-m", "lagsieve.stages.engine"], input='["--no-such-option"]\n',
                          capture_output=True, text=True)
    assert proc.returncode == 2
    assert "unrecognized arguments: --no-such-option" in proc.stderr


@pytest.mark.parametrize("extra, environ, expected", [
    ([], {}, ["--scheduler", "greedy"]),
    (["-n"], {}, ["--scheduler", "greedy"]),
    (["--scheduler", "ilp"], {}, []),
    (["--scheduler=ilp"], {}, []),
    (["--profile", "profiles/slurm"], {}, []),
    ([], {"SNAKEMAKE_PROFILE": "mine"}, []),
])
def test_greedy_scheduler_unless_the_user_chose(monkeypatch, extra, environ, expected):
    monkeypatch.delenv("SNAKEMAKE_PROFILE", raising=False)
    for key, value in environ.items():
        monkeypatch.setenv(key, value)
    assert cli._scheduler(extra) == expected
