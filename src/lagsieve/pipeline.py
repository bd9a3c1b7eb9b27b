"""The pipeline's stages under their old names: every name of :mod:`lagsieve.stages` that tests,
benchmarks and older scripts take from ``lagsieve.pipeline``, imported on first use so that
``from lagsieve.pipeline import run_screen`` costs the screen's imports only (a stage's module
imports what it uses; the report's matplotlib is imported by :mod:`lagsieve.stages.report`).
New code imports the stage module itself (``lagsieve.stages.screen``)."""
from __future__ import annotations

import importlib

# the module that defines each name
_NAMES = {
    "lagsieve.stages.common": ("SCREEN_COLUMNS", "EVIDENCE_COLUMNS", "logged", "ordered", "load_table",
                               "response_dirs"),
    "lagsieve.stages.check": ("check_study", "pattern_problems", "sample_paths", "check_samples",
                              "condition_settings"),
    "lagsieve.stages.plan": ("PlannedStudy", "plan_studies", "study_configs", "write_run_config",
                             "FULL_CHECK_LIMIT", "docx_wanted", "pdf_wanted"),
    "lagsieve.stages.condition": ("run_condition",),
    "lagsieve.stages.screen": ("run_screen", "response_annual"),
    "lagsieve.stages.evidence": ("run_align", "run_evidence"),
    "lagsieve.stages.report": ("run_report",),
    "lagsieve.prep.align": ("annual_table",),
}
_WHERE = {name: module for module, names in _NAMES.items() for name in names}

__all__ = sorted(_WHERE)


def __getattr__(name: str):
    """A stage's name, imported from its module on first use (PEP 562)."""
    try:
        module = _WHERE[name]
    except KeyError:
        raise AttributeError(f"module 'lagsieve.pipeline' has no attribute '{name}'") from None
    value = getattr(importlib.import_module(module), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(_WHERE))
