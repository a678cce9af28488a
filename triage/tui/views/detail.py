"""The item detail panel Incoming and Review share: an item's text with its evidence, runner-up and gap."""

from __future__ import annotations

from typing import Any

from rich.console import Group
from rich.text import Text
from textual.app import ComposeResult
from textual.containers import VerticalScroll
from textual.widgets import Static

from triage.app import Workspace
from triage.tui.widgets import (
    explanation_renderables,
)


class ItemDetail(VerticalScroll):
    """One item's text with its evidence marked, the evidence bars, runner-up and gap."""

    def __init__(self, ws: Workspace, **kw: Any) -> None:
        super().__init__(**kw)
        self.ws = ws
        self.item_id: str | None = None
        self.explanation: dict[str, Any] | None = None

    def on_mount(self) -> None:
        self.border_title = "why: the text, its numbered evidence words and their weights"

    def compose(self) -> ComposeResult:
        yield Static("select an item to see why it went where it went", classes="detail-body")

    def show(self, item_id: str | None) -> None:
        body = self.query_one(".detail-body", Static)
        self.item_id = item_id
        if item_id is None:
            self.explanation = None
            body.update("")
            return
        try:
            ex = self.ws.explain(item_id, n=12)
        except Exception as exc:  # noqa: BLE001 - shown in the panel
            self.explanation = None
            body.update(Text(str(exc), style="red"))
            return
        self.explanation = ex
        names = [f.name for f in self.ws.config.schema.text_fields]
        hazards = [w for words in self.ws.config.watch_words().values() for w in words]
        body.update(Group(*explanation_renderables(ex, names, hazards)))
        self.scroll_home(animate=False)
