"""The forecast ledger: every year, write down what every hypothesis that can forecast predicts
for the next year (with the grade it had), and score those predictions when the year arrives,
against the first value published for it, through restatements of earlier values.

Modules, bottom to top: :mod:`~lagsieve.ledger.fingerprint` (hashes of values),
:mod:`~lagsieve.ledger.store` (the SQLite file: schema, upgrade, transactions, reading),
:mod:`~lagsieve.ledger.forecast` (the next-year forecast and its interval),
:mod:`~lagsieve.ledger.scores` (proper scores, the interval's AR(1) factor),
:mod:`~lagsieve.ledger.study_data` (a run's data as the ledger needs them),
:mod:`~lagsieve.ledger.revisions` (restated values, the restatement tolerance),
:mod:`~lagsieve.ledger.update` (stage `ledger`: record, revise, score, supersede),
:mod:`~lagsieve.ledger.track` (track record, changes since the previous run),
:mod:`~lagsieve.ledger.cli` (`lagsieve ledger`). The entry points are imported from here on first use (PEP 562), so
that importing one module of the package does not import them all: `lagsieve run` checks the
ledger with :mod:`~lagsieve.ledger.store` before Snakemake starts, and importing
:mod:`~lagsieve.ledger.cli` with it (``scipy.stats`` through the forecast's interval) cost that
check 0.5 s of CPU (``python -c "from lagsieve.ledger.store import check_ledger"``: 1.86-1.95 s
against 1.34-1.39 s, three runs each on the shared 2-core machine).
"""
from __future__ import annotations

import importlib

# the module that defines each entry point
_WHERE = {"print_track_record": "lagsieve.ledger.cli", "resolve_ledger_path": "lagsieve.ledger.store",
          "update_ledger": "lagsieve.ledger.update"}

__all__ = sorted(_WHERE)


def __getattr__(name: str):
    """An entry point, imported from its module on first use (PEP 562)."""
    if name not in _WHERE:
        raise AttributeError(f"module 'lagsieve.ledger' has no attribute '{name}'")
    return getattr(importlib.import_module(_WHERE[name]), name)
