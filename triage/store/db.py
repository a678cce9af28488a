"""The SQLite store: items, label history, the corrections journal, decisions and model versions.

One `Store` wraps one connection. It is safe to share between threads (a re-entrant lock guards the
connection) and to open from several processes at once (WAL journal, a 5 s busy timeout, writes under
BEGIN IMMEDIATE). Every change that touches more than one row runs in one transaction, so a crash or a
SIGKILL leaves either all of it or none of it. Timestamps are UTC ISO 8601 text.
"""

from __future__ import annotations

import hashlib
import json
import os
import sqlite3
import stat
import threading
from collections.abc import Iterable, Iterator, Sequence
from contextlib import contextmanager
from dataclasses import dataclass, field, replace
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from triage.records import ItemRecord
from triage.store.migrations import LATEST_VERSION, MIGRATIONS, statements

BUSY_TIMEOUT_S = 5.0
FILE_MODE = 0o600  # tickets hold personal data: the database is readable by its owner only
SHARED_KEYS = ("calibration", "policy", "split", "spec")
SHARED_REF = "$shared"
SHARE_MIN_CHARS = 256
MODEL_KINDS = ("train", "correction", "adopt")
_CHUNK = 500  # ids per IN (...) query, well below SQLite's bound-variable limit


class StoreError(Exception):
    """Something is wrong with the store; the message names the file and what is wrong."""


class StoreFullError(StoreError):
    """The disk (or the file system quota) is full: nothing of the failed write was kept."""


class StoreBusyError(StoreError):
    """Another process held the write lock past the busy timeout: nothing was done, trying again may work."""


# SQLite primary result codes (https://www.sqlite.org/rescode.html)
_SQLITE_BUSY, _SQLITE_LOCKED, _SQLITE_FULL = 5, 6, 13


def store_error(path: Path, exc: sqlite3.Error, what: str = "") -> StoreError:
    """The StoreError for a sqlite3 error, typed by its result code so callers can tell full from busy."""
    code = getattr(exc, "sqlite_errorcode", None)
    primary = code & 0xFF if isinstance(code, int) else None
    text = f"{path}: {what}{exc}"
    if primary == _SQLITE_FULL or "disk is full" in str(exc):
        return StoreFullError(text)
    if primary in (_SQLITE_BUSY, _SQLITE_LOCKED) or "database is locked" in str(exc):
        return StoreBusyError(text)
    return StoreError(text)


class UnknownItemError(StoreError):
    """No item with that id is stored."""


class UnknownVersionError(StoreError):
    """No model version with that number is stored."""


class UnknownCorrectionError(StoreError):
    """No correction with that id is journaled."""


class DuplicateRequestError(StoreError):
    """A correction with this idempotency key is journaled already (`correction_id`)."""

    def __init__(self, message: str, correction_id: int) -> None:
        super().__init__(message)
        self.correction_id = correction_id


@dataclass(frozen=True)
class LabelConflict:
    """An import disagreed with what is stored; the stored value was kept.

    kind 'label': `stored`/`incoming` are the queues. kind 'fields': they are the canonical JSON of the fields.
    """

    item_id: str
    stored: str | None
    incoming: str | None
    kind: str


@dataclass(frozen=True)
class ImportSummary:
    """What one import did: new items, items already stored as given, and disagreements (not applied)."""

    added: int
    unchanged: int
    conflicts: list[LabelConflict]


@dataclass(frozen=True)
class Correction:
    """One journal entry: an operator moved `item_id` from `from_queue` to `to_queue`."""

    id: int
    item_id: str
    from_queue: str | None
    to_queue: str | None
    by: str
    at: str
    base_version: int | None
    status: str  # 'pending' | 'applied' | 'undone'
    applied_version: int | None
    undo_of: int | None
    request_key: str | None = None  # the client's idempotency key, when it sent one


@dataclass(frozen=True)
class Decision:
    """One routing decision; `queue` is None when the item is held for review (`suggested` is the top queue).

    `decided_at` and `batch_id` are filled in by `Store.record_batch` when left None.
    """

    item_id: str
    model_version: int | None
    queue: str | None
    suggested: str | None
    confidence: float
    held: bool
    runner_up: str | None = None
    evidence: list[dict[str, Any]] = field(default_factory=list)
    decided_at: str | None = None
    batch_id: int | None = None
    held_by: str | None = None  # why it was held (a HeldBy value); None when routed or stored before it was kept
    reason: str = ""
    runner_up_confidence: float = 0.0


@dataclass(frozen=True)
class Batch:
    """One routing run: where the items came from, when, how many, and its summary figures."""

    id: int
    source: str
    at: str
    n_items: int
    summary: dict[str, Any]


@dataclass(frozen=True)
class ModelVersion:
    """An immutable model snapshot's bookkeeping; the counts themselves live in the `artifact` file."""

    version: int
    parent: int | None
    created_at: str
    kind: str  # 'train' | 'correction' | 'adopt'
    config: dict[str, Any]
    fingerprint: str
    scorecard: dict[str, Any] | None
    artifact: str
    active: bool
    note: str


def utc_now() -> str:
    """Current time as UTC ISO 8601 text with microseconds (sorts as text in time order)."""
    return datetime.now(UTC).isoformat(timespec="microseconds")


def _json_default(value: Any) -> Any:
    """Turn array-library scalars (anything with `.item()`) into plain Python numbers for JSON."""
    item = getattr(value, "item", None)
    if callable(item):
        return item()
    raise TypeError(f"cannot store a {type(value).__name__} as JSON")


def dumps(value: Any) -> str:
    """Canonical JSON: sorted keys, so equal dicts give equal text and compare equal in SQL."""
    return json.dumps(value, sort_keys=True, ensure_ascii=False, separators=(",", ":"), default=_json_default)


class Store:
    """The workspace's SQLite database. Open with `Store.open(path)`; use as a context manager."""

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
    def open(cls, path: Path | str, *, read_only: bool = False) -> Store:
        """Open (creating if needed) and migrate the store at `path`; raise StoreError when it cannot be used.

        `read_only` opens an existing store with SQLite's `mode=ro` URI (a copy on a read-only disk, a folder
        this user may only read): no migration, no write; a write transaction raises StoreError."""
        path = Path(path)
        if read_only:
            return cls._open_read_only(path)
        _own_file(path)
        try:
            conn = sqlite3.connect(
                path, timeout=BUSY_TIMEOUT_S, isolation_level=None, check_same_thread=False
            )
        except sqlite3.Error as exc:
            raise store_error(path, exc, "cannot open the store: ") from exc
        try:
            _configure(conn, path)
            migrate(conn, path)
        except BaseException:
            conn.close()
            raise
        return cls(path, conn)

    @classmethod
    def _open_read_only(cls, path: Path) -> Store:
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

    def __enter__(self) -> Store:
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

    @contextmanager
    def transaction(self, *, durable: bool = True) -> Iterator[Store]:
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
    def reading(self) -> Iterator[Store]:
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

    # ------------------------------------------------------------------ items

    def import_items(self, records: Iterable[ItemRecord], source: str) -> ImportSummary:
        """Add new items in one transaction; never overwrite a stored label or stored fields.

        New id: inserted (with an 'imported' label-history row when labelled). Same id, same fields and
        label (or no incoming label): unchanged. A different label, or different fields, is reported as a
        LabelConflict (one per differing aspect) and the stored item is kept. Arrival times are not compared.
        """
        added = unchanged = 0
        conflicts: list[LabelConflict] = []
        with self.transaction():
            now = utc_now()
            for rec in records:
                fields_json = dumps(rec.fields)
                row = self._write(
                    "SELECT fields_json, label FROM items WHERE item_id = ?", (rec.item_id,)
                ).fetchone()
                if row is None:
                    self._write(
                        "INSERT INTO items(item_id, fields_json, label, arrived_at, source, added_at)"
                        " VALUES (?, ?, ?, ?, ?, ?)",
                        (rec.item_id, fields_json, rec.label, rec.arrived_at, source, now),
                    )
                    if rec.label is not None:
                        self._write(
                            "INSERT INTO labels(item_id, queue, source, actor, at) VALUES (?, ?, 'imported', ?, ?)",
                            (rec.item_id, rec.label, source, now),
                        )
                    added += 1
                    continue
                stored_fields, stored_label = row
                clash = False
                if rec.label is not None and rec.label != stored_label:
                    conflicts.append(LabelConflict(rec.item_id, stored_label, rec.label, "label"))
                    clash = True
                if fields_json != stored_fields:
                    conflicts.append(LabelConflict(rec.item_id, stored_fields, fields_json, "fields"))
                    clash = True
                if not clash:
                    unchanged += 1
        return ImportSummary(added, unchanged, conflicts)

    def get_item(self, item_id: str) -> ItemRecord | None:
        """The stored item with its current label, or None."""
        row = self._one(
            "SELECT item_id, fields_json, label, arrived_at FROM items WHERE item_id = ?", (item_id,)
        )
        return None if row is None else _item(row)

    def get_items_if_any(self, ids: Iterable[str]) -> list[ItemRecord]:
        """The stored ones among these ids (in no particular order); unknown ids are left out."""
        return list(self._found(list(dict.fromkeys(ids))).values())

    def _found(self, unique: list[str]) -> dict[str, ItemRecord]:
        found: dict[str, ItemRecord] = {}
        for start in range(0, len(unique), _CHUNK):
            chunk = unique[start : start + _CHUNK]
            marks = ",".join("?" * len(chunk))
            for row in self._all(
                f"SELECT item_id, fields_json, label, arrived_at FROM items WHERE item_id IN ({marks})", chunk
            ):
                found[row[0]] = _item(row)
        return found

    def get_items(self, ids: Iterable[str]) -> list[ItemRecord]:
        """Items in the order asked; UnknownItemError names the ids that are not stored."""
        wanted = list(ids)
        unique = list(dict.fromkeys(wanted))
        found = self._found(unique)
        missing = [i for i in unique if i not in found]
        if missing:
            shown = ", ".join(missing[:5]) + (f" and {len(missing) - 5} more" if len(missing) > 5 else "")
            raise UnknownItemError(f"{self.path}: no such item: {shown}")
        return [found[i] for i in wanted]

    def labelled_items(self) -> list[ItemRecord]:
        """Items with a current label, ordered by arrival then id. Items without an arrival time (or with one
        that could not be read) come first: the newest items are scored, and an item of unknown age must
        never be taken for one of them."""
        rows = self._all(
            "SELECT item_id, fields_json, label, arrived_at FROM items WHERE label IS NOT NULL"
            " ORDER BY arrived_at IS NOT NULL, arrived_at, item_id"
        )
        return [_item(r) for r in rows]

    def count_items(self, labelled: bool | None = None) -> int:
        """Number of items: all (None), only labelled (True) or only unlabelled (False)."""
        where = {None: "", True: " WHERE label IS NOT NULL", False: " WHERE label IS NULL"}[labelled]
        row = self._one("SELECT count(*) FROM items" + where)
        return int(row[0]) if row else 0

    def queue_counts(self) -> dict[str, int]:
        """Labelled items per queue, by queue name."""
        rows = self._all(
            "SELECT label, count(*) FROM items WHERE label IS NOT NULL GROUP BY label ORDER BY label"
        )
        return {label: int(n) for label, n in rows}

    def label_history(self, item_id: str) -> list[dict[str, Any]]:
        """Every label the item has had, oldest first, with its provenance (imported or corrected, by whom)."""
        with self._lock:
            if self._one("SELECT 1 FROM items WHERE item_id = ?", (item_id,)) is None:
                raise UnknownItemError(f"{self.path}: no such item: {item_id}")
            rows = self._all(
                "SELECT queue, source, actor, at, previous_queue, correction_id FROM labels"
                " WHERE item_id = ? ORDER BY id",
                (item_id,),
            )
        keys = ("queue", "source", "by", "at", "previous_queue", "correction_id")
        return [dict(zip(keys, r, strict=True)) for r in rows]

    # ------------------------------------------------------------------ corrections journal

    def journal_correction(
        self,
        item_id: str,
        to_queue: str | None,
        by: str,
        base_version: int | None,
        undo_of: int | None = None,
        request_key: str | None = None,
    ) -> Correction:
        """Write a 'pending' correction and commit it, before the model is touched, so a crash can replay it.

        `from_queue` is the item's current label. `to_queue` may be None only for an undo (back to no label).
        An undo must name an applied, not yet undone, non-undo correction of the same item whose label has not
        moved since, and must restore that correction's `from_queue`. A `request_key` already journaled raises
        DuplicateRequestError naming that correction (the key and the entry are written in one transaction).
        """
        with self.transaction():
            if request_key is not None:
                seen = self._write("SELECT id FROM corrections WHERE request_key = ?", (request_key,)).fetchone()
                if seen is not None:
                    raise DuplicateRequestError(f"{self.path}: request key {request_key!r} is correction {seen[0]}",
                                                int(seen[0]))
            row = self._write("SELECT label FROM items WHERE item_id = ?", (item_id,)).fetchone()
            if row is None:
                raise UnknownItemError(f"{self.path}: no such item: {item_id}")
            current = row[0]
            if to_queue is None and undo_of is None:
                raise StoreError(
                    f"{self.path}: a correction of {item_id} needs a queue (only an undo may clear it)"
                )
            busy = self._write(
                "SELECT id FROM corrections WHERE item_id = ? AND status = 'pending' ORDER BY id LIMIT 1",
                (item_id,),
            ).fetchone()
            if busy is not None:
                raise StoreError(
                    f"{self.path}: item {item_id} already has pending correction {busy[0]}; apply it first"
                )
            if undo_of is not None:
                target = self._correction_row(undo_of)
                if target.item_id != item_id:
                    raise StoreError(
                        f"{self.path}: correction {undo_of} is about {target.item_id}, not {item_id}"
                    )
                if target.undo_of is not None:
                    raise StoreError(
                        f"{self.path}: correction {undo_of} is itself an undo; correct the item instead"
                    )
                if target.status != "applied":
                    raise StoreError(
                        f"{self.path}: correction {undo_of} is {target.status}, it cannot be undone"
                    )
                if current != target.to_queue:
                    raise StoreError(
                        f"{self.path}: {item_id} was changed after correction {undo_of}; it cannot be undone"
                    )
                if to_queue != target.from_queue:
                    raise StoreError(
                        f"{self.path}: undoing correction {undo_of} must restore {target.from_queue!r}, not {to_queue!r}"
                    )
            cur = self._write(
                "INSERT INTO corrections(item_id, from_queue, to_queue, actor, at, base_version, status, undo_of,"
                " request_key) VALUES (?, ?, ?, ?, ?, ?, 'pending', ?, ?)",
                (item_id, current, to_queue, by, utc_now(), base_version, undo_of, request_key),
            )
            assert cur.lastrowid is not None
            return self._correction_row(cur.lastrowid)

    def apply_correction(self, correction_id: int, applied_version: int | None) -> Correction:
        """Make a pending correction the item's label, in one transaction, and mark it applied.

        Writes a 'corrected' label-history row; for an undo, the undone correction becomes 'undone'.
        """
        with self.transaction():
            c = self._correction_row(correction_id)
            if c.status != "pending":
                raise StoreError(f"{self.path}: correction {correction_id} is {c.status}, not pending")
            row = self._write("SELECT label FROM items WHERE item_id = ?", (c.item_id,)).fetchone()
            if row is None:
                raise UnknownItemError(f"{self.path}: no such item: {c.item_id}")
            if row[0] != c.from_queue:
                raise StoreError(
                    f"{self.path}: {c.item_id} is now {row[0]!r}, not {c.from_queue!r} as correction"
                    f" {correction_id} expected"
                )
            if c.undo_of is not None:
                target = self._correction_row(c.undo_of)
                if target.status != "applied":
                    raise StoreError(
                        f"{self.path}: correction {c.undo_of} is {target.status}, it cannot be undone"
                    )
                self._write("UPDATE corrections SET status = 'undone' WHERE id = ?", (c.undo_of,))
            now = utc_now()
            self._write("UPDATE items SET label = ? WHERE item_id = ?", (c.to_queue, c.item_id))
            self._write(
                "INSERT INTO labels(item_id, queue, source, actor, at, previous_queue, correction_id)"
                " VALUES (?, ?, 'corrected', ?, ?, ?, ?)",
                (c.item_id, c.to_queue, c.by, now, row[0], c.id),
            )
            self._write(
                "UPDATE corrections SET status = 'applied', applied_version = ? WHERE id = ?",
                (applied_version, correction_id),
            )
            return self._correction_row(correction_id)

    def get_correction(self, correction_id: int) -> Correction:
        """One journal entry; UnknownCorrectionError when there is none."""
        with self._lock:
            return self._correction_row(correction_id)

    def correction_by_key(self, request_key: str) -> Correction | None:
        """The journal entry written with this idempotency key, or None."""
        found = self._corrections("WHERE request_key = ?", (request_key,))
        return found[0] if found else None

    def withdraw_correction(self, correction_id: int) -> bool:
        """Delete a correction that is still pending (its commit failed and the caller reports "not done").

        True when it was withdrawn; False when it is no longer pending (another process applied it)."""
        with self.transaction():
            cur = self._write("DELETE FROM corrections WHERE id = ? AND status = 'pending'", (correction_id,))
            return cur.rowcount == 1

    def save_reply(self, request_key: str, correction_id: int, reply_json: str) -> None:
        """Keep the answer given to an idempotent request, so a repeat gets the same answer."""
        with self.transaction():
            self._write("INSERT OR IGNORE INTO replies(request_key, correction_id, reply_json, at) VALUES (?, ?, ?, ?)",
                        (request_key, correction_id, reply_json, utc_now()))

    def reply_for(self, request_key: str) -> str | None:
        """The answer kept for this idempotency key, or None."""
        row = self._one("SELECT reply_json FROM replies WHERE request_key = ?", (request_key,))
        return None if row is None else str(row[0])

    def pending_corrections(self) -> list[Correction]:
        """Journaled but not applied corrections, oldest first: what to replay after a crash."""
        return self._corrections("WHERE status = 'pending'")

    def last_undoable_correction(self) -> Correction | None:
        """The newest applied correction that is neither an undo nor already undone."""
        found = self._corrections(
            "WHERE status = 'applied' AND undo_of IS NULL ORDER BY id DESC LIMIT 1", order=False
        )
        return found[0] if found else None

    def corrections(self, since_version: int | None = None) -> list[Correction]:
        """The journal, oldest first; with `since_version`, only entries not yet in that model version.

        That is: made against that version or a later one, or applied into a later one.
        """
        if since_version is None:
            return self._corrections("")
        return self._corrections(
            "WHERE base_version >= ? OR applied_version > ?", (since_version, since_version)
        )

    def _corrections(self, where: str, params: Sequence[Any] = (), order: bool = True) -> list[Correction]:
        sql = f"SELECT {_CORRECTION_COLS} FROM corrections {where}" + (" ORDER BY id" if order else "")
        return [Correction(*r) for r in self._all(sql, params)]

    def _correction_row(self, correction_id: int) -> Correction:
        found = self._corrections("WHERE id = ?", (correction_id,))
        if not found:
            raise UnknownCorrectionError(f"{self.path}: no such correction: {correction_id}")
        return found[0]

    # ------------------------------------------------------------------ decisions

    def record_batch(self, source: str, decisions: list[Decision], summary: dict[str, Any]) -> int:
        """Store one routing run and all its decisions in one transaction; return the batch id."""
        with self.transaction():
            now = utc_now()
            cur = self._write(
                "INSERT INTO batches(source, at, n_items, summary_json) VALUES (?, ?, ?, ?)",
                (source, now, len(decisions), dumps(summary)),
            )
            batch_id = cur.lastrowid
            assert batch_id is not None
            self._conn.executemany(
                "INSERT INTO decisions(batch_id, item_id, model_version, queue, suggested, confidence, held,"
                " runner_up, evidence_json, decided_at, held_by, reason, runner_up_confidence)"
                " VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (
                    (
                        batch_id,
                        d.item_id,
                        d.model_version,
                        d.queue,
                        d.suggested,
                        float(d.confidence),
                        1 if d.held else 0,
                        d.runner_up,
                        dumps(list(d.evidence)),
                        d.decided_at or now,
                        d.held_by,
                        d.reason,
                        float(d.runner_up_confidence),
                    )
                    for d in decisions
                ),
            )
            return int(batch_id)

    def latest_decision(self, item_id: str) -> Decision | None:
        """The most recent decision about an item, or None if it was never routed."""
        rows = self._all(
            f"SELECT {_DECISION_COLS} FROM decisions WHERE item_id = ? ORDER BY id DESC LIMIT 1", (item_id,)
        )
        return _decision(rows[0]) if rows else None

    def decisions(
        self, batch_id: int | None = None, held: bool | None = None, limit: int = 1000, offset: int = 0
    ) -> list[Decision]:
        """Decisions in the order made, optionally of one batch and/or only held (True) or routed (False) ones."""
        where: list[str] = []
        params: list[Any] = []
        if batch_id is not None:
            where.append("batch_id = ?")
            params.append(batch_id)
        if held is not None:
            where.append("held = ?")
            params.append(1 if held else 0)
        clause = (" WHERE " + " AND ".join(where)) if where else ""
        rows = self._all(
            f"SELECT {_DECISION_COLS} FROM decisions{clause} ORDER BY id LIMIT ? OFFSET ?",
            (*params, int(limit), int(offset)),
        )
        return [_decision(r) for r in rows]

    def open_held(self, limit: int = 1000, offset: int = 0) -> list[Decision]:
        """Items waiting for a person: unlabelled items whose latest decision held them, oldest first."""
        cols = ", ".join(f"d.{c}" for c in _DECISION_COLS.split(", "))
        rows = self._all(
            f"SELECT {cols} FROM decisions d JOIN items i ON i.item_id = d.item_id WHERE d.held = 1"
            " AND i.label IS NULL AND d.id = (SELECT MAX(e.id) FROM decisions e WHERE e.item_id = d.item_id)"
            " ORDER BY d.id LIMIT ? OFFSET ?",
            (int(limit), int(offset)),
        )
        return [_decision(r) for r in rows]

    def latest_batch(self) -> Batch | None:
        """The most recent routing run, or None."""
        rows = self._all("SELECT id, source, at, n_items, summary_json FROM batches ORDER BY id DESC LIMIT 1")
        return _batch(rows[0]) if rows else None

    def batches(self) -> list[Batch]:
        """Every routing run, oldest first."""
        return [
            _batch(r)
            for r in self._all("SELECT id, source, at, n_items, summary_json FROM batches ORDER BY id")
        ]

    # ------------------------------------------------------------------ model versions

    def add_model_version(
        self,
        parent: int | None,
        kind: str,
        config: dict[str, Any],
        fingerprint: str,
        artifact: str,
        scorecard: dict[str, Any] | None = None,
        note: str = "",
        activate: bool = True,
    ) -> ModelVersion:
        """Record a new model version (numbered from 1); by default it becomes the one active version."""
        if kind not in MODEL_KINDS:
            raise StoreError(f"{self.path}: model kind must be one of {', '.join(MODEL_KINDS)}, not {kind!r}")
        with self.transaction():
            if parent is not None:
                self._version_row(parent)
            if activate:
                self._write("UPDATE model_versions SET active = 0 WHERE active = 1")
            cur = self._write(
                "INSERT INTO model_versions(parent, created_at, kind, config_json, fingerprint, scorecard_json,"
                " artifact, active, note) VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?)",
                (
                    parent,
                    utc_now(),
                    kind,
                    dumps(self._share(config)),
                    fingerprint,
                    None if scorecard is None else dumps(self._share({"scorecard": scorecard}, force=True)),
                    artifact,
                    1 if activate else 0,
                    note,
                ),
            )
            assert cur.lastrowid is not None
            return self._version_row(cur.lastrowid)

    def activate_model(self, version: int) -> ModelVersion:
        """Make `version` the one active model version (UnknownVersionError if there is none)."""
        with self.transaction():
            self._version_row(version)
            self._write("UPDATE model_versions SET active = 0 WHERE active = 1 AND version != ?", (version,))
            self._write("UPDATE model_versions SET active = 1 WHERE version = ?", (version,))
            return self._version_row(version)

    def active_model(self) -> ModelVersion | None:
        """The active model version, or None before the first one."""
        rows = self._all(f"SELECT {_VERSION_COLS} FROM model_versions WHERE active = 1")
        return self._version(rows[0]) if rows else None

    def get_model_version(self, version: int) -> ModelVersion:
        """One model version; UnknownVersionError when there is none."""
        with self._lock:
            return self._version_row(version)

    def model_versions(self) -> list[ModelVersion]:
        """Every model version, oldest first."""
        return [
            self._version(r) for r in self._all(f"SELECT {_VERSION_COLS} FROM model_versions ORDER BY version")
        ]

    def set_scorecard(self, version: int, scorecard: dict[str, Any]) -> None:
        """Attach (or replace) the evaluation report of a model version."""
        with self.transaction():
            self._version_row(version)
            self._write(
                "UPDATE model_versions SET scorecard_json = ? WHERE version = ?",
                (dumps(self._share({"scorecard": scorecard}, force=True)), version)
            )

    def _share(self, config: dict[str, Any], force: bool = False) -> dict[str, Any]:
        """Store large parts of a version's config once, by digest, and refer to them (inside a transaction).

        A correction version carries its parent's calibration and routing policy unchanged; copying them into
        every version made the store grow by kilobytes per correction."""
        out = dict(config)
        for key in (SHARED_KEYS if not force else tuple(config)):
            value = out.get(key)
            if value is None:
                continue
            text = dumps(value)
            if len(text) < SHARE_MIN_CHARS:
                continue
            digest = hashlib.sha256(text.encode("utf-8")).hexdigest()
            self._write("INSERT OR IGNORE INTO shared_parts(digest, json) VALUES (?, ?)", (digest, text))
            out[key] = {SHARED_REF: digest}
        return out

    def _resolve(self, config: dict[str, Any]) -> dict[str, Any]:
        for key, value in list(config.items()):
            if isinstance(value, dict) and set(value) == {SHARED_REF}:
                digest = value[SHARED_REF]
                text = self._parts.get(digest)
                if text is None:
                    row = self._one("SELECT json FROM shared_parts WHERE digest = ?", (digest,))
                    if row is None:
                        raise StoreError(f"{self.path}: the shared part {digest[:12]} of a model version is missing")
                    text = self._parts[digest] = str(row[0])
                config[key] = json.loads(text)
        return config

    def _version(self, row: tuple[Any, ...]) -> ModelVersion:
        mv = _version(row)
        self._resolve(mv.config)
        if isinstance(mv.scorecard, dict) and set(mv.scorecard) == {"scorecard"}:  # the scorecard, shared
            return replace(mv, scorecard=self._resolve(dict(mv.scorecard))["scorecard"])
        return mv

    def _version_row(self, version: int) -> ModelVersion:
        rows = self._all(f"SELECT {_VERSION_COLS} FROM model_versions WHERE version = ?", (version,))
        if not rows:
            raise UnknownVersionError(f"{self.path}: no such model version: {version}")
        return self._version(rows[0])


# ---------------------------------------------------------------------- opening helpers


def _own_file(path: Path) -> None:
    """Create the database file exclusively with mode 0600, never through a symbolic link; tighten an existing
    file (and its WAL and shared-memory files, which SQLite creates with the database's mode) to 0600."""
    for p in (path, Path(f"{path}-wal"), Path(f"{path}-shm")):
        try:
            st = os.lstat(p)
        except FileNotFoundError:
            continue
        except OSError as exc:
            raise StoreError(f"{p}: cannot read the file: {exc.strerror}") from exc
        if stat.S_ISLNK(st.st_mode):
            raise StoreError(f"{p}: is a symbolic link; the store must be a plain file in the workspace")
        if stat.S_IMODE(st.st_mode) & 0o077 and st.st_uid == os.getuid():
            try:
                os.chmod(p, FILE_MODE)
            except OSError:
                pass  # a read-only file system: SQLite says what is wrong when it opens it
    if not path.exists():
        try:
            fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL | os.O_NOFOLLOW, FILE_MODE)
        except FileExistsError:
            return  # another process created it first
        except OSError as exc:
            raise StoreError(f"{path}: cannot create the store: {exc.strerror}") from exc
        os.close(fd)


def _configure(conn: sqlite3.Connection, path: Path) -> None:
    """Per-connection settings: WAL, foreign keys, durable commits, busy timeout."""
    try:
        conn.execute(f"PRAGMA busy_timeout = {int(BUSY_TIMEOUT_S * 1000)}")
        conn.execute("PRAGMA foreign_keys = ON")
        conn.execute("PRAGMA synchronous = FULL")
        mode = conn.execute("PRAGMA journal_mode = WAL").fetchone()[0]
    except sqlite3.DatabaseError as exc:
        raise StoreError(f"{path}: not a usable triage store: {exc}") from exc
    if str(mode).lower() != "wal":
        raise StoreError(f"{path}: the store needs WAL journal mode, but SQLite kept {mode!r}")


def migrate(conn: sqlite3.Connection, path: Path, migrations: Sequence[str] = MIGRATIONS) -> int:
    """Bring the file's schema to `len(migrations)`, each step in its own transaction; return the version.

    The version is read again under the write lock, so two processes opening a new file at once do not
    both run the same migration. A file from a newer triage is refused, naming both versions.
    """
    latest = len(migrations)
    try:
        version = int(conn.execute("PRAGMA user_version").fetchone()[0])
        _refuse_newer(path, version, latest)
        while version < latest:
            conn.execute("BEGIN IMMEDIATE")
            try:
                version = int(conn.execute("PRAGMA user_version").fetchone()[0])
                _refuse_newer(path, version, latest)
                if version < latest:
                    for sql in statements(migrations[version]):
                        conn.execute(sql)
                    version += 1
                    conn.execute(f"PRAGMA user_version = {version}")
                conn.execute("COMMIT")
            except BaseException:
                if conn.in_transaction:
                    conn.execute("ROLLBACK")
                raise
    except sqlite3.Error as exc:
        raise StoreError(f"{path}: migrating the store to schema version {latest} failed: {exc}") from exc
    return version


def _refuse_newer(path: Path, version: int, latest: int) -> None:
    if version > latest:
        raise StoreError(
            f"{path}: schema version {version} was written by a newer triage; this one knows up to"
            f" version {latest}. Upgrade triage to open it."
        )


# ---------------------------------------------------------------------- row -> record

_CORRECTION_COLS = (
    "id, item_id, from_queue, to_queue, actor, at, base_version, status, applied_version, undo_of, request_key"
)
_DECISION_COLS = ("item_id, model_version, queue, suggested, confidence, held, runner_up, evidence_json, decided_at,"
                  " batch_id, held_by, reason, runner_up_confidence")
_VERSION_COLS = (
    "version, parent, created_at, kind, config_json, fingerprint, scorecard_json, artifact, active, note"
)


def _item(row: tuple[Any, ...]) -> ItemRecord:
    item_id, fields_json, label, arrived_at = row
    return ItemRecord(item_id=item_id, fields=json.loads(fields_json), label=label, arrived_at=arrived_at)


def _decision(row: tuple[Any, ...]) -> Decision:
    (item_id, version, queue, suggested, confidence, held, runner_up, evidence, decided_at, batch_id, held_by,
     reason, runner_conf) = row
    return Decision(
        item_id=item_id,
        model_version=version,
        queue=queue,
        suggested=suggested,
        confidence=float(confidence),
        held=bool(held),
        runner_up=runner_up,
        evidence=json.loads(evidence),
        decided_at=decided_at,
        batch_id=batch_id,
        held_by=held_by,
        reason=reason,
        runner_up_confidence=float(runner_conf or 0.0),
    )


def _batch(row: tuple[Any, ...]) -> Batch:
    batch_id, source, at, n_items, summary = row
    return Batch(id=batch_id, source=source, at=at, n_items=int(n_items), summary=json.loads(summary))


def _version(row: tuple[Any, ...]) -> ModelVersion:
    version, parent, created_at, kind, config, fingerprint, scorecard, artifact, active, note = row
    return ModelVersion(
        version=version,
        parent=parent,
        created_at=created_at,
        kind=kind,
        config=json.loads(config),
        fingerprint=fingerprint,
        scorecard=None if scorecard is None else json.loads(scorecard),
        artifact=artifact,
        active=bool(active),
        note=note,
    )


__all__ = [
    "LATEST_VERSION",
    "Batch",
    "Correction",
    "Decision",
    "DuplicateRequestError",
    "ImportSummary",
    "LabelConflict",
    "ModelVersion",
    "Store",
    "StoreBusyError",
    "StoreError",
    "StoreFullError",
    "UnknownCorrectionError",
    "UnknownItemError",
    "UnknownVersionError",
    "migrate",
    "utc_now",
]
