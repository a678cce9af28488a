"""The six views of the terminal UI. Each takes the Workspace as an attribute and posts messages up.

Views read through the Workspace (and its store's read methods); they read model objects it returns but never
change them: every change goes through Workspace.train / activate / correct / undo.
"""

from __future__ import annotations

import threading
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
from rich.console import Group
from rich.table import Table
from rich.text import Text
from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Container, Horizontal, Vertical, VerticalScroll
from textual.widget import Widget
from textual.widgets import DataTable, Input, Label, OptionList, ProgressBar, Select, Static
from textual.widgets.option_list import Option
from textual.worker import Worker, WorkerState, get_current_worker

from triage import tuning
from triage.core.metrics import Scorecard
from triage.core.model import ModelSpec
from triage.tui.messages import LabelsChanged, ModelChanged
from triage.tui.widgets import (
    ConfirmScreen,
    QueuePicker,
    bar,
    confusion_table,
    explanation_renderables,
    num,
    pct,
    reliability_chart,
    shade,
    text_plot,
)
from triage.tuning import GridRow
from triage.workspace import Cancelled, Measurement, Workspace

PAGE_ROWS = 200
SCAN_CHUNK = 2000
REVIEW_LIMIT = 500
MISROUTE_CONFIDENCE = 0.9
CUTOFF_STEP = 0.01
CURVE_POINTS = 50
BY = "tui"


def _err(view: Widget, exc: Exception) -> None:
    view.notify(str(exc), title="could not do that", severity="error", timeout=8)


class View(Widget):
    """A view: reload() re-reads the workspace; `focus_main` is what gets focus when the view is shown."""

    can_focus = False
    main_id = ""

    def __init__(self, ws: Workspace, **kw: Any) -> None:
        super().__init__(**kw)
        self.ws = ws

    def reload(self) -> None:  # pragma: no cover - overridden
        pass

    def focus_main(self) -> None:
        if self.main_id:
            try:
                self.query_one(f"#{self.main_id}").focus()
            except Exception:  # noqa: BLE001 - not composed yet
                pass


# ======================================================================================== 1. overview
class OverviewView(View):
    """Items, queues, the active model and its scorecard summary, corrections since training, drift."""

    main_id = "overview-scroll"

    def compose(self) -> ComposeResult:
        with VerticalScroll(id="overview-scroll"):
            yield Static(id="overview-warning")
            with Horizontal(id="overview-top"):
                yield Static(id="overview-model")
                yield Static(id="overview-batch")
            yield Static(id="overview-queues")

    def on_mount(self) -> None:
        self.reload()

    def reload(self) -> None:
        o = self.ws.overview()
        never = ", ".join(o["never_auto"]) or "none"
        self.query_one("#overview-warning", Static).update(Text(
            f"! Items predicted for a never-auto queue ({never}), or mentioning one of its watch words, are "
            "always held for a person, whatever the confidence.", style="bold yellow"))
        m = Table.grid(padding=(0, 2))
        m.add_column(style="dim")
        m.add_column(style="bold")
        m.add_row("items", f"{o['items']}, {o['labelled']} labelled")
        m.add_row("active model", f"version {o['active_version']}" if o["active_version"] else "none: press 2, t")
        m.add_row("text model", str(o["text_model"] or "—"))
        card = o["scorecard"] or {}
        m.add_row("accuracy", pct(card.get("accuracy")))
        m.add_row("coverage", pct(card.get("coverage")))
        m.add_row("auto precision", pct(card.get("auto_precision")))
        m.add_row("scored on", f"{card.get('n', '—')} newest, held out")
        m.add_row("corrections", f"{o['corrections_since_training']} learned since training")
        self.query_one("#overview-model", Static).update(Group(Text("model", style="bold underline"), m))
        b = Table.grid(padding=(0, 2))
        b.add_column(style="dim")
        b.add_column(style="bold")
        batch = o["latest_batch"]
        if batch:
            b.add_row("batch", f"#{batch['id']} {Path(batch['source']).name}")
            b.add_row("routed / held", f"{batch['routed']} / {batch['held']}  (coverage {pct(batch['coverage'])})")
            unseen = batch["unseen_word_share"]
            b.add_row("unseen words", Text(f"{pct(unseen)}" + ("  ! many new words" if unseen > 0.1 else "  ok"),
                                           style="yellow" if unseen > 0.1 else ""))
            psi = batch["queue_mix_psi"]
            flag = batch.get("drift_flag")
            b.add_row("queue-mix PSI", Text(f"{psi:.3f}" + ("  ! the queue mix moved" if flag else "  ok"),
                                            style="bold red" if flag else ""))
        else:
            b.add_row("batch", "nothing routed yet (triage route FILE)")
        self.query_one("#overview-batch", Static).update(Group(Text("latest batch", style="bold underline"), b))
        q = Table(title="queues (labelled items)", title_justify="left", show_edge=False, box=None,
                  padding=(0, 1))
        q.add_column("queue", no_wrap=True)
        q.add_column("items", justify="right")
        q.add_column("share", justify="right")
        q.add_column("", no_wrap=True)
        q.add_column("latest batch", justify="right")
        total = sum(o["queues"].values()) or 1
        top = max(o["queues"].values(), default=1)
        per_batch = batch["per_queue"] if batch else {}
        for name, n in o["queues"].items():
            mark = "  (never auto)" if name in o["never_auto"] else ""
            q.add_row(name + mark, str(n), pct(n / total), Text(bar(n, top, 24), style="cyan"),
                      str(per_batch.get(name, 0)) if batch else "—")
        self.query_one("#overview-queues", Static).update(q)


# ======================================================================================== 2. models
def grid_cells(row: GridRow, names: list[str]) -> list[str]:
    """One settings-grid row as table cells (weights in the order of the text fields)."""
    weights = "/".join(f"{row.text_weights.get(n, 1.0):g}" for n in names)
    return [row.text_model, f"{row.alpha_text:g}", "on" if row.bigrams else "off", "on" if row.fields else "off",
            weights, "on" if row.transforms else "off", pct(row.coverage), num(row.macro_f1, 3), pct(row.accuracy),
            num(row.log_loss, 3)]


def same_setting(row: GridRow, spec: ModelSpec, weights: dict[str, float]) -> bool:
    """Whether a grid row is the setting a model was fitted with (fields on: a fitted model always has them)."""
    return (row.text_model == spec.text_model and row.alpha_text == spec.alpha_text and row.bigrams == spec.bigrams
            and row.transforms == spec.tf_log == spec.idf == spec.length_norm
            and row.fields and row.text_weights == weights)


class ModelsView(View):
    """Model versions; train (in a thread, cancellable) and activate (after a confirmation); the settings grid
    (cross-validated, cancellable) and adopting one of its rows into triage.toml."""

    main_id = "models-table"
    GRID_FOLDS = 3
    BINDINGS = [
        Binding("t", "train", "Train", id="models.train", tooltip="Train a new model version on every label"),
        Binding("x", "cancel_training", "Cancel", id="models.cancel",
                tooltip="Stop the running training or settings grid"),
        Binding("a", "activate", "Activate", id="models.activate", tooltip="Make the selected version active"),
        Binding("g", "grid", "Grid", id="models.grid",
                tooltip="Cross-validate every setting of the grid (text model, alpha, bigrams, fields, weights)"),
        Binding("s", "adopt", "Adopt", id="models.adopt",
                tooltip="Write the selected grid row's settings into triage.toml (asks first)"),
    ]

    def __init__(self, ws: Workspace, **kw: Any) -> None:
        super().__init__(ws, **kw)
        self.cancel_flag = threading.Event()
        self.last_outcome = ""
        self.grid_rows: list[GridRow] = []
        self.grid_folds = self.GRID_FOLDS

    def compose(self) -> ComposeResult:
        yield Label("t train · x cancel · a activate version · g settings grid · s adopt grid row", classes="hint")
        with Horizontal(id="train-row"):
            yield ProgressBar(total=100, show_eta=False, id="train-progress")
            yield Label("idle", id="train-stage")
        yield DataTable(id="models-table", cursor_type="row", zebra_stripes=True)
        yield Label("settings grid: g runs it (cross-validated on every label)", id="grid-title")
        yield DataTable(id="grid-table", cursor_type="row", zebra_stripes=True)

    def on_mount(self) -> None:
        t = self.query_one("#models-table", DataTable)
        t.add_columns("", "version", "kind", "created (UTC)", "accuracy", "coverage", "note")
        g = self.query_one("#grid-table", DataTable)
        # the ranking figure (auto-routed) next to the settings, so it shows at 80 columns too
        g.add_columns("", "text model", "alpha", "bigr.", "fields", "weights", "transf.", "auto", "F1", "acc.",
                      "log loss")
        self.reload()

    def reload(self) -> None:
        t = self.query_one("#models-table", DataTable)
        row = t.cursor_row
        t.clear()
        for mv in reversed(self.ws.models()):
            card = mv.scorecard or {}
            t.add_row("● active" if mv.active else "", str(mv.version), mv.kind, mv.created_at[:19].replace("T", " "),
                      pct(card.get("accuracy")), pct(card.get("coverage")), mv.note, key=str(mv.version))
        if t.row_count:
            t.move_cursor(row=min(max(row, 0), t.row_count - 1))
        if self.grid_rows:
            self.show_grid()

    # ----- background runs: training and the settings grid share the progress bar and x -----
    @property
    def training(self) -> bool:
        return self._group_running("train")

    @property
    def gridding(self) -> bool:
        return self._group_running("grid")

    def _group_running(self, group: str) -> bool:
        return any(w.state in (WorkerState.PENDING, WorkerState.RUNNING) for w in self.app.workers if w.group == group)

    def _busy(self) -> bool:
        if self.training or self.gridding:
            what = "a training run" if self.training else "the settings grid"
            self.notify(f"{what} is already going; x cancels it")
            return True
        return False

    def _start(self, stage: str) -> None:
        self.cancel_flag.clear()
        self.query_one("#train-progress", ProgressBar).update(progress=0)
        self.query_one("#train-stage", Label).update(stage)

    def action_train(self) -> None:
        if self._busy():
            return
        self._start("starting")
        self.run_training()

    def action_cancel_training(self) -> None:
        if not (self.training or self.gridding):
            self.notify("nothing is running")
            return
        self.cancel_flag.set()
        self.query_one("#train-stage", Label).update("cancelling at the next step…")

    def _progress(self, stage: str, fraction: float) -> None:
        self.query_one("#train-progress", ProgressBar).update(progress=round(100 * fraction))
        self.query_one("#train-stage", Label).update(stage)

    @work(thread=True, exclusive=True, exit_on_error=False, group="train")
    def run_training(self) -> str:
        def progress(stage: str, fraction: float) -> None:
            self.app.call_from_thread(self._progress, stage, fraction)

        try:
            report = self.ws.train(progress=progress, cancel=self.cancel_flag.is_set, note="trained in the TUI")
        except Cancelled as exc:
            self.app.call_from_thread(self._finished, str(exc), None)
            return "cancelled"
        self.app.call_from_thread(self._finished, f"version {report.version.version} is active "
                                  f"({report.n_items} items, {report.seconds:.1f} s)", report.version.version)
        return "trained"

    def _finished(self, what: str, version: int | None) -> None:
        self.last_outcome = what
        self.query_one("#train-stage", Label).update(what)
        self.notify(what)
        if version is not None:
            self.post_message(ModelChanged(version, "trained"))
        else:
            self.query_one("#train-progress", ProgressBar).update(progress=0)

    def on_worker_state_changed(self, event: Worker.StateChanged) -> None:
        if event.worker.group in ("train", "grid") and event.state == WorkerState.ERROR:
            what = "training" if event.worker.group == "train" else "the settings grid"
            self.last_outcome = f"{what} failed"
            self.query_one("#train-stage", Label).update(self.last_outcome)
            _err(self, event.worker.error or Exception(self.last_outcome))

    # ----- the settings grid -----
    def action_grid(self) -> None:
        if self._busy():
            return
        self._start(f"settings grid, {self.grid_folds}-fold: starting")
        self.run_grid()

    @work(thread=True, exclusive=True, exit_on_error=False, group="grid")
    def run_grid(self) -> list[GridRow] | None:
        def progress(stage: str, fraction: float) -> None:
            if self.cancel_flag.is_set():
                raise Cancelled("settings grid cancelled; triage.toml is unchanged")
            self.app.call_from_thread(self._progress, stage, fraction)

        try:
            rows = tuning.run_grid(self.ws, folds=self.grid_folds, progress=progress)
        except Cancelled as exc:
            self.app.call_from_thread(self._grid_done, str(exc), None)
            return None
        self.app.call_from_thread(self._grid_done, f"grid done: {len(rows)} settings, best first", rows)
        return rows

    def _grid_done(self, what: str, rows: list[GridRow] | None) -> None:
        self.last_outcome = what
        self.query_one("#train-stage", Label).update(what)
        self.notify(what)
        if rows is None:
            self.query_one("#train-progress", ProgressBar).update(progress=0)
            return
        self.grid_rows = rows
        self.show_grid()
        g = self.query_one("#grid-table", DataTable)
        g.move_cursor(row=0)
        g.focus()

    def show_grid(self) -> None:
        g = self.query_one("#grid-table", DataTable)
        row = g.cursor_row
        g.clear()
        names = [f.name for f in self.ws.config.schema.text_fields]
        model = self.ws.model
        weights = {f.name: float(f.weight) for f in model.encoder.schema.text_fields} if model is not None else {}
        for i, r in enumerate(self.grid_rows):
            mark = "●" if model is not None and same_setting(r, model.spec, weights) else ""
            g.add_row(mark, *grid_cells(r, names), key=str(i))
        g.set_class(bool(self.grid_rows), "filled")
        if g.row_count:
            g.move_cursor(row=min(max(row, 0), g.row_count - 1))
        self.set_class(bool(self.grid_rows), "gridded")
        self.query_one("#grid-title", Label).update(
            f"grid: {len(self.grid_rows)} settings, {self.grid_folds}-fold, best first · auto: share auto-routed at "
            f"target · weights {'/'.join(names)} · transf.: tf-log, idf, length norm · ● active · s adopts")

    def selected_grid_row(self) -> GridRow | None:
        g = self.query_one("#grid-table", DataTable)
        if not g.row_count or not self.grid_rows:
            return None
        return self.grid_rows[int(g.coordinate_to_cell_key((g.cursor_row, 0)).row_key.value or 0)]

    def action_adopt(self) -> None:
        row = self.selected_grid_row()
        if row is None:
            self.notify("no settings grid yet: g runs it")
            return
        if self._busy():  # a training run reads the config being written
            return
        names = [f.name for f in self.ws.config.schema.text_fields]
        weights = ", ".join(f"{n} {row.text_weights.get(n, 1.0):g}" for n in names)
        transforms = "on" if row.transforms else "off"
        note = "" if row.fields else "\n(This row leaves the fields out; that is not a setting: they stay in.)"

        def answer(yes: bool | None) -> None:
            if yes:
                self.adopt(row)

        self.app.push_screen(ConfirmScreen(
            f"Write this setting into triage.toml?\n  text model {row.text_model}, alpha {row.alpha_text:g}, "
            f"bigrams {'on' if row.bigrams else 'off'}, transforms {transforms}\n  text weights {weights}{note}\n"
            "The active model stays as it is until you train."), answer)

    def adopt(self, row: GridRow) -> None:
        try:
            tuning.adopt(self.ws, row)
        except Exception as exc:  # noqa: BLE001 - shown to the user
            _err(self, exc)
            return
        self.last_outcome = f"triage.toml now uses {row.text_model}, alpha {row.alpha_text:g}: run training to use it"
        self.query_one("#train-stage", Label).update(self.last_outcome)
        self.notify(self.last_outcome)

        def train_now(yes: bool | None) -> None:
            if yes:
                self.action_train()

        self.app.push_screen(ConfirmScreen("Settings written to triage.toml. Train a new model version with them "
                                           "now? (t trains later)"), train_now)

    # ----- activating -----
    def action_activate(self) -> None:
        t = self.query_one("#models-table", DataTable)
        if not t.row_count:
            return
        version = int(t.coordinate_to_cell_key((t.cursor_row, 0)).row_key.value or 0)
        current = self.ws.active_version.version if self.ws.active_version else None
        if version == current:
            self.notify(f"version {version} is already active")
            return

        def answer(yes: bool | None) -> None:
            if not yes:
                return
            try:
                self.ws.activate(version)
            except Exception as exc:  # noqa: BLE001 - shown to the user
                _err(self, exc)
                return
            self.notify(f"version {version} is active")
            self.post_message(ModelChanged(version, "activated"))

        self.app.push_screen(ConfirmScreen(f"Activate model version {version}? New items will be routed with it, "
                                           "and corrections learned on top of it."), answer)


# ======================================================================================== 3. scorecard
def cutoff_text(c: float | None) -> str:
    return "none" if c is None else f"{c:.2f}"


class ScorecardView(View):
    """The workspace's own measurement (`Workspace.evaluate`, what `triage evaluate` prints): confusion matrix,
    per-queue figures, what-if cutoffs re-scored on the same held-out items (`Measurement.rescore`), a
    precision/coverage plot, and saving the what-if cutoffs as a new model version."""

    main_id = "queue-table"
    BINDINGS = [
        Binding("plus,equals_sign", "nudge(1)", "Cutoff +", id="score.up", tooltip="Raise the selected cutoff by 0.01",
                key_display="+"),
        Binding("minus,underscore", "nudge(-1)", "Cutoff −", id="score.down",
                tooltip="Lower the selected cutoff by 0.01", key_display="-"),
        Binding("w", "save_cutoffs", "Save", id="score.save",
                tooltip="Save the what-if cutoffs as a new model version (asks first)"),
        Binding("r", "reset", "Reset", id="score.reset", tooltip="Back to the active model's cutoffs"),
        Binding("e", "remeasure", "Re-score", id="score.remeasure",
                tooltip="Score the held-out items again with the current labels"),
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
        with VerticalScroll(id="score-scroll"):
            yield DataTable(id="queue-table", cursor_type="row")
            with Horizontal(id="score-lower"):
                with Vertical(id="score-charts"):
                    yield Static(id="score-plot")
                    yield Static(id="score-reliability")
                yield Static(id="score-matrix")

    def on_mount(self) -> None:
        t = self.query_one("#queue-table", DataTable)
        t.add_columns("queue", "target", "cutoff", "prec.", "recall", "F1", "cover.", "held", "routed", "supp.")
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
        `triage evaluate` prints), else the same held-out rows re-scored."""
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
        self.notify("scoring the held-out items again…")
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
            self.notify("the held-out items are still being scored")
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
            self.notify("the held-out items are still being scored")
            return
        changed = self.changed
        if not changed:
            self.notify("these are the active version's cutoffs: nothing to save (+ and - try others)")
            return
        now, after = self.meas.rescore(dict(self.saved)), self.card
        lines = "\n".join(f"  {q}: {cutoff_text(self.saved.get(q))} -> {cutoff_text(c)}"
                          for q, c in sorted(changed.items()))
        figures = (f"\nOn the held-out items: coverage {pct(now.coverage)} -> {pct(after.coverage)}, auto "
                   f"precision {pct(now.auto_precision)} -> {pct(after.auto_precision)}." if after is not None else "")
        version = self.measured_for

        def answer(yes: bool | None) -> None:
            if yes:
                self.save_cutoffs(changed)

        self.app.push_screen(ConfirmScreen(
            f"Save these cutoffs as a new model version?\n{lines}{figures}\nNew items are routed with them; "
            f"activating version {version} again undoes it."), answer)

    @work(thread=True, exclusive=True, exit_on_error=False, group="cutoffs")
    def save_cutoffs(self, changed: dict[str, float | None]) -> int:
        mv = self.ws.set_cutoffs(changed, by=BY)
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
        s.append(f"held-out items {card.n}   accuracy {pct(card.accuracy)}   coverage {pct(card.coverage)}   "
                 f"auto precision {pct(card.auto_precision)}   macro F1 {num(card.macro_f1)}", style="bold")
        if self.meas is None:
            s.append("   (stored figures; scoring each item…)", style="dim")
        else:
            if self.changed:
                s.append(f"\nwhat-if cutoffs ({len(self.changed)} changed): not saved · w saves · r resets",
                         style="bold yellow")
            elif self.measuring:
                s.append("   (scoring again…)", style="dim")
            own = [q for q in card.queues if self.saved.get(q) != self.meas.policy.cutoff(q)]
            if own and not self.changed:
                s.append(f"\nat the active version's cutoffs (`triage evaluate` solves its own on these labels: "
                         f"they differ for {', '.join(own)})", style="dim")
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
            t.add_row(qs.queue, num(qs.target), cut, pct(qs.precision), pct(qs.recall), num(qs.f1), pct(qs.coverage),
                      pct(qs.held_share), str(qs.routed), str(qs.support), key=qs.queue)
        if t.row_count:
            t.move_cursor(row=min(max(row, 0), t.row_count - 1))
        self.query_one("#score-matrix", Static).update(confusion_table(card.queues, card.matrix, card.row_shares()))
        self.show_plot()
        self.show_reliability()

    def reliability_figures(self) -> tuple[dict[str, Any], str] | None:
        """The measurement's calibration figures on items calibration never saw, and which items: the newest
        items of a time split (`holdout`), else the out-of-fold decisions of a k-fold split."""
        if self.meas is None:
            return None
        cal = self.meas.calibration
        if isinstance(cal.get("holdout"), dict):
            return cal["holdout"], "the newest, held out"
        return cal, "out-of-fold decisions"

    def show_reliability(self) -> None:
        box = self.query_one("#score-reliability", Static)
        got = self.reliability_figures()
        if got is None:
            box.update(Text("reliability: waiting for the held-out scores", style="dim"))
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
            plot.update(Text("precision vs coverage: waiting for the held-out scores", style="dim"))
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

# ======================================================================================== detail panel
class ItemDetail(VerticalScroll):
    """One item's text with its evidence marked, the evidence bars, runner-up and gap."""

    def __init__(self, ws: Workspace, **kw: Any) -> None:
        super().__init__(**kw)
        self.ws = ws
        self.item_id: str | None = None
        self.explanation: dict[str, Any] | None = None

    def compose(self) -> ComposeResult:
        yield Static("select an item to see why it went where it went", classes="detail-body")

    def show(self, item_id: str | None) -> None:
        body = self.query_one(".detail-body", Static)
        self.item_id = item_id
        if item_id is None:
            self.explanation = None
            body.update("")
            return
        try:
            ex = self.ws.explain(item_id, n=12)
        except Exception as exc:  # noqa: BLE001 - shown in the panel
            self.explanation = None
            body.update(Text(str(exc), style="red"))
            return
        self.explanation = ex
        names = [f.name for f in self.ws.config.schema.text_fields]
        body.update(Group(*explanation_renderables(ex, names)))
        self.scroll_home(animate=False)


# ======================================================================================== 4. incoming
@dataclass(frozen=True)
class Row:
    item_id: str
    suggested: str | None
    confidence: float
    held: bool
    runner_up: str | None
    queue: str | None


class IncomingView(View):
    """The latest batch's decisions, a page at a time, filtered by queue, held and text."""

    main_id = "incoming-table"
    BINDINGS = [
        Binding("n,pagedown", "page(1)", "Next page", id="incoming.next", tooltip="The next page of decisions"),
        Binding("p,pageup", "page(-1)", "Prev page", id="incoming.prev", tooltip="The previous page of decisions"),
        Binding("slash", "search", "Search", id="incoming.search", tooltip="Search in the items' text",
                key_display="/"),
        Binding("h", "cycle_held", "Held/all", id="incoming.held", tooltip="Show all, only held, or only routed"),
    ]

    def __init__(self, ws: Workspace, **kw: Any) -> None:
        super().__init__(ws, **kw)
        self.rows: list[Row] = []
        self.page = 0
        self.batch_id: int | None = None

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
        t.add_columns("item", "suggested", "conf.", "held", "runner-up", "routed to")
        self.reload()

    def reload(self) -> None:
        queues = sorted(set(self.ws.model.queues) if self.ws.model else set()) or sorted(self.ws.store.queue_counts())
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
        batch = self.ws.store.latest_batch()
        if batch is None:
            self.app.call_from_thread(self._loaded, None, [])
            return
        queue, held, text = self.filters()
        rows: list[Row] = []
        offset = 0
        while True:
            chunk = self.ws.store.decisions(batch_id=batch.id, held=held, limit=SCAN_CHUNK, offset=offset)
            if not chunk:
                break
            offset += len(chunk)
            keep = [d for d in chunk if queue is None or d.suggested == queue]
            if text and keep:
                items = {r.item_id: r for r in self.ws.store.get_items([d.item_id for d in keep])}
                keep = [d for d in keep if any(text in str(v).lower() for v in items[d.item_id].fields.values())]
            rows.extend(Row(d.item_id, d.suggested, d.confidence, d.held, d.runner_up, d.queue) for d in keep)
        self.app.call_from_thread(self._loaded, batch.id, rows)

    def _loaded(self, batch_id: int | None, rows: list[Row]) -> None:
        self.batch_id = batch_id
        self.rows = rows
        self.page = 0
        self.show_page()

    @property
    def pages(self) -> int:
        return max(1, -(-len(self.rows) // PAGE_ROWS))

    def show_page(self) -> None:
        t = self.query_one("#incoming-table", DataTable)
        t.clear()
        start = self.page * PAGE_ROWS
        for r in self.rows[start:start + PAGE_ROWS]:
            t.add_row(r.item_id, r.suggested or "", num(r.confidence), "held" if r.held else "",
                      r.runner_up or "", r.queue or "—", key=r.item_id)
        status = self.query_one("#incoming-status", Label)
        if self.batch_id is None:
            status.update("nothing routed yet: `triage route FILE` routes a batch")
        else:
            end = min(start + PAGE_ROWS, len(self.rows))
            status.update(f"batch #{self.batch_id}: {len(self.rows)} decisions match · rows {start + 1 if self.rows else 0}"
                          f"–{end} · page {self.page + 1}/{self.pages} (n/p)")
        if t.row_count:
            t.move_cursor(row=0)
        else:
            self.query_one(ItemDetail).show(None)

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


# ======================================================================================== 5. review
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


# ======================================================================================== 6. field tables
PAIR_ROWS = 12


def is_word(name: str) -> bool:
    """Whether a name from the independence check is a word (listed as "word 'x'") rather than a field."""
    return name.startswith("word '")


def merge_table(result: dict[str, Any]) -> Group:
    """try_merge's figures: the two fields apart and merged into one joint field, side by side."""
    t = Table(box=None, show_edge=False, pad_edge=False, padding=(0, 2), header_style="bold")
    t.add_column("")
    t.add_column("accuracy", justify="right")
    t.add_column("macro F1", justify="right")
    t.add_column("log loss", justify="right")
    for key in ("apart", "merged"):
        r = result[key]
        t.add_row(key, pct(r["accuracy"]), num(r["macro_f1"], 3), num(r["log_loss"], 3))
    head = Text(f"{result['a']} and {result['b']}, apart vs merged into {result['field']} ({result['levels']} "
                f"values seen), {result['folds']}-fold cross-validated:", style="bold")
    verdict = (Text("→ merging helps: log loss falls and macro F1 holds", style="bold green") if result["merge_helps"]
               else Text("→ merging does not help (it would need a lower log loss and no lower macro F1)"))
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
                yield DataTable(id="pairs-table", cursor_type="row", zebra_stripes=True)
                yield Static("", id="merge-result")

    def on_mount(self) -> None:
        t = self.query_one("#pairs-table", DataTable)
        t.add_columns("", "a", "b", "CMI (nats)", "merge")
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
                     f"(CMI > {tuning.CMI_FLAG:g} nats) · top {len(self.pairs)} · i goes here · m tries a merge")
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
        model = self.ws.model
        counts_t = self.query_one("#field-counts", DataTable)
        probs_t = self.query_one("#field-probs", DataTable)
        counts_t.clear(columns=True)
        probs_t.clear(columns=True)
        fields = self.ws.config.schema.value_fields
        if model is None or k is None or k >= len(fields):
            self.query_one("#field-title", Label).update("no model yet")
            return
        f = model.encoder.schema.value_fields[k]
        labels = model.encoder.field_labels(f)
        counts = model.counts.field_count_[k]
        logp = model.field_log_[k]
        self.query_one("#field-title", Label).update(
            f"{f.name} ({f.role.value}): items per value and queue (counts; alpha {model.spec.alpha_fields:g} smooths the "
            "probabilities below)")
        counts_t.add_column("queue", key="queue")
        probs_t.add_column("queue", key="queue")
        for j, lab in enumerate(labels):
            counts_t.add_column(lab, key=f"c{j}")
            probs_t.add_column(lab, key=f"p{j}")
        for i, q in enumerate(model.queues):
            row = [int(counts[i, j]) if j < counts.shape[1] else 0 for j in range(len(labels))]
            counts_t.add_row(q, *[str(v) for v in row])
            ps = np.exp(logp[i])
            probs_t.add_row(q, *[f"{p:.3f}{shade(p)}" for p in ps])
