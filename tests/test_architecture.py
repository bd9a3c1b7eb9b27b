"""The package's structure, checked from its source: layers, circles, function length.

Common practice with no single source: a layered package whose imports flow one way reads
from the bottom up; short functions do one thing. The layer order is the one described in
DEVELOPERS.md.
"""
from __future__ import annotations

import ast
import re
import subprocess
import sys
from pathlib import Path

import pytest

SRC = Path(__file__).resolve().parents[1] / "src" / "lagsieve"

# bottom to top; a module may import only from its own layer or the layers below it
LAYERS = ["formats", "errors", "io", "prep", "stats", "condition", "screen", "evidence", "ledger", "report", "demo", "stages", "pipeline", "cli"]
MAX_FUNCTION_LINES = 80


def _modules() -> list[Path]:
    return sorted(p for p in SRC.rglob("*.py") if "__pycache__" not in p.parts)


def _layer(module: str) -> str | None:
    """The layer of a dotted module name inside lagsieve (``lagsieve.stats.splines`` -> stats)."""
    parts = module.split(".")
    if parts[0] != "lagsieve" or len(parts) < 2:
        return None
    head = parts[1]
    if head in ("__main__", "__init__"):
        return "cli"
    return head if head in LAYERS else None


def _own_module(path: Path) -> str:
    rel = path.relative_to(SRC.parent).with_suffix("")
    return ".".join(rel.parts)


def _imports(tree: ast.AST, own: str) -> list[tuple[str, int, bool]]:
    """(imported module, line, inside a function) for every lagsieve import."""
    out = []
    funcs = [n for n in ast.walk(tree) if isinstance(n, (ast.FunctionDef, ast.AsyncFunctionDef))]
    inner = {id(n) for f in funcs for n in ast.walk(f) if n is not f}
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                pkg = own.split(".")[: -node.level]
                base = ".".join(pkg + ([base] if base else []))
            names = [f"{base}.{a.name}" for a in node.names] if base == "lagsieve" else [base]
            out += [(n, node.lineno, id(node) in inner) for n in names]
        elif isinstance(node, ast.Import):
            out += [(a.name, node.lineno, id(node) in inner) for a in node.names]
    return [(m, line, nested) for m, line, nested in out if m.startswith("lagsieve")]


def test_every_layer_is_a_folder_or_module():
    for layer in LAYERS:
        assert (SRC / layer).is_dir() or (SRC / f"{layer}.py").is_file(), layer


def test_imports_flow_one_way():
    upward = []
    for path in _modules():
        own = _own_module(path)
        mine = _layer(own)
        if mine is None:
            continue
        for module, line, _ in _imports(ast.parse(path.read_text()), own):
            theirs = _layer(module)
            if theirs is not None and LAYERS.index(theirs) > LAYERS.index(mine):
                upward.append(f"{path.relative_to(SRC)}:{line}: {mine} imports {module} ({theirs})")
    assert not upward, "\n".join(upward)


def test_no_import_circles_between_modules():
    graph: dict[str, set[str]] = {}
    for path in _modules():
        own = _own_module(path)
        targets = set()
        for module, _, _ in _imports(ast.parse(path.read_text()), own):
            for cand in (module, module.rsplit(".", 1)[0]):
                if (SRC.parent / Path(*cand.split("."))).with_suffix(".py").is_file():
                    targets.add(cand)
                    break
        graph[own] = targets - {own}

    state: dict[str, int] = {}
    circles = []

    def visit(node, trail):
        state[node] = 1
        for nxt in graph.get(node, ()):
            if state.get(nxt) == 1:
                circles.append(" -> ".join(trail[trail.index(nxt):] + [nxt]))
            elif nxt not in state:
                visit(nxt, trail + [nxt])
        state[node] = 2

    for node in sorted(graph):
        if node not in state:
            visit(node, [node])
    assert not circles, "\n".join(circles)


@pytest.mark.parametrize("path", _modules(), ids=lambda p: str(p.relative_to(SRC)))
def test_functions_are_short(path):
    long = []
    for node in ast.walk(ast.parse(path.read_text())):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            n = node.end_lineno - node.lineno + 1
            if n > MAX_FUNCTION_LINES:
                long.append(f"{node.name}: {n} lines")
    assert not long, long


def test_imports_inside_functions_say_why():
    """An import inside a function is allowed only with a comment on its line or the line
    above that says why (a measured start-up cost, an optional library)."""
    unexplained = []
    for path in _modules():
        lines = path.read_text().splitlines()
        for module, line, nested in _imports(ast.parse("\n".join(lines)), _own_module(path)):
            if nested and "#" not in lines[line - 1] and not lines[line - 2].strip().startswith("#"):
                unexplained.append(f"{path.relative_to(SRC)}:{line}: {module}")
    assert not unexplained, "\n".join(unexplained)


def test_planning_a_run_imports_no_pandas():
    """What the Snakefile and its rules import to plan a run (their `from lagsieve... import`
    lines) leaves out pandas, numpy, scipy and matplotlib: the workflow engine's process imports
    it before its first job (DEVELOPERS.md, "Start-up and the allocator"). Measured on this
    shared 2-core machine, pandas and numpy cost that process about 0.5 s of CPU."""
    workflow = SRC.parents[1] / "workflow"
    names = {m.groups() for f in [workflow / "Snakefile", *workflow.glob("rules/*.smk")]
             for m in re.finditer(r"^from (lagsieve[\w.]*) import (\w+)", f.read_text(), re.M)}
    code = ("import importlib, sys\n"
            f"for module, name in {sorted(names)!r}:\n"
            "    importlib.import_module(module)\n"
            "    try:\n"
            "        importlib.import_module(module + '.' + name)\n"
            "    except ImportError:\n"
            "        pass\n"
            "print(sorted(m for m in ('pandas', 'numpy', 'scipy', 'matplotlib') if m in sys.modules))")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    assert len(names) >= 5 and proc.stdout.strip() == "[]"
