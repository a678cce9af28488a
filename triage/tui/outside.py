"""Noticing what another process did to the workspace (the command line, the service, a second terminal UI).

SQLite's `data_version` changes when another connection commits to the database file and stays the same for
this connection's own commits, which the views already hear about by message; the config file's mtime covers
edits of triage.toml. Polling the pair every few seconds is cheap: one pragma and one stat.
"""

from __future__ import annotations

from triage.app import Workspace

POLL_SECONDS = 2.0


def outside_stamp(ws: Workspace) -> tuple[int, int | None]:
    """A value that changes when another process commits to the store or edits the config."""
    return ws.change_stamp()
