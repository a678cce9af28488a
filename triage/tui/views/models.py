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
from triage.tui.views.correct import reviewer
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


def cutoff_words(c: float | None) -> str:
    return "none (hold all)" if c is None else f"{c:.2f}"


def hand_set_cutoffs(ws: Workspace) -> dict[str, float | None]:
    """The active version's cutoffs that differ from those its last training solved (saved by hand since,
    e.g. from the Scorecard or `triage cutoff`); empty when there are none."""
    mv = ws.active_version
    if mv is None:
        return {}
    by_version = {v.version: v for v in ws.models()}
    train = mv
    while train.kind != "train" and train.parent in by_version:
        train = by_version[train.parent]
    if train.version == mv.version or train.kind != "train":
        return {}
    now = (mv.config.get("policy") or {}).get("cutoffs") or {}
    solved = (train.config.get("policy") or {}).get("cutoffs") or {}
    return {q: c for q, c in now.items() if q in solved and c != solved[q]}


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
        Binding("s", "adopt", "Use setting", id="models.adopt",
                tooltip="Write the selected grid row's settings into triage.toml (asks first)"),
    ]

    def __init__(self, ws: Workspace, **kw: Any) -> None:
        super().__init__(ws, **kw)
        self.cancel_flag = threading.Event()
        self.last_outcome = ""
        self.grid_rows: list[GridRow] = []
        self.grid_folds = self.GRID_FOLDS

    def compose(self) -> ComposeResult:
        yield Label("t train · x cancel · a activate version · g settings grid · s use a grid row's setting",
                    classes="hint")
        with Horizontal(id="train-row"):
            yield ProgressBar(total=100, show_eta=False, id="train-progress")
            yield Label("idle", id="train-stage")
        yield DataTable(id="models-table", cursor_type="row", zebra_stripes=True)
        yield Label("settings grid: g runs it (cross-validated on every label)", id="grid-title")
        yield DataTable(id="grid-table", cursor_type="row", zebra_stripes=True)

    def on_mount(self) -> None:
        t = self.query_one("#models-table", DataTable)
        # the figures each version was saved with (the Scorecard measures the active one on today's labels)
        t.add_columns("", "version", "kind", "created (UTC)", "accuracy", "auto-routed", "note")
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
        hand = hand_set_cutoffs(self.ws)
        if not hand:
            self._start("starting")
            self.run_training()
            return
        listed = ", ".join(f"{q} {cutoff_words(c)}" for q, c in sorted(hand.items()))

        def answer(keep: bool | None) -> None:
            if keep:
                reviewer(self, lambda name: self._train(hand, name))
            else:
                self._train(None, None)

        self.app.push_screen(ConfirmScreen(
            f"The active version has cutoffs set by hand: {listed}.\nTraining solves new cutoffs from the "
            "targets in triage.toml. Keep yours on the new version?\n  y: keep them (saved on top of the new "
            "version)\n  n: use the cutoffs training solves"), answer)

    def _train(self, keep: dict[str, float | None] | None, name: str | None) -> None:
        self._start("starting")
        self.run_training(keep, name)

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
    def run_training(self, keep: dict[str, float | None] | None = None, name: str | None = None) -> str:
        def progress(stage: str, fraction: float) -> None:
            self.app.call_from_thread(self._progress, stage, fraction)

        try:
            report = self.ws.train(progress=progress, cancel=self.cancel_flag.is_set, note="trained in the TUI")
        except Cancelled as exc:
            self.app.call_from_thread(self._finished, str(exc), None)
            return "cancelled"
        version = report.version.version
        what = f"version {version} is active ({report.n_items} items, {report.seconds:.1f} s)"
        if keep:
            self.app.call_from_thread(self._progress, "setting your cutoffs again on the new version", 1.0)
            kept = {q: c for q, c in keep.items() if self.ws.model is not None and q in self.ws.model.queues}
            version = self.ws.set_cutoffs(kept, by=name or "someone").version
            what = f"trained, and your cutoffs kept: version {version} is active ({report.n_items} items)"
        self.app.call_from_thread(self._finished, what, version)
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

        lacking = self.ws.corrections_missing_from(version)
        lines = "".join(f"\n  {c.item_id} → {c.to_queue or 'no queue'} by {c.by}" for c in lacking[:6])
        more = f"\n  and {len(lacking) - 6} more" if len(lacking) > 6 else ""
        missing = (f"\nVersion {version} lacks {len(lacking)} correction{'s' if len(lacking) != 1 else ''} made "
                   f"since:{lines}{more}\nThey stay in the journal and the labels; the next training learns them."
                   if lacking else f"\nVersion {version} lacks no correction made since.")

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
                                           f"and corrections learned on top of it.{missing}"), answer)
