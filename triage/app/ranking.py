"""Ranking one queue's items by its score, for sales ops: whom to call first, and how much better than random
the order is (cumulative gains and lift), on the test items whose outcome is known.

It reads a Measurement (the Scorecard's, or `Workspace.evaluate()`), so the figures are on items the model
was not trained on, and nothing is scored twice.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from triage.app.errors import UnknownQueue
from triage.core.measure import Measurement


@dataclass(frozen=True)
class RankedItem:
    """One test item in the ranking: its place (1 = first to call), score, true queue, and the running figures
    for the top `rank` items: share of the queue's items found so far (gain) and how many times the base rate
    the top holds (lift)."""

    rank: int
    item_id: str
    score: float
    label: str
    in_queue: bool
    gain: float
    lift: float


@dataclass(frozen=True)
class Ranking:
    queue: str
    items: list[RankedItem]
    positives: int
    base_rate: float

    def gain_at(self, share: float) -> float:
        """The share of the queue's items in the top `share` of the ranking (0..1)."""
        if not self.items:
            return 0.0
        k = max(1, int(round(share * len(self.items))))
        return self.items[k - 1].gain


def ranking(meas: Measurement, queue: str) -> Ranking:
    """The test items sorted by `queue`'s calibrated probability, highest first (ties by item id)."""
    if queue not in meas.model_queues:
        raise UnknownQueue(f"queue {queue!r} is not one of the model's queues ({', '.join(meas.model_queues)})")
    if meas.test_probs is None or not meas.test_ids:
        return Ranking(queue, [], 0, 0.0)
    scores = meas.test_probs[:, meas.model_queues.index(queue)]
    order = sorted(range(len(scores)), key=lambda i: (-float(scores[i]), meas.test_ids[i]))
    hits = np.array([meas.test_labels[i] == queue for i in order])
    positives = int(hits.sum())
    base = positives / len(order)
    found = np.cumsum(hits)
    items = []
    for r, i in enumerate(order, start=1):
        gain = float(found[r - 1] / positives) if positives else 0.0
        lift = float((found[r - 1] / r) / base) if base else 0.0
        items.append(RankedItem(r, meas.test_ids[i], float(scores[i]), meas.test_labels[i], bool(hits[r - 1]),
                                gain, lift))
    return Ranking(queue, items, positives, base)


@dataclass(frozen=True)
class CellItem:
    """A test item behind a cell of the confusion matrix: truly `label`, suggested `suggested`."""

    item_id: str
    label: str
    suggested: str
    confidence: float


def cell_items(meas: Measurement, label: str | None = None, suggested: str | None = None) -> list[CellItem]:
    """The test items behind a cell (true `label`, suggested `suggested`), or a whole row or column when one is
    None; the misroutes of a queue are cell_items(label=q) plus cell_items(suggested=q) off the diagonal. Most
    confident first: a confident misroute is the costly one."""
    verdicts = meas.verdicts()
    out = [CellItem(i, lab, v.suggested, v.confidence)
           for i, lab, v in zip(meas.test_ids, meas.test_labels, verdicts, strict=True)
           if (label is None or lab == label) and (suggested is None or v.suggested == suggested)]
    return sorted(out, key=lambda c: (-c.confidence, c.item_id))
