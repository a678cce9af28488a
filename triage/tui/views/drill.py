"""The items behind a scorecard figure (enter on a matrix cell, or on a queue's row): the list from
`triage.app.drilldown`, the highlighted item's evidence below it, and `s` to correct one from there."""

from __future__ import annotations

from collections.abc import Sequence

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import DataTable, Label

from triage.app import Workspace
from triage.app.drilldown import MeasuredItem
from triage.tui.views.correct import pick_and_correct
from triage.tui.views.detail import ItemDetail
from triage.tui.widgets import pct

ROUTED = "auto-routed"
HELD = "held"


def outcome(x: MeasuredItem) -> Text:
    """Auto-routed or held, in words; an auto-routed item of another queue is marked ✗ (reads without colour)."""
    if x.held:
        return Text(HELD, style="dim")
    if x.misrouted:
        return Text(f"✗ {ROUTED}", style="bold red")
    return Text(ROUTED)


class MeasuredItemsScreen(ModalScreen[None]):
    """Test items behind one figure: each row says how the measurement decided it; the panel below shows the
    active model's evidence for the highlighted one; `s` sends it to a queue (a stored label: asked first)."""

    BINDINGS = [
        Binding("escape,q", "leave", "Close", id="drill.close", tooltip="Back to the scorecard"),
        Binding("s", "send", "Send to…", id="drill.send", tooltip="Pick the queue this item belongs to"),
    ]

    def __init__(self, ws: Workspace, title: str, summary: str, items: Sequence[MeasuredItem],
                 show_label: bool = False) -> None:
        super().__init__()
        self.ws = ws
        self.title_text = title
        self.summary = summary
        self.items = list(items)
        self.show_label = show_label  # a queue's row mixes true queues; a cell has one

    def compose(self) -> ComposeResult:
        with Vertical(id="ranking-dialog") as box:
            box.border_title = self.title_text
            box.border_subtitle = "s sends · escape closes"
            note = ("" if self.items else "\nno test items here") + (
                "\nrows: the measurement's decisions, made without these items; evidence: the active model's")
            yield Label(Text(self.summary + note), id="ranking-summary")
            yield DataTable(id="drill-table", cursor_type="row", zebra_stripes=True)
            yield ItemDetail(self.ws, id="drill-detail")

    def on_mount(self) -> None:
        t = self.query_one(DataTable)
        t.add_column("item", key="item")
        if self.show_label:
            t.add_column("true queue", key="label")
        t.add_column("conf.", key="conf")
        t.add_column("outcome", key="outcome")
        t.add_column("what it says", key="gist")
        for x in self.items:
            cells: list[str | Text] = [x.item_id]
            if self.show_label:
                cells.append(x.label)
            cells += [pct(x.confidence), outcome(x), x.gist]
            t.add_row(*cells, key=x.item_id)
        t.focus()

    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        event.stop()
        if event.row_key is not None and event.row_key.value:
            self.query_one(ItemDetail).show(str(event.row_key.value))

    def selected(self) -> MeasuredItem | None:
        t = self.query_one(DataTable)
        if not t.row_count:
            return None
        key = t.coordinate_to_cell_key((t.cursor_row, 0)).row_key.value
        return next((x for x in self.items if x.item_id == key), None)

    def action_send(self) -> None:
        x = self.selected()
        if x is None:
            return
        t = self.query_one(DataTable)

        def done(item_id: str, queue: str) -> None:
            name = getattr(self.app, "reviewer_name", None) or "someone"
            t.update_cell(item_id, "outcome", Text(f"✓ → {queue} by {name}", style="bold"), update_width=True)

        pick_and_correct(self, self.ws, x.item_id, x.suggested, done)

    def action_leave(self) -> None:
        self.dismiss(None)
