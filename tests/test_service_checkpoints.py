"""The service checkpoints the store's write-ahead log on a thread of its own, never inside a route's commit.

What a checkpoint is, and that the main database file holds only checkpointed pages while newer commits live in
the -wal file: sqlite.org/wal.html ("Checkpointing"); `wal_autocheckpoint` (0 turns the automatic one off) and
`wal_checkpoint(PASSIVE)`: sqlite.org/pragma.html. A copy of the main file alone therefore shows exactly what
has been checkpointed.
"""

from __future__ import annotations

import shutil
import sqlite3
from pathlib import Path
from typing import Any

import httpx

from tests.service_support import serving
from triage.records import ItemRecord
from triage.store import Store
from triage.store.checkpoints import DEFAULT_PAGES, BackgroundCheckpoints


def _rows_checkpointed(db: Path, table: str, scratch: Path) -> int:
    """Rows of `table` in the main database file alone (its -wal file left behind): the checkpointed ones."""
    copy = scratch / "main-file-only.db"
    copy.unlink(missing_ok=True)
    shutil.copy(db, copy)
    conn = sqlite3.connect(copy)
    try:
        return int(conn.execute(f"SELECT count(*) FROM {table}").fetchone()[0])
    except sqlite3.OperationalError:  # the table itself is still only in the log
        return 0
    finally:
        conn.close()


def test_commits_wait_for_no_checkpoint_and_stop_checkpoints_everything(tmp_path: Path) -> None:
    store = Store.open(tmp_path / "s.db")
    checkpoints = BackgroundCheckpoints(store, interval_s=3600.0)  # its thread never gets to run one here
    try:
        assert store.pragma("wal_autocheckpoint") == 0
        store.import_items([ItemRecord(f"i{n}", {"subject": "x" * 200}, None, None) for n in range(300)],
                           source="test")
        # committed (this connection sees them) but not copied into the main file: no commit checkpointed
        assert len(store.get_items_if_any([f"i{n}" for n in range(300)])) == 300
        assert _rows_checkpointed(tmp_path / "s.db", "items", tmp_path) == 0
    finally:
        checkpoints.stop()
    assert store.pragma("wal_autocheckpoint") == DEFAULT_PAGES
    assert _rows_checkpointed(tmp_path / "s.db", "items", tmp_path) == 300
    checkpoints.stop()  # a second stop is harmless
    store.close()


def test_the_service_checkpoints_apart_and_keeps_every_routed_item(base_dir: Path, tmp_path: Path,
                                                                   items: list[dict[str, Any]]) -> None:
    with serving(base_dir, tmp_path) as (url, app, root):
        assert app.state.workspace.store.pragma("wal_autocheckpoint") == 0
        with httpx.Client(base_url=url, timeout=30) as c:
            for item in items[:20]:
                assert c.post("/v1/route", json=item).status_code == 200
    # the server has shut down: its last checkpoint copied the log into the main file
    conn = sqlite3.connect(root / "triage.db")
    stored = {r[0] for r in conn.execute("SELECT item_id FROM decisions")}
    conn.close()
    assert {i["id"] for i in items[:20]} <= stored
    assert _rows_checkpointed(root / "triage.db", "decisions", tmp_path) == len(stored) > 0
