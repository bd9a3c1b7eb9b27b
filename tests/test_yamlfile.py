"""The config's YAML reader: bounded, strict about duplicate keys, one line per problem.

Sources: the YAML 1.2 spec says mapping keys are unique (section 3.2.1.1), yet PyYAML keeps
the last of two equal keys silently; the "billion laughs" expansion of nested aliases is a
well-known attack on YAML and XML parsers (common knowledge, no single reference).
"""
from __future__ import annotations


import pytest

from lagsieve.errors import InputErrors
from lagsieve.io import yamlfile
from lagsieve.io.yamlfile import read_yaml


def _lines(path) -> list[str]:
    with pytest.raises(InputErrors) as info:
        read_yaml(path)
    return [p.line() for p in info.value.problems]


def test_duplicate_top_level_key_names_both_lines(tmp_path):
    f = tmp_path / "c.yaml"
    f.write_text("study: x\nscreen:\n  lags: [0, 1]\n  seed: 4\nscreen:\n  surrogates: 99\n")
    (line,) = _lines(f)
    assert line.startswith(f"{f}:5: key 'screen' is written twice (first on line 2)")


def test_duplicate_nested_key_is_found_too(tmp_path):
    f = tmp_path / "c.yaml"
    f.write_text("screen:\n  seed: 1\n  lags: [0]\n  seed: 2\ndrivers:\n  - {id: a, id: b}\n")
    lines = _lines(f)
    assert len(lines) == 2  # every duplicate in one pass
    assert ":4: key 'seed'" in lines[0] and ":6: key 'id'" in lines[1]


def test_alias_bomb_is_refused_fast_and_small(tmp_path):
    rows = ['a0: &a0 ["x","x","x","x","x","x","x","x","x"]']
    rows += [f"a{i}: &a{i} [" + ",".join([f"*a{i - 1}"] * 9) + "]" for i in range(1, 9)]  # 9**9 values
    f = tmp_path / "bomb.yaml"
    f.write_text("\n".join(rows) + "\n")
    (line,) = _lines(f)  # measured, never built: the check is linear in the file, not the expansion
    assert "expand to more than 100,000 values" in line
    assert len(line) < 300


def test_self_referring_alias_is_refused(tmp_path):
    f = tmp_path / "c.yaml"
    f.write_text("a: &x\n  b: 1\n  c: *x\n")
    (line,) = _lines(f)
    assert line.startswith(f"{f}:1: an alias refers to the mapping or list that contains it")


def test_ordinary_anchors_and_merge_keys_still_work(tmp_path):
    f = tmp_path / "c.yaml"
    f.write_text("base: &b {lags: [0, 1]}\nscreen: *b\nother: {<<: *b, seed: 2}\n")
    assert read_yaml(f) == {"base": {"lags": [0, 1]}, "screen": {"lags": [0, 1]},
                            "other": {"lags": [0, 1], "seed": 2}}


def test_oversized_file_is_refused_without_reading_it_all(tmp_path, monkeypatch):
    monkeypatch.setattr(yamlfile, "MAX_BYTES", 100)
    f = tmp_path / "big.yaml"
    f.write_text("a: " + "x" * 500 + "\n")
    (line,) = _lines(f)
    assert "config is larger than" in line


def test_syntax_error_gives_its_line(tmp_path):
    f = tmp_path / "c.yaml"
    f.write_text("study: x\nlags: [1, 2\n")
    (line,) = _lines(f)
    assert line.startswith(f"{f}:3: YAML syntax error") or line.startswith(f"{f}:2: YAML syntax error")


def test_not_utf8_and_empty(tmp_path):
    f = tmp_path / "c.yaml"
    f.write_bytes(b"study: \xff\xfe\n")
    assert "not UTF-8" in _lines(f)[0]
    g = tmp_path / "e.yaml"
    g.write_text("")
    assert read_yaml(g) is None


def test_whole_number_floats_become_ints_where_the_schema_wants_integers(tmp_path):
    """JSON Schema (2020-12, section 6.1.1 of the validation vocabulary) counts 1.0 as an
    integer, so validation passes it; the study must hold real ints."""
    from lagsieve.io.config import load_study
    from lagsieve.demo import demo_config_text, write_demo

    write_demo(tmp_path / "data")
    text = demo_config_text("data").replace("  seed: 20261201 ", "  seed: 20261201.0 ")
    text = text.replace("  surrogates: 999 ", "  surrogates: 99.0 ")
    assert "20261201.0" in text and "99.0" in text
    (tmp_path / "c.yaml").write_text(text)
    study = load_study(tmp_path / "c.yaml")
    assert type(study.screen["seed"]) is int and study.screen["seed"] == 20261201
    assert type(study.screen["surrogates"]) is int and study.screen["surrogates"] == 99


def test_fractional_float_in_an_integer_place_is_one_line(tmp_path):
    from lagsieve.io.config import load_study
    from lagsieve.demo import demo_config_text, write_demo

    write_demo(tmp_path / "data")
    (tmp_path / "c.yaml").write_text(demo_config_text("data").replace("  surrogates: 999 ", "  surrogates: 99.5 "))
    with pytest.raises(InputErrors) as info:
        load_study(tmp_path / "c.yaml")
    (line,) = [p.line() for p in info.value.problems]
    assert "screen.surrogates" in line and "99.5" in line


def test_results_are_written_with_the_users_umask(tmp_path):
    """Common practice (POSIX open(2)): a new file gets mode 0666 less the umask; a
    temporary file from mkstemp gets 0600, which the atomic writer must not keep."""
    import os

    from lagsieve.io.files import write_text

    old = os.umask(0o022)
    try:
        write_text("x\n", tmp_path / "a.txt")
        os.umask(0o027)
        write_text("x\n", tmp_path / "b.txt")
    finally:
        os.umask(old)
    assert (tmp_path / "a.txt").stat().st_mode & 0o777 == 0o644
    assert (tmp_path / "b.txt").stat().st_mode & 0o777 == 0o640


def test_a_config_that_is_a_folder_or_a_pipe_is_named_as_such(tmp_path):
    import os

    from lagsieve.io.config import load_study

    for path, words in ((tmp_path, "the config path is a folder"),):
        with pytest.raises(InputErrors) as info:
            load_study(path)
        assert words in info.value.problems[0].line()
    fifo = tmp_path / "c.yaml"
    os.mkfifo(fifo)
    with pytest.raises(InputErrors) as info:  # must not block on opening the pipe
        load_study(fifo)
    assert "not a regular file" in info.value.problems[0].line()


def test_check_refuses_braces_in_a_path_with_one_line(new_study, tmp_path):
    """The workflow engine reads '{...}' in a tracked file name as a placeholder (Snakemake
    documentation on wildcards); such a study is refused at check, not half-way."""
    import shutil

    from helpers import lagsieve

    braced = tmp_path / "study {2024}"
    shutil.copytree(new_study.parent, braced)
    proc = lagsieve("check", braced / "config.yaml")
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "which the workflow engine reads as a placeholder" in lines[0]


def test_schema_messages_never_expand_a_large_value(new_study):
    """A wrong value that is a large structure (here 20,000 nested lists) is named, not printed."""
    from lagsieve.io.config import load_study

    text = new_study.read_text()
    big = "[" + ", ".join(["[1, 2, 3]"] * 20000) + "]"
    new_study.write_text(text.replace("  seed: 20261201 ", f"  seed: {big} "))
    with pytest.raises(InputErrors) as info:
        load_study(new_study)
    lines = [p.line() for p in info.value.problems]
    assert len(lines) == 1 and "screen.seed" in lines[0]
    assert len(lines[0]) < 400
