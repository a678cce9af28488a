"""Integration tests of the SQLite store, on real database files.

Reference for the pragmas checked here: SQLite's own documentation (pragma.html: journal_mode, foreign_keys,
synchronous, user_version, integrity_check; wal.html) and the Python `sqlite3` module documentation.
"""

from __future__ import annotations

import signal
import sqlite3
import subprocess
import sys
import textwrap
import threading
import time
from pathlib import Path

import pytest

from triage.records import ItemRecord
from triage.store import (
    LATEST_VERSION,
    MIGRATIONS,
    Decision,
    LabelConflict,
    Store,
    StoreError,
    UnknownCorrectionError,
    UnknownItemError,
    UnknownVersionError,
)
from triage.store.opening import migrate

REPO = Path(__file__).resolve().parents[1]


def rec(item_id: str, label: str | None = "billing", text: str = "my invoice is wrong") -> ItemRecord:
    """A small support ticket with text, category and number fields."""
    fields = {"message": text, "channel": "email", "tenure_days": 12.0}
    return ItemRecord(item_id=item_id, fields=fields, label=label)


@pytest.fixture
def store(tmp_path: Path):
    s = Store.open(tmp_path / "triage.db")
    yield s
    s.close()


def raw(path: Path) -> sqlite3.Connection:
    """A plain connection for inspecting the file independently of the Store under test."""
    return sqlite3.connect(path)


# ---------------------------------------------------------------------- opening, pragmas, migrations


def test_pragmas_wal_foreign_keys_full_sync(store: Store) -> None:
    assert store.pragma("journal_mode") == "wal"
    assert store.pragma("foreign_keys") == 1
    assert store.pragma("synchronous") == 2  # FULL
    assert store.pragma("busy_timeout") == 5000
    # WAL is a property of the file: a fresh plain connection sees it too
    with raw(store.path) as conn:
        assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"


def test_foreign_keys_are_enforced(store: Store) -> None:
    with pytest.raises(StoreError, match="FOREIGN KEY"):
        with store.transaction():
            store._write(
                "INSERT INTO labels(item_id, queue, source, actor, at) VALUES ('ghost', 'x', 'imported', 'me', 'now')"
            )
    assert store.count_items() == 0


def test_migrates_an_empty_file_from_version_zero(tmp_path: Path) -> None:
    path = tmp_path / "empty.db"
    path.touch()
    with raw(path) as conn:
        assert conn.execute("PRAGMA user_version").fetchone()[0] == 0
    with Store.open(path) as s:
        assert s.schema_version() == LATEST_VERSION
        assert s.count_items() == 0
    with raw(path) as conn:
        tables = {r[0] for r in conn.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        assert conn.execute("PRAGMA user_version").fetchone()[0] == LATEST_VERSION
    assert {"items", "labels", "corrections", "batches", "decisions", "model_versions"} <= tables


def test_older_db_runs_only_the_missing_migrations_in_order(tmp_path: Path) -> None:
    path = tmp_path / "old.db"
    conn = sqlite3.connect(path, isolation_level=None)
    assert migrate(conn, path, MIGRATIONS[:1]) == 1
    conn.execute(
        "INSERT INTO items(item_id, fields_json, label, arrived_at, source, added_at)"
        " VALUES ('t-1', '{}', 'billing', NULL, 'old.csv', '2026-01-01T00:00:00+00:00')"
    )
    later = [
        *MIGRATIONS[:1],
        "ALTER TABLE items ADD COLUMN priority TEXT; UPDATE items SET priority = 'normal';",
        "CREATE TABLE notes (id INTEGER PRIMARY KEY, body TEXT NOT NULL);",
    ]
    assert migrate(conn, path, later) == 3
    assert conn.execute("PRAGMA user_version").fetchone()[0] == 3
    assert conn.execute("SELECT item_id, priority FROM items").fetchall() == [("t-1", "normal")]
    assert conn.execute("SELECT count(*) FROM notes").fetchone()[0] == 0
    conn.close()


def test_failed_migration_leaves_the_old_version(tmp_path: Path) -> None:
    path = tmp_path / "old.db"
    conn = sqlite3.connect(path, isolation_level=None)
    migrate(conn, path, MIGRATIONS[:1])
    broken = [*MIGRATIONS[:1], "ALTER TABLE items ADD COLUMN extra TEXT; SELECT * FROM no_such_table;"]
    with pytest.raises(StoreError, match="old.db"):
        migrate(conn, path, broken)
    assert conn.execute("PRAGMA user_version").fetchone()[0] == 1
    columns = [r[1] for r in conn.execute("PRAGMA table_info(items)")]
    assert "extra" not in columns
    conn.close()


def test_refuses_a_db_from_a_newer_version(tmp_path: Path) -> None:
    path = tmp_path / "future.db"
    Store.open(path).close()
    with raw(path) as conn:
        conn.execute(f"PRAGMA user_version = {LATEST_VERSION + 4}")
    with pytest.raises(StoreError) as info:
        Store.open(path)
    message = str(info.value)
    assert str(path) in message
    assert f"version {LATEST_VERSION + 4}" in message
    assert f"version {LATEST_VERSION}" in message


def test_not_a_database_is_a_clear_error(tmp_path: Path) -> None:
    path = tmp_path / "notes.db"
    path.write_text("this is a text file, not a database\n" * 50)
    with pytest.raises(StoreError, match="notes.db"):
        Store.open(path)


def test_closed_store_raises(tmp_path: Path) -> None:
    s = Store.open(tmp_path / "t.db")
    s.close()
    with pytest.raises(StoreError, match="closed"):
        s.count_items()


# ---------------------------------------------------------------------- items


def test_import_twice_changes_nothing(store: Store) -> None:
    records = [rec(f"t-{i}", label=("billing" if i % 2 else None)) for i in range(20)]
    first = store.import_items(records, "a.csv")
    assert (first.added, first.unchanged, first.conflicts) == (20, 0, [])
    with raw(store.path) as conn:
        before = conn.execute("SELECT * FROM items ORDER BY item_id").fetchall()
        history_before = conn.execute("SELECT count(*) FROM labels").fetchone()[0]
    second = store.import_items(records, "a.csv")
    assert (second.added, second.unchanged, second.conflicts) == (0, 20, [])
    with raw(store.path) as conn:
        assert conn.execute("SELECT * FROM items ORDER BY item_id").fetchall() == before
        assert conn.execute("SELECT count(*) FROM labels").fetchone()[0] == history_before == 10


def test_conflicting_label_is_reported_and_not_overwritten(store: Store) -> None:
    store.import_items([rec("t-1", "billing"), rec("t-2", None)], "a.csv")
    summary = store.import_items([rec("t-1", "cancellations"), rec("t-2", "billing")], "b.csv")
    assert summary.added == 0 and summary.unchanged == 0
    assert summary.conflicts == [
        LabelConflict("t-1", "billing", "cancellations", "label"),
        LabelConflict("t-2", None, "billing", "label"),
    ]
    assert store.get_item("t-1").label == "billing"
    assert store.get_item("t-2").label is None
    assert [h["queue"] for h in store.label_history("t-1")] == ["billing"]


def test_changed_fields_are_a_fields_conflict(store: Store) -> None:
    store.import_items([rec("t-1", text="battery is swelling")], "a.csv")
    summary = store.import_items([rec("t-1", text="battery is fine")], "b.csv")
    assert len(summary.conflicts) == 1
    conflict = summary.conflicts[0]
    assert conflict.kind == "fields" and conflict.item_id == "t-1"
    assert "swelling" in conflict.stored and "fine" in conflict.incoming
    assert store.get_item("t-1").fields["message"] == "battery is swelling"


def test_unlabelled_record_for_a_known_item_is_unchanged(store: Store) -> None:
    store.import_items([rec("t-1", "billing")], "train.csv")
    summary = store.import_items([rec("t-1", None)], "route.jsonl")
    assert (summary.added, summary.unchanged, summary.conflicts) == (0, 1, [])
    assert store.get_item("t-1").label == "billing"


def test_fields_json_is_canonical_and_keeps_types(store: Store) -> None:
    fields = {"b": 3.0, "a": None, "c": "ünïcode", "d": 7}
    store.import_items([ItemRecord("t-1", fields, "billing")], "a.csv")
    reordered = {"d": 7, "c": "ünïcode", "a": None, "b": 3.0}
    assert store.import_items([ItemRecord("t-1", reordered, "billing")], "b.csv").unchanged == 1
    back = store.get_item("t-1").fields
    assert back == fields
    assert isinstance(back["b"], float) and back["b"] == 3.0
    assert back["a"] is None and isinstance(back["d"], int)


def test_duplicate_ids_inside_one_import(store: Store) -> None:
    summary = store.import_items(
        [rec("t-1", "billing"), rec("t-1", "billing"), rec("t-1", "safety")], "a.csv"
    )
    assert summary.added == 1 and summary.unchanged == 1
    assert summary.conflicts == [LabelConflict("t-1", "billing", "safety", "label")]


def test_item_queries(store: Store) -> None:
    store.import_items(
        [
            ItemRecord("c", {"m": "x"}, "billing", "2026-03-02T10:00:00Z"),
            ItemRecord("a", {"m": "y"}, "safety", None),
            ItemRecord("b", {"m": "z"}, "billing", "2026-03-01T10:00:00Z"),
            ItemRecord("d", {"m": "w"}, None, "2026-01-01T10:00:00Z"),
            ItemRecord("e", {"m": "v"}, "billing", "2026-03-01T10:00:00Z"),
        ],
        "a.csv",
    )
    # an item of unknown age comes first (it is never scored as one of the newest)
    assert [r.item_id for r in store.labelled_items()] == ["a", "b", "e", "c"]
    assert (store.count_items(), store.count_items(True), store.count_items(False)) == (5, 4, 1)
    assert store.queue_counts() == {"billing": 3, "safety": 1}
    assert [r.item_id for r in store.get_items(["e", "a", "e"])] == ["e", "a", "e"]
    assert store.get_item("nope") is None
    with pytest.raises(UnknownItemError, match="nope"):
        store.get_items(["a", "nope"])
    with pytest.raises(UnknownItemError):
        store.label_history("nope")


# ---------------------------------------------------------------------- transactions


def test_transaction_that_raises_halfway_leaves_nothing(store: Store) -> None:
    with pytest.raises(RuntimeError, match="halfway"):
        with store.transaction():
            store.import_items([rec(f"t-{i}") for i in range(100)], "a.csv")
            store.add_model_version(None, "train", {"alpha": 1.0}, "fp", "models/v1.npz")
            store.record_batch("a.csv", [Decision("t-1", 1, "billing", "billing", 0.9, False)], {})
            raise RuntimeError("halfway")
    assert store.count_items() == 0
    assert store.model_versions() == [] and store.batches() == []
    with raw(store.path) as conn:
        assert conn.execute("SELECT count(*) FROM labels").fetchone()[0] == 0


def test_import_whose_input_fails_midway_leaves_nothing(store: Store) -> None:
    def records():
        for i in range(1000):
            if i == 600:
                raise ValueError("row 600 is broken")
            yield rec(f"t-{i}")

    with pytest.raises(ValueError, match="row 600"):
        store.import_items(records(), "a.csv")
    assert store.count_items() == 0
    # the store is still usable afterwards
    assert store.import_items([rec("t-1")], "a.csv").added == 1


def test_nested_transaction_joins_the_outer_one(store: Store) -> None:
    with store.transaction():
        with store.transaction():
            store.import_items([rec("t-1")], "a.csv")
        assert store._conn.in_transaction  # the inner block did not commit
    assert store.count_items() == 1
    with pytest.raises(KeyError):
        with store.transaction():
            with store.transaction():
                store.import_items([rec("t-2")], "a.csv")
            raise KeyError("outer fails")
    assert store.get_item("t-2") is None


# ---------------------------------------------------------------------- corrections journal


def test_correction_round_trip_with_provenance(store: Store) -> None:
    store.import_items([rec("t-1", "billing")], "a.csv")
    c = store.journal_correction("t-1", "cancellations", by="dana", base_version=3)
    assert (c.status, c.from_queue, c.to_queue, c.by, c.base_version) == (
        "pending",
        "billing",
        "cancellations",
        "dana",
        3,
    )
    assert c.at.endswith("+00:00")
    assert store.get_item("t-1").label == "billing"  # journaled only: the label has not moved yet
    assert store.pending_corrections() == [c]

    applied = store.apply_correction(c.id, applied_version=4)
    assert (applied.status, applied.applied_version) == ("applied", 4)
    assert store.get_item("t-1").label == "cancellations"
    assert store.pending_corrections() == []
    history = store.label_history("t-1")
    assert [(h["queue"], h["source"], h["by"], h["previous_queue"], h["correction_id"]) for h in history] == [
        ("billing", "imported", "a.csv", None, None),
        ("cancellations", "corrected", "dana", "billing", c.id),
    ]
    with pytest.raises(StoreError, match="not pending"):
        store.apply_correction(c.id, applied_version=5)


def test_undo_restores_the_previous_label(store: Store) -> None:
    store.import_items([rec("t-1", "billing"), rec("t-2", None)], "a.csv")
    c1 = store.apply_correction(store.journal_correction("t-1", "safety", "dana", 1).id, 2)
    c2 = store.apply_correction(store.journal_correction("t-2", "billing", "lee", 2).id, 3)
    assert store.last_undoable_correction() == c2

    with pytest.raises(StoreError, match="must restore"):
        store.journal_correction("t-2", "safety", "lee", 3, undo_of=c2.id)
    undo2 = store.journal_correction("t-2", None, "lee", 3, undo_of=c2.id)  # t-2 had no label before
    store.apply_correction(undo2.id, 4)
    assert store.get_item("t-2").label is None
    assert store.get_correction(c2.id).status == "undone"
    assert store.last_undoable_correction() == c1

    with pytest.raises(StoreError, match="cannot be undone"):
        store.journal_correction("t-2", None, "lee", 4, undo_of=c2.id)
    with pytest.raises(StoreError, match="itself an undo"):
        store.journal_correction("t-2", "billing", "lee", 4, undo_of=undo2.id)

    store.apply_correction(store.journal_correction("t-1", "billing", "dana", 4, undo_of=c1.id).id, 5)
    assert store.get_item("t-1").label == "billing"
    assert store.last_undoable_correction() is None
    assert [h["queue"] for h in store.label_history("t-1")] == ["billing", "safety", "billing"]


def test_undo_refused_when_the_item_moved_since(store: Store) -> None:
    store.import_items([rec("t-1", "billing")], "a.csv")
    c1 = store.apply_correction(store.journal_correction("t-1", "safety", "dana", 1).id, 2)
    store.apply_correction(store.journal_correction("t-1", "hardware", "lee", 2).id, 3)
    with pytest.raises(StoreError, match="changed after"):
        store.journal_correction("t-1", "billing", "dana", 3, undo_of=c1.id)


def test_journal_rejects_bad_corrections(store: Store) -> None:
    store.import_items([rec("t-1", "billing")], "a.csv")
    with pytest.raises(UnknownItemError, match="ghost"):
        store.journal_correction("ghost", "billing", "dana", 1)
    with pytest.raises(StoreError, match="needs a queue"):
        store.journal_correction("t-1", None, "dana", 1)
    with pytest.raises(UnknownCorrectionError):
        store.apply_correction(999, 1)
    first = store.journal_correction("t-1", "safety", "dana", 1)
    with pytest.raises(StoreError, match="pending correction"):
        store.journal_correction("t-1", "hardware", "lee", 1)
    assert store.pending_corrections() == [first]


def test_pending_corrections_survive_reopening(tmp_path: Path) -> None:
    path = tmp_path / "t.db"
    with Store.open(path) as s:
        s.import_items([rec("t-1", "billing"), rec("t-2", "safety")], "a.csv")
        a = s.journal_correction("t-1", "hardware", "dana", 1)
        b = s.journal_correction("t-2", "billing", "lee", 1)
    with Store.open(path) as s:
        assert s.pending_corrections() == [a, b]
        for c in s.pending_corrections():
            s.apply_correction(c.id, 2)
        assert s.get_item("t-1").label == "hardware" and s.get_item("t-2").label == "billing"
    with Store.open(path) as s:
        assert s.pending_corrections() == []
        assert [c.status for c in s.corrections()] == ["applied", "applied"]


def test_corrections_since_version(store: Store) -> None:
    store.import_items([rec(f"t-{i}") for i in range(3)], "a.csv")
    old = store.apply_correction(store.journal_correction("t-0", "safety", "dana", 1).id, 2)
    mid = store.apply_correction(store.journal_correction("t-1", "safety", "dana", 2).id, 3)
    new = store.journal_correction("t-2", "safety", "dana", 3)
    assert store.corrections() == [old, mid, new]
    assert store.corrections(since_version=2) == [mid, new]
    assert store.corrections(since_version=3) == [new]


# ---------------------------------------------------------------------- decisions


def test_record_batch_and_read_decisions(store: Store) -> None:
    store.import_items([rec(f"t-{i}", None) for i in range(5)], "in.jsonl")
    evidence = [{"term": "invoice", "weight": 1.25}, {"term": "prior", "weight": -0.5}]
    decisions = [
        Decision(
            f"t-{i}",
            1,
            None if i % 2 else "billing",
            "billing",
            0.5 + i / 10,
            bool(i % 2),
            "safety",
            evidence,
        )
        for i in range(5)
    ]
    batch_id = store.record_batch("in.jsonl", decisions, {"routed": 3, "held": 2})
    batch = store.latest_batch()
    assert batch is not None and batch.id == batch_id
    assert (batch.source, batch.n_items, batch.summary) == ("in.jsonl", 5, {"routed": 3, "held": 2})
    held = store.decisions(batch_id=batch_id, held=True)
    assert [d.item_id for d in held] == ["t-1", "t-3"]
    assert all(d.queue is None and d.held for d in held)
    assert [d.item_id for d in store.decisions(held=False)] == ["t-0", "t-2", "t-4"]
    assert [d.item_id for d in store.decisions(limit=2, offset=1)] == ["t-1", "t-2"]
    first = store.decisions()[0]
    assert first.evidence == evidence and first.batch_id == batch_id and first.decided_at == batch.at

    second = store.record_batch("again", [Decision("t-0", 2, "safety", "safety", 0.99, False)], {})
    latest = store.latest_decision("t-0")
    assert latest is not None and (latest.queue, latest.model_version, latest.batch_id) == (
        "safety",
        2,
        second,
    )
    assert store.latest_decision("never-routed") is None
    assert [b.id for b in store.batches()] == [batch_id, second]


# ---------------------------------------------------------------------- model versions


def test_exactly_one_active_model(store: Store) -> None:
    assert store.active_model() is None
    v1 = store.add_model_version(None, "train", {"alpha": 1.0}, "fp1", "models/v1.npz", note="first fit")
    assert (v1.version, v1.active, v1.config, v1.scorecard) == (1, True, {"alpha": 1.0}, None)
    v2 = store.add_model_version(1, "correction", {"alpha": 1.0}, "fp2", "models/v2.npz")
    v3 = store.add_model_version(2, "train", {"alpha": 0.5}, "fp3", "models/v3.npz", activate=False)
    assert store.active_model().version == v2.version
    assert not v3.active

    def active_versions() -> list[int]:
        return [m.version for m in store.model_versions() if m.active]

    assert active_versions() == [2]
    assert store.activate_model(1).active
    assert active_versions() == [1]
    assert store.activate_model(1).version == 1 and active_versions() == [1]
    with pytest.raises(UnknownVersionError, match="99"):
        store.activate_model(99)
    assert active_versions() == [1]
    with pytest.raises(UnknownVersionError):
        store.add_model_version(42, "adopt", {}, "fp", "x.npz")
    with pytest.raises(StoreError, match="kind"):
        store.add_model_version(None, "guess", {}, "fp", "x.npz")
    # the database itself refuses a second active version
    with raw(store.path) as conn, pytest.raises(sqlite3.IntegrityError):
        conn.execute("UPDATE model_versions SET active = 1")


def test_scorecard_round_trip(store: Store) -> None:
    v = store.add_model_version(None, "train", {}, "fp", "v1.npz")
    card = {"accuracy": 0.91, "per_queue": {"billing": {"precision": 0.95, "recall": 0.8}}}
    store.set_scorecard(v.version, card)
    assert store.get_model_version(v.version).scorecard == card
    with pytest.raises(UnknownVersionError):
        store.set_scorecard(7, card)
    with pytest.raises(UnknownVersionError):
        store.get_model_version(7)


# ---------------------------------------------------------------------- concurrency and crashes


def test_two_threads_writing_at_once(tmp_path: Path) -> None:
    path = tmp_path / "t.db"
    shared = Store.open(path)
    other = Store.open(path)  # a second connection, as another process would have
    shared.import_items([rec("seed", "billing")], "seed.csv")
    errors: list[BaseException] = []
    start = threading.Barrier(3)

    def writer(s: Store, prefix: str) -> None:
        try:
            start.wait()
            for n in range(60):
                ids = [f"{prefix}-{n}-{k}" for k in range(10)]
                s.import_items([rec(i) for i in ids], prefix)
                s.record_batch(
                    prefix, [Decision(i, None, "billing", "billing", 0.8, False) for i in ids], {"n": n}
                )
                s.count_items()
        except BaseException as exc:  # collected so the main thread can fail the test
            errors.append(exc)

    threads = [
        threading.Thread(target=writer, args=(shared, "a")),
        threading.Thread(target=writer, args=(shared, "b")),
        threading.Thread(target=writer, args=(other, "c")),
    ]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    other.close()
    assert errors == []
    assert shared.count_items() == 1 + 3 * 60 * 10
    assert len(shared.batches()) == 3 * 60
    assert all(b.n_items == 10 for b in shared.batches())
    assert shared.pragma("integrity_check") == "ok"
    shared.close()


CHILD = textwrap.dedent(
    """
    import sys, time
    from pathlib import Path
    from triage.records import ItemRecord
    from triage.store import Store

    path, n, pause = Path(sys.argv[1]), int(sys.argv[2]), sys.argv[3] == "pause"

    def records():
        for i in range(n):
            if i == n // 2:
                print("halfway", flush=True)
                if pause:
                    time.sleep(120)
            yield ItemRecord(
                f"item-{i:06d}",
                {"message": f"inverter {i} keeps restarting after the update, please advise " * 2,
                 "channel": "email", "open_orders": float(i % 7)},
                label=f"queue-{i % 5}",
                arrived_at=f"2026-02-{1 + i % 28:02d}T08:00:00Z",
            )

    with Store.open(path) as store:
        store.import_items(records(), "big.csv")
    print("done", flush=True)
    """
)

N_BIG = 50_000


def big_records(n: int):
    """The same records the child writes (kept in step with CHILD)."""
    for i in range(n):
        yield ItemRecord(
            f"item-{i:06d}",
            {
                "message": f"inverter {i} keeps restarting after the update, please advise " * 2,
                "channel": "email",
                "open_orders": float(i % 7),
            },
            label=f"queue-{i % 5}",
            arrived_at=f"2026-02-{1 + i % 28:02d}T08:00:00Z",
        )


def kill_child_midway(path: Path, pause: bool, delay: float) -> None:
    proc = subprocess.Popen(
        [sys.executable, "-c", CHILD, str(path), str(N_BIG), "pause" if pause else "run"],
        cwd=REPO,
        stdout=subprocess.PIPE,
        text=True,
    )
    try:
        assert proc.stdout is not None
        assert proc.stdout.readline().strip() == "halfway"
        time.sleep(delay)
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait()
    assert proc.returncode == -signal.SIGKILL


def check_after_kill(path: Path) -> int:
    with Store.open(path) as s:
        assert s.pragma("integrity_check") == "ok"
        n = s.count_items()
        assert n in (0, N_BIG)
        with raw(path) as conn:
            assert conn.execute("SELECT count(*) FROM labels").fetchone()[0] == n
        summary = s.import_items(big_records(N_BIG), "big.csv")
        assert (summary.added, summary.unchanged, summary.conflicts) == (N_BIG - n, n, [])
        assert s.count_items() == N_BIG
        assert s.queue_counts() == {f"queue-{q}": N_BIG // 5 for q in range(5)}
        with raw(path) as conn:
            assert conn.execute("SELECT count(*) FROM labels").fetchone()[0] == N_BIG
            assert conn.execute("SELECT count(DISTINCT item_id) FROM labels").fetchone()[0] == N_BIG
        assert s.pragma("integrity_check") == "ok"
    return n


def test_sigkill_in_the_middle_of_an_import(tmp_path: Path) -> None:
    path = tmp_path / "t.db"
    Store.open(path).close()
    kill_child_midway(path, pause=True, delay=0.2)
    # half the rows were written but never committed: the uncommitted pages spilled into the WAL file
    wal = path.with_name(path.name + "-wal")
    assert wal.exists() and wal.stat().st_size > 1_000_000
    assert check_after_kill(path) == 0


def test_sigkill_at_an_unplanned_moment_of_an_import(tmp_path: Path) -> None:
    path = tmp_path / "t.db"
    Store.open(path).close()
    kill_child_midway(path, pause=False, delay=0.15)
    check_after_kill(path)  # either none or all of the import, and re-running it completes without duplicates


def test_store_imports_no_numerics_or_front_ends() -> None:
    script = (
        "import sys, triage.store; "
        "bad = [m for m in sys.modules if m.split('.')[0] in ('numpy', 'textual') "
        "or m in ('triage.cli', 'triage.service') or m.startswith('triage.tui')]; "
        "print(','.join(bad))"
    )
    out = subprocess.run([sys.executable, "-c", script], cwd=REPO, capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""


def test_a_non_durable_transaction_commits_and_restores_full_sync(tmp_path: Path) -> None:
    """SQLite documents synchronous=NORMAL as crash-safe in WAL mode (sqlite.org/pragma.html#pragma_synchronous);
    the store uses it only inside `transaction(durable=False)` and returns to FULL (2) afterwards."""
    with Store.open(tmp_path / "t.db") as store:
        with store.transaction(durable=False):
            assert store.pragma("synchronous") == 1
            store.import_items([ItemRecord("n1", {"body": "x"}, "billing", None)], source="test")
        assert store.pragma("synchronous") == 2
        assert store.count_items() == 1
        with pytest.raises(RuntimeError), store.transaction(durable=False):
            store.import_items([ItemRecord("n2", {"body": "y"}, "billing", None)], source="test")
            raise RuntimeError("boom")
        assert store.pragma("synchronous") == 2
        assert store.get_item("n2") is None
