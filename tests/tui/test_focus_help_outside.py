"""Pilot tests for three faults of the app shell: focus following the active tab, the key list's size, and
changes made by another process (the command line here) being noticed."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from textual import events
from textual.widgets import Static, TabbedContent

from triage.tui.app import TriageApp
from triage.tui.widgets import HelpScreen

from .pilot import run, screen_lines, settle, text_of


def _pane_of(app: TriageApp) -> str | None:
    """The id of the tab pane that holds the focused widget."""
    node = app.focused
    while node is not None and not (node.id in {"overview", "models", "scorecard", "incoming", "review", "fields"}
                                    and type(node).__name__ == "TabPane"):
        node = node.parent
    return None if node is None else node.id


def test_fast_number_keys_settle_on_the_last_view(workspace_path: Path) -> None:
    """5, 3, 5 pressed 0.2 s apart: the last key wins, the content stays there and the focus is inside it."""
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        for key in "535":  # as a terminal driver hands them over: queued at once, faster than a refresh
            app.post_message(events.Key(key, key))
        tabs = app.query_one(TabbedContent)
        seen = []
        for _ in range(40):  # watch from the first frame: a view taking the tab back shows up within a few
            await pilot.pause(0.05)
            seen.append(tabs.active)
        await settle(app, pilot)
        seen.append(tabs.active)
        first = seen.index("review")
        assert seen[first:] == ["review"] * (len(seen) - first), seen
        assert _pane_of(app) == "review"

    run(go, workspace_path)


def test_the_key_list_has_a_size_on_screen(workspace_path: Path) -> None:
    """? opens the key list and it is drawn: its table has rows and columns on the screen, at 80x24 too."""
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        for key in ("question_mark", "f1"):
            await pilot.press(key)
            await pilot.pause()
            assert isinstance(app.screen, HelpScreen)
            keys = app.screen.query_one("#help-keys", Static)
            assert keys.size.width >= 40 and keys.size.height >= 10, keys.size
            text = "\n".join(screen_lines(app))
            assert "switch view" in text and "Train a new model version" in text
            await pilot.press("escape")
            await pilot.pause()
            assert not isinstance(app.screen, HelpScreen)

    run(go, workspace_path, size=(80, 24))


def test_a_correction_made_by_another_process_is_noticed(workspace_path: Path) -> None:
    """The command line corrects an item while the UI is open: the UI picks up the new active version and the
    Review list no longer offers that item; accepting a stale row does not record a second correction."""
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        await pilot.press("5")
        await settle(app, pilot)
        from triage.tui.views import ReviewView
        rv = app.query_one(ReviewView)
        w = next(x for x in rv.items if x.label is None)
        before = app.ws.active_version.version
        done = subprocess.run([sys.executable, "-m", "triage", "correct", "-w", str(workspace_path), w.item_id,
                               w.suggested, "--by", "someone else"], capture_output=True, text=True)
        assert done.returncode == 0, done.stderr
        for _ in range(100):  # the UI polls the workspace; wait until it has looked
            await pilot.pause(0.1)
            await settle(app, pilot)
            if app.ws.active_version.version != before:
                break
        assert app.ws.active_version.version > before
        assert w.item_id not in {x.item_id for x in rv.items}
        n = len(app.ws.models())
        rv.correct(w, w.suggested)  # a row kept from before the other process's correction
        await settle(app, pilot)
        assert len(app.ws.models()) == n

    run(go, workspace_path)


def test_at_70x20_the_overview_panels_do_not_overlap(workspace_path: Path) -> None:
    """Each panel's widest line (rendered unconstrained) fits inside its own region, and the regions do not
    meet: nothing is cut off against the next panel."""
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        await settle(app, pilot)
        model = app.query_one("#overview-model", Static)
        run_ = app.query_one("#overview-batch", Static)
        assert not model.region.overlaps(run_.region)
        for panel in (model, run_):
            widest = max(len(line.rstrip()) for line in text_of(panel).splitlines())
            assert widest <= panel.region.width, (panel.id, widest, panel.region)

    run(go, workspace_path, size=(70, 20))
