"""Corrections: a person's change of an item's queue, journaled (durable) first, then learned exactly and
activated as a new model version; undo is a correction back to the previous queue."""

from __future__ import annotations

import difflib
import os
from typing import TYPE_CHECKING

from triage.app.active import (
    commit_correction,
    load_active,
    replay_pending,
    require_model,
    require_writable_model,
)
from triage.app.decisions import CorrectionReport
from triage.app.errors import AlreadyInQueue, BadInput, UnknownItem, UnknownQueue
from triage.app.routing import decide_records

if TYPE_CHECKING:
    from triage.app.workspace import Workspace

REVIEWER_ENV = "TRIAGE_REVIEWER"


def reviewer(ws: Workspace) -> str | None:
    """Who is deciding, when the person did not say: `[desk] reviewer` in triage.toml, else the environment's
    TRIAGE_REVIEWER, else None (the terminal UI then asks; it never records a fixed name of its own)."""
    if ws.config.reviewer:
        return ws.config.reviewer
    return " ".join(os.environ.get(REVIEWER_ENV, "").split()) or None


def known_queues(ws: Workspace) -> set[str]:
    """The queues the active model or the labelled items know."""
    active = ws._active
    return (set(active.model.queues) if active is not None else set()) | set(ws.store.queue_counts())


def reply_for(ws: Workspace, request_key: str) -> str | None:
    """The answer (JSON text) given the first time a correction was asked with this idempotency key, or None;
    a repeat of the request gets it back word for word."""
    return ws.store.reply_for(request_key)


def save_reply(ws: Workspace, request_key: str, correction_id: int, reply_json: str) -> None:
    """Keep the answer to a correction asked with an idempotency key; the first answer kept stays."""
    ws.store.save_reply(request_key, correction_id, reply_json)


def check_queue(ws: Workspace, queue: str, *, new_queue: bool) -> None:
    """May an item be sent to `queue`? Decided here, once, for the command line, the service and the UI.

    A known queue, yes. A queue not yet known only when the person asked for a new one explicitly
    (`new_queue`): a typo ("netwrok") would otherwise create a queue of its own without a word. The refusal
    names the closest known queue."""
    known = known_queues(ws)
    if queue in known:
        return
    if not queue.replace("_", "").replace("-", "").isalnum():
        raise BadInput(f"queue {queue!r}: use letters, digits, '_' or '-' for a new queue")
    if new_queue:
        return
    folded = {q.casefold(): q for q in known}
    close = difflib.get_close_matches(queue.casefold(), sorted(folded), n=1, cutoff=0.6)
    hint = f"; did you mean {folded[close[0]]!r}?" if close else ""
    raise UnknownQueue(f"queue {queue!r} is not a known queue{hint} (known: {', '.join(sorted(known))}); to "
                       "create a new queue, ask for it explicitly (--new-queue on the command line, "
                       "\"new_queue\": true in a request)")


def correct(ws: Workspace, item_id: str, queue: str, by: str = "operator", *,
            new_queue: bool = False, request_key: str | None = None) -> CorrectionReport:
    """Journal a correction (durable first), learn it exactly, and activate the corrected model.

    A queue not yet known needs `new_queue=True` (see `check_queue`); the queue the item already has is
    refused (`AlreadyInQueue`), read under the lock so that a decision made elsewhere meanwhile counts.
    `request_key`: a repeat with the same key returns the first outcome and changes nothing. When the correction cannot be committed it is withdrawn
    from the journal before the error is raised, so an error means "not done"."""
    queue = queue.strip()
    if not queue:
        raise BadInput("the queue to correct to is empty")
    with ws.lock:
        ws.refresh_if_changed()  # correct the newest model, whoever activated it
        replay_pending(ws)  # a correction left pending by a failed commit is finished first
        active = require_writable_model(ws)
        rec = ws.store.get_item(item_id)
        if rec is None:
            raise UnknownItem(f"{ws.store.path}: no item with id {item_id!r}")
        if request_key is not None:
            seen = ws.store.correction_by_key(request_key)
            if seen is not None and seen.applied_version is not None:
                return CorrectionReport(seen, ws.store.get_model_version(seen.applied_version), seen.from_queue,
                                        seen.to_queue, decide_records(ws, [rec])[0])
        if rec.label == queue:
            raise AlreadyInQueue(f"{item_id} is already in {queue}: nothing to correct, nothing recorded")
        check_queue(ws, queue, new_queue=new_queue)
        c = ws.store.journal_correction(item_id, queue, by, active.version.version, request_key=request_key)
        before = rec.label
        try:
            mv = commit_correction(ws, c)
        except BaseException:
            if ws.store.withdraw_correction(c.id):
                raise
            load_active(ws)  # another process applied it meanwhile: it is done
            mv = require_model(ws).version
        decision = decide_records(ws, [rec])[0]
    return CorrectionReport(ws.store.get_correction(c.id), mv, before, queue, decision)


def undo(ws: Workspace, by: str = "operator") -> CorrectionReport:
    """Reverse the newest correction that has not been undone (journaled and learned like any correction)."""
    with ws.lock:
        ws.refresh_if_changed()
        active = require_writable_model(ws)
        last = ws.store.last_undoable_correction()
        if last is None:
            raise BadInput("there is no correction to undo")
        c = ws.store.journal_correction(last.item_id, last.from_queue, by, active.version.version,
                                        undo_of=last.id)
        mv = commit_correction(ws, c)
    return CorrectionReport(ws.store.get_correction(c.id), mv, last.to_queue, last.from_queue)
