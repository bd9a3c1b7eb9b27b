"""Reading a study config's YAML safely: bounded, strict and with line numbers.

A config is a small hand-written file, so this reader refuses what no config needs and
what could hurt: files over ``MAX_BYTES``, anchors and aliases that expand beyond
``MAX_NODES`` nodes (a few lines of aliases can stand for billions of values), aliases that
refer to themselves, and a key written twice in one mapping (YAML keeps the last silently,
so a second ``screen:`` block would drop the first block's lags and seed without a word).
Every refusal is one :class:`~lagsieve.errors.InputProblem` with the file and the line.
"""
from __future__ import annotations

from pathlib import Path

import yaml

from lagsieve.errors import InputErrors, InputProblem

# libyaml's parser when PyYAML was built with it (same safety, about ten times faster)
_BaseLoader = getattr(yaml, "CSafeLoader", yaml.SafeLoader)

MAX_BYTES = 1_000_000  # a study config is a few kilobytes; a megabyte is already absurd
MAX_NODES = 100_000  # values after expanding every alias


class _Loader(_BaseLoader):
    """The safe loader; composition is checked by :func:`_check_graph` before construction."""


def _check_graph(root: yaml.Node, shown: str) -> list[InputProblem]:
    """Duplicate keys, self-referring aliases and the expanded size of the node graph.

    Aliases make the graph a DAG whose nodes are shared; the expanded size is computed once
    per node (memoised), so a bomb is measured in microseconds and never built.
    """
    problems: list[InputProblem] = []
    size: dict[int, int] = {}
    on_path: set[int] = set()

    def visit(node: yaml.Node) -> int:
        key = id(node)
        if key in size:
            return size[key]
        if key in on_path:
            problems.append(InputProblem(
                what="an alias refers to the mapping or list that contains it",
                fix="write the values out instead of the alias", file=shown, row=node.start_mark.line + 1))
            return MAX_NODES + 1
        on_path.add(key)
        total = 1
        if isinstance(node, yaml.MappingNode):
            _duplicate_keys(node, shown, problems)
            for k, v in node.value:
                total += visit(k) + visit(v)
        elif isinstance(node, yaml.SequenceNode):
            for item in node.value:
                total += visit(item)
        on_path.discard(key)
        size[key] = total
        return total

    expanded = visit(root)
    if expanded > MAX_NODES and not problems:
        problems.append(InputProblem(
            what=f"anchors and aliases expand to more than {MAX_NODES:,} values",
            fix="write the config without nested aliases (a study config needs no more than a few hundred values)",
            file=shown))
    return problems


def _duplicate_keys(node: yaml.MappingNode, shown: str, problems: list[InputProblem]) -> None:
    seen: dict[str, int] = {}
    for k, _ in node.value:
        if not isinstance(k, yaml.ScalarNode):
            continue
        line = k.start_mark.line + 1
        if k.value in seen:
            problems.append(InputProblem(
                what=f"key {_short(k.value)!r} is written twice (first on line {seen[k.value]}); YAML would keep "
                     "only the last one", fix="merge the two blocks into one", file=shown, row=line))
        else:
            seen[k.value] = line


def _short(text: str, limit: int = 40) -> str:
    return text if len(text) <= limit else text[: limit - 3] + "..."


def read_yaml(path: str | Path, shown: str | None = None):
    """The YAML document in ``path`` as Python objects, or :class:`InputErrors`.

    ``shown`` is the file name used in messages (default: the path as given).
    """
    path = Path(path)
    shown = shown or str(path)
    data = path.read_bytes()[: MAX_BYTES + 1]
    if len(data) > MAX_BYTES:
        raise InputErrors([InputProblem(what=f"config is larger than {MAX_BYTES // 1000:,} kB",
                                        fix="give the study config, not a data file", file=shown)])
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise InputErrors([InputProblem(what="config is not UTF-8 text", fix="save it as UTF-8", file=shown)]) from None
    loader = _Loader(text)
    try:
        root = loader.get_single_node()
        if root is None:
            return None
        problems = _check_graph(root, shown)
        if problems:
            raise InputErrors(problems)
        return loader.construct_document(root)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        row = mark.line + 1 if mark is not None else None
        what = getattr(exc, "problem", None) or "not valid YAML"
        raise InputErrors([InputProblem(what=f"YAML syntax error: {what}",
                                        fix="fix the indentation or quoting on that line", file=shown, row=row)]) from None
    finally:
        loader.dispose()
