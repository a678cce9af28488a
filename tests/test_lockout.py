"""No lock-out and no lost correction: a damaged or deleted model never stops rollback, train or the service;
training reads labels and journal from one snapshot; replay is safe from any process; a one-item new queue is
never suggested over an established one.

The snapshot rule is SQLite's own (sqlite.org/isolation.html: in WAL mode "a read transaction ... sees a
consistent snapshot of the database as it existed when the read transaction started"). The counts check is the
model's definition (DESIGN: after any learns and forgets the model equals a fresh fit on the final labels).
"""

from __future__ import annotations

import json
import shutil
import sqlite3
import subprocess
import sys
from pathlib import Path

import httpx
import pytest

from tests.helpers import build_demo_workspace, copy_workspace
from tests.service_support import running
from triage.app import NoModel, Workspace
from triage.app.active import commit_correction
from triage.app.routing import HELD_YOUNG, MIN_QUEUE_ITEMS
from triage.service import create_app
from triage.store import Store


@pytest.fixture(scope="module")
def two_versions(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A workspace trained twice: version 1 and version 2 (active), each with its own artifact folder."""
    root = build_demo_workspace(tmp_path_factory.mktemp("lockout") / "ws", rows=400)
    with Workspace.open(root) as ws:
        ws.train(note="second")
    return root


def _artifact(root: Path, version: int) -> Path:
    with Store.open(root / "triage.db") as store:
        mv = store.get_model_version(version)
    return root / mv.config.get("base_artifact", mv.artifact)


def _counts_match_labels(ws: Workspace) -> bool:
    counts = dict(zip(ws.model.queues, ws.model.counts.class_count_.tolist(), strict=True))
    return {q: int(n) for q, n in counts.items() if n} == ws.store.queue_counts()


@pytest.mark.parametrize("damage", ["delete", "corrupt"])
def test_a_damaged_active_model_locks_nobody_out(two_versions: Path, tmp_path: Path, damage: str) -> None:
    root = copy_workspace(two_versions, tmp_path)
    folder = _artifact(root, 2)
    if damage == "delete":
        shutil.rmtree(folder)
    else:
        (folder / "arrays.npz").write_bytes(b"PK\x03\x04 not the arrays any more")
    with Workspace.open(root) as ws:  # opening works
        assert ws.active_version is None and ws.load_problem is not None and ws.load_problem.version == 2
        with pytest.raises(NoModel, match="version 2 cannot be loaded"):
            ws.decide_records(ws.store.labelled_items()[:1])
        view = ws.overview()
        assert view["model_problem"] is not None and "models activate" in view["model_problem"]
        assert view["lost_versions"] == ([2] if damage == "delete" else [])
        assert ws.activate(1).version == 1  # the rollback works
        assert ws.load_problem is None and ws.active_version.version == 1
    r = subprocess.run([sys.executable, "-m", "triage", "models", "activate", "2", "-w", str(root)],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 2 and "Traceback" not in r.stderr  # refused in one line: version 2 is damaged
    r = subprocess.run([sys.executable, "-m", "triage", "train", "-w", str(root)], capture_output=True, text=True,
                       timeout=300)
    assert r.returncode == 0, r.stderr


def test_a_deleted_models_folder_does_not_block_train(two_versions: Path, tmp_path: Path) -> None:
    root = copy_workspace(two_versions, tmp_path)
    shutil.rmtree(root / "models")
    r = subprocess.run([sys.executable, "-m", "triage", "overview", "--json", "-w", str(root)],
                       capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    assert json.loads(r.stdout)["lost_versions"] == [1, 2]
    r = subprocess.run([sys.executable, "-m", "triage", "train", "-w", str(root)], capture_output=True, text=True,
                       timeout=300)
    assert r.returncode == 0, r.stderr
    with Workspace.open(root) as ws:
        assert ws.active_version.version == 3 and ws.load_problem is None


def test_the_service_serves_the_last_good_version_and_says_degraded(two_versions: Path, tmp_path: Path) -> None:
    root = copy_workspace(two_versions, tmp_path)
    shutil.rmtree(_artifact(root, 2))
    with running(create_app(root)) as url, httpx.Client(base_url=url, timeout=30) as c:
        h = c.get("/v1/health").json()
        assert (h["status"], h["model_version"]) == ("degraded", 1)
        assert any("version 2 cannot be loaded" in p for p in h["problems"])
        r = c.post("/v1/route", json={"id": "after-damage", "fields": {"subject": "invoice wrong"}})
        assert r.status_code == 200 and r.json()["decision"]["model_version"] == 1
        item = Store.open(root / "triage.db").labelled_items()[0].item_id
        r = c.post("/v1/corrections", json={"item_id": item, "queue": "billing"})
        assert r.status_code == 409  # not built on a stand-in; nothing journaled
        assert "cannot be loaded" in r.json()["error"]
        with Workspace.open(root) as other:  # a rollback by another process is picked up: healthy again
            other.activate(1)
        assert c.get("/v1/model").json()["model_version"] == 1
        assert c.get("/v1/health").json()["status"] == "ok"


def test_the_labels_and_the_journal_are_read_from_one_snapshot(two_versions: Path, tmp_path: Path) -> None:
    root = copy_workspace(two_versions, tmp_path)
    with Store.open(root / "triage.db") as store, Workspace.open(root) as writer:
        item = store.labelled_items()[0]
        target = next(q for q in writer.model.queues if q != item.label)
        with store.reading():
            before = {r.item_id: r.label for r in store.labelled_items()}
            writer.correct(item.item_id, target, "other process")  # commits between the two reads
            journal = store.corrections()
        assert before[item.item_id] == item.label
        assert journal == []  # the same snapshot: neither the label nor the journal entry, so train replays it
        assert store.get_item(item.item_id).label == target  # outside the snapshot the commit is there


def test_replay_from_another_process_is_safe(two_versions: Path, tmp_path: Path) -> None:
    """A correction journaled by one process and finished by another (which opened in between): the first
    process's commit takes the finished version, nothing doubled, nothing failed."""
    root = copy_workspace(two_versions, tmp_path)
    with Workspace.open(root) as first:
        rec = first.store.labelled_items()[1]
        target = next(q for q in first.model.queues if q != rec.label)
        c = first.store.journal_correction(rec.item_id, target, "first", first.active_version.version)
        with Workspace.open(root) as second:  # opens while the correction is pending: it finishes it
            assert second.store.get_correction(c.id).status == "applied"
            assert _counts_match_labels(second)
        mv = commit_correction(first, c)  # the journaling process goes on: no error, no second application
        assert first.store.get_correction(c.id).status == "applied"
        assert mv.version == first.active_version.version
        assert _counts_match_labels(first)
        assert len(first.store.corrections()) == 1


def test_a_one_item_new_queue_is_never_suggested_over_established_ones(two_versions: Path, tmp_path: Path) -> None:
    root = copy_workspace(two_versions, tmp_path)
    with Workspace.open(root) as ws:
        blank = ws.store.labelled_items()[:1]
        empty = {k: None for k in blank[0].fields}
        ws.route_records([type(blank[0])("blank-1", empty, None, None)], "test")
        ws.correct("blank-1", "warranty", "tester", new_queue=True)
        assert "warranty" in ws.model.queues
        sparse = [type(blank[0])(f"sparse-{i}", {**empty, "subject": s}, None, None)
                  for i, s in enumerate(["help", "question", "hello", "urgent", "call me", "", "status", "?"])]
        decisions = ws.decide_records(sparse)
    assert all(d["suggested"] != "warranty" for d in decisions)
    young = [d for d in decisions if d["runner_up"] == "warranty"]
    assert young, "the sparse items favour the new queue, as its one all-missing item makes them"
    for d in young:
        assert d["held"] and d["queue"] is None
        if d["held_by"] in ("watch_word", "watch_probability"):  # a safety hold keeps its own reason
            assert d["flag"] == "watch"
            continue
        assert d["reason"].startswith(HELD_YOUNG) and str(MIN_QUEUE_ITEMS) in d["reason"]


def test_the_store_refuses_a_write_inside_a_read_snapshot(tmp_path: Path) -> None:
    with Store.open(tmp_path / "triage.db") as store, store.reading():
        with pytest.raises(Exception, match="inside a read transaction"):
            with store.transaction():
                pass
    with sqlite3.connect(tmp_path / "triage.db") as conn:
        assert conn.execute("PRAGMA user_version").fetchone()[0] >= 2
