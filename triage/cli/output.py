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


# the words a support lead reads, one per idea, the same in every command (the README uses them too)
MACRO_F1 = "average F1 with queues equal (macro-F1)"  # the first time in a table or a block of text
AVG_F1 = "average F1"  # every time after that
LOG_ODDS = ("the natural log of how many times likelier one queue is than the other; "
            "+0.69 is twice as likely, +2.3 ten times")
NATS = "nats, the natural-log unit of information; 0 = the two tell nothing about each other"


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


def count(x: float | int | None) -> str:
    """A count as people write it: 814, never 814.0 (counts may arrive as floats from stored JSON)."""
    return "-" if x is None else f"{round(x):,}"


def plain(v: object) -> str:
    """A setting's value in words: "not set" for None, "on"/"off" for booleans, lists without brackets."""
    if v is None:
        return "not set"
    if isinstance(v, bool):
        return "on" if v else "off"
    if isinstance(v, float):
        return f"{v:g}"
    if isinstance(v, list | tuple):
        return ", ".join(plain(x) for x in v) or "none"
    if isinstance(v, dict):
        return ", ".join(f"{k} {plain(x)}" for k, x in v.items()) or "none"
    return str(v)


def open_workspace(args: argparse.Namespace, *, read_only: bool = False) -> Workspace:
    """The workspace; commands that only look open it read-only, so they work on a read-only copy."""
    return Workspace.open(args.workspace, read_only=read_only)
