"""The review desk's finding aids in the real app: typing in the queue picker filters its list, Review's search
box and queue filter narrow the work order, and both Review and Overview say in plain words that a never-auto
queue's items always reach a person. Each check is made against the workspace's own queues and work order."""

from __future__ import annotations

from pathlib import Path

from textual.widgets import DataTable, Input, Label, OptionList, Select, Static

from triage.tui.app import TriageApp
from triage.tui.views import ReviewView
from triage.tui.widgets import QueuePicker

from .pilot import run, settle, text_of


def shown_ids(picker: QueuePicker) -> list[str]:
    ol = picker.query_one("#queue-options", OptionList)
    return [str(ol.get_option_at_index(i).id) for i in range(ol.option_count)]


def test_typing_in_the_queue_picker_filters_the_list(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        ws = app.ws
        await pilot.press("5")
        await settle(app, pilot)
        rv = app.query_one(ReviewView)
        item = rv.items[0]
        await pilot.press("s")
        await pilot.pause()
        picker = app.screen
        assert isinstance(picker, QueuePicker)
        every = sorted(ws.known_queues())
        assert shown_ids(picker) == every
        target = "hardware_fault"
        assert target in every
        await pilot.press(*"hard")
        await pilot.pause()
        # only the queues with "hard" in their name stay, and the first is highlighted
        expected = [q for q in every if "hard" in q.casefold()]
        assert shown_ids(picker) == expected and len(expected) < len(every)
        ol = picker.query_one("#queue-options", OptionList)
        assert ol.get_option_at_index(ol.highlighted or 0).id == target
        # letters no queue has keep the list and say so; backspace brings everything back
        await pilot.press("z")
        await pilot.pause()
        assert shown_ids(picker) == expected
        assert "no queue has it" in str(picker.query_one("#picker-typed", Label).render())
        await pilot.press(*["backspace"] * 5)
        await pilot.pause()
        assert shown_ids(picker) == every
        await pilot.press(*"hard", "enter")
        await settle(app, pilot)
        assert ws.store.get_item(item.item_id).label == target

    run(go, workspace_path)


def test_review_search_and_queue_filter_narrow_the_work_order(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        await pilot.press("5")
        await settle(app, pilot)
        rv = app.query_one(ReviewView)
        table = app.query_one("#review-table", DataTable)
        total = len(rv.entries)
        assert table.row_count == total
        # the queue filter: only the items suggested for that queue
        queue = "billing"
        expected = [e.item.item_id for e in rv.entries if e.item.suggested == queue]
        assert 0 < len(expected) < total
        app.query_one("#review-queue", Select).value = queue
        await settle(app, pilot)
        assert [str(k.value) for k in table.rows] == expected
        app.query_one("#review-queue", Select).clear()
        await settle(app, pilot)
        assert table.row_count == total
        # the search box (/): an item id finds that one item
        wanted = rv.entries[-1].item.item_id
        await pilot.press("slash")
        await pilot.pause()
        assert app.focused is app.query_one("#review-search", Input)
        await pilot.press(*wanted, "enter")
        await settle(app, pilot)
        assert [str(k.value) for k in table.rows] == [wanted]
        assert "1 match the filter" in str(app.query_one("#review-status", Label).render())

    run(go, workspace_path)


def test_review_and_overview_say_never_auto_items_always_reach_a_person(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        assert app.ws.config.never_auto() == {"safety"}  # configs/voltwren.toml
        overview = text_of(app.query_one("#overview-warning", Static))
        assert "never auto-routed or closed" in overview and "always reach a person" in overview
        await pilot.press("5")
        await settle(app, pilot)
        line = str(app.query_one("#review-safety", Label).render())
        assert line == "! safety is never auto-routed or closed: a person decides every item"

    run(go, workspace_path)
