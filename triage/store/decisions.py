"""Routing runs and stored decisions."""

from __future__ import annotations

from typing import Any

from triage.store.base import StoreBase
from triage.store.rows import (
    DECISION_COLS,
    Batch,
    Decision,
    batch_from_row,
    decision_from_row,
    dumps,
    utc_now,
)


class DecisionLog(StoreBase):
    """Routing runs and the decisions they stored, with why each held item was held."""


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
            f"SELECT {DECISION_COLS} FROM decisions WHERE item_id = ? ORDER BY id DESC LIMIT 1", (item_id,)
        )
        return decision_from_row(rows[0]) if rows else None

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
            f"SELECT {DECISION_COLS} FROM decisions{clause} ORDER BY id LIMIT ? OFFSET ?",
            (*params, int(limit), int(offset)),
        )
        return [decision_from_row(r) for r in rows]

    def open_held(self, limit: int = 1000, offset: int = 0) -> list[Decision]:
        """Items waiting for a person: unlabelled items whose latest decision held them, oldest first."""
        cols = ", ".join(f"d.{c}" for c in DECISION_COLS.split(", "))
        rows = self._all(
            f"SELECT {cols} FROM decisions d JOIN items i ON i.item_id = d.item_id WHERE d.held = 1"
            " AND i.label IS NULL AND d.id = (SELECT MAX(e.id) FROM decisions e WHERE e.item_id = d.item_id)"
            " ORDER BY d.id LIMIT ? OFFSET ?",
            (int(limit), int(offset)),
        )
        return [decision_from_row(r) for r in rows]

    def latest_batch(self) -> Batch | None:
        """The most recent routing run, or None."""
        rows = self._all("SELECT id, source, at, n_items, summary_json FROM batches ORDER BY id DESC LIMIT 1")
        return batch_from_row(rows[0]) if rows else None

    def batches(self) -> list[Batch]:
        """Every routing run, oldest first."""
        return [
            batch_from_row(r)
            for r in self._all("SELECT id, source, at, n_items, summary_json FROM batches ORDER BY id")
        ]
