"""What every view shares: the View base class (reload, focus_main), the error toast, and constants."""

from __future__ import annotations

from typing import Any

from textual.widget import Widget

from triage.app import Workspace

SCAN_CHUNK = 2000


def _err(view: Widget, exc: Exception) -> None:
    view.notify(str(exc), title="could not do that", severity="error", timeout=8)


class View(Widget):
    """A view: reload() re-reads the workspace; `focus_main` is what gets focus when the view is shown."""

    can_focus = False
    main_id = ""

    def __init__(self, ws: Workspace, **kw: Any) -> None:
        super().__init__(**kw)
        self.ws = ws

    def reload(self) -> None:  # pragma: no cover - overridden
        pass

    @property
    def shown(self) -> bool:
        """Whether this view is the one on screen. A view that is not must never take the focus itself: a focused
        widget selects its tab, so focusing from a hidden view would switch views under the user's hands."""
        return getattr(self.app, "active_key", None) == (self.id or "").removesuffix("-view")

    def focus_main(self) -> None:
        if self.main_id:
            try:
                self.query_one(f"#{self.main_id}").focus()
            except Exception:  # noqa: BLE001 - not composed yet
                pass
