"""The corrections journal."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from triage.store.base import StoreBase
from triage.store.errors import DuplicateRequestError, StoreError, UnknownCorrectionError, UnknownItemError
from triage.store.rows import CORRECTION_COLS, Correction, utc_now


class CorrectionJournal(StoreBase):
    """The corrections journal: journaled first, applied after, withdrawn or undone, never deleted."""


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
        sql = f"SELECT {CORRECTION_COLS} FROM corrections {where}" + (" ORDER BY id" if order else "")
        return [Correction(*r) for r in self._all(sql, params)]

    def _correction_row(self, correction_id: int) -> Correction:
        found = self._corrections("WHERE id = ?", (correction_id,))
        if not found:
            raise UnknownCorrectionError(f"{self.path}: no such correction: {correction_id}")
        return found[0]
