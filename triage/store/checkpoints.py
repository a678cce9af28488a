"""WAL checkpoints on a thread of their own, so no commit of a long-running writer waits for one.

SQLite copies the write-ahead log back into the database (a checkpoint, with an fsync of each file) inside the
commit that takes the log past `wal_autocheckpoint` pages (1000 by default). For a service storing one routed
item per commit, one request in about a hundred then waits several milliseconds for it: that is its p99.
`BackgroundCheckpoints` turns the automatic checkpoint off on the store's connection and runs a PASSIVE
checkpoint (it never waits for, nor blocks, readers or the writer) every `interval_s` on a connection of its
own. Durability is unchanged: commits are made exactly as before, and the checkpoint syncs the log and the
database as the automatic one does (synchronous=FULL on its connection). When stopped, the store's automatic
checkpoint is turned on again and one last checkpoint runs.
"""

from __future__ import annotations

import logging
import sqlite3
import threading

from triage.store.base import StoreBase
from triage.store.opening import BUSY_TIMEOUT_S

log = logging.getLogger(__name__)

DEFAULT_PAGES = 1000  # SQLite's own wal_autocheckpoint default, restored on stop


class BackgroundCheckpoints:
    """Checkpoint `store`'s log every `interval_s` seconds on a daemon thread; `stop()` ends it."""

    def __init__(self, store: StoreBase, interval_s: float = 0.5) -> None:
        self._store = store
        self._interval_s = interval_s
        self._stopping = threading.Event()
        self._conn = sqlite3.connect(store.path, timeout=BUSY_TIMEOUT_S, isolation_level=None,
                                     check_same_thread=False)
        self._conn.execute("PRAGMA synchronous = FULL")
        store.set_wal_autocheckpoint(0)
        self._thread = threading.Thread(target=self._run, name="store-checkpoints", daemon=True)
        self._thread.start()

    def _checkpoint(self) -> None:
        try:
            self._conn.execute("PRAGMA wal_checkpoint(PASSIVE)").fetchone()
        except sqlite3.Error as exc:  # busy or out of space: the log keeps the commits; try again next time
            log.warning("%s: a checkpoint of the write-ahead log failed: %s", self._store.path, exc)

    def _run(self) -> None:
        while not self._stopping.wait(self._interval_s):
            self._checkpoint()

    def stop(self) -> None:
        """Hand checkpoints back to SQLite's automatic ones and run a last one; safe to call twice."""
        if self._stopping.is_set():
            return
        self._stopping.set()
        self._thread.join()
        try:
            self._store.set_wal_autocheckpoint(DEFAULT_PAGES)
        except Exception as exc:  # the store was closed first: nothing left to hand back
            log.debug("automatic checkpoints not restored: %s", exc)
        self._checkpoint()
        self._conn.close()
