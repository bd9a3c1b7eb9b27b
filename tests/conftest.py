"""Shared fixtures: a copy of the invented demo study in a temporary folder."""
from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
import yaml

REPO = Path(__file__).resolve().parents[1]


def lagsieve(*args, cwd=None, check=False):
    """Run the command line in a subprocess (as a user would), return CompletedProcess."""
    env = dict(os.environ, PYTHONPATH=str(REPO / "src"), MPLBACKEND="Agg")
    proc = subprocess.run([sys.executable, "-m", "lagsieve.cli", *map(str, args)], cwd=cwd, env=env,
                          capture_output=True, text=True)
    if check and proc.returncode != 0:
        raise AssertionError(proc.stdout + proc.stderr)
    return proc


def init_study(folder: Path, **screen) -> Path:
    """`lagsieve init` into ``folder``; override screen settings; return the config path."""
    proc = lagsieve("init", folder, check=True)
    assert "wrote" in proc.stdout
    cfg = folder / "config.yaml"
    if screen:
        data = yaml.safe_load(cfg.read_text())
        data["screen"].update(screen)
        cfg.write_text(yaml.safe_dump(data, sort_keys=False))
    return cfg


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


def ar1(rng, n, phi, burn=100):
    """A simulated AR(1) series x_t = phi x_{t-1} + e_t (standard normal e), after a burn-in."""
    import numpy as np

    e = rng.normal(size=n + burn)
    x = np.zeros(n + burn)
    for t in range(1, n + burn):
        x[t] = phi * x[t - 1] + e[t]
    return x[burn:]
