"""The old import path of the invented demo (``lagsieve.demo.simulate``), kept for its callers.

The demo now lives in :mod:`lagsieve.demo.world` (the invented data), :mod:`lagsieve.demo.check`,
:mod:`lagsieve.demo.texts` (config text, TRUTH.md) and :mod:`lagsieve.demo.write` (the files);
new code imports from :mod:`lagsieve.demo`.
"""
from __future__ import annotations

from lagsieve.demo.check import association_check
from lagsieve.demo.texts import DEMO_CONFIG_TEXT, demo_config_text, truth_markdown
from lagsieve.demo.world import DEFAULT_SEED, PARAMETERS, DemoData, simulate_demo
from lagsieve.demo.write import DEMO_FILES, write_demo

__all__ = [
    "DEFAULT_SEED",
    "DEMO_CONFIG_TEXT",
    "DEMO_FILES",
    "PARAMETERS",
    "DemoData",
    "association_check",
    "demo_config_text",
    "simulate_demo",
    "truth_markdown",
    "write_demo",
]
