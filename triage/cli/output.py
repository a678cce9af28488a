"""Where the command writes: the two consoles, JSON lines, the progress bar, and the error types that exit 2.
"""

from __future__ import annotations

import argparse
import json
import sys
from collections.abc import Callable
from typing import Any

from rich.console import Console
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

from triage.app import USER_ERRORS as APP_USER_ERRORS
from triage.app import Workspace

# the error types that exit 2 with one line on stderr; any other exception is a bug and shows its traceback
USER_ERRORS = (*APP_USER_ERRORS, FileNotFoundError, PermissionError, IsADirectoryError)


SAFETY_NOTE = ("Queues marked never_auto (such as a safety queue) are never auto-routed: a person reviews every item "
               "predicted there, every item that gives such a queue a real chance, and every item that mentions "
               "one of its watch words.")


out = Console(highlight=False)


err = Console(stderr=True, highlight=False)


def emit_json(data: Any) -> None:
    sys.stdout.write(json.dumps(data, ensure_ascii=False, default=jsonable) + "\n")


def jsonable(v: Any) -> Any:
    if hasattr(v, "item"):
        return v.item()
    if hasattr(v, "__dict__"):
        return vars(v)
    return str(v)


def progress_bar(enabled: bool) -> tuple[Callable[[str, float], None], Callable[[], None]]:
    """A rich progress bar on stderr fed by the workspace's (stage, fraction) callback."""
    if not enabled:
        return (lambda _s, _f: None), (lambda: None)
    bar = Progress(TextColumn("{task.description:<44}"), BarColumn(), TextColumn("{task.percentage:>3.0f}%"),
                   TimeElapsedColumn(), console=err, transient=True)
    task = bar.add_task("starting", total=1.0)
    bar.start()

    def update(stage: str, frac: float) -> None:
        bar.update(task, description=stage, completed=frac)

    return update, bar.stop


def pct(x: float | None) -> str:
    return "-" if x is None else f"{100 * x:.1f}%"


def open_workspace(args: argparse.Namespace, *, read_only: bool = False) -> Workspace:
    """The workspace; commands that only look open it read-only, so they work on a read-only copy."""
    return Workspace.open(args.workspace, read_only=read_only)
