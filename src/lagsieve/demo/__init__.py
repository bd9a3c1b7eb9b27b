"""The invented demonstration study of lagsieve (Merrow hake on the Caldrin Shelf).

EVERYTHING IN IT IS INVENTED: a fictional stock on a fictional shelf, drawn from a seed.

* :mod:`lagsieve.demo.world`: the invented world and :func:`simulate_demo`;
* :mod:`lagsieve.demo.check`: :func:`association_check`, a plain check of a realisation;
* :mod:`lagsieve.demo.texts`: :func:`demo_config_text` and :func:`truth_markdown` (templates);
* :mod:`lagsieve.demo.write`: :func:`write_demo`, the data files and TRUTH.md in a folder.
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
