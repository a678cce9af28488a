"""View 5, Review: the work order (safety first, then held items closest to a decision, then on request the
stored labels the model disagrees with); send, accept, undo; search and a queue filter."""

from __future__ import annotations

from typing import Any

from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Container, Horizontal
from textual.widgets import DataTable, Input, Label, Select

from triage.app import Workspace
from triage.app.work_order import Group, WorkEntry, WorkOrder, work_order
from triage.tui.messages import LabelsChanged, ReviewCount
from triage.tui.views.base import View, _err
from triage.tui.views.correct import correct, pick_and_correct, reviewer
from triage.tui.views.detail import ItemDetail
from triage.tui.widgets import pct

# a mark per group that reads without colour too
MARKS = {Group.SAFETY: ("!", "bold red"), Group.HELD: ("·", ""), Group.DISAGREES: ("≠", "magenta")}
DECIDED_MARK = "✓"


class ReviewView(View):
    """The work order: send the selected item to a queue (learned at once), accept the suggestion, undo."""

    main_id = "review-table"
    BINDINGS = [
        Binding("s", "send", "Send to…", id="review.send", tooltip="Pick the queue this item belongs to"),
        Binding("a", "accept", "Accept", id="review.accept", tooltip="The suggested queue is right: learn it"),
        Binding("u", "undo", "Undo", id="review.undo", tooltip="Undo the newest correction"),
        Binding("d", "toggle_disagreements", "Disagree", id="review.disagreements",
                tooltip="Show or hide stored labels the model disagrees with"),
        Binding("slash", "search", "Search", show=False, id="review.search", tooltip="Filter by item id or words of the reason",
                key_display="/"),
        Binding("g", "rebuild", "Rebuild", show=False, id="review.rebuild", tooltip="Build the work order again"),
    ]

    def __init__(self, ws: Workspace, **kw: Any) -> None:
        super().__init__(ws, **kw)
        self.order: WorkOrder | None = None
        self.entries: list[WorkEntry] = []
        self.decided: dict[str, str] = {}  # item id -> "decided -> X by NAME", for this session's rows
        self.disagreements = False
        self.done = 0

    @property
    def items(self) -> list[Any]:
        """The work items on the list (decided rows excluded)."""
        return [e.item for e in self.entries if e.item.item_id not in self.decided]

    def compose(self) -> ComposeResult:
        with Horizontal(classes="filters"):
            yield Select([], prompt="any queue", id="review-queue", compact=True)
            yield Input(placeholder="/ search id or reason, enter applies", id="review-search", compact=True)
        yield Label(id="review-safety")
        yield Label("building the work order…", id="review-status")
        with Container(classes="split"):
            yield DataTable(id="review-table", cursor_type="row", zebra_stripes=True)
            yield ItemDetail(self.ws, id="review-detail")

    def on_mount(self) -> None:
        t = self.query_one("#review-table", DataTable)
        t.add_column("", key="mark")
        t.add_column("item", key="item")
        t.add_column("suggested", key="suggested")
        t.add_column("conf.", key="conf")
        t.add_column("label", key="label")
        t.add_column("why (safety first, then closest to a decision)", key="why")
        never = sorted(self.ws.config.never_auto())
        safety = self.query_one("#review-safety", Label)
        safety.display = bool(never)
        safety.update(Text(
            f"! {', '.join(never)} {'is' if len(never) == 1 else 'are'} never auto-routed or closed: a person "
            "decides every item" if never else "", style="bold yellow"))
        self.reload()

    def reload(self) -> None:
        self.rebuild()

    def action_rebuild(self) -> None:
        self.rebuild()

    def action_toggle_disagreements(self) -> None:
        self.disagreements = not self.disagreements
        self.rebuild()

    def action_search(self) -> None:
        self.query_one("#review-search", Input).focus()

    def rebuild(self) -> None:
        self.query_one("#review-table", DataTable).loading = True
        self.query_one("#review-status", Label).update(
            "building the work order…" + (" (with the stored labels the model disagrees with: scoring every "
                                          "labelled item)" if self.disagreements else ""))
        self.build(self.disagreements)

    @work(thread=True, exclusive=True, exit_on_error=False, group="review")
    def build(self, disagreements: bool) -> WorkOrder:
        order = work_order(self.ws, disagreements=disagreements)
        self.app.call_from_thread(self._built, order)
        return order

    def _built(self, order: WorkOrder) -> None:
        self.order = order
        self.entries = list(order.entries)
        self.decided = {k: v for k, v in self.decided.items() if any(e.item.item_id == k for e in self.entries)}
        self.query_one("#review-table", DataTable).loading = False
        queues = sorted({e.item.suggested for e in self.entries if e.item.suggested})
        sel = self.query_one("#review-queue", Select)
        value = sel.value
        with self.prevent(Select.Changed):
            sel.set_options([(q, q) for q in queues])
            if value in queues:
                sel.value = value
        self.show()

    def on_worker_state_changed(self, event: Any) -> None:
        if event.worker.group == "review" and event.state.name == "ERROR":
            self.query_one("#review-table", DataTable).loading = False
            self.query_one("#review-status", Label).update("the work order could not be built")
            _err(self, event.worker.error or Exception("the work order could not be built"))

    def visible(self) -> list[WorkEntry]:
        q = self.query_one("#review-queue", Select).value
        text = self.query_one("#review-search", Input).value.strip().casefold()
        out = []
        for e in self.entries:
            if isinstance(q, str) and e.item.suggested != q:
                continue
            if text and text not in f"{e.item.item_id} {e.why} {e.item.suggested}".casefold():
                continue
            out.append(e)
        return out

    def show(self) -> None:
        t = self.query_one("#review-table", DataTable)
        row = t.cursor_row
        t.clear()
        shown = self.visible()
        for e in shown:
            w = e.item
            done = self.decided.get(w.item_id)
            mark, style = (DECIDED_MARK, "bold green") if done else MARKS[e.group]
            t.add_row(Text(mark, style=style), w.item_id, w.suggested, pct(w.confidence), w.label or "—",
                      Text(done or e.why, style="dim" if done else style), key=w.item_id)
        order = self.order
        if order is not None:
            left = order.to_review - sum(1 for k in self.decided if k in {e.item.item_id for e in self.entries
                                                                          if e.group is not Group.DISAGREES})
            n_dis = sum(1 for e in self.entries if e.group is Group.DISAGREES)
            dis = (f"{n_dis} labels the model disagrees with (d hides)" if self.disagreements
                   else "d shows labels the model disagrees with")
            filt = f" · {len(shown)} match the filter" if len(shown) != len(self.entries) else ""
            left_safety = order.safety - sum(1 for e in self.entries if e.group is Group.SAFETY
                                             and e.item.item_id in self.decided)
            self.post_message(ReviewCount(max(0, left), max(0, left_safety)))
            self.query_one("#review-status", Label).update(
                f"to review: {max(0, left)} (safety {max(0, left_safety)}) · {self.done} decided here · {dis}{filt}")
        if t.row_count:
            t.move_cursor(row=min(max(row, 0), t.row_count - 1))
        else:
            self.query_one(ItemDetail).show(None)

    def selected(self) -> WorkEntry | None:
        t = self.query_one("#review-table", DataTable)
        if not t.row_count:
            return None
        key = t.coordinate_to_cell_key((t.cursor_row, 0)).row_key.value
        return next((e for e in self.entries if e.item.item_id == key), None)

    def _done(self, item_id: str, queue: str) -> None:
        name = getattr(self.app, "reviewer_name", None) or "someone"
        self.decided[item_id] = f"decided → {queue} by {name}"
        self.done += 1
        self.show()

    def action_send(self) -> None:
        e = self.selected()
        if e is not None:
            pick_and_correct(self, self.ws, e.item.item_id, e.item.suggested, self._done)

    def action_accept(self) -> None:
        e = self.selected()
        if e is not None:
            self.correct(e.item, e.item.suggested)

    def correct(self, w: Any, queue: str) -> None:
        correct(self, self.ws, w.item_id, queue, self._done)

    def action_undo(self) -> None:
        def go(name: str) -> None:
            try:
                report = self.ws.undo(by=name)
            except Exception as exc:  # noqa: BLE001
                _err(self, exc)
                return
            c = report.correction
            self.done = max(0, self.done - 1)
            self.decided.pop(c.item_id, None)
            self.notify(f"undone by {name}: {c.item_id} is back to {c.to_queue or 'no queue'} "
                        f"(model version {report.version.version})")
            self.post_message(LabelsChanged(c.item_id, c.to_queue, report.version.version, undo=True))

        reviewer(self, go)

    def on_select_changed(self, event: Select.Changed) -> None:
        event.stop()
        if self.is_mounted:
            self.show()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        self.show()
        self.query_one("#review-table", DataTable).focus()

    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        event.stop()
        if event.row_key is not None and event.row_key.value:
            self.query_one(ItemDetail).show(str(event.row_key.value))
