"""Corrections: a person's change of an item's queue, journaled (durable) first, then learned exactly and
activated as a new model version; undo is a correction back to the previous queue."""

from __future__ import annotations

from typing import TYPE_CHECKING

from triage.app.active import commit_correction, replay_pending, require_model
from triage.app.decisions import CorrectionReport
from triage.app.errors import BadInput, UnknownItem
from triage.app.routing import decide_records

if TYPE_CHECKING:
    from triage.app.workspace import Workspace


def correct(ws: Workspace, item_id: str, queue: str, by: str = "operator") -> CorrectionReport:
    """Journal a correction (durable first), learn it exactly, and activate the corrected model."""
    queue = queue.strip()
    if not queue:
        raise BadInput("the queue to correct to is empty")
    with ws.lock:
        ws.refresh_if_changed()  # correct the newest model, whoever activated it
        replay_pending(ws)  # a correction left pending by a failed commit is finished first
        active = require_model(ws)
        rec = ws.store.get_item(item_id)
        if rec is None:
            raise UnknownItem(f"{ws.store.path}: no item with id {item_id!r}")
        known = set(active.model.queues) | set(ws.store.queue_counts())
        if queue not in known and not queue.replace("_", "").replace("-", "").isalnum():
            raise BadInput(f"queue {queue!r}: use letters, digits, '_' or '-' for a new queue")
        c = ws.store.journal_correction(item_id, queue, by, active.version.version)
        before = rec.label
        mv = commit_correction(ws, c)
        decision = decide_records(ws, [rec])[0]
    return CorrectionReport(ws.store.get_correction(c.id), mv, before, queue, decision)


def undo(ws: Workspace, by: str = "operator") -> CorrectionReport:
    """Reverse the newest correction that has not been undone (journaled and learned like any correction)."""
    with ws.lock:
        ws.refresh_if_changed()
        active = require_model(ws)
        last = ws.store.last_undoable_correction()
        if last is None:
            raise BadInput("there is no correction to undo")
        c = ws.store.journal_correction(last.item_id, last.from_queue, by, active.version.version,
                                        undo_of=last.id)
        mv = commit_correction(ws, c)
    return CorrectionReport(ws.store.get_correction(c.id), mv, last.to_queue, last.from_queue)
