"""Scorecard and Models in the real app: figures about auto-routed items when none were routed, queues below
their target, the layout at 120x40, hand-set cutoffs and training, what an older version lacks, and no
Python spellings (None, 814.0, dicts) on any screen. References: the store's journal and versions (read
through the workspace), the Scorecard the workspace measures, the screen as characters."""

from __future__ import annotations

import re
from pathlib import Path

from textual.containers import VerticalScroll
from textual.widgets import DataTable

from triage.tui.app import TriageApp
from triage.tui.views import ModelsView, ScorecardView
from triage.tui.views.scorecard import BELOW, NOTHING
from triage.tui.widgets import ConfirmScreen

from .pilot import run, screen_lines, settle

SNAPSHOTS = Path(__file__).parent / "snapshots"


def test_nothing_routed_reads_as_a_dash_and_a_queue_below_target_is_marked(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        await pilot.press("3")
        await settle(app, pilot)
        sv = app.query_one(ScorecardView)
        table = app.query_one("#queue-table", DataTable)
        seen_nothing = seen_below = False
        for qs in sv.card.per_queue:
            row = [str(c) for c in table.get_row(qs.queue)]
            if qs.routed == 0:
                seen_nothing = True
                assert row[3] == NOTHING and row[5] == NOTHING, row  # precision and F1 of nothing
            elif qs.target is not None and qs.precision < qs.target:
                seen_below = True
                assert BELOW in row[3] and "below its target" in row[10], row
            else:
                assert BELOW not in row[3]
        assert seen_nothing and seen_below  # the small demo workspace has both

    run(go, workspace_path)


def test_at_80x24_the_marks_are_explained_on_screen(workspace_path: Path) -> None:
    """The note column saying "below its target" is off screen at 80 columns: the summary says what ▼ and —
    mean, beside the rows that carry them."""
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        await pilot.press("3")
        await settle(app, pilot)
        text = "\n".join(screen_lines(app))
        assert "below its target" not in text  # the note column does not fit
        assert f"{BELOW} precision below the queue's target" in text
        assert f"{NOTHING} nothing auto-routed, so no precision" in text
        card = app.query_one(ScorecardView).card
        below = [q.queue for q in card.per_queue if q.routed and q.target is not None and q.precision < q.target]
        assert below and all(re.search(rf"^ +{q} .*{BELOW}", text, re.M) for q in below)
        assert re.search(rf"^ +safety .*never auto +{NOTHING}", text, re.M)

    run(go, workspace_path, size=(80, 24))


def test_at_120x40_the_matrix_shows_and_the_queue_table_stays_after_scrolling(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        await pilot.press("3")
        await settle(app, pilot)
        text = "\n".join(screen_lines(app))
        assert "confusion matrix" in text and "F safety" in text
        scroll = app.query_one("#score-scroll", VerticalScroll)
        scroll.scroll_end(animate=False)
        await pilot.pause()
        text = "\n".join(screen_lines(app))
        assert "true items" in text and "app_connectivity  0.95" in text  # the per-queue table is still there

    run(go, workspace_path, size=(120, 40))


def test_training_asks_to_keep_hand_set_cutoffs_and_keeps_them(workspace_path: Path) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        ws = app.ws
        q = next(s.queue for s in ws.evaluate().scorecard.per_queue if s.cutoff is not None and not s.never_auto)
        ws.set_cutoffs({q: 0.97}, by="Ada Tester")  # by hand, as the Scorecard's w or `triage cutoff` do
        await pilot.press("ctrl+r", "2")
        await settle(app, pilot)
        await pilot.press("t")
        await pilot.pause()
        assert isinstance(app.screen, ConfirmScreen)
        assert f"set by hand: {q} 0.97" in app.screen.question and "Keep yours" in app.screen.question
        trained = len(ws.models())
        await pilot.press("y")
        await settle(app, pilot)
        versions = ws.models()
        assert [v.kind for v in versions[trained:]] == ["train", "adopt"]
        assert ws.policy.cutoff(q) == 0.97
        assert "kept" in app.query_one(ModelsView).last_outcome

    run(go, workspace_path)


def test_activating_an_older_version_says_which_corrections_it_lacks(workspace_path: Path,
                                                                     reviewer_name: str) -> None:
    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        ws = app.ws
        first = ws.active_version.version
        item = ws.store.open_held(limit=1)[0]
        queue = next(q for q in ws.model.queues if q != item.suggested)
        ws.correct(item.item_id, queue, by=reviewer_name)
        await pilot.press("ctrl+r", "2")
        await settle(app, pilot)
        table = app.query_one("#models-table", DataTable)
        table.move_cursor(row=[str(table.get_row_at(i)[1]) for i in range(table.row_count)].index(str(first)))
        await pilot.press("a")
        await pilot.pause()
        assert isinstance(app.screen, ConfirmScreen)
        assert f"Version {first} lacks 1 correction" in app.screen.question
        assert f"{item.item_id} → {queue} by {reviewer_name}" in app.screen.question

    run(go, workspace_path)


LEAKS = [re.compile(p) for p in (r"\bNone\b", r"=None", r"-> None", r"\b\d+\.0(?![\d%])", r"\{'", r"'\w+': ")]


def test_no_python_spellings_on_any_screen() -> None:
    """The six screens (the snapshot test keeps these files equal to the screens) show no None, no 814.0 and
    no printed dict."""
    found = []
    for path in sorted(SNAPSHOTS.glob("*.txt")):
        for n, line in enumerate(path.read_text(encoding="utf-8").splitlines(), start=1):
            found += [f"{path.name}:{n}: {line.strip()}" for p in LEAKS if p.search(line)]
    assert not found, "\n".join(found)
