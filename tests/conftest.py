"""Shared fixtures: a copy of the invented demo study in a temporary folder, run once.

Plain helpers (run the command line, write a study, simulate a series) are in helpers.py.
A test that uses ``demo_run`` runs Snakemake, and one that uses ``demo_report`` screens and
reports the whole demo: both are marked ``slow`` here (no test can forget it), so
``python -m pytest -m "not slow"`` leaves every Snakemake run and whole-demo run out.
"""
from __future__ import annotations

import shutil

import pytest

from helpers import init_study, lagsieve

SLOW_FIXTURES = {"demo_run", "demo_report"}  # Snakemake, or the whole demo through the stages


def pytest_collection_modifyitems(config, items):
    for item in items:
        if SLOW_FIXTURES & set(getattr(item, "fixturenames", ())):
            item.add_marker(pytest.mark.slow)


@pytest.fixture(scope="session")
def initialised_study(tmp_path_factory):
    """`lagsieve init` once per session; tests take copies (``new_study``)."""
    return init_study(tmp_path_factory.mktemp("init") / "s")


@pytest.fixture
def rc():
    """matplotlib under the report's rc settings (``figures.RC``); every figure closed afterwards."""
    import matplotlib.pyplot as plt  # here, not at the top: only the figure tests pay for matplotlib

    from lagsieve.report import figures as fg

    with plt.rc_context(fg.RC):
        yield
    plt.close("all")


@pytest.fixture
def new_study(initialised_study, tmp_path):
    """A private copy of the study `lagsieve init` writes, in ``tmp_path / "s"``; its config path.
    (The config names its data folder relative to itself, so the copy is self-contained.)"""
    dest = tmp_path / "s"
    shutil.copytree(initialised_study.parent, dest)
    return dest / "config.yaml"


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory):
    """The demo study run once through `lagsieve run` (Snakemake) from another folder,
    with 199 surrogates to keep the suite fast; returns (config path, results folder)."""
    root = tmp_path_factory.mktemp("demo")
    cfg = init_study(root / "study", surrogates=199)
    elsewhere = tmp_path_factory.mktemp("cwd")
    proc = lagsieve("run", cfg, "--cores", "2", cwd=elsewhere)
    assert proc.returncode == 0, proc.stdout[-3000:] + proc.stderr[-3000:]
    return cfg, root / "study" / "results" / "caldrin_shelf_demo"
