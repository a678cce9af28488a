"""The review desk in the real app: corrections from Incoming (auto-routed items too), the reviewer's name,
type-ahead in the queue picker, and the to-review count on the Review tab and on Overview. Each check reads
the store behind the screen (the corrections journal, the items' labels) or the work order function."""

from __future__ import annotations

from pathlib import Path

import pytest
from textual.widgets import DataTable, Static, TabbedContent

from triage.app import Workspace
from triage.app.work_order import work_order
from triage.tui.app import TriageApp
from triage.tui.views import IncomingView, ReviewView
from triage.tui.widgets import NameScreen, QueuePicker

from .pilot import run, settle, text_of


def test_an_auto_routed_item_is_corrected_from_incoming(workspace_path: Path, reviewer_name: str) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        ws = app.ws
        await pilot.press("4")
        await settle(app, pilot)
        view = app.query_one(IncomingView)
        table = app.query_one("#incoming-table", DataTable)
        k, row = next((i, r) for i, r in enumerate(view.rows) if not r.held)  # routed: a misroute found later
        table.move_cursor(row=k)
        await pilot.pause()
        other = next(q for q in ws.model.queues if q not in (row.suggested, "safety"))
        await pilot.press("s")
        await pilot.pause()
        picker = app.screen
        assert isinstance(picker, QueuePicker)
        for ch in other[:4]:  # type-ahead: the first letters find the queue
            await pilot.press(ch)
        await pilot.pause()
        ol = picker.query_one("#queue-options")
        assert ol.get_option_at_index(ol.highlighted).id == other
        await pilot.press("enter")
        await settle(app, pilot)
        assert ws.store.get_item(row.item_id).label == other
        journal = ws.store.corrections()
        assert journal[-1].item_id == row.item_id and journal[-1].by == reviewer_name
        cells = [str(c) for c in table.get_row(row.item_id)]
        assert f"decided → {other} by {reviewer_name}" in cells

    run(go, workspace_path)


def test_the_reviewer_is_asked_for_a_name_when_none_is_set(workspace_path: Path,
                                                           monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("TRIAGE_REVIEWER")

    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        ws = app.ws
        await pilot.press("5")
        await settle(app, pilot)
        await pilot.press("a")
        await pilot.pause()
        assert isinstance(app.screen, NameScreen)
        assert len(ws.store.corrections()) == 0  # nothing is recorded before someone is named
        for ch in "Bo Rivera":
            await pilot.press("space" if ch == " " else ch)
        await pilot.press("enter")
        await settle(app, pilot)
        journal = ws.store.corrections()
        assert len(journal) == 1 and journal[0].by == "Bo Rivera"
        # asked once: the next decision uses the same name
        await pilot.press("down", "a")
        await settle(app, pilot)
        assert [c.by for c in ws.store.corrections()] == ["Bo Rivera", "Bo Rivera"]

    run(go, workspace_path)


def test_the_to_review_count_is_on_the_tab_and_on_overview(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        await settle(app, pilot)
        order = work_order(app.ws)
        label = str(app.query_one(TabbedContent).get_tab("review").label)
        assert label == f"5 Review ({order.to_review}, safety {order.safety})"
        assert f"to review: {order.to_review} (safety {order.safety})" in text_of(
            app.query_one("#overview-review", Static))

    run(go, workspace_path)


def test_a_decision_made_elsewhere_meanwhile_is_a_notice_not_a_new_version(workspace_path: Path,
                                                                          monkeypatch: pytest.MonkeyPatch) -> None:
    """While the reviewer types their name, another process gives the item the same queue: the UI records
    nothing (the application layer refuses "X -> X") and says so plainly instead of showing an error."""
    monkeypatch.delenv("TRIAGE_REVIEWER")

    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        ws = app.ws
        await pilot.press("5")
        await settle(app, pilot)
        entry = app.query_one(ReviewView).selected()
        assert entry is not None and ws.store.get_item(entry.item.item_id).label is None
        await pilot.press("a")  # accept the suggestion: the UI asks who is deciding first
        await pilot.pause()
        assert isinstance(app.screen, NameScreen)
        with Workspace.open(workspace_path) as elsewhere:  # a second process decides the same item meanwhile
            elsewhere.correct(entry.item.item_id, entry.item.suggested, by="Cy Elsewhere")
        versions = [v.version for v in ws.models()]
        for ch in "Bo":
            await pilot.press(ch)
        await pilot.press("enter")
        await settle(app, pilot)
        assert [c.by for c in ws.store.corrections()] == ["Cy Elsewhere"]
        assert [v.version for v in ws.models()] == versions
        said = [(n.title, n.message, n.severity) for n in app._notifications]
        assert ("nothing to record", f"{entry.item.item_id} is already in {entry.item.suggested}: nothing to "
                "correct, nothing recorded", "information") in said, said
        assert not [s for s in said if s[2] == "error"], said
        assert "by Bo" not in app.query_one(ReviewView).decided.get(entry.item.item_id, "")  # not credited to Bo

    run(go, workspace_path)


@pytest.mark.parametrize("env", [None, "Ada Tester"], ids=["no-environment", "environment-too"])
def test_the_configured_reviewer_decides_without_being_asked(workspace_path: Path, env: str | None,
                                                             monkeypatch: pytest.MonkeyPatch) -> None:
    """`[desk] reviewer` in triage.toml names who decides: no prompt, and it comes before TRIAGE_REVIEWER."""
    if env is None:
        monkeypatch.delenv("TRIAGE_REVIEWER")
    cfg = workspace_path / "triage.toml"
    cfg.write_text(cfg.read_text(encoding="utf-8") + '\n[desk]\nreviewer = "Cleo Config"\n', encoding="utf-8")

    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        await pilot.press("5")
        await settle(app, pilot)
        entry = app.query_one(ReviewView).selected()
        assert entry is not None
        await pilot.press("a")
        await settle(app, pilot)
        assert not isinstance(app.screen, NameScreen)
        assert [(c.item_id, c.by) for c in app.ws.store.corrections()] == [(entry.item.item_id, "Cleo Config")]

    run(go, workspace_path)


def test_accepting_a_stored_labels_disagreement_asks_first(workspace_path: Path) -> None:
    """`a` on a stored label the model disagrees with would rewrite that item's history: a yes/no question
    comes first, no leaves the label and the model versions as they were, yes relabels it."""
    from triage.app.work_order import Group
    from triage.tui.widgets import ConfirmScreen

    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        ws = app.ws
        await pilot.press("5")
        await settle(app, pilot)
        await pilot.press("d")  # the stored labels the model disagrees with
        await settle(app, pilot)
        rv = app.query_one(ReviewView)
        table = app.query_one("#review-table", DataTable)
        entry = next(e for e in rv.entries if e.group is Group.DISAGREES)
        table.move_cursor(row=[str(k.value) for k in table.rows].index(entry.item.item_id))
        await pilot.pause()
        old = ws.store.get_item(entry.item.item_id).label
        assert old is not None and old != entry.item.suggested
        versions = [v.version for v in ws.models()]
        await pilot.press("a")
        await pilot.pause()
        assert isinstance(app.screen, ConfirmScreen)
        assert f"stored as {old}. Relabel it as {entry.item.suggested}?" in app.screen.question
        await pilot.press("n")
        await settle(app, pilot)
        assert ws.store.get_item(entry.item.item_id).label == old
        assert [v.version for v in ws.models()] == versions and not ws.store.corrections()
        await pilot.press("a")
        await pilot.pause()
        await pilot.press("y")
        await settle(app, pilot)
        assert ws.store.get_item(entry.item.item_id).label == entry.item.suggested
        assert len(ws.models()) == len(versions) + 1

    run(go, workspace_path)
