"""Text snapshots of the six views at 100x32 over the session's demo workspace.

Each view is shown with its key, the app is left to finish every worker and to give the view's main widget the
focus, and the screen is read as plain characters (no colours or styles, so the terminal's colour depth does
not matter). What changes from run to run (times, temporary paths) is replaced by a placeholder, then the text
is compared with tests/tui/snapshots/<view>.txt.

After a deliberate change of a view, write the files again and read the diff before committing it:

    TRIAGE_UPDATE_SNAPSHOTS=1 python -m pytest tests/tui/test_snapshots.py
"""

from __future__ import annotations

import difflib
import os
import re
from pathlib import Path
from typing import Any

import pytest
import textual.constants

from triage.tui.app import VIEWS, TriageApp

from .pilot import no_blink, run, screen_lines, settle

SNAPSHOTS = Path(__file__).parent / "snapshots"
UPDATE = os.environ.get("TRIAGE_UPDATE_SNAPSHOTS") == "1"
SIZE = (100, 32)
ROOT = Path(__file__).resolve().parents[2]
TIMES = re.compile(r"\d{4}-\d\d-\d\d[ T]\d\d:\d\d(:\d\d(\.\d+)?)?(Z|[+-]\d\d:\d\d)?")
SECONDS = re.compile(r"\b\d+\.\d s\b")


def normalise(text: str, workspace: Path) -> str:
    """Placeholders for what differs between runs: the workspace's temporary folder, times, durations."""
    for path in (str(workspace.parent), str(workspace.resolve().parent)):
        text = text.replace(path, "<tmp>")
    text = TIMES.sub(lambda m: "<time>".ljust(len(m.group(0))), text)
    return SECONDS.sub(lambda m: "<s>".ljust(len(m.group(0))), text)


async def idle_on(app: TriageApp, pilot: Any, key: str) -> None:
    """Wait until the workers are done and the view's main widget has the focus (it is given after a refresh)."""
    main = app.view(key).main_id
    for _ in range(100):
        await settle(app, pilot)
        if app.focused is not None and app.focused.id == main:
            break
        await pilot.pause(0.05)
    assert app.focused is not None and app.focused.id == main, (key, app.focused)
    app.clear_notifications()  # toasts time out: not part of a view
    no_blink(app)
    await pilot.pause(0.05)


def collect(workspace_path: Path, seen: list[TriageApp] | None = None) -> dict[str, str]:
    """Every view's screen as normalised plain text, in the order of the keys 1-6 (the app goes into `seen`)."""
    async def go(app: TriageApp, pilot: Any) -> dict[str, str]:
        if seen is not None:
            seen.append(app)
        shots = {}
        for i, (key, *_rest) in enumerate(VIEWS, start=1):
            await pilot.press(str(i))
            await idle_on(app, pilot, key)
            shots[key] = normalise("\n".join(screen_lines(app)) + "\n", workspace_path)
        return shots

    return run(go, workspace_path, size=SIZE)


def compare(shots: dict[str, str]) -> None:
    if UPDATE:
        SNAPSHOTS.mkdir(exist_ok=True)
        for key, text in shots.items():
            (SNAPSHOTS / f"{key}.txt").write_text(text, encoding="utf-8")
        return
    problems = []
    for key, text in shots.items():
        path = SNAPSHOTS / f"{key}.txt"
        if not path.exists():
            problems.append(f"{path.name} is missing: TRIAGE_UPDATE_SNAPSHOTS=1 writes it")
            continue
        stored = path.read_text(encoding="utf-8")
        if stored != text:
            diff = difflib.unified_diff(stored.splitlines(), text.splitlines(), f"stored {path.name}",
                                        f"now {path.name}", lineterm="", n=1)
            problems.append("\n".join(diff))
    assert not problems, "views changed (TRIAGE_UPDATE_SNAPSHOTS=1 rewrites the snapshots):\n" + "\n\n".join(problems)


def test_the_six_views_match_their_snapshots(workspace_path: Path) -> None:
    shots = collect(workspace_path)
    assert list(shots) == [key for key, *_ in VIEWS]
    for key, text in shots.items():
        lines = text.splitlines()
        assert len(lines) == SIZE[1] and max(len(line) for line in lines) <= SIZE[0], key
        assert "<tmp>" not in text, key  # no machine paths on screen
    compare(shots)


def test_a_second_run_gives_the_same_text(workspace_path: Path) -> None:
    """The same workspace opened twice shows the same six screens (no clocks, blinking or timing on them)."""
    first = collect(workspace_path)
    second = collect(workspace_path)
    assert first == second


def test_snapshots_do_not_depend_on_the_colour_depth(workspace_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    """The same screens in a 16-colour terminal and with colours turned off (NO_COLOR), too.

    In this process rather than a fresh one: Textual reads TEXTUAL_COLOR_SYSTEM into `constants` at import
    and NO_COLOR when an app starts, so patching both is what a fresh process with those variables would see.
    """
    if UPDATE:
        pytest.skip("snapshots are being rewritten")
    for name, value in (("COLOR_SYSTEM", "standard"), ("NO_COLOR", "1")):
        with monkeypatch.context() as m:
            if name == "NO_COLOR":
                m.setenv("NO_COLOR", value)
            else:
                m.setattr(textual.constants, name, value)
            app_seen: list[TriageApp] = []
            shots = collect(workspace_path, seen=app_seen)
            if name == "NO_COLOR":
                assert app_seen[0].no_color
            else:
                assert app_seen[0].console.color_system == "standard"
            compare(shots)
