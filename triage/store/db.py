"""The SQLite store: items, label history, the corrections journal, decisions and model versions.

One `Store` wraps one connection. It is safe to share between threads (a re-entrant lock guards the
connection) and to open from several processes at once (WAL journal, a 5 s busy timeout, writes under
BEGIN IMMEDIATE). Every change that touches more than one row runs in one transaction, so a crash or a
SIGKILL leaves either all of it or none of it. Timestamps are UTC ISO 8601 text.

`Store` is put together from one class per table group (`items`, `journal`, `decisions`, `versions`) over the
connection and transactions of `base`; the records live in `rows`, the errors in `errors`, opening a file in
`opening`.
"""

from __future__ import annotations

from triage.store.decisions import DecisionLog
from triage.store.items import ItemTables
from triage.store.journal import CorrectionJournal
from triage.store.versions import VersionTable


class Store(ItemTables, CorrectionJournal, DecisionLog, VersionTable):
    """The workspace's SQLite database. Open with `Store.open(path)`; use as a context manager."""
