"""Helpers shared by the tests (imported as ``from helpers import ...``; fixtures live in conftest.py).

Nothing here edits sys.path or sets PYTHONPATH: the package is installed (``pip install -e .``).
"""
from __future__ import annotations

import contextlib
import io
import os
import subprocess
import sys
import traceback
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np
import yaml

from lagsieve import cli
from lagsieve import pipeline as stages
from lagsieve.io.config import load_study
from lagsieve.io.names import slug

REPO = Path(__file__).resolve().parents[1]

HOSTILE = "<script>alert(1)</script>"
HOSTILE_TITLE = 'Tiny <img src=x onerror="alert(2)"> & "study"'
DOLLAR_LABEL = 'Cost of $5 & "quoted" <b>bold</b>'


# ----------------------------------------------------------------------------- the command line
def lagsieve(*args, cwd=None, check=False, subprocess_only=False) -> subprocess.CompletedProcess:
    """Run the command line and capture what it prints and its exit status.

    ``run`` (which starts Snakemake, whose output goes to the process's own streams) and any call
    with ``subprocess_only`` run ``python -m lagsieve`` in a subprocess, as a user would; the other
    commands (init, check, ledger, --help, --version) run ``lagsieve.cli.main`` in this process,
    which gives the same stdout, stderr and status without a Python start and the package's
    imports for every call (about 1.2 s each). tests/test_cli.py's test of ``python -m lagsieve``
    and the installed-wheel test in tests/test_packaging.py run the real entry points in
    subprocesses."""
    argv = [str(a) for a in args]
    if argv[:1] != ["run"] and not subprocess_only:
        proc = _in_process(argv, cwd)
    else:
        env = dict(os.environ, MPLBACKEND="Agg")
        proc = subprocess.run([sys.executable, "-m", "lagsieve", *argv], cwd=cwd, env=env,
                              capture_output=True, text=True)
    if check and proc.returncode != 0:
        raise AssertionError(proc.stdout + proc.stderr)
    return proc


def _in_process(argv: list[str], cwd) -> subprocess.CompletedProcess:
    """``lagsieve.cli.main(argv)`` in this process, from ``cwd``, with stdout and stderr captured;
    an exception that escapes is printed as a traceback on stderr with status 1, as Python would."""
    out, err, here = io.StringIO(), io.StringIO(), os.getcwd()
    try:
        if cwd is not None:
            os.chdir(cwd)
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            try:
                status = cli.main(argv)
            except SystemExit as exc:  # argparse's --help, --version and usage errors
                status = exc.code if isinstance(exc.code, int) else (0 if exc.code is None else 1)
            except Exception:  # noqa: BLE001 - what a user would see
                traceback.print_exc()
                status = 1
    finally:
        os.chdir(here)
    return subprocess.CompletedProcess([sys.executable, "-m", "lagsieve", *argv], status, out.getvalue(),
                                       err.getvalue())


def init_study(folder: Path, **screen) -> Path:
    """`lagsieve init` into ``folder``; override screen settings; return the config path.
    (Tests that only need such a study take the faster fixture ``new_study``: a copy.)"""
    proc = lagsieve("init", folder, check=True)
    assert "wrote" in proc.stdout
    return set_screen(folder / "config.yaml", **screen)


def set_screen(cfg: Path, **screen) -> Path:
    """Override keys of the config's ``screen`` section; return the config path."""
    if screen:
        data = yaml.safe_load(cfg.read_text())
        data["screen"].update(screen)
        cfg.write_text(yaml.safe_dump(data, sort_keys=False))
    return cfg


# ----------------------------------------------------------------------------- series
def ar1(rng, n, phi, burn=100):
    """A simulated AR(1) series x_t = phi x_{t-1} + e_t (standard normal e), after a burn-in."""
    e = rng.normal(size=n + burn)
    x = np.zeros(n + burn)
    for t in range(1, n + burn):
        x[t] = phi * x[t - 1] + e[t]
    return x[burn:]


# ----------------------------------------------------------------------------- stages without Snakemake
def _screen_one(args):
    cfg, annual, rid, out = args
    stages.run_screen(cfg, annual, rid, out)
    return rid


def run_study(cfg: Path, out: Path, parallel: bool = True) -> Path:
    """align, screen (responses in parallel), evidence; returns the study's result folder."""
    study = load_study(cfg)
    res = out / study.id
    work = res / "work"
    condition = condition_files(res)
    if study.condition is not None:  # the condition stage first, as the workflow runs it
        stages.run_condition(cfg, *condition)
    stages.run_align(cfg, work / "annual.csv", work / "notes.csv", condition[:1] if study.condition else [])
    jobs = [(cfg, work / "annual.csv", rid, work / "responses" / slug(rid)) for rid in study.response_ids]
    if parallel and len(jobs) > 1:
        import multiprocessing as mp

        with ProcessPoolExecutor(max_workers=2, mp_context=mp.get_context("fork")) as ex:
            list(ex.map(_screen_one, jobs))
    else:
        for j in jobs:
            _screen_one(j)
    stages.run_evidence(cfg, work / "annual.csv", work, res / "screen.csv", res / "evidence.csv")
    return res


def condition_files(res: Path) -> list[Path]:
    """The condition stage's outputs under a study's result folder, in run_condition's order."""
    return [res / "condition.csv", res / "condition_sensitivity.csv", res / "work" / "condition_fish.csv",
            res / "work" / "condition_fit.json"]


def make_report(cfg: Path, res: Path, out: Path | None = None, screen_csv: Path | None = None) -> Path:
    """run_report for a screened study into ``out`` (default: the result folder)."""
    out = out or res
    work = res / "work"
    stages.run_report(cfg, work / "annual.csv", work / "notes.csv", work, screen_csv or res / "screen.csv",
                      res / "evidence.csv", out / "report.html", out / "provenance.json", out / "figures",
                      threads=2, condition=[p for p in condition_files(res) if p.is_file()])
    return out


def write_config(path: Path, raw: dict) -> Path:
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(yaml.safe_dump(raw, sort_keys=False, allow_unicode=True), encoding="utf-8")
    return path


def tiny_config(dirpath: Path, **over) -> Path:
    """Two responses, three drivers of the demo data, hostile labels; ``over`` replaces keys."""
    demo_dir = REPO / "resources" / "demo"
    raw = {
        "study": "tiny_escape",
        "title": HOSTILE_TITLE,
        "description": "Test study </style><script>alert(3)</script>",
        "invented": True,
        "inputs": [str(demo_dir / f) for f in ("mortality_by_age.csv", "surveys_annual.csv", "indices_long.csv")],
        "responses": [{"id": "m:age2", "label": "M age 2", "unit": "per year"},
                      {"id": "m:age5plus", "label": "M age 5+"}],
        "drivers": [
            {"id": "forage_biomass", "label": HOSTILE, "transform": "log", "expected_sign": "negative",
             "category": "prey", "unit": "kt"},
            {"id": "bottom_oxygen", "label": DOLLAR_LABEL, "expected_sign": "negative", "category": "oxygen"},
            {"id": "pinniped_abundance", "transform": "log", "expected_sign": "positive", "category": "predator"},
        ],
        "screen": {"lags": [0, 1], "models": ["linear", "gam"], "surrogates": 49, "seed": 7, "fdr": 0.1,
                   "validation": {"initial_years": 15, "holdout_years": 5}},
        "report": {"top": 2},
    }
    raw.update(over)
    return write_config(dirpath / "config.yaml", raw)
