"""The files of a study that the workflow tracks, named without reading them: the condition
stage's per-fish samples (:func:`sample_paths`), the draws and vintages tables of the responses
(:func:`estimate_paths`), and the paths the workflow engine would misread
(:func:`pattern_problems`). The Snakefile and its rules import this module to plan a run, so it
imports neither pandas nor numpy (planning a run with them cost the workflow engine's process
their import, about 0.5 s of CPU, before its first job)."""
from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

from lagsieve.errors import InputProblem

if TYPE_CHECKING:
    from lagsieve.io.config import Study


def sample_paths(study: Study) -> list[Path]:
    """The condition stage's per-fish files, resolved against the config's folder."""
    if study.condition is None:
        return []
    specs = study.condition.get("samples") or []
    specs = [specs] if isinstance(specs, (str, dict)) else specs
    return [study.base_dir / (sp["path"] if isinstance(sp, dict) else str(sp)) for sp in specs
            if isinstance(sp, (str, dict)) and (not isinstance(sp, dict) or isinstance(sp.get("path"), str))]


def estimate_paths(responses: list[dict], base_dir: str | Path) -> list[Path]:
    """Every draws and vintages file of ``responses`` (config entries), resolved against the
    config's folder: inputs of the evidence job."""
    return [Path(base_dir) / r[k] for r in responses for k in ("draws", "vintages") if r.get(k)]


def pattern_problems(paths: list[str]) -> list[InputProblem]:
    """Paths the workflow engine would misread: it takes '{...}' in any file name it tracks for
    a placeholder and has no escape for a literal brace."""
    bad = [p for p in dict.fromkeys(paths) if "{" in p or "}" in p]
    if not bad:
        return []
    more = f" (so do {len(bad) - 1} more paths of the study)" if len(bad) > 1 else ""
    return [InputProblem(what=f"the path holds '{{' or '}}'{more}, which the workflow engine reads as a placeholder",
                         fix="rename the folder or file without braces (or move the study)", file=bad[0])]
