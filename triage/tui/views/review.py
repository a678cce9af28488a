"""View 5, Review: the worklist of held items and likely misroutes; send, accept, undo."""

from __future__ import annotations

from typing import Any

from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Container
from textual.widgets import DataTable, Label

from triage.app import Workspace
from triage.app.review import WorkItem, worklist
from triage.tui.messages import LabelsChanged
from triage.tui.views.base import BY, View, _err
from triage.tui.views.detail import ItemDetail
from triage.tui.widgets import (
    QueuePicker,
    num,
)


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
        current = self.ws.store.get_item(w.item_id)
        if current is not None and current.label == queue:
            # the row is older than the item's label (another process decided it): learning it again would
            # record "queue -> queue" as a new model version
            self.items = [x for x in self.items if x.item_id != w.item_id]
            self.show()
            self.notify(f"{w.item_id} is already in {queue} (decided elsewhere); nothing recorded")
            return
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
