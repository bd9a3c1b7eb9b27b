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
:mod:`~lagsieve.ledger.cli` (`lagsieve ledger`). The entry points are imported here.
"""
from lagsieve.ledger.cli import print_track_record
from lagsieve.ledger.store import resolve_ledger_path
from lagsieve.ledger.update import update_ledger

__all__ = ["print_track_record", "resolve_ledger_path", "update_ledger"]
