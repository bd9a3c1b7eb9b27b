"""What the Snakefile needs at parse time: every study of the run loaded and checked
(:func:`plan_studies`), its response slugs, the input files of each response; the run config
that `lagsieve run` hands to Snakemake (:func:`write_run_config`), with what its own check
found (:func:`checked_entry`), so that the Snakefile does not check the same files again."""
from __future__ import annotations

import json
import sys
from dataclasses import dataclass
from pathlib import Path

import yaml

from lagsieve.condition.settings import series_ids
from lagsieve.errors import InputErrors, raise_any, report_problems
from lagsieve.io.config import Study, load_study
from lagsieve.io.files import sha256_file, sha256_text, write_text
from lagsieve.io.names import slug
from lagsieve.io.provenance import tool_version
from lagsieve.io.studyfiles import pattern_problems, sample_paths

FULL_CHECK_LIMIT = 50


@dataclass(frozen=True)
class PlannedStudy:
    study: Study
    config_path: str
    input_paths: list[str]
    response_inputs: dict[str, list[str]]  # response slug -> files holding it or its drivers
    sample_paths: list[str] = ()           # the condition stage's per-fish files
    condition_responses: frozenset = frozenset()  # response slugs that need condition.csv

    @property
    def response_slugs(self) -> list[str]:
        return [slug(r) for r in self.study.response_ids]

    @property
    def condition(self) -> dict | None:
        """The study's ``condition:`` section (defaults filled), None without one."""
        return self.study.condition


def study_configs(config: dict, default: str = "config/config.yaml") -> list[str]:
    """Config paths from Snakemake's config: ``studies`` (a list), or ``study_config``: one
    path, taken whole when it names a file (a folder ``hake, 2024/`` keeps its comma), else
    several separated by commas; without either, the default demo config."""
    if config.get("studies"):
        items = config["studies"]
        return [str(p) for p in (items if isinstance(items, list) else str(items).split(","))]
    value = str(config.get("study_config", default))
    if Path(value).is_file():
        return [value]
    return [p for p in value.split(",") if p]


def write_run_config(study_config: str | Path | list, out: str | Path, path: str | Path,
                     batch: int | str | None = None, checked: dict | None = None) -> Path:
    """Write the workflow's config for one study, or a list of them, to ``path`` (a YAML file
    that `lagsieve run` hands to Snakemake with ``--configfile``) and return ``path``; ``batch``:
    studies per job (``batch: K``, :mod:`lagsieve.stages.batch`), none when None; ``checked``:
    config path -> :func:`checked_entry` of the studies `lagsieve run` has just checked.

    Values given with ``--config key=value`` are cut at commas (``study_config``), stripped of
    quotes and read as YAML (``a: b`` becomes a mapping, `` #x`` a comment); in a YAML file the
    paths come back exactly, whatever the folders are called (commas, spaces, colons, unicode).
    """
    configs = study_config if isinstance(study_config, list) else [study_config]
    run = {"studies": [str(c) for c in configs], "out": str(out)}
    if batch is not None:
        run["batch"] = int(str(batch).strip())
    if checked:
        run["checked"] = checked
    text = yaml.safe_dump(run, allow_unicode=True, default_style='"', width=float("inf"))
    write_text(text, path)
    return Path(path)


def files_stamp(paths) -> str:
    """A digest of the bytes of the files ``paths`` (in their order) and the tool's version."""
    return sha256_text(json.dumps([tool_version(), *[sha256_file(f) for f in paths]]))


def study_files(st: Study) -> list[str]:
    """What a study's results are made from: its config, input and sample files."""
    return [str(st.path), *[str(p) for p in st.input_paths()], *[str(p) for p in sample_paths(st)]]


def checked_entry(st: Study, annual) -> dict:
    """What the check of a study found that the plan needs (each response's input files), with
    the stamp of the files it read (:func:`files_stamp` of :func:`study_files`): the plan of a
    run takes it in place of its own check while the stamp holds (:func:`plan_studies`)."""
    inputs = [str(p) for p in st.input_paths()]
    return {"stamp": files_stamp(study_files(st)), "response_inputs": _response_inputs(st, annual, inputs)}


def _response_inputs(st: Study, annual, inputs: list[str]) -> dict[str, list[str]]:
    """For every response, the input files that hold it or one of its drivers, so that a
    screen job depends on exactly those files. Without the checked table (large batches),
    every response depends on every input."""
    if annual is None or "file" not in annual:
        return {slug(r): list(inputs) for r in st.response_ids}
    shown = [spec["path"] for spec in st.inputs]
    by_series: dict[str, set[str]] = {}
    for sid, f in zip(annual["series"], annual["file"]):
        by_series.setdefault(sid, set()).add(str(f))
    out = {}
    for r in st.response_ids:
        wanted = {r} | {d["id"] for d in st.drivers_for(r)}
        files = set().union(*(by_series.get(w, set()) for w in wanted))
        out[slug(r)] = [full for full, written in zip(inputs, shown) if written in files] or list(inputs)
    return out


def plan_studies(config: dict, check: bool = True) -> dict[str, PlannedStudy]:
    """Load every study config; a user's mistake prints one line per problem and exits 2.

    Up to ``FULL_CHECK_LIMIT`` studies (or with ``check_inputs=true`` in Snakemake's
    config) every input file is checked too, before any job starts, so a bad input never
    leaves a partial result; larger batches check the configs only and leave the inputs to
    each study's jobs (``lagsieve check`` checks a study on its own). A study that `lagsieve
    run` has just checked (``checked`` in Snakemake's config, :func:`checked_entry`) is not
    checked again while its files are the ones checked: on the demo the second check cost
    every run 1.3-1.4 s before its first job (cProfile of ``snakemake -n``).
    """
    planned: dict[str, PlannedStudy] = {}
    paths = study_configs(config)
    full = check and str(config.get("check_inputs", len(paths) <= FULL_CHECK_LIMIT)).lower() in ("true", "1", "yes")
    handed = config.get("checked") or {}
    try:
        for path in paths:
            st, known = _load(path, full, handed.get(str(path)))
            if st.id in planned:
                print(f"{path}: key 'study': id '{st.id}' is used by two configs; give each study its own id",
                      file=sys.stderr)
                sys.exit(2)
            inputs = [str(p) for p in st.input_paths()]
            samples = [str(p) for p in sample_paths(st)]
            raise_any(pattern_problems([str(st.path), *inputs, *samples, str(config.get("out", ""))]))
            planned[st.id] = PlannedStudy(st, str(st.path), inputs, known or _response_inputs(st, None, inputs),
                                          samples, _condition_responses(st))
    except InputErrors as exc:
        sys.exit(report_problems(exc))
    return planned


def _load(path: str, full: bool, handed: dict | None) -> tuple[Study, dict | None]:
    """A study and each response's input files (None: not known without the inputs read):
    from its check (``full``), or the check handed over by `lagsieve run` while its stamp holds."""
    st = load_study(path) if handed is not None or not full else None
    if handed is not None and handed.get("stamp") == files_stamp(study_files(st)):
        return st, handed["response_inputs"]
    if not full:
        return st, None
    # imported here: the check reads the inputs with pandas, which a run whose studies
    # `lagsieve run` has just checked never imports to plan (lagsieve.io.studyfiles)
    from lagsieve.stages.check import check_study

    st, annual, _, _ = check_study(path)
    inputs = [str(p) for p in st.input_paths()]
    return st, _response_inputs(st, annual, inputs)


def _condition_responses(study: Study) -> frozenset:
    """Slugs of the responses whose screen reads condition.csv (it or a driver is a condition series)."""
    if study.condition is None:
        return frozenset()
    ids = set(series_ids(study.condition.get("age_groups") or {}, study.condition.get("seasons") or {}))
    return frozenset(slug(r) for r in study.response_ids
                     if ({r} | {d["id"] for d in study.drivers_for(r)}) & ids)


def docx_wanted(study: Study) -> bool:
    """``report.docx`` of the config (default true, from the schema)."""
    return bool(study.report.get("docx", True))


def pdf_wanted(study: Study) -> bool:
    """``report.pdf`` of the config; when the key is absent, a PDF is made."""
    value = (study.raw.get("report") or {}).get("pdf")
    return True if value is None else bool(value)
