"""Items and their label history."""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

from triage.records import ItemRecord
from triage.store.base import CHUNK, StoreBase
from triage.store.errors import UnknownItemError
from triage.store.rows import ImportSummary, LabelConflict, dumps, item_from_row, utc_now


class ItemTables(StoreBase):
    """Items and their label history."""


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
        return None if row is None else item_from_row(row)

    def get_items_if_any(self, ids: Iterable[str]) -> list[ItemRecord]:
        """The stored ones among these ids (in no particular order); unknown ids are left out."""
        return list(self._found(list(dict.fromkeys(ids))).values())

    def _found(self, unique: list[str]) -> dict[str, ItemRecord]:
        found: dict[str, ItemRecord] = {}
        for start in range(0, len(unique), CHUNK):
            chunk = unique[start : start + CHUNK]
            marks = ",".join("?" * len(chunk))
            for row in self._all(
                f"SELECT item_id, fields_json, label, arrived_at FROM items WHERE item_id IN ({marks})", chunk
            ):
                found[row[0]] = item_from_row(row)
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
        return [item_from_row(r) for r in rows]

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
