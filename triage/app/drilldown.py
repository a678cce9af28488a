"""The items behind the scorecard's figures: a cell of the confusion matrix (truly X, suggested Y) and a queue's
row (the test items suggested for it, auto-routed and held), so that a person goes from a number to the items
and corrects them there.

Both read the Measurement the scorecard was made from, under the cutoffs on screen (what-if ones too), so a
list always holds exactly the items its figure counts; the store adds what each item says.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

from triage.app.errors import UnknownQueue
from triage.core.measure import Measurement
from triage.core.routing import Verdict

if TYPE_CHECKING:
    from triage.app.workspace import Workspace

GIST_CHARS = 80


@dataclass(frozen=True)
class MeasuredItem:
    """One test item as the measurement decided it: truly `label`, suggested `suggested` with `confidence`,
    auto-routed or held under the cutoffs asked for (`reason` says why), and the start of its first text field."""

    item_id: str
    label: str
    suggested: str
    confidence: float
    runner_up: str | None
    held: bool
    reason: str
    gist: str

    @property
    def misrouted(self) -> bool:
        """Suggested for another queue than its label (auto-routed: a wrong item; held: a misroute avoided)."""
        return self.label != self.suggested


@dataclass(frozen=True)
class QueueItems:
    """A queue's row of the per-queue table: its test items auto-routed and held (the row's routed and held)."""

    queue: str
    routed: list[MeasuredItem]
    held: list[MeasuredItem]


def _gists(ws: Workspace, ids: list[str]) -> dict[str, str]:
    """The first non-empty text field of each item, on one line, cut to GIST_CHARS."""
    names = [f.name for f in ws.config.schema.text_fields]
    out: dict[str, str] = {}
    for rec in ws.store.get_items_if_any(ids):
        text = next((str(rec.fields[n]) for n in names if rec.fields.get(n)), "")
        text = " ".join(text.split())
        out[rec.item_id] = text if len(text) <= GIST_CHARS else text[:GIST_CHARS - 1] + "…"
    return out


def _measured(ws: Workspace, meas: Measurement, keep: list[tuple[int, Verdict]]) -> list[MeasuredItem]:
    gists = _gists(ws, [meas.test_ids[i] for i, _ in keep])
    return [MeasuredItem(meas.test_ids[i], meas.test_labels[i], v.suggested, v.confidence, v.runner_up, v.held,
                         v.reason, gists.get(meas.test_ids[i], "")) for i, v in keep]


def _check(meas: Measurement, *queues: str) -> None:
    for q in queues:
        if q not in meas.scorecard.queues:
            raise UnknownQueue(f"queue {q!r} is not in the scorecard ({', '.join(meas.scorecard.queues)})")


def _verdicts(meas: Measurement, cutoffs: dict[str, float | None] | None) -> list[tuple[int, Verdict]]:
    return list(enumerate(meas.verdicts(cutoffs))) if meas.test_ids else []


def cell(ws: Workspace, meas: Measurement, label: str, suggested: str,
         cutoffs: dict[str, float | None] | None = None) -> list[MeasuredItem]:
    """The test items behind the matrix cell (truly `label`, suggested `suggested`): as many as the cell counts.
    Auto-routed before held (those reached a queue without a person), then most confident first (a confident
    misroute is the costly one), then by id. `cutoffs` replaces the measurement's (what-if)."""
    _check(meas, label, suggested)
    keep = [(i, v) for i, v in _verdicts(meas, cutoffs) if meas.test_labels[i] == label and v.suggested == suggested]
    items = _measured(ws, meas, keep)
    return sorted(items, key=lambda x: (x.held, -x.confidence, x.item_id))


def queue_row(ws: Workspace, meas: Measurement, queue: str,
              cutoffs: dict[str, float | None] | None = None) -> QueueItems:
    """The test items suggested for `queue`, split as its per-queue row counts them: auto-routed (wrong ones
    first, then most confident first) and held (closest to being routed first)."""
    _check(meas, queue)
    items = _measured(ws, meas, [(i, v) for i, v in _verdicts(meas, cutoffs) if v.suggested == queue])
    routed = sorted((x for x in items if not x.held), key=lambda x: (not x.misrouted, -x.confidence, x.item_id))
    held = sorted((x for x in items if x.held), key=lambda x: (-x.confidence, x.item_id))
    return QueueItems(queue, routed, held)
