"""View 2, Models: model versions; training and the settings grid in thread workers; activating a version."""

from __future__ import annotations

import threading
from typing import Any

from textual import work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal
from textual.widgets import DataTable, Label, ProgressBar
from textual.worker import Worker, WorkerState

from triage.app import Cancelled, ModelSpec, Workspace, tuning
from triage.app.tuning import GridRow
from triage.tui.messages import ModelChanged
from triage.tui.views.base import View, _err
from triage.tui.widgets import (
    ConfirmScreen,
    num,
    pct,
)


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
        if self.shown:
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
