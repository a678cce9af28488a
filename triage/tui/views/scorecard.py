"""View 3, Scorecard: the workspace's own measurement, what-if cutoffs, precision/coverage and reliability."""

from __future__ import annotations

from typing import Any

from rich.console import Group
from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical, VerticalScroll
from textual.widgets import DataTable, Static
from textual.worker import Worker, WorkerState, get_current_worker

from triage.app import Measurement, Scorecard, Workspace
from triage.app.drilldown import cell, queue_row
from triage.app.ranking import cell_items, ranking
from triage.tui.messages import ModelChanged
from triage.tui.views.base import View, _err
from triage.tui.views.correct import reviewer
from triage.tui.views.drill import MeasuredItemsScreen
from triage.tui.views.ranking import MisroutesScreen, RankingScreen
from triage.tui.widgets import (
    ConfirmScreen,
    matrix_cells,
    num,
    pct,
    reliability_chart,
    text_plot,
)

CUTOFF_STEP = 0.01
CURVE_POINTS = 50


def cutoff_text(c: float | None) -> str:
    return "none" if c is None else f"{c:.2f}"


NOTHING = "—"  # a figure about auto-routed items when none were routed: not 0.0%
BELOW = "▼"  # precision below the queue's target (reads without colour)


def queue_cells(qs: Any) -> list[str | Text]:  # a Scorecard's per-queue entry (QueueScore)
    """One per-queue row: a queue that routed nothing shows "—" for its precision and F1, a precision below the
    target is marked ▼, and the last cell says what is wrong in words."""
    routed = qs.routed > 0
    below = routed and qs.target is not None and qs.precision < qs.target
    prec: str | Text = pct(qs.precision) if routed else NOTHING
    if below:
        prec = Text(f"{pct(qs.precision)} {BELOW}", style="bold red")
    note = ("a person sees every item" if qs.never_auto else f"{BELOW} below its target" if below else
            "no cutoff reaches the target" if qs.cutoff is None else "nothing auto-routed" if not routed else "")
    return [qs.queue, num(qs.target), num(qs.cutoff), prec, pct(qs.recall), num(qs.f1) if routed else NOTHING,
            pct(qs.coverage), pct(qs.held_share), str(qs.routed), str(qs.support),
            Text(note, style="bold red" if below else "dim")]


def legend_line(card: Scorecard) -> str:
    """What the table's marks mean, for the marks it shows (on a narrow terminal the note column is off
    screen, so the summary says it)."""
    below = any(q.routed and q.target is not None and q.precision < q.target for q in card.per_queue)
    nothing = any(not q.routed for q in card.per_queue)
    return " · ".join([f"{BELOW} precision below the queue's target"] * below
                      + [f"{NOTHING} nothing auto-routed, so no precision"] * nothing)


class ScorecardView(View):
    """The workspace's own measurement (`Workspace.evaluate`, what `triage evaluate` prints): confusion matrix,
    per-queue figures, what-if cutoffs re-scored on the same test items (`Measurement.rescore`), a
    precision/coverage plot, and saving the what-if cutoffs as a new model version."""

    main_id = "queue-table"
    BINDINGS = [
        Binding("plus,equals_sign", "nudge(1)", "Cutoff +", id="score.up", tooltip="Raise the selected cutoff by 0.01",
                key_display="+"),
        Binding("minus,underscore", "nudge(-1)", "Cutoff −", id="score.down",
                tooltip="Lower the selected cutoff by 0.01", key_display="-"),
        Binding("w", "save_cutoffs", "Save", id="score.save",
                tooltip="Save the what-if cutoffs as a new model version (asks first)"),
        Binding("r", "reset", "Reset", show=False, id="score.reset", tooltip="Back to the active model's cutoffs"),
        Binding("e", "remeasure", "Re-score", show=False, id="score.remeasure",
                tooltip="Score the test items again with the current labels"),
        Binding("i", "misroutes", "Misroutes", id="score.misroutes",
                tooltip="The test items behind the selected queue's row and column of the matrix, with evidence"),
        Binding("k", "ranking", "Ranking", id="score.ranking",
                tooltip="The selected queue's test items sorted by its score, with gain and lift (whom to call first)"),
        Binding("m", "matrix", "Matrix", show=False, id="score.matrix",
                tooltip="Go to the confusion matrix: arrows pick a cell, enter lists the items behind it"),
        Binding("c", "toggle_reliability", "Raw/calib.", id="score.reliability", show=False,
                tooltip="Reliability chart: calibrated confidence or raw posterior (scrolls to it)"),
    ]

    def __init__(self, ws: Workspace, **kw: Any) -> None:
        super().__init__(ws, **kw)
        self.meas: Measurement | None = None
        self.measured_for: int | None = None  # the active version the measurement and `saved` belong to
        self.measuring = False  # a measurement was asked for and has not arrived
        self.saved: dict[str, float | None] = {}  # the active policy's cutoffs, per scorecard queue
        self.cutoffs: dict[str, float | None] = {}  # the what-if cutoffs on screen
        self.curves: dict[str, dict[str, list[float]]] = {}
        self.card: Scorecard | None = None
        self.raw_reliability = False  # c: the raw posterior's reliability instead of the routing confidence's

    def compose(self) -> ComposeResult:
        yield Static(id="score-summary")
        # the per-queue table stays put; the matrix and the charts scroll below it
        table = DataTable(id="queue-table", cursor_type="row", classes="panel")
        table.border_title = "per queue, at the cutoffs (+ - try others · enter lists its items)"
        yield table
        with VerticalScroll(id="score-scroll"):
            with Horizontal(id="score-lower"):
                with Vertical(id="score-matrix"):
                    yield Static(Text.assemble(("confusion matrix", "bold"), ": rows true, columns suggested\n",
                                               ("cell: count, % of the row, shade · m, arrows, enter: its items",
                                                "dim")), id="matrix-title")
                    yield DataTable(id="matrix-table", cursor_type="cell", cell_padding=0)
                with Vertical(id="score-charts"):
                    yield Static(id="score-plot")
                    yield Static(id="score-reliability")

    def on_mount(self) -> None:
        t = self.query_one("#queue-table", DataTable)
        t.add_columns("queue", "target", "cutoff", "precision", "recall", "F1", "auto-routed", "held", "routed",
                      "true items", "")
        self.reload()

    def reload(self) -> None:
        mv = self.ws.active_version
        if mv is None:
            self.meas, self.card, self.measured_for = None, None, None
            self.show()
            return
        if self.meas is not None and mv.version == self.measured_for:
            self.saved = self._active_cutoffs(self.meas)  # e.g. the cutoffs just saved: same labels, no refit
            self.show()
            return
        if self.card is None and mv.scorecard:
            self.card = Scorecard.from_dict(mv.scorecard)  # stored figures until the measurement arrives
            self.cutoffs = {q.queue: q.cutoff for q in self.card.per_queue}
        self.measuring = True
        self.show()
        self.measure()

    def _active_cutoffs(self, meas: Measurement) -> dict[str, float | None]:
        policy = self.ws.policy
        return {q: policy.cutoff(q) if policy is not None and q in meas.model_queues else None
                for q in meas.scorecard.queues}

    @work(thread=True, exclusive=True, exit_on_error=False, group="score")
    def measure(self) -> Measurement | None:
        worker = get_current_worker()
        mv = self.ws.active_version
        if self.ws.model is None or mv is None:
            return None
        meas = self.ws.evaluate()
        curves = meas.precision_coverage(CURVE_POINTS)
        if not worker.is_cancelled:
            self.app.call_from_thread(self._measured, meas, curves, mv.version)
        return meas

    def _measured(self, meas: Measurement, curves: dict[str, dict[str, list[float]]], version: int) -> None:
        pending = {q: c for q, c in self.cutoffs.items() if self.meas is not None and c != self.saved.get(q)}
        self.meas, self.curves, self.measured_for = meas, curves, version
        self.measuring = False
        self.saved = self._active_cutoffs(meas)
        # unsaved what-if cutoffs survive a re-measure (a correction elsewhere), for queues the model still has
        self.cutoffs = dict(self.saved)
        self.cutoffs.update({q: c for q, c in pending.items() if q in meas.model_queues})
        self.rescore()

    def rescore(self) -> None:
        """The figures at the cutoffs on screen: the measurement's own scorecard at its own cutoffs (exactly what
        `triage evaluate` prints), else the same test rows re-scored."""
        assert self.meas is not None
        own = {q: self.meas.policy.cutoff(q) for q in self.meas.scorecard.queues}
        self.card = self.meas.scorecard if self.cutoffs == own else self.meas.rescore(dict(self.cutoffs))
        self.show()

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        if event.worker.group in ("score", "cutoffs") and event.state == WorkerState.ERROR:
            _err(self, event.worker.error or Exception("scoring failed"))
            self.measuring = False
            self.show()

    def action_remeasure(self) -> None:
        self.notify("scoring the test items again…")
        self.measuring = True
        self.measure()
        self.show()

    def selected_queue(self) -> str | None:
        t = self.query_one("#queue-table", DataTable)
        if not t.row_count or self.card is None:
            return None
        return self.card.queues[min(t.cursor_row, len(self.card.queues) - 1)]

    def action_nudge(self, sign: int) -> None:
        q = self.selected_queue()
        if q is None or self.meas is None:
            self.notify("the test items are still being scored")
            return
        if q in self.meas.policy.never_auto:
            self.notify(f"{q} is never auto-routed: a person reviews every item, whatever the cutoff")
            return
        if q not in self.meas.model_queues:
            self.notify(f"{q} is not one of the model's queues: train to add it")
            return
        current = self.cutoffs.get(q)
        start = current if current is not None else 1.0
        self.cutoffs[q] = round(min(1.0, max(0.0, start + sign * CUTOFF_STEP)), 4)
        self.rescore()

    def action_reset(self) -> None:
        if self.meas is not None:
            self.cutoffs = dict(self.saved)
            self.rescore()

    @property
    def changed(self) -> dict[str, float | None]:
        """The what-if cutoffs that differ from the active version's."""
        if self.meas is None:
            return {}
        return {q: c for q, c in self.cutoffs.items() if c != self.saved.get(q)}

    def action_save_cutoffs(self) -> None:
        if self.meas is None:
            self.notify("the test items are still being scored")
            return
        changed = self.changed
        if not changed:
            self.notify("these are the active version's cutoffs: nothing to save (+ and - try others)")
            return
        now, after = self.meas.rescore(dict(self.saved)), self.card
        lines = "\n".join(f"  {q}: {cutoff_text(self.saved.get(q))} -> {cutoff_text(c)}"
                          for q, c in sorted(changed.items()))
        figures = (f"\nOn the test items: auto-routed {pct(now.coverage)} -> {pct(after.coverage)}, precision of "
                   f"auto-routed {pct(now.auto_precision)} -> {pct(after.auto_precision)}." if after is not None else "")
        version = self.measured_for

        def answer(yes: bool | None) -> None:
            if yes:
                self.save_cutoffs(changed)

        self.app.push_screen(ConfirmScreen(
            f"Save these cutoffs as a new model version?\n{lines}{figures}\nNew items are routed with them; "
            f"activating version {version} again undoes it.\nThe next training solves cutoffs again from the targets "
            "in triage.toml; training from Models asks whether to keep these instead."), answer)

    def save_cutoffs(self, changed: dict[str, float | None]) -> None:
        reviewer(self, lambda name: self._save_cutoffs(changed, name))

    @work(thread=True, exclusive=True, exit_on_error=False, group="cutoffs")
    def _save_cutoffs(self, changed: dict[str, float | None], name: str) -> int:
        mv = self.ws.set_cutoffs(changed, by=name)
        self.app.call_from_thread(self._saved, mv.version, changed)
        return mv.version

    def _saved(self, version: int, changed: dict[str, float | None]) -> None:
        self.measured_for = version  # same labels and counts: the measurement still holds
        self.saved.update(changed)
        self.show()
        self.notify(f"cutoffs saved: version {version} is active")
        self.post_message(ModelChanged(version, "cutoffs saved"))

    def show(self) -> None:
        card = self.card
        summary = self.query_one("#score-summary", Static)
        if card is None:
            summary.update("no scorecard yet: train a model (2, then t)")
            return
        s = Text()
        s.append(f"test items {card.n}   accuracy {pct(card.accuracy)}   auto-routed {pct(card.coverage)}   "
                 f"precision of auto-routed {pct(card.auto_precision)}   average F1 (queues equal) "
                 f"{num(card.macro_f1)}", style="bold")
        if self.meas is None:
            s.append("   (stored figures; scoring each item…)", style="dim")
        else:
            if self.changed:
                s.append(f"\nwhat-if cutoffs ({len(self.changed)} changed): not saved · w saves · r resets",
                         style="bold yellow")
            elif self.measuring:
                s.append("   (scoring again…)", style="dim")
            stored = (self.ws.active_version.scorecard or {}) if self.ws.active_version else {}
            made = stored.get("coverage")
            if made is not None and not self.changed and abs(float(made) - card.coverage) >= 0.0005:
                s.append(f"\nModels shows {pct(made)} auto-routed: the figure from when version "
                         f"{self.measured_for} was made; this one is on today's labels (corrections since)",
                         style="dim")
            own = [q for q in card.queues if self.saved.get(q) != self.meas.policy.cutoff(q)]
            if own and not self.changed:
                s.append(f"\nat the active version's cutoffs (`triage evaluate` solves its own on these labels: "
                         f"they differ for {', '.join(own)})", style="dim")
        legend = legend_line(card)
        if legend:
            s.append("\n" + legend, style="dim")
        summary.update(s)
        t = self.query_one("#queue-table", DataTable)
        row = t.cursor_row
        t.clear()
        for qs in card.per_queue:
            if qs.never_auto:
                cut: str | Text = "never auto"
            else:
                c = self.cutoffs.get(qs.queue, qs.cutoff)
                moved = self.meas is not None and c != self.saved.get(qs.queue)
                cut = Text(num(c) + ("*" if moved else ""), style="bold yellow" if moved else "")
            t.add_row(*queue_cells(qs), key=qs.queue)
            t.update_cell(qs.queue, t.ordered_columns[2].key, cut)
        if t.row_count:
            t.move_cursor(row=min(max(row, 0), t.row_count - 1))
        self.show_matrix(card)
        self.show_plot()
        self.show_reliability()

    def show_matrix(self, card: Scorecard) -> None:
        """The matrix as a table a cursor moves over (rows true, columns suggested); the cursor stays on its cell
        across refreshes, and starts on the largest misroute."""
        t = self.query_one("#matrix-table", DataTable)
        first = t.row_count == 0
        at = t.cursor_coordinate
        header, rows = matrix_cells(card.queues, card.matrix, card.row_shares())
        t.clear(columns=True)
        for key, label in zip(card.queues, header, strict=True):
            t.add_column(Text(label, justify="right"), key=key)
        for q, (label, cells) in zip(card.queues, rows, strict=True):
            t.add_row(*cells, key=q, label=label)
        if first:
            off = [(card.matrix[i][j], i, j) for i in range(len(card.queues)) for j in range(len(card.queues))
                   if i != j and card.matrix[i][j]]
            if off:
                _, i, j = max(off, key=lambda x: (x[0], -x[1], -x[2]))
                t.move_cursor(row=i, column=j)
        elif t.row_count:
            t.move_cursor(row=min(at.row, t.row_count - 1), column=min(at.column, len(card.queues) - 1))

    def _shown_cutoffs(self) -> dict[str, float | None] | None:
        """The cutoffs behind the figures on screen: None when they are the measurement's own."""
        if self.meas is None or self.card is self.meas.scorecard:
            return None
        return dict(self.cutoffs)

    def action_matrix(self) -> None:
        t = self.query_one("#matrix-table", DataTable)
        t.focus()
        self.call_after_refresh(t.scroll_visible, animate=False)

    def on_data_table_cell_selected(self, event: DataTable.CellSelected) -> None:
        """Enter on a matrix cell: the test items truly of its row's queue that were suggested its column's."""
        if event.data_table.id != "matrix-table":
            return
        event.stop()
        if self.meas is None or self.card is None:
            self.notify("the test items are still being scored")
            return
        label, suggested = str(event.cell_key.row_key.value), str(event.cell_key.column_key.value)
        items = cell(self.ws, self.meas, label, suggested, self._shown_cutoffs())
        routed = sum(not x.held for x in items)
        self.app.push_screen(MeasuredItemsScreen(
            self.ws, f"truly {label}, suggested {suggested}: {len(items)} test items",
            f"{routed} auto-routed, {len(items) - routed} held at the cutoffs on screen; most confident first",
            items))

    def on_data_table_row_selected(self, event: DataTable.RowSelected) -> None:
        """Enter on a queue's row: the test items suggested for it, auto-routed (wrong ones first) and held."""
        if event.data_table.id != "queue-table":
            return
        event.stop()
        q = self.selected_queue()
        if q is None or self.meas is None:
            self.notify("the test items are still being scored")
            return
        row = queue_row(self.ws, self.meas, q, self._shown_cutoffs())
        wrong = sum(x.misrouted for x in row.routed)
        self.app.push_screen(MeasuredItemsScreen(
            self.ws, f"suggested {q}: {len(row.routed) + len(row.held)} test items",
            f"{len(row.routed)} auto-routed ({wrong} truly elsewhere, ✗, first), then {len(row.held)} held, "
            "closest to being routed first", [*row.routed, *row.held], show_label=True))

    def reliability_figures(self) -> tuple[dict[str, Any], str] | None:
        """The measurement's calibration figures on items calibration never saw, and which items: the newest
        items of a time split (`holdout`), else the out-of-fold decisions of a k-fold split."""
        if self.meas is None:
            return None
        cal = self.meas.calibration
        if isinstance(cal.get("holdout"), dict):
            return cal["holdout"], "the newest, not trained on"
        return cal, "out-of-fold decisions"

    def show_reliability(self) -> None:
        box = self.query_one("#score-reliability", Static)
        got = self.reliability_figures()
        if got is None:
            box.update(Text("reliability: waiting for the test scores", style="dim"))
            return
        figs, where = got
        bins = figs.get("reliability_before" if self.raw_reliability else "reliability") or []
        n = sum(int(b["n"]) for b in bins)
        what, other = ("raw posterior", "calibrated") if self.raw_reliability else ("routing confidence", "raw")
        title = Text(f"reliability of the {what}", style="bold")
        sub = Text(f"{n} items, {where} · c: {other}", style="dim")
        ece = Text("ECE before ")
        ece.append(num(figs.get("ece_before"), 3), style="bold")
        ece.append(" → after ")
        ece.append(num(figs.get("ece_after"), 3), style="bold")
        if figs.get("ece_temperature") is not None:
            ece.append(f" · temperature only {num(figs['ece_temperature'], 3)}", style="dim")
        box.update(Group(title, sub, ece, reliability_chart(bins, width=16)))

    def action_misroutes(self) -> None:
        q = self.selected_queue()
        if q is None or self.meas is None:
            self.notify("the test items are still being scored")
            return
        items = ([c for c in cell_items(self.meas, label=q) if c.suggested != q]
                 + [c for c in cell_items(self.meas, suggested=q) if c.label != q])
        self.app.push_screen(MisroutesScreen(self.ws, q, items))

    def action_ranking(self) -> None:
        q = self.selected_queue()
        if q is None or self.meas is None:
            self.notify("the test items are still being scored")
            return
        if q not in self.meas.model_queues:
            self.notify(f"{q} is not one of the model's queues: train to add it")
            return
        self.app.push_screen(RankingScreen(ranking(self.meas, q)))

    def action_toggle_reliability(self) -> None:
        """Switch the chart between the calibrated and the raw confidences, and bring it into view (below the
        queue table it is out of sight on a small terminal)."""
        self.raw_reliability = not self.raw_reliability
        self.show_reliability()
        box = self.query_one("#score-reliability", Static)
        self.call_after_refresh(box.scroll_visible, animate=False)

    def show_plot(self) -> None:
        q = self.selected_queue()
        plot = self.query_one("#score-plot", Static)
        if q is None or self.meas is None or self.card is None:
            plot.update(Text("precision vs coverage: waiting for the test scores", style="dim"))
            return
        curve = self.curves.get(q, {"precision": [], "coverage": []})
        qs = next((s for s in self.card.per_queue if s.queue == q), None)
        mark = (qs.coverage, qs.precision) if qs is not None and qs.routed else None
        n = qs.routed + qs.held if qs is not None else 0
        title = Text(f"{q}: precision vs coverage over its {n} suggested items\n", style="bold")
        plot.update(Group(title, text_plot(curve["coverage"], curve["precision"], mark, width=36, height=7)))

    def on_data_table_row_highlighted(self, event: DataTable.RowHighlighted) -> None:
        if event.data_table.id == "queue-table":
            self.show_plot()
