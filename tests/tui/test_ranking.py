"""The ranking for sales ops as a plain function (triage.app.ranking) over the workspace's own measurement.
References: pandas sorts and cumulates the same test items independently; the lift of the top decile is
checked against the decile table of `lift_for` (triage lift), which is checked in its own tests."""

from __future__ import annotations

from pathlib import Path

import pandas as pd

from triage.app import Workspace
from triage.app.ranking import ranking
from triage.app.tuning import lift_for


def test_the_ranking_matches_a_pandas_sort_and_the_decile_lift(workspace_path: Path) -> None:
    with Workspace.open(workspace_path) as ws:
        meas = ws.evaluate()
        queue = "billing"
        r = ranking(meas, queue)
        df = pd.DataFrame({"id": meas.test_ids, "label": meas.test_labels,
                           "score": meas.test_probs[:, meas.model_queues.index(queue)]})
        df = df.sort_values(["score", "id"], ascending=[False, True], kind="mergesort").reset_index(drop=True)
        assert [x.item_id for x in r.items] == list(df["id"])
        hit = df["label"].eq(queue)
        gains = hit.cumsum() / hit.sum()
        lift = (hit.cumsum() / (df.index + 1)) / hit.mean()
        assert all(abs(x.gain - g) < 1e-12 and abs(x.lift - li) < 1e-12
                   for x, g, li in zip(r.items, gains, lift, strict=True))
        assert r.positives == int(hit.sum()) and abs(r.base_rate - hit.mean()) < 1e-12
        # the top 10% holds what `triage lift` says the top decile holds (its deciles cut at the same place
        # when the count divides by ten)
        table = lift_for(ws, queue)
        if len(r.items) % 10 == 0:
            assert abs(r.gain_at(0.10) - table["deciles"][0]["cumulative_gain"]) < 1e-9


def test_k_on_the_scorecard_opens_the_selected_queues_ranking(workspace_path: Path) -> None:
    from textual.widgets import DataTable

    from triage.tui.app import TriageApp
    from triage.tui.views import ScorecardView
    from triage.tui.views.ranking import RankingScreen

    from .pilot import run, settle

    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        await pilot.press("3")
        await settle(app, pilot)
        sv = app.query_one(ScorecardView)
        app.query_one("#queue-table", DataTable).move_cursor(row=sv.card.queues.index("billing"))
        await pilot.press("k")
        await pilot.pause()
        assert isinstance(app.screen, RankingScreen)
        expected = ranking(sv.meas, "billing")
        table = app.screen.query_one("#ranking-table", DataTable)
        assert table.row_count == min(300, len(expected.items))
        assert table.coordinate_to_cell_key((0, 0)).row_key.value == expected.items[0].item_id
        await pilot.press("escape")
        await pilot.pause()
        assert not isinstance(app.screen, RankingScreen)

    run(go, workspace_path)


def test_the_items_behind_each_matrix_cell_add_up_to_the_scorecards_counts(workspace_path: Path) -> None:
    """Reference: the scorecard's confusion matrix (itself checked against sklearn.metrics.confusion_matrix)."""
    from triage.app.ranking import cell_items

    with Workspace.open(workspace_path) as ws:
        meas = ws.evaluate()
        card = meas.scorecard
        for i, a in enumerate(card.queues):
            for j, b in enumerate(card.queues):
                items = cell_items(meas, a, b)
                assert len(items) == card.matrix[i][j], (a, b)
                assert all(c.label == a and c.suggested == b for c in items)


def test_i_lists_a_queues_misroutes_with_evidence_and_a_correction(workspace_path: Path,
                                                                   reviewer_name: str) -> None:
    from textual.widgets import DataTable

    from triage.app.ranking import cell_items
    from triage.tui.app import TriageApp
    from triage.tui.views import ItemDetail, ScorecardView
    from triage.tui.views.ranking import MisroutesScreen
    from triage.tui.widgets import ConfirmScreen, QueuePicker

    from .pilot import run, settle

    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        await pilot.press("3")
        await settle(app, pilot)
        sv = app.query_one(ScorecardView)
        q = "billing"
        app.query_one("#queue-table", DataTable).move_cursor(row=sv.card.queues.index(q))
        await pilot.press("i")
        await settle(app, pilot)
        screen = app.screen
        assert isinstance(screen, MisroutesScreen)
        i = sv.card.queues.index(q)
        expected = sum(sv.card.matrix[i]) - sv.card.matrix[i][i] + sum(r[i] for r in sv.card.matrix) - sv.card.matrix[i][i]
        assert len(screen.items) == expected == screen.query_one(DataTable).row_count
        first = screen.items[0]
        assert screen.query_one(ItemDetail).explanation["id"] == first.item_id
        assert [c.item_id for c in cell_items(sv.meas, first.label, first.suggested)].count(first.item_id) == 1
        await pilot.press("s")
        await pilot.pause()
        assert isinstance(app.screen, QueuePicker)
        await pilot.press("enter")  # the suggested queue is highlighted first
        await pilot.pause()
        assert isinstance(app.screen, ConfirmScreen)  # a stored label: asked first
        await pilot.press("y")
        await settle(app, pilot)
        assert app.ws.store.get_item(first.item_id).label == first.suggested
        assert app.ws.store.corrections()[-1].by == reviewer_name

    run(go, workspace_path)
