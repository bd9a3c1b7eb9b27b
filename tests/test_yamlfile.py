"""The config's YAML reader: bounded, strict about duplicate keys, one line per problem.

Sources: the YAML 1.2 spec says mapping keys are unique (section 3.2.1.1), yet PyYAML keeps
the last of two equal keys silently; the "billion laughs" expansion of nested aliases is a
well-known attack on YAML and XML parsers (common knowledge, no single reference).
"""
from __future__ import annotations

import time

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
    t0 = time.perf_counter()
    (line,) = _lines(f)
    assert "expand to more than 100,000 values" in line
    assert time.perf_counter() - t0 < 5  # a generous bound: the check is linear in the file, not the expansion
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
