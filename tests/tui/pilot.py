"""Helpers shared by the terminal UI tests: run the app over a workspace with the pilot, wait for workers,
and read what is on the screen as plain text."""

from __future__ import annotations

import asyncio
import html
import re
from collections.abc import Awaitable, Callable
from io import StringIO
from pathlib import Path
from typing import Any

from rich.console import Console
from textual.widgets import Input, Static

from triage.tui.app import TriageApp, make_app

SIZE = (100, 32)


def screen_text(app: TriageApp) -> str:
    """The screen as plain text (the exported SVG without its markup)."""
    svg = app.export_screenshot(simplify=True)
    body = svg[svg.find("<g class"):] if "<g class" in svg else svg
    return html.unescape(re.sub(r"<[^>]+>", "", body)).replace("\xa0", " ")


def screen_lines(app: TriageApp) -> list[str]:
    """The active screen line by line, as the compositor draws it: characters only, no styles or colours."""
    return [strip.text.rstrip() for strip in app.screen._compositor.render_strips()]


def text_of(widget: Static) -> str:
    console = Console(width=200, file=StringIO(), color_system=None)
    console.print(widget.content)
    return console.file.getvalue()  # type: ignore[attr-defined]


async def settle(app: TriageApp, pilot: Any) -> None:
    """Wait for every worker, then for the messages they posted."""
    await pilot.pause()
    await app.workers.wait_for_complete()
    await pilot.pause()
    await app.workers.wait_for_complete()
    await pilot.pause()


def no_blink(app: TriageApp) -> None:
    """Turn the text cursor's blinking off, so two screenshots of the same state are the same."""
    for widget in app.query(Input):
        widget.cursor_blink = False


def run(coro_fn: Callable[[TriageApp, Any], Awaitable[Any]], workspace_path: Path,
        size: tuple[int, int] = SIZE) -> Any:
    """Open the workspace in the app at `size`, wait until it is idle, run `coro_fn(app, pilot)`, close."""
    async def inner() -> Any:
        app = make_app(workspace_path)
        try:
            async with app.run_test(size=size) as pilot:
                no_blink(app)
                await settle(app, pilot)
                return await coro_fn(app, pilot)
        finally:
            app.ws.close()

    return asyncio.run(inner())
