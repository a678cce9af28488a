"""The read models front ends show (the review worklist, the incoming page, the field tables) as plain functions
of the application layer, on a real workspace: each is checked against the SQLite file read with plain SQL
(Python's sqlite3 module) or against a pandas cross-tabulation of the labelled items, never against itself."""

from __future__ import annotations

import shutil
import sqlite3
from pathlib import Path

import pandas as pd
import pytest

from tests.helpers import ROOT
from triage.app import HeldBy, Workspace
from triage.app.review import MISROUTE_CONFIDENCE, ReviewReason, field_table, incoming, worklist

INCOMING = 300


@pytest.fixture(scope="module")
def routed(demo_1200: Path, tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A trained workspace (1,200 demo tickets) with one stored run of 300 incoming items."""
    root = tmp_path_factory.mktemp("review") / "ws"
    shutil.copytree(demo_1200, root)
    pd.read_csv(ROOT / "demo_corpus" / "voltwren_incoming.csv").head(INCOMING).to_csv(root / "in.csv", index=False)
    with Workspace.open(root) as ws:
        ws.route_file(root / "in.csv")
    return root


@pytest.fixture
def ws(routed: Path, tmp_path: Path) -> Workspace:
    dst = tmp_path / "ws"
    shutil.copytree(routed, dst)
    w = Workspace.open(dst)
    yield w
    w.close()


def held_by_sql(root: Path) -> set[str]:
    """Reference: unlabelled items whose latest stored decision held them, straight from the SQLite file."""
    with sqlite3.connect(root / "triage.db") as conn:
        rows = conn.execute(
            "SELECT d.item_id FROM decisions d JOIN items i USING (item_id) WHERE i.label IS NULL AND d.held = 1"
            " AND d.id = (SELECT MAX(id) FROM decisions WHERE item_id = d.item_id)").fetchall()
    return {r[0] for r in rows}


def test_the_worklist_lists_exactly_the_stored_held_items(ws: Workspace) -> None:
    items = worklist(ws, limit=10_000)
    held = {w.item_id for w in items if w.why != ReviewReason.MISROUTE}
    assert held and held == held_by_sql(ws.root)
    # person-first order: every never-auto item comes before every other line
    whys = [w.why for w in items]
    n_person = whys.count(ReviewReason.PERSON)
    assert n_person and whys[:n_person] == [ReviewReason.PERSON] * n_person
    # each line carries its stored decision's reason to hold, as the stored row says
    with sqlite3.connect(ws.root / "triage.db") as conn:
        stored = dict(conn.execute("SELECT item_id, held_by FROM decisions").fetchall())
    for w in items:
        if w.why != ReviewReason.MISROUTE:
            assert w.held_by is not None and w.held_by.value == stored[w.item_id]
            if w.why == ReviewReason.PERSON:
                assert w.held_by is HeldBy.NEVER_AUTO or w.suggested in ws.config.never_auto()


def test_a_held_item_stays_until_a_person_decides_or_it_is_routed_again(ws: Workspace) -> None:
    before = {w.item_id for w in worklist(ws, limit=10_000) if w.why == ReviewReason.HELD}
    assert before
    # cutoffs of 0 for every queue that takes one: the current model would now route every such item
    ws.set_cutoffs({q: 0.0 for q in ws.model.queues if q not in ws.policy.never_auto}, scorecard={})
    after = {w.item_id for w in worklist(ws, limit=10_000) if w.why == ReviewReason.HELD}
    assert after == before  # nothing left the list because the model changed
    # a person decides one: it leaves
    first = sorted(before)[0]
    ws.correct(first, "billing")
    assert first not in {w.item_id for w in worklist(ws, limit=10_000) if w.why != ReviewReason.MISROUTE}
    # routing the others again stores new decisions: the ones now routed leave, the ones still held stay
    recs = ws.store.get_items(sorted(before - {first}))
    decisions = ws.route_records(recs, source="again")[0]
    still = {d["id"] for d in decisions if d["held"]}
    now = {w.item_id for w in worklist(ws, limit=10_000) if w.why == ReviewReason.HELD}
    assert now == still & held_by_sql(ws.root)
    assert now != before - {first}  # the re-routed run did route some of them


def test_a_misroute_uses_the_confidence_shown_everywhere(ws: Workspace) -> None:
    misroutes = [w for w in worklist(ws, limit=10_000) if w.why == ReviewReason.MISROUTE]
    assert misroutes
    recs = {r.item_id: r for r in ws.store.labelled_items()}
    shown = {d["id"]: d for d in ws.decide_records([recs[w.item_id] for w in misroutes])}
    for w in misroutes:
        d = shown[w.item_id]
        assert d["suggested"] == w.suggested != recs[w.item_id].label
        assert abs(d["confidence"] - w.confidence) < 1e-6 and w.confidence >= MISROUTE_CONFIDENCE


def test_the_incoming_page_equals_a_query_of_the_stored_run(ws: Workspace) -> None:
    with sqlite3.connect(ws.root / "triage.db") as conn:
        ref = pd.read_sql_query("SELECT d.item_id, d.suggested, d.held, i.fields_json FROM decisions d JOIN items i"
                                " USING (item_id) WHERE d.batch_id = (SELECT MAX(id) FROM batches) ORDER BY d.id",
                                conn)
    run_id, rows = incoming(ws)
    assert run_id is not None and [r.item_id for r in rows] == ref["item_id"].tolist()
    _, held = incoming(ws, held=True)
    assert [r.item_id for r in held] == ref.loc[ref["held"] == 1, "item_id"].tolist()
    _, billing_routed = incoming(ws, queue="billing", held=False)
    pick = (ref["suggested"] == "billing") & (ref["held"] == 0)
    assert [r.item_id for r in billing_routed] == ref.loc[pick, "item_id"].tolist()
    _, found = incoming(ws, text="Battery")
    assert [r.item_id for r in found] == ref.loc[ref["fields_json"].str.lower().str.contains("battery"),
                                                 "item_id"].tolist()


def test_a_field_table_equals_a_crosstab_of_the_labelled_items(ws: Workspace) -> None:
    names = [f.name for f in ws.model.encoder.schema.value_fields]
    k = names.index("channel")
    table = field_table(ws, k)
    assert table is not None and table.name == "channel"
    labelled = pd.DataFrame([{"queue": r.label, "channel": r.fields.get("channel")}
                             for r in ws.store.labelled_items()])
    ref = pd.crosstab(labelled["queue"], labelled["channel"])
    for i, q in enumerate(table.queues):
        for j, value in enumerate(table.values):
            expected = int(ref.loc[q, value]) if value in ref.columns and q in ref.index else 0
            assert table.counts[i][j] == expected, (q, value)
        assert abs(sum(table.probabilities[i]) - 1.0) < 1e-9  # a smoothed distribution over the values
    assert field_table(ws, len(names)) is None


def test_a_stored_decision_keeps_why_it_was_held(ws: Workspace) -> None:
    with sqlite3.connect(ws.root / "triage.db") as conn:
        stored = {r[0]: r[1:] for r in conn.execute("SELECT item_id, held, held_by, reason FROM decisions")}
    again = ws.decide_records(ws.store.get_items(sorted(stored)))  # same model, same items: same decisions
    kinds = set()
    for d in again:
        held, held_by, reason = stored[d["id"]]
        assert (bool(held), held_by, reason) == (d["held"], d["held_by"], d["reason"])
        # the flag derives from held_by: never_auto, watch (a safeguard) or nothing
        expected = {"never_auto": "never_auto", "watch_word": "watch", "watch_probability": "watch"}.get(held_by)
        assert d["flag"] == expected
        kinds.add(held_by)
    assert "never_auto" in kinds and len(kinds) >= 3  # the run holds items for several reasons
