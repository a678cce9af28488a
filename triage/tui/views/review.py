"""View 5, Review: the worklist of held items and likely misroutes; send, accept, undo."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Container
from textual.widgets import DataTable, Label

from triage.app import Workspace
from triage.tui.messages import LabelsChanged
from triage.tui.views.base import BY, SCAN_CHUNK, View, _err
from triage.tui.views.detail import ItemDetail
from triage.tui.widgets import (
    QueuePicker,
    num,
)

REVIEW_LIMIT = 500
MISROUTE_CONFIDENCE = 0.9


@dataclass(frozen=True)
class WorkItem:
    """One line of the review worklist."""

    item_id: str
    why: str  # "person must review" | "likely misroute" | "held"
    suggested: str
    confidence: float
    runner_up: str | None
    runner_up_confidence: float
    label: str | None
    score: float


def worklist(ws: Workspace, limit: int = REVIEW_LIMIT) -> list[WorkItem]:
    """Held items and likely misroutes, most useful first.

    First the items a person must review (suggested for a never-auto queue in the batch or now: they stay on
    the list until someone gives them a queue), then labelled items whose label a confident model disagrees
    with (highest confidence first), then the other held items, closest calls first (runner-up's confidence
    descending). An item leaves the list when it gets a label, or when the current model routes it.
    """
    model, policy = ws.model, ws.policy
    if model is None or policy is None:
        return []
    never = set(ws.config.never_auto())
    out: list[WorkItem] = []
    batch = ws.store.latest_batch()
    if batch is not None:
        offset = 0
        while True:
            chunk = ws.store.decisions(batch_id=batch.id, held=True, limit=SCAN_CHUNK, offset=offset)
            if not chunk:
                break
            offset += len(chunk)
            recs = [r for r in ws.store.get_items([d.item_id for d in chunk]) if r.label is None]
            if not recs:
                continue
            sticky = {d.item_id for d in chunk if d.suggested in never}
            for rec, d in zip(recs, ws.decide_records(recs), strict=True):
                person = d["suggested"] in never or rec.item_id in sticky
                if not person and not d["held"]:
                    continue
                why = "person must review" if person else "held"
                score = 3.0 + d["confidence"] if person else d["runner_up_confidence"]
                out.append(WorkItem(rec.item_id, why, d["suggested"], d["confidence"], d["runner_up"],
                                    d["runner_up_confidence"], None, score))
    labelled = ws.store.labelled_items()
    if labelled:
        enc = model.encoder.transform([r.fields for r in labelled], allow_missing=True)
        probs = policy.calibrated(model.joint_log_likelihood(enc))
        order = np.argsort(-probs, axis=1)
        queues = model.queues
        for i, rec in enumerate(labelled):
            a, b = int(order[i, 0]), int(order[i, 1]) if probs.shape[1] > 1 else int(order[i, 0])
            conf = float(probs[i, a])
            if queues[a] != rec.label and conf >= MISROUTE_CONFIDENCE:
                out.append(WorkItem(rec.item_id, "likely misroute", queues[a], conf, queues[b], float(probs[i, b]),
                                    rec.label, 1.0 + conf))
    out.sort(key=lambda w: -w.score)
    return out[:limit]


class ReviewView(View):
    """The worklist: send the selected item to a queue (learned at once), accept the suggestion, undo."""

    main_id = "review-table"
    BINDINGS = [
        Binding("s", "send", "Send to…", id="review.send", tooltip="Pick the queue this item belongs to"),
        Binding("a", "accept", "Accept", id="review.accept", tooltip="The suggested queue is right: learn it"),
        Binding("u", "undo", "Undo", id="review.undo", tooltip="Undo the newest correction"),
        Binding("g", "rebuild", "Rebuild", id="review.rebuild", tooltip="Build the worklist again"),
    ]

    def __init__(self, ws: Workspace, **kw: Any) -> None:
        super().__init__(ws, **kw)
        self.items: list[WorkItem] = []
        self.done = 0

    def compose(self) -> ComposeResult:
        yield Label("", id="review-status")
        with Container(classes="split"):
            yield DataTable(id="review-table", cursor_type="row", zebra_stripes=True)
            yield ItemDetail(self.ws, id="review-detail")

    def on_mount(self) -> None:
        t = self.query_one("#review-table", DataTable)
        t.add_columns("why", "item", "suggested", "conf.", "runner-up", "conf.", "label")
        self.reload()

    def reload(self) -> None:
        self.rebuild()

    def action_rebuild(self) -> None:
        self.rebuild()

    @work(thread=True, exclusive=True, exit_on_error=False, group="review")
    def rebuild(self) -> list[WorkItem]:
        items = worklist(self.ws)
        self.app.call_from_thread(self._built, items)
        return items

    def _built(self, items: list[WorkItem]) -> None:
        self.items = items
        self.show()

    def show(self) -> None:
        t = self.query_one("#review-table", DataTable)
        row = t.cursor_row
        t.clear()
        for w in self.items:
            why = Text(w.why, style="bold yellow" if w.why == "person must review" else
                       "magenta" if w.why == "likely misroute" else "")
            t.add_row(why, w.item_id, w.suggested, num(w.confidence), w.runner_up or "",
                      num(w.runner_up_confidence), w.label or "—", key=w.item_id)
        n_person = sum(1 for w in self.items if w.why == "person must review")
        n_mis = sum(1 for w in self.items if w.why == "likely misroute")
        self.query_one("#review-status", Label).update(
            f"{len(self.items)} to look at: {n_person} a person must review, {n_mis} likely misroutes, "
            f"{len(self.items) - n_person - n_mis} held · {self.done} done here · s send · a accept · u undo")
        if t.row_count:
            t.move_cursor(row=min(max(row, 0), t.row_count - 1))
        else:
            self.query_one(ItemDetail).show(None)

    def selected(self) -> WorkItem | None:
        t = self.query_one("#review-table", DataTable)
        if not t.row_count:
            return None
        key = t.coordinate_to_cell_key((t.cursor_row, 0)).row_key.value
        return next((w for w in self.items if w.item_id == key), None)

    def action_send(self) -> None:
        w = self.selected()
        if w is None:
            return
        queues = sorted(set(self.ws.model.queues if self.ws.model else []) | set(self.ws.store.queue_counts()))

        def picked(queue: str | None) -> None:
            if queue:
                self.correct(w, queue)

        self.app.push_screen(QueuePicker(w.item_id, queues, w.suggested, self.ws.config.never_auto()), picked)

    def action_accept(self) -> None:
        w = self.selected()
        if w is not None:
            self.correct(w, w.suggested)

    def correct(self, w: WorkItem, queue: str) -> None:
        try:
            report = self.ws.correct(w.item_id, queue, by=BY)
        except Exception as exc:  # noqa: BLE001 - shown to the user
            _err(self, exc)
            return
        self.done += 1
        self.items = [x for x in self.items if x.item_id != w.item_id]
        self.show()
        self.notify(f"{w.item_id}: {report.before or 'no queue'} → {queue}; learned, version {report.version.version}")
        self.post_message(LabelsChanged(w.item_id, queue, report.version.version))

    def action_undo(self) -> None:
        try:
            report = self.ws.undo(by=BY)
        except Exception as exc:  # noqa: BLE001
            _err(self, exc)
            return
        c = report.correction
        self.done = max(0, self.done - 1)
        self.notify(f"undone: {c.item_id} is back to {c.to_queue or 'no queue'} (version {report.version.version})")
        self.post_message(LabelsChanged(c.item_id, c.to_queue, report.version.version, undo=True))

    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        event.stop()
        if event.row_key is not None and event.row_key.value:
            self.query_one(ItemDetail).show(str(event.row_key.value))
