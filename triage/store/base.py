"""One connection shared safely between threads and processes: the lock, transactions and query helpers."""

from __future__ import annotations

import sqlite3
import threading
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Self

from triage.store.errors import StoreError, store_error
from triage.store.migrations import LATEST_VERSION
from triage.store.opening import BUSY_TIMEOUT_S, configure, migrate, own_file

CHUNK = 500  # ids per IN (...) query, well below SQLite's bound-variable limit


class StoreBase:
    """One connection, its lock and its transactions; the tables' mixins build on it."""


    def __init__(self, path: Path, conn: sqlite3.Connection) -> None:
        """Wrap an already configured connection; call `Store.open` instead."""
        self.path = path
        self._conn = conn
        self._lock = threading.RLock()
        self._depth = 0
        self._closed = False
        self.read_only = False
        self._reading = False
        self._parts: dict[str, str] = {}  # shared config parts by digest (immutable, so cached as text)

    # ------------------------------------------------------------------ opening and transactions

    @classmethod
    def open(cls, path: Path | str, *, read_only: bool = False) -> Self:
        """Open (creating if needed) and migrate the store at `path`; raise StoreError when it cannot be used.

        `read_only` opens an existing store with SQLite's `mode=ro` URI (a copy on a read-only disk, a folder
        this user may only read): no migration, no write; a write transaction raises StoreError."""
        path = Path(path)
        if read_only:
            return cls._open_read_only(path)
        own_file(path)
        try:
            conn = sqlite3.connect(
                path, timeout=BUSY_TIMEOUT_S, isolation_level=None, check_same_thread=False
            )
        except sqlite3.Error as exc:
            raise store_error(path, exc, "cannot open the store: ") from exc
        try:
            configure(conn, path)
            migrate(conn, path)
        except BaseException:
            conn.close()
            raise
        return cls(path, conn)

    @classmethod
    def _open_read_only(cls, path: Path) -> Self:
        if not path.is_file():
            raise StoreError(f"{path}: no store here (a read-only workspace cannot create one)")
        uri = path.resolve().as_uri()
        conn = None
        # a WAL store needs its -shm file; in a folder no one may write, SQLite can only read the file as
        # immutable (nothing else can be writing to it there either)
        for query in ("?mode=ro", "?mode=ro&immutable=1"):
            try:
                conn = sqlite3.connect(uri + query, uri=True, timeout=BUSY_TIMEOUT_S, isolation_level=None,
                                       check_same_thread=False)
                version = int(conn.execute("PRAGMA user_version").fetchone()[0])
                break
            except sqlite3.Error as exc:
                if conn is not None:
                    conn.close()
                conn, last = None, exc
        if conn is None:
            raise StoreError(f"{path}: cannot open the store read-only: {last}")
        if version != LATEST_VERSION:
            conn.close()
            raise StoreError(f"{path}: the store has schema version {version}, this triage needs "
                             f"{LATEST_VERSION}; open it once where it can be written to upgrade it")
        conn.execute("PRAGMA query_only = ON")
        store = cls(path, conn)
        store.read_only = True
        return store

    def close(self) -> None:
        """Close the connection; later calls raise StoreError."""
        with self._lock:
            if not self._closed:
                self._closed = True
                self._conn.close()

    def __enter__(self) -> Self:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def __repr__(self) -> str:
        return f"Store({str(self.path)!r})"

    def schema_version(self) -> int:
        """The schema version recorded in the file (PRAGMA user_version)."""
        return int(self._one("PRAGMA user_version")[0])

    def pragma(self, name: str) -> Any:
        """Read one PRAGMA value (journal_mode, foreign_keys, integrity_check, ...) for checks and diagnostics."""
        if not name.replace("_", "").isalnum():
            raise StoreError(f"{self.path}: not a pragma name: {name!r}")
        row = self._one(f"PRAGMA {name}")
        return None if row is None else row[0]

    def set_wal_autocheckpoint(self, pages: int) -> None:
        """Pages of log after which a commit on this connection checkpoints (0: never; see store.checkpoints)."""
        with self._lock:
            self._check_open()
            self._conn.execute(f"PRAGMA wal_autocheckpoint = {int(pages)}")

    @contextmanager
    def transaction(self, *, durable: bool = True) -> Iterator[Self]:
        """One BEGIN IMMEDIATE ... COMMIT; any exception rolls everything back. Nested use joins the outer one.

        The write lock is taken at BEGIN (not at the first write) so two processes cannot both read,
        then both try to write and deadlock; the lock also keeps other threads of this process out.
        `durable=False` commits with synchronous=NORMAL: in WAL mode that survives a crash of the process but
        may lose the newest commits on a power cut, and it saves an fsync per commit. For routing decisions,
        which can be recomputed; never for corrections or model versions.
        """
        with self._lock:
            self._check_open()
            if self.read_only:
                raise StoreError(f"{self.path}: the workspace is read-only here; this command needs to write "
                                 "(run it on a writable copy)")
            if self._reading:
                raise StoreError(f"{self.path}: a write was asked for inside a read transaction")
            if not self._depth and not durable:
                self._conn.execute("PRAGMA synchronous=NORMAL")
                try:
                    with self.transaction() as store:
                        yield store
                finally:
                    self._conn.execute("PRAGMA synchronous=FULL")
                return
            if self._depth:
                self._depth += 1
                try:
                    yield self
                finally:
                    self._depth -= 1
                return
            try:
                self._conn.execute("BEGIN IMMEDIATE")
            except sqlite3.Error as exc:
                raise store_error(self.path, exc, "cannot start a write transaction: ") from exc
            self._depth = 1
            try:
                yield self
                self._conn.execute("COMMIT")
            except BaseException as exc:
                self._rollback()
                if isinstance(exc, sqlite3.Error):
                    raise store_error(self.path, exc) from exc
                raise
            finally:
                self._depth = 0

    @contextmanager
    def reading(self) -> Iterator[Self]:
        """One read transaction: every query inside sees the same committed state.

        In WAL mode a transaction's reads all come from one snapshot, taken at its first read, so two queries
        (the labelled items and the corrections journal, say) cannot straddle a commit of another process.
        Writes are not allowed inside (they would need the write lock the snapshot may no longer get)."""
        with self._lock:
            self._check_open()
            if self._depth or self._conn.in_transaction:
                yield self  # already inside a transaction: its view is consistent
                return
            try:
                self._conn.execute("BEGIN DEFERRED")
            except sqlite3.Error as exc:
                raise store_error(self.path, exc, "cannot start a read transaction: ") from exc
            self._reading = True
            try:
                yield self
            finally:
                self._reading = False
                self._rollback()  # nothing was written: ending it is all a rollback does

    def _rollback(self) -> None:
        """Roll back if a transaction is still open (SQLite may already have ended it on some errors)."""
        if self._conn.in_transaction:
            try:
                self._conn.execute("ROLLBACK")
            except sqlite3.Error:
                pass

    def _check_open(self) -> None:
        if self._closed:
            raise StoreError(f"{self.path}: the store is closed")

    def _all(self, sql: str, params: Sequence[Any] = ()) -> list[tuple[Any, ...]]:
        """Run a query under the lock; sqlite errors become StoreError naming the file."""
        with self._lock:
            self._check_open()
            try:
                return self._conn.execute(sql, params).fetchall()
            except sqlite3.Error as exc:
                raise store_error(self.path, exc) from exc

    def _one(self, sql: str, params: Sequence[Any] = ()) -> tuple[Any, ...] | None:
        rows = self._all(sql, params)
        return rows[0] if rows else None

    def _write(self, sql: str, params: Sequence[Any] = ()) -> sqlite3.Cursor:
        """Run one statement; callers hold a transaction, so errors surface through `transaction()`."""
        return self._conn.execute(sql, params)
