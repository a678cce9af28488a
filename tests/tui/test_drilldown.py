"""From the scorecard's numbers to the items, in the real app: enter on a confusion-matrix cell lists the test
items behind it, enter on a queue's row lists its auto-routed and held ones; each with its evidence, and a
correction from there. The lists are checked against `triage.app.drilldown` and the scorecard's own counts."""

from __future__ import annotations

from pathlib import Path

from textual.widgets import DataTable

from triage.app.drilldown import cell, queue_row
from triage.tui.app import TriageApp
from triage.tui.views import ItemDetail, ScorecardView
from triage.tui.views.drill import MeasuredItemsScreen
from triage.tui.widgets import ConfirmScreen, QueuePicker

from .pilot import run, settle


def listed(screen: MeasuredItemsScreen) -> list[str]:
    t = screen.query_one("#drill-table", DataTable)
    return [str(t.coordinate_to_cell_key((r, 0)).row_key.value) for r in range(t.row_count)]


def test_enter_on_a_matrix_cell_lists_its_items_and_corrects_one(workspace_path: Path, reviewer_name: str) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        await pilot.press("3")
        await settle(app, pilot)
        sv = app.query_one(ScorecardView)
        card, queues = sv.card, sv.card.queues
        await pilot.press("m")
        await pilot.pause()
        matrix = app.query_one("#matrix-table", DataTable)
        assert app.focused is matrix
        # the cursor starts on the largest misroute
        top = max((card.matrix[i][j], -i, -j) for i in range(len(queues)) for j in range(len(queues)) if i != j)
        i, j = -top[1], -top[2]
        assert (matrix.cursor_row, matrix.cursor_column) == (i, j)
        # one step along the row with the arrow keys, to a cell with items
        k = next(c for c in range(len(queues)) if c != j and card.matrix[i][c])
        await pilot.press(*(["right"] * (k - j) if k > j else ["left"] * (j - k)))
        await pilot.press("enter")
        await settle(app, pilot)
        screen = app.screen
        assert isinstance(screen, MeasuredItemsScreen)
        expected = cell(app.ws, sv.meas, queues[i], queues[k])
        assert listed(screen) == [x.item_id for x in expected] and len(expected) == card.matrix[i][k]
        first = expected[0]
        assert screen.query_one(ItemDetail).explanation["id"] == first.item_id  # its evidence, below
        other = next(q for q in queues if q != first.label)
        await pilot.press("s")
        await pilot.pause()
        assert isinstance(app.screen, QueuePicker)
        app.screen.query_one("#queue-options").highlighted = app.screen.queues.index(other)
        await pilot.press("enter")
        await pilot.pause()
        assert isinstance(app.screen, ConfirmScreen)  # a stored label: asked first
        await pilot.press("y")
        await settle(app, pilot)
        assert app.ws.item(first.item_id).label == other
        assert [(c.item_id, c.to_queue, c.by) for c in app.ws.store.corrections()] == [
            (first.item_id, other, reviewer_name)]
        row = screen.query_one("#drill-table", DataTable).get_row(first.item_id)
        assert f"→ {other} by {reviewer_name}" in str(row[2])

    run(go, workspace_path)


def test_enter_on_a_queues_row_lists_its_routed_and_held_items(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        await pilot.press("3")
        await settle(app, pilot)
        sv = app.query_one(ScorecardView)
        qs = max(sv.card.per_queue, key=lambda s: (s.routed > 0 and s.held > 0, s.routed))
        table = app.query_one("#queue-table", DataTable)
        table.move_cursor(row=sv.card.queues.index(qs.queue))
        await pilot.press("enter")
        await settle(app, pilot)
        screen = app.screen
        assert isinstance(screen, MeasuredItemsScreen)
        row = queue_row(app.ws, sv.meas, qs.queue)
        assert listed(screen) == [x.item_id for x in [*row.routed, *row.held]]
        assert (len(row.routed), len(row.held)) == (qs.routed, qs.held) and qs.routed and qs.held
        await pilot.press("escape")
        await pilot.pause()
        assert not isinstance(app.screen, MeasuredItemsScreen)

        # what-if cutoffs: the lists follow the cutoffs on screen, as the figures do
        await pilot.press(*["minus"] * 5)
        await settle(app, pilot)
        assert sv.changed
        qs2 = next(s for s in sv.card.per_queue if s.queue == qs.queue)
        await pilot.press("enter")
        await settle(app, pilot)
        row2 = queue_row(app.ws, sv.meas, qs.queue, dict(sv.cutoffs))
        assert (len(row2.routed), len(row2.held)) == (qs2.routed, qs2.held)
        assert len(row2.routed) > len(row.routed)
        assert listed(app.screen) == [x.item_id for x in [*row2.routed, *row2.held]]

    run(go, workspace_path)
