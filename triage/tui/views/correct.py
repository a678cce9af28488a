"""Making a correction from any list (Review, Incoming, the items behind a scorecard cell), the same way.

Who decides: the reviewer's name comes from `[desk] reviewer` in triage.toml, else TRIAGE_REVIEWER
(`triage.app.corrections.reviewer`), else the user types it once per session (never a fixed name).
Relabelling an item that already has a stored label changes history, so it is asked first. A row older than
the item's label (another process decided it) is not learned twice.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

from textual.widget import Widget

from triage.app import AlreadyInQueue, Workspace
from triage.app.corrections import reviewer as configured_reviewer
from triage.tui.messages import LabelsChanged
from triage.tui.views.base import _err
from triage.tui.widgets import ConfirmScreen, NameScreen, QueuePicker

Done = Callable[[str, str], None]  # (item id, queue) once learned


def reviewer(view: Widget, then: Callable[[str], None]) -> None:
    """Call `then(name)` with the reviewer's name: the one this session has, the configured one (triage.toml,
    then the environment), or asked for now."""
    app = view.app
    ws = getattr(app, "ws", None)
    name = getattr(app, "reviewer_name", None) or (configured_reviewer(ws) if ws is not None else None)
    if name:
        app.reviewer_name = name  # type: ignore[attr-defined]
        then(name)
        return

    def typed(value: str | None) -> None:
        if value:
            app.reviewer_name = value  # type: ignore[attr-defined]
            then(value)

    app.push_screen(NameScreen(), typed)


def queues_of(ws: Workspace) -> list[str]:
    return sorted(ws.known_queues())


def pick_and_correct(view: Widget, ws: Workspace, item_id: str, suggested: str | None, done: Done) -> None:
    """Let the user pick a queue (type-ahead), then correct."""
    def picked(queue: str | None) -> None:
        if queue:
            correct(view, ws, item_id, queue, done)

    view.app.push_screen(QueuePicker(item_id, queues_of(ws), suggested, ws.config.never_auto()), picked)


def correct(view: Widget, ws: Workspace, item_id: str, queue: str, done: Done,
            extra: Sequence[str] = ()) -> None:
    """Learn `item_id` -> `queue`: asks before changing a stored label, skips what is already so."""
    current = ws.item(item_id)
    if current is not None and current.label == queue:
        view.notify(f"{item_id} is already in {queue} (decided elsewhere or before); nothing recorded")
        done(item_id, queue)
        return

    def go(name: str) -> None:
        try:
            report = ws.correct(item_id, queue, by=name)
        except AlreadyInQueue as exc:  # decided so elsewhere meanwhile: a notice, not an error, and no version
            # not marked "decided by NAME" here: someone else decided it; the watch on other processes
            # (tui/outside.py) reads every view again with their decision
            view.notify(str(exc), title="nothing to record")
            return
        except Exception as exc:  # noqa: BLE001 - shown to the user
            _err(view, exc)
            return
        view.notify(f"{item_id}: {report.before or 'no queue'} → {queue} by {name}; learned, model version "
                    f"{report.version.version}")
        done(item_id, queue)
        view.post_message(LabelsChanged(item_id, queue, report.version.version))

    if current is not None and current.label is not None:
        def answer(yes: bool | None) -> None:
            if yes:
                reviewer(view, go)

        view.app.push_screen(ConfirmScreen(
            f"{item_id} is stored as {current.label}. Relabel it as {queue}?\nThis changes the item's history: "
            "the model forgets it under the old queue and learns it under the new one at once (u undoes)."
            + "".join(f"\n{line}" for line in extra)), answer)
        return
    reviewer(view, go)
