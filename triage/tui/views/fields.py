"""View 6, Fields: value-by-queue tables, the independence check and trying a merge of two fields."""

from __future__ import annotations

from typing import Any

from rich.console import Group
from rich.table import Table
from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, VerticalScroll
from textual.widgets import DataTable, Label, OptionList, Static
from textual.widgets.option_list import Option
from textual.worker import Worker, WorkerState, get_current_worker

from triage.app import Workspace, tuning
from triage.app.review import field_table
from triage.tui.views.base import View, _err
from triage.tui.widgets import (
    num,
    pct,
    shade,
)

PAIR_ROWS = 12


def is_word(name: str) -> bool:
    """Whether a name from the independence check is a word (listed as "word 'x'") rather than a field."""
    return name.startswith("word '")


def merge_table(result: dict[str, Any]) -> Group:
    """try_merge's figures: the two fields apart and merged into one joint field, side by side."""
    t = Table(box=None, show_edge=False, pad_edge=False, padding=(0, 2), header_style="bold")
    t.add_column("")
    t.add_column("accuracy", justify="right")
    t.add_column("avg F1 (queues equal)", justify="right")
    t.add_column("log loss", justify="right")
    for key in ("apart", "merged"):
        r = result[key]
        t.add_row(key, pct(r["accuracy"]), num(r["macro_f1"], 3), num(r["log_loss"], 3))
    head = Text(f"{result['a']} and {result['b']}, apart vs merged into {result['field']} ({result['levels']} "
                f"values seen), {result['folds']}-fold cross-validated:", style="bold")
    verdict = (Text("→ merging helps: log loss falls and the average F1 holds", style="bold green") if result["merge_helps"]
               else Text("→ merging does not help (it would need a lower log loss and no lower average F1)"))
    return Group(head, t, verdict)


class FieldsView(View):
    """Per value field: the value-by-queue counts and the smoothed probabilities, unseen column included; the
    independence check (conditional mutual information given the queue) and trying a merge of two fields."""

    main_id = "field-list"
    MERGE_FOLDS = 5
    BINDINGS = [
        Binding("i", "pairs", "Pairs", id="fields.pairs",
                tooltip="Go to the independence check: pairs most dependent given the queue"),
        Binding("m", "merge", "Try merge", id="fields.merge",
                tooltip="Cross-validate the selected pair of fields apart and merged into one field"),
    ]

    def __init__(self, ws: Workspace, **kw: Any) -> None:
        super().__init__(ws, **kw)
        self.pairs: list[dict[str, Any]] = []
        self.pairs_checked = 0
        self.pairs_for: int | None = None  # the model version the pairs were checked on
        self.merge_result: dict[str, Any] | None = None

    def compose(self) -> ComposeResult:
        with Horizontal():
            yield OptionList(id="field-list")
            with VerticalScroll(id="field-tables"):
                yield Label("", id="field-title")
                yield DataTable(id="field-counts", cursor_type="none")
                yield Label("smoothed P(value | queue)   (shade: ░▒▓█ by size)", id="field-prob-title")
                yield DataTable(id="field-probs", cursor_type="none")
                yield Label("independence given the queue: checking…", id="pairs-title")
                yield Label("shared information: how much knowing a tells about b once the queue is known; 0 means "
                            "independent, as the model assumes (in nats: natural-log units)", id="pairs-gloss",
                            classes="hint")
                yield DataTable(id="pairs-table", cursor_type="row", zebra_stripes=True)
                yield Static("", id="merge-result")

    def on_mount(self) -> None:
        t = self.query_one("#pairs-table", DataTable)
        t.add_columns("", "a", "b", "shared info", "merge")
        self.reload()

    def reload(self) -> None:
        ol = self.query_one("#field-list", OptionList)
        keep = ol.highlighted
        ol.clear_options()
        for f in self.ws.config.schema.value_fields:
            ol.add_option(Option(f.name, id=f.name))
        if ol.option_count:
            ol.highlighted = keep if keep is not None and keep < ol.option_count else 0
            self.show_field(ol.highlighted)
        mv = self.ws.active_version
        if mv is None:
            self.pairs, self.pairs_for = [], None
            self.show_pairs()
        else:
            if self.pairs_for != mv.version:
                self.merge_result = None  # figures of other labels
                self.query_one("#merge-result", Static).update("")
            self.check_pairs()

    # ----- the independence check -----
    @work(thread=True, exclusive=True, exit_on_error=False, group="independence")
    def check_pairs(self) -> list[dict[str, Any]]:
        worker = get_current_worker()
        version = self.ws.active_version.version if self.ws.active_version else None
        pairs = tuning.independence(self.ws)
        if not worker.is_cancelled:
            self.app.call_from_thread(self._checked, pairs, version)
        return pairs

    def _checked(self, pairs: list[dict[str, Any]], version: int | None) -> None:
        self.pairs_checked = len(pairs)
        flagged = sum(1 for p in pairs if p["flagged"])
        self.pairs = pairs[:max(PAIR_ROWS, flagged)]
        self.pairs_for = version
        self.show_pairs()

    def show_pairs(self) -> None:
        t = self.query_one("#pairs-table", DataTable)
        title = self.query_one("#pairs-title", Label)
        row = t.cursor_row
        t.clear()
        if self.ws.active_version is None:
            title.update("independence given the queue: no model yet")
            return
        flagged = sum(1 for p in self.pairs if p["flagged"])
        title.update(f"independence given the queue: {self.pairs_checked} pairs checked, {flagged} flagged "
                     f"(above {tuning.CMI_FLAG:g}) · top {len(self.pairs)} · i goes here · m tries a merge")
        for k, p in enumerate(self.pairs):
            mark = Text("! dependent", style="bold yellow") if p["flagged"] else ""
            fields = not (is_word(p["a"]) or is_word(p["b"]))
            t.add_row(mark, p["a"], p["b"], f"{p['cmi_nats']:.4f}", "m" if fields else "—", key=str(k))
        if t.row_count:
            t.move_cursor(row=min(max(row, 0), t.row_count - 1))

    def action_pairs(self) -> None:
        t = self.query_one("#pairs-table", DataTable)
        t.focus()
        t.scroll_visible(animate=False)

    def selected_pair(self) -> dict[str, Any] | None:
        t = self.query_one("#pairs-table", DataTable)
        if not t.row_count or not self.pairs:
            return None
        return self.pairs[int(t.coordinate_to_cell_key((t.cursor_row, 0)).row_key.value or 0)]

    @property
    def merging(self) -> bool:
        return any(w.state in (WorkerState.PENDING, WorkerState.RUNNING) for w in self.app.workers
                   if w.group == "merge")

    def action_merge(self) -> None:
        pair = self.selected_pair()
        if pair is None:
            self.notify("the independence check has not finished yet")
            return
        if is_word(pair["a"]) or is_word(pair["b"]):
            self.notify("only two fields can be merged; a word belongs to the text model (pick a pair of fields)")
            return
        if self.merging:
            self.notify("a merge is already being tried")
            return
        self.query_one("#merge-result", Static).update(Text(
            f"trying {pair['a']} × {pair['b']}: {self.MERGE_FOLDS}-fold, apart and merged…", style="dim"))
        self.try_merge(pair["a"], pair["b"])

    @work(thread=True, exclusive=True, exit_on_error=False, group="merge")
    def try_merge(self, a: str, b: str) -> dict[str, Any]:
        result = tuning.try_merge(self.ws, a, b, folds=self.MERGE_FOLDS)
        self.app.call_from_thread(self._merged, result)
        return result

    def _merged(self, result: dict[str, Any]) -> None:
        self.merge_result = result
        box = self.query_one("#merge-result", Static)
        box.update(merge_table(result))
        self.call_after_refresh(box.scroll_visible, animate=False)

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        if event.worker.group in ("independence", "merge") and event.state == WorkerState.ERROR:
            what = "the independence check" if event.worker.group == "independence" else "the merge"
            if event.worker.group == "merge":
                self.query_one("#merge-result", Static).update(Text(f"{what} failed", style="red"))
            else:
                self.query_one("#pairs-title", Label).update(f"independence given the queue: {what} failed")
            _err(self, event.worker.error or Exception(f"{what} failed"))

    # ----- value-by-queue tables -----
    def on_option_list_option_highlighted(self, event: OptionList.OptionHighlighted) -> None:
        self.show_field(event.option_index)
    def show_field(self, k: int | None) -> None:
        counts_t = self.query_one("#field-counts", DataTable)
        probs_t = self.query_one("#field-probs", DataTable)
        counts_t.clear(columns=True)
        probs_t.clear(columns=True)
        table = field_table(self.ws, k) if k is not None else None
        if table is None:
            self.query_one("#field-title", Label).update("no model yet")
            return
        self.query_one("#field-title", Label).update(
            f"{table.name} ({table.role}): items per value and queue (counts; alpha {table.alpha:g} smooths the "
            "probabilities below)")
        counts_t.add_column("queue", key="queue")
        probs_t.add_column("queue", key="queue")
        for j, lab in enumerate(table.values):
            counts_t.add_column(lab, key=f"c{j}")
            probs_t.add_column(lab, key=f"p{j}")
        for q, row, ps in zip(table.queues, table.counts, table.probabilities, strict=True):
            counts_t.add_row(q, *[str(v) for v in row])
            probs_t.add_row(q, *[f"{p:.3f}{shade(p)}" for p in ps])
