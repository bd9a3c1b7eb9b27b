"""lagsieve: honest screening of lagged and nonlinear drivers of natural mortality and condition.

All computation is importable without Snakemake; see DEVELOPERS.md for the module map.
"""
from lagsieve.io.provenance import tool_version

__version__ = tool_version()
__all__ = ["__version__"]
