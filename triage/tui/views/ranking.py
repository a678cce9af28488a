"""The ranking screen (k on the Scorecard) and the misroutes behind a queue's row of the matrix (i): the selected queue's test items sorted by its score, with the
running gain and lift beside them, so a sales analyst sees whom to call first and what the order is worth."""

from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import DataTable, Label

from triage.app import Workspace
from triage.app.ranking import CellItem, Ranking
from triage.tui.views.correct import pick_and_correct
from triage.tui.views.detail import ItemDetail
from triage.tui.widgets import pct

SHOWN = 300


class RankingScreen(ModalScreen[None]):
    """One queue's ranking over the test items (outcome known)."""

    BINDINGS = [Binding("escape,q,k", "leave", "Close", id="ranking.close", tooltip="Back to the scorecard")]

    def __init__(self, ranking: Ranking) -> None:
        super().__init__()
        self.ranking = ranking

    def compose(self) -> ComposeResult:
        r = self.ranking
        with Vertical(id="ranking-dialog") as box:
            box.border_title = f"ranking by the {r.queue} score"
            box.border_subtitle = "escape closes"
            yield Label(self.summary(), id="ranking-summary")
            yield DataTable(id="ranking-table", cursor_type="row", zebra_stripes=True)

    def summary(self) -> Text:
        r = self.ranking
        s = Text()
        s.append(f"{len(r.items)} test items, {r.positives} truly {r.queue} (base rate {pct(r.base_rate)}). ")
        s.append(f"Calling the top 10% first reaches {pct(r.gain_at(0.10))} of them, the top 20% "
                 f"{pct(r.gain_at(0.20))}.", style="bold")
        s.append("  gain: share of the queue found so far · lift: times the base rate so far", style="dim")
        return s

    def on_mount(self) -> None:
        t = self.query_one(DataTable)
        t.add_columns("rank", "item", "score", "true queue", "", "gain", "lift")
        for x in self.ranking.items[:SHOWN]:
            t.add_row(str(x.rank), x.item_id, pct(x.score), x.label, "✓" if x.in_queue else "",
                      pct(x.gain), f"{x.lift:.1f}×", key=x.item_id)
        t.focus()

    def action_leave(self) -> None:
        self.dismiss(None)


class MisroutesScreen(ModalScreen[None]):
    """The items behind a queue's row and column of the confusion matrix (i on the Scorecard): test items truly
    of the queue suggested elsewhere, and items suggested for it that are truly elsewhere; each with its
    evidence below, and `s` corrects one (a stored label: asked first)."""

    BINDINGS = [
        Binding("escape,q", "leave", "Close", id="misroutes.close", tooltip="Back to the scorecard"),
        Binding("s", "send", "Send to…", id="misroutes.send", tooltip="Pick the queue this item belongs to"),
    ]

    def __init__(self, ws: Workspace, queue: str, items: list[CellItem]) -> None:
        super().__init__()
        self.ws = ws
        self.queue = queue
        self.items = items

    def compose(self) -> ComposeResult:
        with Vertical(id="ranking-dialog") as box:
            box.border_title = f"misroutes of {self.queue} among the test items"
            box.border_subtitle = "s sends · escape closes"
            out = sum(1 for c in self.items if c.label == self.queue)
            yield Label(f"{out} truly {self.queue} but suggested elsewhere · {len(self.items) - out} suggested "
                        f"for {self.queue} but truly elsewhere · most confident first", id="ranking-summary")
            yield DataTable(id="misroutes-table", cursor_type="row", zebra_stripes=True)
            yield ItemDetail(self.ws, id="misroutes-detail")

    def on_mount(self) -> None:
        t = self.query_one(DataTable)
        t.add_columns("item", "true queue", "suggested", "conf.", "")
        for c in self.items:
            t.add_row(c.item_id, c.label, c.suggested, pct(c.confidence), "", key=c.item_id)
        t.focus()

    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        event.stop()
        if event.row_key is not None and event.row_key.value:
            self.query_one(ItemDetail).show(str(event.row_key.value))

    def action_send(self) -> None:
        t = self.query_one(DataTable)
        if not t.row_count:
            return
        key = str(t.coordinate_to_cell_key((t.cursor_row, 0)).row_key.value)
        c = next(x for x in self.items if x.item_id == key)

        def done(item_id: str, queue: str) -> None:
            name = getattr(self.app, "reviewer_name", None) or "someone"
            t.update_cell(item_id, t.ordered_columns[4].key, f"decided → {queue} by {name}")

        pick_and_correct(self, self.ws, c.item_id, c.suggested, done)

    def action_leave(self) -> None:
        self.dismiss(None)
