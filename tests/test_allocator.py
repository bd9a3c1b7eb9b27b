"""The C allocator's setting for the workflow's jobs (lagsieve.stages.allocator).

Source: the glibc manual, "Memory Allocation Tunables" and mallopt(3) (from memory): the
variables MALLOC_TOP_PAD_, MALLOC_TRIM_THRESHOLD_, MALLOC_MMAP_THRESHOLD_, MALLOC_MMAP_MAX_
and MALLOC_ARENA_MAX are read when a process starts, as are the glibc.malloc.* tunables of
GLIBC_TUNABLES; a user who set any of them keeps them.
"""
from __future__ import annotations

import json
import os

import pytest

from lagsieve.stages.allocator import ALLOCATOR_SETTING, allocator_environment, allocator_variables, user_tuned


def test_the_setting_is_added_on_linux():
    assert allocator_environment({"PATH": "/usr/bin"}, platform="linux") == {"MALLOC_TOP_PAD_": "268435456"}
    assert int(ALLOCATOR_SETTING["MALLOC_TOP_PAD_"]) == 256 * 1024 * 1024


@pytest.mark.parametrize("environ", [
    {"MALLOC_TOP_PAD_": "0"},                                   # the same variable, another value
    {"MALLOC_ARENA_MAX": "2"},                                  # another allocator variable
    {"MALLOC_TRIM_THRESHOLD_": "131072"},
    {"GLIBC_TUNABLES": "glibc.malloc.trim_threshold=131072"},   # the tunables' form
    {"GLIBC_TUNABLES": "glibc.rtld.nns=2:glibc.malloc.top_pad=0"},
])
def test_a_users_setting_is_never_overridden(environ):
    assert user_tuned(environ)
    assert allocator_environment(environ, platform="linux") == {}


def test_other_tunables_leave_the_setting():
    environ = {"GLIBC_TUNABLES": "glibc.rtld.nns=2"}
    assert not user_tuned(environ)
    assert allocator_environment(environ, platform="linux") == ALLOCATOR_SETTING


@pytest.mark.parametrize("platform", ["darwin", "win32"])
def test_nothing_is_set_outside_linux(platform):
    """glibc's variables mean nothing to the allocators of other systems."""
    assert allocator_environment({}, platform=platform) == {}


def test_provenance_records_the_allocator_variables():
    environ = {"MALLOC_TOP_PAD_": "1", "GLIBC_TUNABLES": "x", "HOME": "/root", "PYTHONMALLOC": "malloc"}
    assert allocator_variables(environ) == {"GLIBC_TUNABLES": "x", "MALLOC_TOP_PAD_": "1"}


def test_the_jobs_of_a_run_inherit_the_setting(demo_run):
    """The Snakefile puts the setting in the environment at parse time; the report job records
    what it had in provenance.json (the test's own environment decides which is expected)."""
    _, results = demo_run
    prov = json.loads((results / "provenance.json").read_text())
    expected = allocator_variables(os.environ) or allocator_environment(os.environ)
    assert prov["allocator"] == expected


def test_the_objects_alive_at_a_stages_end_are_left_to_the_exit(tmp_path):
    """gc.freeze (Python's gc module documentation): the frozen objects leave every later
    collection, the one at the interpreter's exit included; a job's log ends the stage."""
    import gc
    from types import SimpleNamespace

    from lagsieve.stages.common import logged

    gc.unfreeze()
    try:
        with logged(SimpleNamespace(log=[str(tmp_path / "stage.log")])):
            pass
        assert gc.get_freeze_count() > 0
    finally:
        gc.unfreeze()
    assert gc.get_freeze_count() == 0
