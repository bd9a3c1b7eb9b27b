"""The package as a user installs it: a wheel, installed (not editable) in a fresh virtual
environment, used from a folder unrelated to the source checkout.

Fast checks read pyproject.toml and the source tree: every subpackage is listed, every runtime
dependency is imported at run time. The slow ones build the wheel and check what it ships,
then run `lagsieve init / check / run / ledger` with the installed script, and finally damage
the installation to see the one-line message for a missing internal file.
"""
from __future__ import annotations

import ast
import os
import re
import shutil
import subprocess
import sys
import tomllib
import venv
import zipfile
from pathlib import Path

import pytest
import yaml

from helpers import REPO

PYPROJECT = tomllib.loads((REPO / "pyproject.toml").read_text(encoding="utf-8"))
SRC = REPO / "src" / "lagsieve"
WORKFLOW = REPO / "workflow"
# distribution name -> import name, where they differ
IMPORT_NAME = {"pyyaml": "yaml", "pillow": "PIL", "scikit-learn": "sklearn", "python-docx": "docx"}
# dependencies used without an import statement: distribution -> text in src/ that uses it
USED_WITHOUT_IMPORT = {"snakemake": '"-m", "snakemake"',  # the CLI starts `python -m snakemake`
                       "pyarrow": "pd.read_parquet(",      # pandas' parquet engine
                       "pillow": "mpimg.imread("}          # matplotlib reads the figures' PNGs with Pillow


def _dist_name(requirement: str) -> str:
    return re.match(r"[A-Za-z0-9_.-]+", requirement).group(0).lower()


def _imports_in(folders) -> set[str]:
    """Top-level module names imported anywhere in the .py files under ``folders``."""
    names = set()
    for folder in folders:
        for py in folder.rglob("*.py"):
            for node in ast.walk(ast.parse(py.read_text(encoding="utf-8"))):  # real imports, never prose
                if isinstance(node, ast.Import):
                    names |= {a.name.split(".")[0] for a in node.names}
                elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                    names.add(node.module.split(".")[0])
    return names


def test_every_subpackage_is_listed():
    listed = set(PYPROJECT["tool"]["setuptools"]["packages"])
    found = {".".join(p.parent.relative_to(SRC.parent).parts) for p in SRC.rglob("__init__.py")
             if "__pycache__" not in p.parts}
    assert "lagsieve.io" in found and "lagsieve.stats" in found  # the walk does see subpackages
    assert found - listed == set(), "add these to [tool.setuptools] packages in pyproject.toml"
    assert PYPROJECT["tool"]["setuptools"]["package-dir"]["lagsieve.workflow"] == "workflow"
    assert "lagsieve.workflow" in listed and (WORKFLOW / "__init__.py").is_file()
    assert listed - found - {"lagsieve.workflow"} == set(), "listed packages that do not exist"


def test_runtime_dependencies_are_used_at_run_time():
    used = _imports_in([SRC, WORKFLOW])
    deps = [_dist_name(r) for r in PYPROJECT["project"]["dependencies"]]
    unused = [d for d in deps if IMPORT_NAME.get(d, d).replace("-", "_") not in used]
    source = "".join(py.read_text(encoding="utf-8") for py in SRC.rglob("*.py"))
    unused = [d for d in unused if USED_WITHOUT_IMPORT.get(d, "\0") not in source]
    assert unused == [], "runtime dependencies nothing in src/ or workflow/ imports (move them to an extra)"
    # and what the package imports from outside the standard library is declared
    third_party = used - set(sys.stdlib_module_names) - {"lagsieve", "__future__"}
    extras = PYPROJECT["project"]["optional-dependencies"]
    optional = [_dist_name(r) for name, reqs in extras.items() if name != "test" for r in reqs]  # e.g. pdf
    declared = {IMPORT_NAME.get(d, d).replace("-", "_") for d in deps + optional}
    assert third_party - declared == set()
    test_extra = {_dist_name(r) for r in extras["test"]}
    assert {"playwright", "snakefmt"} <= test_extra and "websocket-client" not in test_extra


def test_tests_share_helpers_through_one_module():
    """Shared test code lives in conftest.py fixtures or helpers.py: no test module imports
    conftest or another test module, and nothing edits sys.path or sets PYTHONPATH."""
    imports_test_code = re.compile(r"^\s*(from|import)\s+(conftest|test_\w+)\b", flags=re.M)
    assert imports_test_code.search("x = 1\nfrom test_report import run_study\n")  # the pattern bites
    offenders = []
    for py in (REPO / "tests").glob("*.py"):
        text = py.read_text(encoding="utf-8")
        if imports_test_code.search(text):
            offenders.append(f"{py.name}: imports conftest or a test module")
        if py.name != "test_packaging.py" and re.search(r"sys\.path\.(insert|append)|PYTHONPATH=", text):
            offenders.append(f"{py.name}: edits sys.path or PYTHONPATH")
    assert offenders == []


# ----------------------------------------------------------------------------- the wheel
def _source_copy(dest: Path) -> Path:
    """What the wheel is built from, copied so the build writes nothing into the checkout."""
    skip = shutil.ignore_patterns("__pycache__", "*.pyc", "*.egg-info", ".snakemake")
    for name in ("pyproject.toml", "README.md"):
        shutil.copy2(REPO / name, dest / name)
    for name in ("src", "workflow"):
        shutil.copytree(REPO / name, dest / name, ignore=skip)
    return dest


@pytest.fixture(scope="module")
def source(tmp_path_factory) -> Path:
    return _source_copy(tmp_path_factory.mktemp("source"))


@pytest.fixture(scope="module")
def wheel(source, tmp_path_factory) -> Path:
    src = source
    out = tmp_path_factory.mktemp("wheel")
    proc = subprocess.run([sys.executable, "-m", "pip", "wheel", "--no-deps", "-q", "-w", str(out), str(src)],
                          capture_output=True, text=True, timeout=600)
    assert proc.returncode == 0, proc.stdout[-2000:] + proc.stderr[-2000:]
    (whl,) = out.glob("lagsieve-*.whl")
    return whl


def _shipped_source_files(source: Path) -> dict[str, Path]:
    """Wheel path -> source file, for the files the installed tool needs besides its modules:
    the whole workflow folder, and every template and static file of any subpackage."""
    want = {}
    workflow, src = source / "workflow", source / "src" / "lagsieve"
    for f in workflow.rglob("*"):
        if f.is_file():
            want["lagsieve/workflow/" + f.relative_to(workflow).as_posix()] = f
    for folder in [*src.rglob("templates"), *src.rglob("static")]:
        for f in folder.rglob("*"):
            if f.is_file():
                want["lagsieve/" + f.relative_to(src).as_posix()] = f
    return want


@pytest.mark.slow
def test_wheel_ships_workflow_schema_and_templates(wheel, source):
    """Compared with the copy of the source tree the wheel was built from (the checkout may
    change meanwhile)."""
    with zipfile.ZipFile(wheel) as z:
        names = set(z.namelist())
        want = _shipped_source_files(source)
        assert any("/templates/" in n for n in want) and any("/static/" in n for n in want)
        for must in ("lagsieve/workflow/Snakefile", "lagsieve/workflow/schemas/config.schema.yaml",
                     "lagsieve/cli.py", "lagsieve/__main__.py"):
            assert must in names, must
        assert any(n.startswith("lagsieve/workflow/rules/") and n.endswith(".smk") for n in names)
        assert any(n.startswith("lagsieve/workflow/scripts/") for n in names)
        missing = sorted(set(want) - names)
        assert missing == [], "files the wheel does not ship (see package-data in pyproject.toml)"
        for name, f in want.items():  # byte for byte
            assert z.read(name) == f.read_bytes(), name
        src = source / "src" / "lagsieve"
        modules = {"lagsieve/" + p.relative_to(src).as_posix() for p in src.rglob("*.py")}
        assert modules - names == set()
        entry = z.read(next(n for n in names if n.endswith(".dist-info/entry_points.txt"))).decode()
        assert "lagsieve = lagsieve.cli:main" in entry


# ----------------------------------------------------------------------------- installed, elsewhere
class Installed:
    """A virtual environment with the wheel installed; runs its commands from ``cwd``."""

    def __init__(self, root: Path, wheel: Path, cwd: Path):
        self.root, self.cwd = root, cwd
        # the system's site-packages provide numpy, pandas, snakemake ... (no download);
        # lagsieve itself comes from the wheel, installed into the venv, not editable
        venv.EnvBuilder(system_site_packages=True, with_pip=False, symlinks=True).create(root)
        self.python = root / "bin" / "python"
        self.env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "PYTHONHOME")}
        self.env.update(MPLBACKEND="Agg", VIRTUAL_ENV=str(root), PATH=f"{root / 'bin'}:{os.environ['PATH']}")
        proc = subprocess.run([sys.executable, "-m", "pip", "--python", str(self.python), "install", "--no-deps",
                               "--no-index", "-q", str(wheel)], capture_output=True, text=True, timeout=600)
        assert proc.returncode == 0, proc.stderr[-2000:]

    def run(self, *args, timeout=600) -> subprocess.CompletedProcess:
        return subprocess.run([*map(str, args)], cwd=self.cwd, env=self.env, capture_output=True, text=True,
                              timeout=timeout)

    def lagsieve(self, *args, timeout=600) -> subprocess.CompletedProcess:
        return self.run(self.root / "bin" / "lagsieve", *args, timeout=timeout)

    def package_dir(self) -> Path:
        out = self.run(self.python, "-c", "import lagsieve, pathlib; print(pathlib.Path(lagsieve.__file__).parent)")
        return Path(out.stdout.strip())


@pytest.fixture(scope="module")
def installed(wheel, tmp_path_factory) -> Installed:
    return Installed(tmp_path_factory.mktemp("venv"), wheel, tmp_path_factory.mktemp("elsewhere"))


@pytest.mark.slow
def test_installed_package_is_the_wheel(installed):
    probe = installed.run(installed.python, "-c",
                          "import sys, lagsieve, lagsieve.workflow as w, lagsieve.io.config as c; "
                          "print(lagsieve.__file__); print(w.__file__); print(c.WORKFLOW); print(*sys.path, sep='\\n')")
    assert probe.returncode == 0, probe.stderr
    init, wf, workflow_dir, *path = probe.stdout.splitlines()
    root = installed.root.resolve()
    for f in (init, wf, workflow_dir):
        assert root in Path(f).resolve().parents, f  # inside the venv, not the checkout
    checkout = {REPO.resolve(), (REPO / "src").resolve(), WORKFLOW.resolve()}
    assert not checkout & {Path(p).resolve() for p in path if p}, path
    assert REPO.resolve() not in Path(installed.cwd).resolve().parents
    assert installed.run(installed.python, "-m", "lagsieve", "--help").returncode == 0
    assert installed.lagsieve("--version").stdout.startswith("lagsieve ")


@pytest.mark.slow
def test_installed_tool_runs_a_study_from_anywhere(installed):
    study = installed.cwd / "study"
    assert installed.lagsieve("init", study).returncode == 0
    cfg = study / "config.yaml"
    raw = yaml.safe_load(cfg.read_text(encoding="utf-8"))
    assert raw["screen"]["surrogates"] == 999
    raw["screen"]["surrogates"] = 49  # a full run in well under a minute
    cfg.write_text(yaml.safe_dump(raw, sort_keys=False), encoding="utf-8")

    check = installed.lagsieve("check", cfg)
    assert check.returncode == 0, check.stderr
    assert "ok: study 'caldrin_shelf_demo': 6 responses, 10 drivers" in check.stdout

    dry = installed.lagsieve("run", cfg, "--cores", "2", "--", "--dry-run")
    assert dry.returncode == 0, dry.stdout[-3000:] + dry.stderr[-3000:]
    assert "screen" in dry.stdout + dry.stderr and not (study / "results" / "caldrin_shelf_demo").exists()

    full = installed.lagsieve("run", cfg, "--cores", "2", timeout=900)
    assert full.returncode == 0, full.stdout[-3000:] + full.stderr[-3000:]
    res = study / "results" / "caldrin_shelf_demo"
    for name in ("screen.csv", "evidence.csv", "report.html", "provenance.json"):
        assert (res / name).stat().st_size > 100, name

    ledger = installed.lagsieve("ledger", cfg)
    assert ledger.returncode == 0, ledger.stderr
    assert "caldrin_shelf_demo" in ledger.stdout


@pytest.mark.slow
def test_missing_internal_file_is_one_line(installed):
    """Runs last: it damages the installation on purpose."""
    study = installed.cwd / "damaged"
    assert installed.lagsieve("init", study).returncode == 0
    schema = installed.package_dir() / "workflow" / "schemas" / "config.schema.yaml"
    schema.unlink()
    for command in (["check", study / "config.yaml"], ["run", study / "config.yaml", "--", "--dry-run"]):
        proc = installed.lagsieve(*command)
        assert proc.returncode == 2, proc.stderr
        assert "Traceback" not in proc.stderr
        lines = proc.stderr.strip().splitlines()
        assert len(lines) == 1, proc.stderr
        assert "config.schema.yaml" in lines[0] and "reinstall" in lines[0]
