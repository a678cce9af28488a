"""The terminal UI driven with Textual's pilot over a real demo workspace (no mocks).

Each test checks the screen and, where something changes, the store and the model behind it.
"""

from __future__ import annotations

import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
from textual import events
from textual.widgets import DataTable, Static

from triage.app import Workspace, tuning
from triage.tui.app import TriageApp
from triage.tui.views import (
    FieldsView,
    IncomingView,
    ItemDetail,
    ModelsView,
    ReviewView,
    ScorecardView,
    grid_cells,
)
from triage.tui.widgets import ConfirmScreen, HelpScreen, QueuePicker, marked_text, pct, shade

from .pilot import run, screen_text, settle, text_of

ROOT = Path(__file__).resolve().parents[2]


def test_every_view_shows_the_workspace(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        ws = app.ws
        overview = text_of(app.query_one("#overview-model", Static))
        assert f"version {ws.active_version.version}" in overview
        assert "never-auto queue (safety)" in text_of(app.query_one("#overview-warning", Static))
        assert "queue-mix PSI" in text_of(app.query_one("#overview-batch", Static))

        await pilot.press("2")
        await settle(app, pilot)
        models = app.query_one("#models-table", DataTable)
        assert models.row_count == len(ws.models()) == 1
        assert "active" in str(models.get_row_at(0)[0])

        await pilot.press("3")
        await settle(app, pilot)
        sv = app.query_one(ScorecardView)
        assert sv.meas is not None
        assert app.query_one("#queue-table", DataTable).row_count == len(sv.card.queues)
        # the workspace's own measurement on unchanged labels reproduces the stored scorecard exactly
        stored = ws.active_version.scorecard
        assert sv.card.n == stored["n"]
        assert sv.card.matrix == stored["matrix"]
        assert abs(sv.card.coverage - stored["coverage"]) < 1e-12
        assert abs(sv.card.auto_precision - stored["auto_precision"]) < 1e-12
        # and it is what `triage evaluate` prints: the workspace's measurement, figure for figure
        assert sv.card.to_dict() == ws.evaluate().scorecard.to_dict()
        matrix = app.query_one("#matrix-table", DataTable)  # one row per true queue, one column per suggested
        assert (matrix.row_count, len(matrix.columns)) == (len(sv.card.queues), len(sv.card.queues))
        assert [str(matrix.get_cell_at((i, i))).split()[0] for i in range(matrix.row_count)] == [
            str(sv.card.matrix[i][i]) if sv.card.matrix[i][i] else "·" for i in range(matrix.row_count)]

        await pilot.press("4")
        await settle(app, pilot)
        incoming = app.query_one("#incoming-table", DataTable)
        batch = ws.store.latest_batch()
        assert incoming.row_count == min(200, batch.n_items)
        first = ws.store.decisions(batch_id=batch.id, limit=1)[0]
        assert incoming.coordinate_to_cell_key((0, 0)).row_key.value == first.item_id
        detail = app.query_one("#incoming-detail", ItemDetail)
        assert detail.explanation is not None and detail.explanation["id"] == first.item_id

        await pilot.press("5")
        await settle(app, pilot)
        rv = app.query_one(ReviewView)
        assert app.query_one("#review-table", DataTable).row_count == len(rv.items) > 0
        for w in rv.items:  # stored labels the model disagrees with are behind d: only unlabelled held items
            assert ws.store.get_item(w.item_id).label is None

        await pilot.press("6")
        await settle(app, pilot)
        counts = app.query_one("#field-counts", DataTable)
        f = ws.model.encoder.schema.value_fields[0]
        labels = ws.model.encoder.field_labels(f)
        assert len(counts.columns) == len(labels) + 1
        table = ws.model.counts.field_count_[0]
        for i in range(len(ws.model.queues)):
            row = counts.get_row_at(i)
            assert [int(v) for v in row[1:]] == [int(v) for v in table[i]] + [0] * (len(labels) - table.shape[1])
        probs = app.query_one("#field-probs", DataTable)
        p = float(str(probs.get_row_at(0)[1])[:5])
        assert abs(p - float(np.exp(ws.model.field_log_[0][0, 0]))) < 5e-4

    run(go, workspace_path)


def test_review_lists_never_auto_items_for_a_person(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        await pilot.press("5")
        await settle(app, pilot)
        rv = app.query_one(ReviewView)
        batch = app.ws.store.latest_batch()
        safety = {d.item_id for d in app.ws.store.decisions(batch_id=batch.id, limit=10_000)
                  if d.suggested == "safety"}
        assert safety, "the demo batch has items suggested for safety"
        person = [e.item.item_id for e in rv.entries if e.group == "safety"]
        # every item suggested for safety is in the safety group, and the group comes first; it also holds the
        # items held by a watch word or the watch probability
        assert safety <= set(person)
        assert [e.group for e in rv.entries[: len(person)]] == ["safety"] * len(person)
        for e in rv.entries[: len(person)]:
            assert "safety" in e.why or "mentions '" in e.why, e.why

    run(go, workspace_path)


def test_changing_a_cutoff_moves_precision_and_coverage(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        await pilot.press("3")
        await settle(app, pilot)
        sv = app.query_one(ScorecardView)
        table = app.query_one("#queue-table", DataTable)
        queues = sv.card.queues
        # the queue with a cutoff that routes the most: lowering it routes more items
        q = max((s for s in sv.card.per_queue if s.cutoff is not None and not s.never_auto),
                key=lambda s: s.routed).queue
        table.move_cursor(row=queues.index(q))
        await pilot.pause()
        before = next(s for s in sv.card.per_queue if s.queue == q)
        total_before = sv.card.coverage
        for _ in range(10):
            await pilot.press("minus")
        await pilot.pause()
        after = next(s for s in sv.card.per_queue if s.queue == q)
        assert sv.cutoffs[q] == round(before.cutoff - 0.10, 4)
        assert after.routed > before.routed
        assert after.coverage > before.coverage
        assert sv.card.coverage > total_before
        assert after.precision != before.precision or after.routed != before.routed
        row = table.get_row(q)
        assert str(row[2]) == f"{sv.cutoffs[q]:.2f}*"  # the star marks a what-if cutoff
        assert "what-if" in text_of(app.query_one("#score-summary", Static))
        # raising it above every confidence routes nothing
        for _ in range(100):
            await pilot.press("plus")
        await pilot.pause()
        top = next(s for s in sv.card.per_queue if s.queue == q)
        assert sv.cutoffs[q] == 1.0 and top.routed <= before.routed
        # a never-auto queue does not move
        table.move_cursor(row=queues.index("safety"))
        await pilot.pause()
        await pilot.press("plus")
        await pilot.pause()
        assert next(s for s in sv.card.per_queue if s.queue == "safety").routed == 0
        assert sv.cutoffs.get("safety") is None
        await pilot.press("r")
        await pilot.pause()
        assert abs(sv.card.coverage - total_before) < 1e-12
        # nothing was saved: the workspace's policy is untouched
        assert app.ws.policy.cutoff(q) == before.cutoff

    run(go, workspace_path)


def test_saving_what_if_cutoffs_makes_a_new_active_version(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        ws = app.ws
        await pilot.press("3")
        await settle(app, pilot)
        sv = app.query_one(ScorecardView)
        table = app.query_one("#queue-table", DataTable)
        version = ws.active_version.version
        n_versions = len(ws.models())
        # nothing changed: w has nothing to save and asks nothing
        await pilot.press("w")
        await pilot.pause()
        assert not isinstance(app.screen, ConfirmScreen)
        assert len(ws.models()) == n_versions
        q = max((s for s in sv.card.per_queue if s.cutoff is not None and not s.never_auto),
                key=lambda s: s.routed).queue
        old = ws.policy.cutoff(q)
        table.move_cursor(row=sv.card.queues.index(q))
        await pilot.pause()
        for _ in range(5):
            await pilot.press("minus")
        await pilot.pause()
        new = round(old - 0.05, 4)
        assert sv.cutoffs[q] == new
        # the figures on screen are the measurement's own rescoring at these cutoffs
        expected = sv.meas.rescore(dict(sv.cutoffs))
        assert sv.card.to_dict() == expected.to_dict()
        summary = text_of(app.query_one("#score-summary", Static))
        assert f"auto-routed {pct(expected.coverage)}" in summary and "not saved" in summary
        mine = next(s for s in expected.per_queue if s.queue == q)
        assert table.get_row(q)[6] == pct(mine.coverage)
        # a never-auto queue still refuses a change
        table.move_cursor(row=sv.card.queues.index("safety"))
        await pilot.pause()
        await pilot.press("minus")
        await pilot.pause()
        assert sv.cutoffs["safety"] is None and set(sv.changed) == {q}
        # the confirmation lists the change; no keeps everything as it is
        await pilot.press("w")
        await pilot.pause()
        assert isinstance(app.screen, ConfirmScreen)
        assert f"{q}: {old:.2f} -> {new:.2f}" in app.screen.question
        await pilot.press("n")
        await settle(app, pilot)
        assert ws.active_version.version == version and len(ws.models()) == n_versions
        await pilot.press("w")
        await pilot.pause()
        await pilot.press("y")
        await settle(app, pilot)
        mv = ws.store.active_model()
        assert mv.version == ws.active_version.version == version + 1 and mv.kind == "adopt"
        assert mv.config["policy"]["cutoffs"][q] == new
        assert ws.policy.cutoff(q) == new
        assert len(ws.models()) == n_versions + 1
        # the screen follows: no "not saved", the same figures, models and overview show the new version
        assert sv.changed == {} and sv.saved[q] == new
        summary = text_of(app.query_one("#score-summary", Static))
        assert "not saved" not in summary and f"auto-routed {pct(expected.coverage)}" in summary
        assert sv.card.to_dict() == ws.evaluate().rescore(dict(sv.saved)).to_dict()
        models = app.query_one("#models-table", DataTable)
        assert models.row_count == n_versions + 1
        top = models.get_row_at(0)
        assert "active" in str(top[0]) and top[1] == str(version + 1) and top[2] == "adopt"
        assert f"version {version + 1}" in text_of(app.query_one("#overview-model", Static))
        # r now goes back to the saved cutoffs, and a fresh open routes with them
        table.move_cursor(row=sv.card.queues.index(q))
        await pilot.pause()
        await pilot.press("minus")
        await pilot.pause()
        assert sv.changed == {q: round(new - 0.01, 4)}
        await pilot.press("r")
        await pilot.pause()
        assert sv.cutoffs[q] == new and sv.changed == {}
        with Workspace.open(ws.root) as again:
            assert again.policy.cutoff(q) == new

    run(go, workspace_path)


def test_the_settings_grid_fills_its_table_and_a_row_is_adopted(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        ws = app.ws
        mv = app.query_one(ModelsView)
        mv.grid_folds = 2
        await pilot.press("2")
        await pilot.pause()
        # nothing to adopt before the grid has run
        await pilot.press("s")
        await pilot.pause()
        assert not isinstance(app.screen, ConfirmScreen)
        await pilot.press("g")
        await settle(app, pilot)
        expected = tuning.run_grid(ws, folds=2)
        grid = app.query_one("#grid-table", DataTable)
        assert len(mv.grid_rows) == grid.row_count == len(expected) > 1
        names = [f.name for f in ws.config.schema.text_fields]
        assert [str(c) for c in grid.get_row_at(0)[1:]] == grid_cells(expected[0], names)
        assert mv.grid_rows == expected
        assert f"{len(expected)} settings" in mv.last_outcome
        assert app.query_one("#train-progress").progress == 100
        # adopt a row with another text model than the active one
        k = next(i for i, r in enumerate(expected) if r.text_model != ws.model.spec.text_model)
        row = expected[k]
        grid.move_cursor(row=k)
        version = ws.active_version.version
        await pilot.press("s")
        await pilot.pause()
        assert isinstance(app.screen, ConfirmScreen) and row.text_model in app.screen.question
        await pilot.press("y")
        await pilot.pause()
        config = tomllib.loads((ws.root / "triage.toml").read_text(encoding="utf-8"))
        assert config["model"]["text_model"] == row.text_model
        assert config["model"]["alpha_text"] == row.alpha_text
        assert "run training to use it" in mv.last_outcome
        assert ws.active_version.version == version  # written, not yet trained
        # the second question offers training with it now
        assert isinstance(app.screen, ConfirmScreen) and "Train" in app.screen.question
        await pilot.press("y")
        await settle(app, pilot)
        assert ws.active_version.version == version + 1
        assert ws.model.spec.text_model == row.text_model and ws.model.spec.alpha_text == row.alpha_text

    run(go, workspace_path)


def test_cancelling_the_settings_grid_leaves_the_config(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        ws = app.ws
        before = (ws.root / "triage.toml").read_bytes()
        n_versions = len(ws.models())
        await pilot.press("2")
        await pilot.pause()
        for key in ("g", "x"):  # queued at once, as for training
            app.post_message(events.Key(key, key))
        await settle(app, pilot)
        mv = app.query_one(ModelsView)
        assert "cancelled" in mv.last_outcome
        assert mv.grid_rows == [] and app.query_one("#grid-table", DataTable).row_count == 0
        assert (ws.root / "triage.toml").read_bytes() == before
        assert len(ws.models()) == n_versions
        # s has no row to adopt
        await pilot.press("s")
        await pilot.pause()
        assert not isinstance(app.screen, ConfirmScreen)

    run(go, workspace_path)


def test_a_correction_in_review_is_learned_and_undone(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        ws = app.ws
        await pilot.press("5")
        await settle(app, pilot)
        rv = app.query_one(ReviewView)
        table = app.query_one("#review-table", DataTable)
        await pilot.press("d")  # show the stored labels the model disagrees with
        await settle(app, pilot)
        target = next(w for w in rv.items if w.why == "likely misroute")
        table.move_cursor(row=[w.item_id for w in rv.items].index(target.item_id))
        await pilot.pause()
        version = ws.active_version.version
        old = ws.store.get_item(target.item_id).label
        queues = ws.model.queues
        counts = ws.model.counts.class_count_.copy()
        # send it to a queue picked in the picker: the suggested one is highlighted first
        await pilot.press("s")
        await pilot.pause()
        assert isinstance(app.screen, QueuePicker)
        await pilot.press("enter")
        await pilot.pause()
        # the item has a stored label: relabelling history is asked first
        assert isinstance(app.screen, ConfirmScreen) and "Relabel" in app.screen.question
        assert ws.active_version.version == version
        await pilot.press("y")
        await settle(app, pilot)
        assert ws.active_version.version == version + 1
        assert ws.store.get_item(target.item_id).label == target.suggested != old
        after = ws.model.counts.class_count_
        assert after[queues.index(old)] == counts[queues.index(old)] - 1
        assert after[queues.index(target.suggested)] == counts[queues.index(target.suggested)] + 1
        assert target.item_id not in {w.item_id for w in rv.items}
        assert f"{target.item_id} -> {target.suggested}" in ws.active_version.note
        models = app.query_one("#models-table", DataTable)
        assert models.row_count == len(ws.models()) == 2
        overview = text_of(app.query_one("#overview-model", Static))
        assert "1 learned since training" in overview
        # the same workspace opened afresh sees the corrected model
        with Workspace.open(ws.root) as again:
            assert again.active_version.version == version + 1
            assert again.store.get_item(target.item_id).label == target.suggested
            assert np.array_equal(again.model.counts.class_count_, after)
        # undo restores the label and the counts, as a new version
        await pilot.press("u")
        await settle(app, pilot)
        assert ws.active_version.version == version + 2
        assert ws.store.get_item(target.item_id).label == old
        assert np.array_equal(ws.model.counts.class_count_, counts)
        assert target.item_id in {w.item_id for w in rv.items}

    run(go, workspace_path)


def test_sending_a_never_auto_item_to_a_chosen_queue(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        ws = app.ws
        await pilot.press("5")
        await settle(app, pilot)
        rv = app.query_one(ReviewView)
        w = rv.items[0]
        assert w.why == "person must review" and w.suggested == "safety"
        picked = "hardware_fault"
        version = ws.active_version.version
        n_before = ws.model.counts.class_count_[ws.model.queues.index(picked)]
        await pilot.press("s")
        await pilot.pause()
        picker = app.screen
        assert isinstance(picker, QueuePicker)
        ol = picker.query_one("#queue-options")
        ol.highlighted = picker.queues.index(picked)
        await pilot.press("enter")
        await settle(app, pilot)
        assert ws.store.get_item(w.item_id).label == picked
        assert ws.active_version.version == version + 1
        assert ws.model.counts.class_count_[ws.model.queues.index(picked)] == n_before + 1
        assert w.item_id not in {x.item_id for x in rv.items}
        # escape in the picker sends nowhere
        nxt = rv.items[0]
        await pilot.press("s")
        await pilot.pause()
        await pilot.press("escape")
        await settle(app, pilot)
        assert ws.store.get_item(nxt.item_id).label is None
        assert ws.active_version.version == version + 1

    run(go, workspace_path)


def test_cancelling_a_training_run_keeps_the_active_model(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        ws = app.ws
        before = ws.active_version.version
        n_versions = len(ws.models())
        await pilot.press("2")
        await pilot.pause()
        # both keys are queued at once: pilot.press would wait for the busy training thread to go idle first
        for key in ("t", "x"):
            app.post_message(events.Key(key, key))
        await settle(app, pilot)
        mv = app.query_one(ModelsView)
        assert "cancelled" in mv.last_outcome
        assert ws.active_version.version == before
        assert len(ws.models()) == n_versions
        assert ws.store.active_model().version == before

    run(go, workspace_path)


def test_training_then_activating_an_older_version(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        ws = app.ws
        await pilot.press("2")
        await pilot.pause()
        await pilot.press("t")
        await settle(app, pilot)
        mv = app.query_one(ModelsView)
        assert "version 2 is active" in mv.last_outcome
        assert ws.active_version.version == 2 and ws.store.active_model().version == 2
        table = app.query_one("#models-table", DataTable)
        assert table.row_count == 2
        assert "active" in str(table.get_row("2")[0]) and "active" not in str(table.get_row("1")[0])
        assert app.query_one("#train-progress").progress == 100
        # activate version 1: refuse first, then confirm
        table.move_cursor(row=table.get_row_index("1"))
        await pilot.press("a")
        await pilot.pause()
        assert isinstance(app.screen, ConfirmScreen)
        await pilot.press("n")
        await pilot.pause()
        assert ws.active_version.version == 2
        await pilot.press("a")
        await pilot.pause()
        await pilot.press("y")
        await settle(app, pilot)
        assert ws.active_version.version == 1 and ws.store.active_model().version == 1
        assert "active" in str(table.get_row("1")[0])

    run(go, workspace_path)


def test_incoming_pages_filters_and_search(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        ws = app.ws
        await pilot.press("4")
        await settle(app, pilot)
        iv = app.query_one(IncomingView)
        table = app.query_one("#incoming-table", DataTable)
        batch = ws.store.latest_batch()
        assert batch.n_items == 300 and iv.pages == 2
        await pilot.press("n")
        await pilot.pause()
        assert iv.page == 1 and table.row_count == 100
        await pilot.press("n")
        assert iv.page == 1
        await pilot.press("p")
        await pilot.pause()
        assert iv.page == 0 and table.row_count == 200
        # held only
        await pilot.press("h")
        await settle(app, pilot)
        held = ws.store.decisions(batch_id=batch.id, held=True, limit=1000)
        assert len(iv.rows) == len(held) and all(r.held for r in iv.rows)
        # a queue
        app.query_one("#incoming-queue").value = "billing"
        await settle(app, pilot)
        assert iv.rows and all(r.suggested == "billing" and r.held for r in iv.rows)
        assert len(iv.rows) == sum(1 for d in held if d.suggested == "billing")
        # text search over all queues and both held and routed
        app.query_one("#incoming-queue").clear()
        await pilot.press("h", "h")
        await settle(app, pilot)
        await pilot.press("slash")
        await pilot.press(*"invoice", "enter")
        await settle(app, pilot)
        items = ws.store.get_items([r.item_id for r in iv.rows])
        assert iv.rows and all("invoice" in " ".join(map(str, r.fields.values())).lower() for r in items)
        every = ws.store.get_items([d.item_id for d in ws.store.decisions(batch_id=batch.id, limit=1000)])
        assert len(iv.rows) == sum(1 for r in every if "invoice" in " ".join(map(str, r.fields.values())).lower())
        detail = app.query_one("#incoming-detail", ItemDetail)
        assert detail.explanation["id"] == iv.rows[0].item_id

    run(go, workspace_path)


def test_marked_text_reads_without_colour() -> None:
    # evidence words carry their row number in the weight table; a watch word is marked as a hazard with ⚠
    text = marked_text("Smoke from the battery, please help", {"smoke": 1, "please": 4}, hazards=["smok"])
    assert text.plain == "⚠Smoke¹ from the battery, please⁴ help"
    assert shade(0.0) == " " and shade(1.0) == "█" and shade(0.3) != shade(0.9)


def test_help_and_command_palette(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        await pilot.press("question_mark")
        await pilot.pause()
        assert isinstance(app.screen, HelpScreen)
        keys = text_of(app.screen.query_one("#help-keys", Static))
        assert "Raise the selected cutoff" in keys and "Pick the queue" in keys
        assert "Save the what-if cutoffs" in keys and "grid row's settings into triage.toml" in keys
        await pilot.press("escape")
        await pilot.pause()
        assert not isinstance(app.screen, HelpScreen)
        await pilot.press("ctrl+p")
        await pilot.pause()
        await pilot.press(*"show fields")
        await pilot.pause(0.3)
        await pilot.press("enter")
        await settle(app, pilot)
        assert app.query_one("TabbedContent").active == "fields"
        assert app.query_one(FieldsView).query_one("#field-counts", DataTable).row_count == len(app.ws.model.queues)

    run(go, workspace_path)


def test_bindings_have_ids_and_tooltips() -> None:
    from triage.tui.app import VIEWS

    for cls in [TriageApp, *[v[2] for v in VIEWS]]:
        for b in cls.BINDINGS:
            assert b.id and b.tooltip, (cls.__name__, b.key)


def test_readable_at_small_and_large_sizes(workspace_path: Path) -> None:
    for size in ((80, 24), (160, 48)):
        async def go(app: TriageApp, pilot) -> list[str]:  # noqa: ANN001
            shots = []
            for key in "123456":
                await pilot.press(key)
                await settle(app, pilot)
                shots.append(screen_text(app))
            return shots

        shots = run(go, workspace_path, size=size)
        for shot in shots:
            for label in ("Overview", "Models", "Scorecard", "Incoming", "Review", "Fields", "Quit"):
                assert label in shot, (size, label)
        for shot, label in zip(shots, ("never-auto", "Train", "Cutoff", "Next page", "Send to", "P(value | queue)"),
                               strict=True):
            assert label in shot, (size, label)


def test_core_and_workspace_do_not_import_textual() -> None:
    code = ("import sys, triage.app, triage.store, triage.core.metrics, triage.core.model, "
            "triage.core.routing, triage.core.selection, triage.core.evidence, triage.core.encode; "
            "bad = sorted(m for m in sys.modules if m.split('.')[0] == 'textual' or m.startswith('triage.tui')); "
            "assert not bad, bad")
    result = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True)
    assert result.returncode == 0, result.stderr
