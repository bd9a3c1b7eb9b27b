"""The SLURM profile (profiles/slurm/config.yaml): its keys, and a Snakemake dry run with it.

The dry run needs the executor plugin ``snakemake-executor-plugin-slurm`` (PyPI) in the
environment, but no cluster: a dry run submits nothing. Without the plugin it is skipped.
"""
from __future__ import annotations

import importlib.util
import re
import subprocess
import sys

import pytest
import yaml

from helpers import REPO, init_study

PROFILE = REPO / "profiles" / "slurm"
PLUGIN = "snakemake_executor_plugin_slurm"


def _profile() -> dict:
    return yaml.safe_load((PROFILE / "config.yaml").read_text(encoding="utf-8"))


def _workflow_rules() -> set[str]:
    rules = set()
    for smk in (REPO / "workflow" / "rules").glob("*.smk"):
        rules |= set(re.findall(r"^rule\s+(\w+)\s*:", smk.read_text(encoding="utf-8"), flags=re.M))
    return rules


def test_profile_uses_the_slurm_executor_with_documented_resources():
    prof = _profile()
    assert prof["executor"] == "slurm"
    assert isinstance(prof["jobs"], int) and prof["jobs"] > 0
    assert prof["latency-wait"] >= 5
    assert prof["retries"] >= 1
    default = prof["default-resources"]
    for key in ("slurm_partition", "mem_mb", "runtime"):
        assert key in default, key
    # every rule of the workflow has its own resources, so a new rule is not forgotten
    rules = _workflow_rules()
    assert {"screen", "evidence", "report"} <= rules
    assert set(prof["set-resources"]) == rules
    for rule, res in prof["set-resources"].items():
        assert res["mem_mb"] > 0 and res["runtime"] > 0, rule
    assert set(prof["set-threads"]) <= rules
    assert (PROFILE / "README.md").is_file()


@pytest.mark.slow
@pytest.mark.skipif(importlib.util.find_spec(PLUGIN) is None,
                    reason="the SLURM dry run needs the executor plugin: "
                           "python -m pip install snakemake-executor-plugin-slurm")
def test_dry_run_with_the_slurm_profile(tmp_path):
    cfg = init_study(tmp_path / "study")
    out = tmp_path / "results"
    proc = subprocess.run(
        [sys.executable, "-m", "snakemake", "-n", "--profile", str(PROFILE), "--snakefile", str(REPO / "Snakefile"),
         "--directory", str(out), "--config", f"study_config={cfg}", f"out={out}"],
        cwd=tmp_path, capture_output=True, text=True)
    log = proc.stdout + proc.stderr
    assert proc.returncode == 0, log[-3000:]
    assert "This was a dry-run" in log
    # the profile's resources reach the jobs: the screen jobs ask for its memory and time
    screen = _profile()["set-resources"]["screen"]
    blocks = [b for b in log.split("rule ") if b.startswith("screen:")]
    assert len(blocks) == 1  # one per study: the demo's six responses in one job
    for b in blocks:
        assert f"mem_mb={screen['mem_mb']}" in b and f"runtime={screen['runtime']}" in b
        assert "slurm_partition=CHANGE_ME" in b
    assert not out.joinpath("caldrin_shelf_demo", "evidence.csv").exists()  # nothing ran
