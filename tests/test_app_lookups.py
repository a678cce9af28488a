"""The look-ups front ends make through the application layer instead of the store: one item, the known
queues, the kept replies to idempotent corrections, the corrections a model version lacks, the change stamp.

Each is checked against the SQLite file read with plain SQL (Python's sqlite3 module), against the sequence of
events the test itself made, or against SQLite's documented `PRAGMA data_version` rule
(https://www.sqlite.org/pragma.html#pragma_data_version: the value changes when another connection commits,
never for this connection's own commits) and the file's `os.stat` time, never against the function itself."""

from __future__ import annotations

import os
import shutil
import sqlite3
from pathlib import Path

import pandas as pd
import pytest

from tests.helpers import ROOT, pinned_voltwren_config
from triage.app import Workspace


@pytest.fixture
def ws(demo_1200: Path, tmp_path: Path) -> Workspace:
    dst = tmp_path / "ws"
    shutil.copytree(demo_1200, dst)
    w = Workspace.open(dst)
    yield w
    w.close()


def sql(root: Path, query: str, params: tuple[object, ...] = ()) -> list[tuple[object, ...]]:
    with sqlite3.connect(root / "triage.db") as conn:
        return conn.execute(query, params).fetchall()


def item_and_another_queue(ws: Workspace) -> tuple[str, str]:
    """A stored item and a queue of the model other than its label."""
    item_id, label = sql(ws.root, "SELECT item_id, label FROM items ORDER BY item_id LIMIT 1")[0]
    other = next(q for q in ws.model.queues if q != label)
    return str(item_id), other


def test_item_is_the_stored_row_or_none(ws: Workspace) -> None:
    item_id, label, arrived = sql(ws.root, "SELECT item_id, label, arrived_at FROM items ORDER BY item_id DESC"
                                           " LIMIT 1")[0]
    found = ws.item(str(item_id))
    assert found is not None and (found.item_id, found.label, found.arrived_at) == (item_id, label, arrived)
    assert ws.item("no-such-item") is None


def test_known_queues_add_the_labelled_queues_the_model_lacks(ws: Workspace, tmp_path: Path) -> None:
    row = pd.read_csv(ROOT / "demo_corpus" / "voltwren_tickets.csv").tail(1).assign(
        ticket_id="NEW-1", queue="warranty_claims")
    row.to_csv(tmp_path / "new.csv", index=False)
    ws.import_file(tmp_path / "new.csv")
    stored = {str(q) for (q,) in sql(ws.root, "SELECT DISTINCT label FROM items WHERE label IS NOT NULL")}
    assert "warranty_claims" in stored and "warranty_claims" not in ws.model.queues
    assert ws.known_queues() == stored | set(ws.model.queues)
    # the incoming page filters by what a decision can suggest: the model's queues only
    assert ws.incoming_queues() == sorted(ws.model.queues)


def test_without_a_model_the_incoming_queues_are_the_labelled_ones(tmp_path: Path) -> None:
    root = tmp_path / "fresh"
    root.mkdir()
    (root / "triage.toml").write_text(pinned_voltwren_config(), encoding="utf-8")
    pd.read_csv(ROOT / "demo_corpus" / "voltwren_tickets.csv").head(60).to_csv(root / "t.csv", index=False)
    with Workspace.open(root) as w:
        w.import_file(root / "t.csv")
        assert w.model is None
        stored = sorted(str(q) for (q,) in sql(root, "SELECT DISTINCT label FROM items WHERE label IS NOT NULL"))
        assert stored and w.incoming_queues() == stored and w.known_queues() == set(stored)


def test_the_first_reply_kept_for_a_key_is_the_one_given_back(ws: Workspace) -> None:
    item_id, queue = item_and_another_queue(ws)
    assert ws.reply_for("key-1") is None
    c = ws.correct(item_id, queue, by="tester", request_key="key-1").correction
    ws.save_reply("key-1", c.id, '{"first": true}')
    ws.save_reply("key-1", c.id, '{"second": true}')
    assert ws.reply_for("key-1") == '{"first": true}'
    assert sql(ws.root, "SELECT correction_id, reply_json FROM replies WHERE request_key = ?", ("key-1",)) == [
        (c.id, '{"first": true}')]
    assert ws.reply_for("key-2") is None


def test_corrections_missing_from_a_version_are_those_made_after_it(ws: Workspace) -> None:
    start = ws.active_version.version
    ids = [str(i) for (i,) in sql(ws.root, "SELECT item_id FROM items ORDER BY item_id LIMIT 2")]
    first = ws.correct(ids[0], next(q for q in ws.model.queues if q != ws.item(ids[0]).label), by="a")
    second = ws.correct(ids[1], next(q for q in ws.model.queues if q != ws.item(ids[1]).label), by="b")
    assert [c.id for c in ws.corrections_missing_from(start)] == [first.correction.id, second.correction.id]
    assert [c.id for c in ws.corrections_missing_from(first.version.version)] == [second.correction.id]
    assert ws.corrections_missing_from(second.version.version) == []
    ws.undo(by="c")  # the second is no longer in effect, and the undo itself is never listed
    assert [c.id for c in ws.corrections_missing_from(start)] == [first.correction.id]
    assert ws.corrections_missing_from(first.version.version) == []


def test_the_change_stamp_moves_for_other_writers_and_config_edits_only(ws: Workspace) -> None:
    before = ws.change_stamp()
    item_id, queue = item_and_another_queue(ws)
    ws.correct(item_id, queue, by="this connection")
    assert ws.change_stamp()[0] == before[0]  # our own commits leave data_version alone
    with Workspace.open(ws.root) as other:
        other.undo(by="another connection")
    assert ws.change_stamp()[0] != before[0]
    config = ws.root / "triage.toml"
    os.utime(config, ns=(config.stat().st_atime_ns, config.stat().st_mtime_ns + 5_000_000_000))
    assert ws.change_stamp()[1] == config.stat().st_mtime_ns != before[1]
