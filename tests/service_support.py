"""What the service tests share: a small trained demo workspace, unseen items, and a live server on loopback.

The server is the real one: `triage.service.server_config` (the timeouts, limits and protocol `serve` uses)
run by uvicorn in a thread on a free loopback port.
"""

from __future__ import annotations

import csv
import shutil
import sqlite3
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

import pytest
import uvicorn

from triage.app import Workspace
from triage.service import create_app, server_config

REPO = Path(__file__).resolve().parents[1]
TICKETS = REPO / "demo_corpus" / "voltwren_tickets.csv"
CONFIG = REPO / "configs" / "voltwren.toml"
TRAIN_ROWS = 1500
TOKEN = "a-long-random-test-token-7f3c9e"
NUMBER_FIELDS = ("tenure_days", "open_orders")


# ----------------------------------------------------------------------------------------------------------
# fixtures: the workspace, a live server, items


def _ticket_rows() -> list[dict[str, str]]:
    with TICKETS.open(encoding="utf-8", newline="") as fh:
        return list(csv.DictReader(fh))


@pytest.fixture(scope="session")
def base_dir(tmp_path_factory: pytest.TempPathFactory) -> Path:
    root = tmp_path_factory.mktemp("service-ws")
    shutil.copy(CONFIG, root / "triage.toml")
    rows = _ticket_rows()[:TRAIN_ROWS]
    data = tmp_path_factory.mktemp("service-data") / "tickets.csv"
    with data.open("w", encoding="utf-8", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=list(rows[0]))
        w.writeheader()
        w.writerows(rows)
    with Workspace.open(root) as ws:
        ws.import_file(data)
        ws.train()
    return root


@pytest.fixture(scope="session")
def items() -> list[dict[str, Any]]:
    """Tickets the model never saw, in the service's item shape."""
    out = []
    for r in _ticket_rows()[TRAIN_ROWS:TRAIN_ROWS + 1500]:
        fields = {k: r[k] for k in ("subject", "body", "channel", "product_line", "plan", "region")}
        for k in NUMBER_FIELDS:
            fields[k] = float(r[k]) if r[k] else None
        out.append({"id": r["ticket_id"], "fields": fields, "arrived_at": r["received_at"]})
    return out


@pytest.fixture(scope="session")
def trained_ids() -> list[str]:
    return [r["ticket_id"] for r in _ticket_rows()[:TRAIN_ROWS]]


@contextmanager
def running(app: Any, **server_options: Any) -> Iterator[str]:
    """Run `app` with uvicorn in a thread on a free loopback port; yield its base URL."""
    server = uvicorn.Server(server_config(app, "127.0.0.1", 0, log_level="warning", **server_options))
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 30
    while not server.started:
        if not thread.is_alive() or time.monotonic() > deadline:
            raise RuntimeError("the test server did not start")
        time.sleep(0.01)
    port = server.servers[0].sockets[0].getsockname()[1]
    try:
        yield f"http://127.0.0.1:{port}"
    finally:
        server.should_exit = True
        thread.join(timeout=30)


@contextmanager
def serving(base: Path, dest: Path, server_options: dict[str, Any] | None = None,
            **options: Any) -> Iterator[tuple[str, Any, Path]]:
    """A copy of the base workspace at `dest`, served with `options`: (url, app, folder)."""
    root = dest / "ws"
    shutil.copytree(base, root)
    app = create_app(root, **options)
    with running(app, **(server_options or {})) as url:
        yield url, app, root




@contextmanager
def store_locked_elsewhere(app: Any, root: Path) -> Iterator[None]:
    """While inside, a second connection holds the store's write lock (BEGIN IMMEDIATE takes it at once,
    sqlite.org/lang_transaction.html) and the service's own connection waits only 50 ms for it, so a write the
    service tries fails as SQLite's "database is locked"; the lock is released (rolled back) on leaving."""
    store = app.state.workspace.store
    with store._lock:
        store._conn.execute("PRAGMA busy_timeout = 50")
    other = sqlite3.connect(root / "triage.db", isolation_level=None)
    other.execute("BEGIN IMMEDIATE")
    try:
        yield
    finally:
        other.execute("ROLLBACK")
        other.close()
