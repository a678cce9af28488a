"""The terminal UI says it as it opens when a never-auto queue has no watch words (the app layer's warning)."""

from __future__ import annotations

from pathlib import Path

from triage.tui.app import TriageApp

from .pilot import run, settle


def test_a_never_auto_queue_without_watch_words_is_noticed(workspace_path: Path) -> None:
    cfg = workspace_path / "triage.toml"
    text = cfg.read_text(encoding="utf-8")
    start = text.index("watch_words = [")
    cfg.write_text(text[:start] + text[text.index("]", start) + 1:], encoding="utf-8")

    async def go(app: TriageApp, pilot) -> None:  # noqa: ANN001
        await settle(app, pilot)
        assert app.ws.safety_warnings()
        # the toasts posted (Textual keeps them on the app while they show)
        said = [n.message for n in app._notifications]
        assert any("[queues.safety] is never_auto but has no watch_words" in m for m in said), said

    run(go, workspace_path)
