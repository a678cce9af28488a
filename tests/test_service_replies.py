"""A non-2xx answer means "not done": time limits, a full disk and a locked store leave nothing behind, and an
idempotency key makes a repeated correction return the first outcome.

Statuses as RFC 9110 defines them (503 with Retry-After, section 15.6.4 and 10.2.3) and RFC 4918 section 11.5
(507 Insufficient Storage). The full disk is SQLite's own SQLITE_FULL, produced for real by
`PRAGMA max_page_count` (sqlite.org/pragma.html#pragma_max_page_count: "attempts to grow the database beyond
this limit fail" with SQLITE_FULL), the lock a second connection's BEGIN IMMEDIATE (sqlite.org/lang_transaction.html).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import httpx

from tests.service_support import serving, store_locked_elsewhere
from triage.store import Store


def _journal(root: Path) -> list[Any]:
    with Store.open(root / "triage.db") as store:
        return store.corrections()


def test_a_correction_that_waited_past_its_time_is_not_done(base_dir: Path, tmp_path: Path,
                                                            trained_ids: list[str]) -> None:
    with serving(base_dir, tmp_path, request_timeout_s=0.5) as (url, app, root), \
            httpx.Client(base_url=url, timeout=60) as c:
        ws = app.state.workspace
        label_before = ws.store.get_item(trained_ids[0]).label
        ws.lock.acquire()  # another request holds the workspace, longer than the time limit
        try:
            r = c.post("/v1/corrections", json={"item_id": trained_ids[0], "queue": "billing"})
        finally:
            ws.lock.release()
        assert r.status_code == 503, r.text
        assert r.headers["retry-after"] == "1"
        assert "nothing was done" in r.json()["error"]
        # the worker that served it is gone with it: nothing journaled, now or later
        assert c.get("/v1/model").status_code == 200
        assert _journal(root) == []
        assert ws.store.get_item(trained_ids[0]).label == label_before
        r = c.post("/v1/route", json={"id": "after", "fields": {}})
        assert r.status_code == 200
        assert _journal(root) == []


def test_a_repeated_idempotency_key_returns_the_first_outcome(base_dir: Path, tmp_path: Path,
                                                              trained_ids: list[str]) -> None:
    with serving(base_dir, tmp_path) as (url, app, root), httpx.Client(base_url=url, timeout=60) as c:
        item = trained_ids[3]
        first = c.post("/v1/corrections", json={"item_id": item, "queue": "billing", "by": "dana"},
                       headers={"Idempotency-Key": "k-1"})
        assert first.status_code == 200, first.text
        again = c.post("/v1/corrections", json={"item_id": item, "queue": "billing", "by": "dana"},
                       headers={"Idempotency-Key": "k-1"})
        assert again.status_code == 200
        assert again.json() == first.json()
        assert again.headers.get("idempotent-replayed") == "true"
        journal = _journal(root)
        assert [c.request_key for c in journal] == ["k-1"]
        # a different key is a different correction
        other = c.post("/v1/corrections", json={"item_id": item, "queue": "installation"},
                       headers={"Idempotency-Key": "k-2"})
        assert other.status_code == 200
        assert other.json()["correction_id"] != first.json()["correction_id"]
        assert len(_journal(root)) == 2
        # the key survives a restart: kept in the store, not in memory
    with serving(root, tmp_path / "second") as (url2, _app, root2), \
            httpx.Client(base_url=url2, timeout=60) as c:
        again = c.post("/v1/corrections", json={"item_id": item, "queue": "billing"},
                       headers={"Idempotency-Key": "k-1"})
        assert again.json() == first.json()
        assert len(_journal(root2)) == 2


def test_a_full_disk_is_507_and_nothing_is_journaled(base_dir: Path, tmp_path: Path,
                                                     trained_ids: list[str]) -> None:
    """Corrections go on until the file can grow no more: every 200 is applied, the first 507 left nothing."""
    with serving(base_dir, tmp_path) as (url, app, root), httpx.Client(base_url=url, timeout=60) as c:
        store = app.state.workspace.store
        with store._lock:
            store._conn.execute(f"PRAGMA max_page_count = {store.pragma('page_count')}")
        done: list[dict] = []
        try:
            refused = None
            elsewhere = [i for i in trained_ids if store.get_item(i).label != "billing"]  # billing is refused
            for item in elsewhere[:300]:
                r = c.post("/v1/corrections", json={"item_id": item, "queue": "billing"})
                if r.status_code != 200:
                    refused = (item, r)
                    break
                done.append(r.json())
            assert refused is not None, "the store never filled up"
            item, r = refused
            assert r.status_code == 507, r.text
            assert "disk is full" in r.json()["error"]
            health = c.get("/v1/health").json()
            assert health["status"] == "degraded" and any("full" in p for p in health["problems"])
            big = [{"id": f"full-{i}", "fields": {"body": "word " * 2000}} for i in range(40)]
            r = c.post("/v1/route", json={"items": big})
            assert r.status_code == 507, r.text
            label_before = store.get_item(item).label
        finally:
            with store._lock:
                store._conn.execute("PRAGMA max_page_count = 1073741823")
        journal = _journal(root)
        assert sorted(x.id for x in journal) == sorted(d["correction_id"] for d in done)
        assert all(x.status == "applied" for x in journal)
        assert store.get_item(item).label == label_before
        assert store.get_item("full-0") is None
        r = c.post("/v1/corrections", json={"item_id": item, "queue": "billing"})
        assert r.status_code == 200, r.text
        assert c.get("/v1/health").json()["status"] == "ok"


def test_a_locked_store_is_503_with_retry_after(base_dir: Path, tmp_path: Path,
                                                trained_ids: list[str]) -> None:
    with serving(base_dir, tmp_path) as (url, app, root), httpx.Client(base_url=url, timeout=60) as c:
        with store_locked_elsewhere(app, root):
            r = c.post("/v1/corrections", json={"item_id": trained_ids[6], "queue": "billing"})
        assert r.status_code == 503, r.text
        assert r.headers["retry-after"] == "1"
        assert "locked" in r.json()["error"]
        assert _journal(root) == []
        r = c.post("/v1/corrections", json={"item_id": trained_ids[6], "queue": "billing"})
        assert r.status_code == 200, r.text
