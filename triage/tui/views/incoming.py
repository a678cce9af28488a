"""View 4, Incoming: the latest run's decisions a page at a time, filtered by queue, held and text."""

from __future__ import annotations

from typing import Any

from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Container, Horizontal
from textual.widgets import DataTable, Input, Label, Select

from triage.app import Workspace
from triage.app.review import IncomingRow as Row
from triage.app.review import incoming
from triage.tui.views.base import View
from triage.tui.views.correct import correct, pick_and_correct
from triage.tui.views.detail import ItemDetail
from triage.tui.widgets import (
    pct,
)

PAGE_ROWS = 200


class IncomingView(View):
    """The latest run's decisions, a page at a time, filtered by queue, held and text."""

    main_id = "incoming-table"
    BINDINGS = [
        Binding("n,pagedown", "page(1)", "Next page", id="incoming.next", tooltip="The next page of decisions"),
        Binding("p,pageup", "page(-1)", "Prev page", show=False, id="incoming.prev", tooltip="The previous page of decisions"),
        Binding("slash", "search", "Search", show=False, id="incoming.search", tooltip="Search in the items' text",
                key_display="/"),
        Binding("h", "cycle_held", "Held/all", id="incoming.held", tooltip="Show all, only held, or only routed"),
        Binding("s", "send", "Send to…", id="incoming.send",
                tooltip="Pick the queue this item belongs to (auto-routed items too: a misroute found later)"),
        Binding("a", "accept", "Accept", id="incoming.accept", tooltip="The suggested queue is right: learn it"),
    ]

    def __init__(self, ws: Workspace, **kw: Any) -> None:
        super().__init__(ws, **kw)
        self.rows: list[Row] = []
        self.page = 0
        self.batch_id: int | None = None
        self.decided: dict[str, str] = {}  # item id -> "decided -> X by NAME" (this session)

    def compose(self) -> ComposeResult:
        with Horizontal(id="incoming-filters"):
            yield Select([], prompt="any queue", id="incoming-queue", compact=True)
            yield Select([("held and routed", "all"), ("held only", "held"), ("routed only", "routed")],
                         value="all", allow_blank=False, id="incoming-held", compact=True)
            yield Input(placeholder="/ search text, enter applies", id="incoming-search", compact=True)
        yield Label("", id="incoming-status")
        with Container(classes="split"):
            yield DataTable(id="incoming-table", cursor_type="row", zebra_stripes=True)
            yield ItemDetail(self.ws, id="incoming-detail")

    def on_mount(self) -> None:
        t = self.query_one("#incoming-table", DataTable)
        t.add_columns("item", "suggested", "conf.", "held", "runner-up", "routed to / decided")
        self.reload()

    def reload(self) -> None:
        queues = self.ws.incoming_queues()
        sel = self.query_one("#incoming-queue", Select)
        value = sel.value
        sel.set_options([(q, q) for q in queues])
        if value in queues:
            sel.value = value
        self.load()

    def filters(self) -> tuple[str | None, bool | None, str]:
        q = self.query_one("#incoming-queue", Select).value
        h = self.query_one("#incoming-held", Select).value
        held = None if h == "all" else h == "held"
        text = self.query_one("#incoming-search", Input).value.strip().lower()
        return (q if isinstance(q, str) else None), held, text

    @work(thread=True, exclusive=True, exit_on_error=False, group="incoming")
    def load(self) -> None:
        queue, held, text = self.filters()
        run_id, rows = incoming(self.ws, queue, held, text)
        self.app.call_from_thread(self._loaded, run_id, rows)

    def _loaded(self, batch_id: int | None, rows: list[Row]) -> None:
        self.batch_id = batch_id
        self.rows = rows
        self.page = 0
        self.show_page()

    @property
    def pages(self) -> int:
        return max(1, -(-len(self.rows) // PAGE_ROWS))

    def show_page(self, keep: int = 0) -> None:
        t = self.query_one("#incoming-table", DataTable)
        t.clear()
        start = self.page * PAGE_ROWS
        for r in self.rows[start:start + PAGE_ROWS]:
            t.add_row(r.item_id, r.suggested or "", pct(r.confidence), "held" if r.held else "",
                      r.runner_up or "", self.decided.get(r.item_id) or r.queue or "—", key=r.item_id)
        status = self.query_one("#incoming-status", Label)
        if self.batch_id is None:
            status.update("nothing routed yet: `triage route FILE` makes a routing run")
        else:
            end = min(start + PAGE_ROWS, len(self.rows))
            status.update(f"run #{self.batch_id}: {len(self.rows)} decisions match · rows {start + 1 if self.rows else 0}"
                          f"–{end} · page {self.page + 1}/{self.pages} (n/p)")
        if t.row_count:
            t.move_cursor(row=min(max(keep, 0), t.row_count - 1))
        else:
            self.query_one(ItemDetail).show(None)

    # ----- corrections from this list, routed items included -----
    def selected(self) -> Row | None:
        t = self.query_one("#incoming-table", DataTable)
        if not t.row_count:
            return None
        key = t.coordinate_to_cell_key((t.cursor_row, 0)).row_key.value
        return next((r for r in self.rows if r.item_id == key), None)

    def action_send(self) -> None:
        r = self.selected()
        if r is not None:
            pick_and_correct(self, self.ws, r.item_id, r.suggested, self._done)

    def action_accept(self) -> None:
        r = self.selected()
        if r is not None and r.suggested:
            correct(self, self.ws, r.item_id, r.suggested, self._done)

    def _done(self, item_id: str, queue: str) -> None:
        self.mark_decided(item_id, queue, False)

    def mark_decided(self, item_id: str, queue: str | None, undo: bool) -> None:
        """Show "decided -> X by NAME" on the item's row (or take it back after an undo)."""
        if undo or queue is None:
            self.decided.pop(item_id, None)
        else:
            name = getattr(self.app, "reviewer_name", None) or "someone"
            self.decided[item_id] = f"decided → {queue} by {name}"
        if any(r.item_id == item_id for r in self.rows):
            self.show_page(keep=self.query_one("#incoming-table", DataTable).cursor_row)

    def action_page(self, step: int) -> None:
        new = min(max(0, self.page + step), self.pages - 1)
        if new != self.page:
            self.page = new
            self.show_page()

    def action_search(self) -> None:
        self.query_one("#incoming-search", Input).focus()

    def action_cycle_held(self) -> None:
        sel = self.query_one("#incoming-held", Select)
        order = ["all", "held", "routed"]
        sel.value = order[(order.index(str(sel.value)) + 1) % 3]

    def on_select_changed(self, event: Select.Changed) -> None:
        event.stop()
        if self.is_mounted:
            self.load()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        event.stop()
        self.load()
        self.query_one("#incoming-table", DataTable).focus()

    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        event.stop()
        if event.row_key is not None and event.row_key.value:
            self.query_one(ItemDetail).show(str(event.row_key.value))
