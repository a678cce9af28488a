"""The items behind the scorecard's figures (triage.app.drilldown). Reference: the scorecard's own confusion
matrix and per-queue routed and held counts (checked against sklearn.metrics in test_workspace.py), at the
measurement's cutoffs and at what-if ones (`Measurement.rescore`); the gists against the demo CSV as written."""

from __future__ import annotations

import csv

import pytest

from tests.helpers import ROOT, build_demo_workspace
from triage.app import UnknownQueue, Workspace
from triage.app.drilldown import GIST_CHARS, cell, queue_row


@pytest.fixture(scope="module")
def measured(tmp_path_factory: pytest.TempPathFactory):  # noqa: ANN201
    root = build_demo_workspace(tmp_path_factory.mktemp("drill") / "ws", rows=900)
    ws = Workspace.open(root)
    yield ws, ws.evaluate()
    ws.close()


def test_each_cell_holds_the_items_its_count_counts(measured) -> None:  # noqa: ANN001
    ws, meas = measured
    card = meas.scorecard
    seen: list[str] = []
    for i, a in enumerate(card.queues):
        for j, b in enumerate(card.queues):
            items = cell(ws, meas, a, b)
            assert len(items) == card.matrix[i][j], (a, b)
            assert all(x.label == a and x.suggested == b for x in items)
            keys = [(x.held, -x.confidence, x.item_id) for x in items]
            assert keys == sorted(keys)  # auto-routed first, then most confident first
            seen += [x.item_id for x in items]
    assert sorted(seen) == sorted(meas.test_ids)  # every test item is behind exactly one cell
    assert any(card.matrix[i][j] for i in range(len(card.queues)) for j in range(len(card.queues)) if i != j)


@pytest.mark.parametrize("what_if", [None, 0.6], ids=["own-cutoffs", "what-if"])
def test_a_queues_row_lists_its_routed_and_held_items(measured, what_if: float | None) -> None:  # noqa: ANN001
    ws, meas = measured
    cutoffs = None if what_if is None else {q: what_if for q in meas.scorecard.queues}
    card = meas.scorecard if cutoffs is None else meas.rescore(cutoffs)
    for qs in card.per_queue:
        row = queue_row(ws, meas, qs.queue, cutoffs)
        assert (len(row.routed), len(row.held)) == (qs.routed, qs.held), qs.queue
        assert sum(not x.misrouted for x in row.routed) == round(qs.precision * qs.routed)
        assert all(not x.held for x in row.routed) and all(x.held for x in row.held)
        wrong = [x.misrouted for x in row.routed]
        assert wrong == sorted(wrong, reverse=True)  # the wrong ones first
    if what_if is not None:  # a lower cutoff routes more: the lists follow the cutoffs asked for
        assert sum(len(queue_row(ws, meas, q, cutoffs).routed) for q in card.queues) > sum(
            len(queue_row(ws, meas, q).routed) for q in card.queues)


def test_each_item_says_what_it_is_about(measured) -> None:  # noqa: ANN001
    ws, meas = measured
    with (ROOT / "demo_corpus" / "voltwren_tickets.csv").open(newline="", encoding="utf-8") as fh:
        subjects = {r["ticket_id"]: " ".join(r["subject"].split()) for r in csv.DictReader(fh)}
    first = ws.config.schema.text_fields[0].name
    assert first == "subject"
    items = [x for q in meas.scorecard.queues for x in queue_row(ws, meas, q).routed]
    assert items
    for x in items:
        s = subjects[x.item_id]
        assert x.gist == (s if len(s) <= GIST_CHARS else s[:GIST_CHARS - 1] + "…")


def test_a_queue_the_scorecard_lacks_is_refused(measured) -> None:  # noqa: ANN001
    ws, meas = measured
    with pytest.raises(UnknownQueue, match="'biling' is not in the scorecard"):
        cell(ws, meas, "biling", "billing")
    with pytest.raises(UnknownQueue):
        queue_row(ws, meas, "nope")
