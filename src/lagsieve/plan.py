"""What the Snakemake workflow needs to know about its studies, at parse time.

Kept here (not in the Snakefile) so that it is importable and testable without Snakemake.
"""
from __future__ import annotations

import sys
from dataclasses import dataclass
from pathlib import Path

from .config import Study, load_study, slug
from .errors import InputErrors, report_problems


@dataclass(frozen=True)
class PlannedStudy:
    study: Study
    config_path: str
    input_paths: list[str]
    response_inputs: dict[str, list[str]]  # response slug -> files holding it or its drivers

    @property
    def response_slugs(self) -> list[str]:
        return [slug(r) for r in self.study.response_ids]


def study_configs(config: dict, default: str = "config/config.yaml") -> list[str]:
    """Config paths from Snakemake's config: ``study_config`` (one path, or several separated by
    commas) or ``studies`` (a list), else the default demo config."""
    if config.get("studies"):
        items = config["studies"]
        return [str(p) for p in (items if isinstance(items, list) else str(items).split(","))]
    value = config.get("study_config", default)
    return [p for p in str(value).split(",") if p]


FULL_CHECK_LIMIT = 50


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
    each study's jobs (``lagsieve check`` checks a study on its own).
    """
    planned: dict[str, PlannedStudy] = {}
    paths = study_configs(config)
    full = check and str(config.get("check_inputs", len(paths) <= FULL_CHECK_LIMIT)).lower() in ("true", "1", "yes")
    try:
        for path in paths:
            annual = None
            if full:
                from .stages import check_study

                st, annual, _, _ = check_study(path)
            else:
                st = load_study(path)
            if st.study in planned:
                print(f"{path}: key 'study': id '{st.study}' is used by two configs; give each study its own id",
                      file=sys.stderr)
                sys.exit(2)
            inputs = []
            for spec in st.inputs:
                p = Path(spec["path"])
                inputs.append(str(p if p.is_absolute() else st.base_dir / p))
            planned[st.study] = PlannedStudy(st, str(st.path), inputs, _response_inputs(st, annual, inputs))
    except InputErrors as exc:
        sys.exit(report_problems(exc))
    return planned
