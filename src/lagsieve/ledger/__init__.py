"""The forecast ledger: every year, write down what the supported hypotheses predict for the
next year, and score those predictions when the year arrives.

Modules, bottom to top: :mod:`~lagsieve.ledger.fingerprint` (hashes of values),
:mod:`~lagsieve.ledger.store` (the SQLite file: schema, upgrade, transactions, reading),
:mod:`~lagsieve.ledger.forecast` (the next-year forecast and its interval),
:mod:`~lagsieve.ledger.study_data` (a run's data as the ledger needs them),
:mod:`~lagsieve.ledger.update` (stage `ledger`: record, score, supersede),
:mod:`~lagsieve.ledger.track` (track record, changes since the previous run),
:mod:`~lagsieve.ledger.cli` (`lagsieve ledger`). The entry points are imported here.
"""
from lagsieve.ledger.cli import print_track_record
from lagsieve.ledger.store import resolve_ledger_path
from lagsieve.ledger.update import update_ledger

__all__ = ["print_track_record", "resolve_ledger_path", "update_ledger"]
