"""The store's records (items' conflicts, corrections, decisions, runs, model versions) and how a row becomes one."""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from datetime import UTC, datetime
from typing import Any

from triage.records import ItemRecord


@dataclass(frozen=True)
class LabelConflict:
    """An import disagreed with what is stored; the stored value was kept.

    kind 'label': `stored`/`incoming` are the queues. kind 'fields': they are the canonical JSON of the fields.
    """

    item_id: str
    stored: str | None
    incoming: str | None
    kind: str


@dataclass(frozen=True)
class ImportSummary:
    """What one import did: new items, items already stored as given, and disagreements (not applied)."""

    added: int
    unchanged: int
    conflicts: list[LabelConflict]


@dataclass(frozen=True)
class Correction:
    """One journal entry: an operator moved `item_id` from `from_queue` to `to_queue`."""

    id: int
    item_id: str
    from_queue: str | None
    to_queue: str | None
    by: str
    at: str
    base_version: int | None
    status: str  # 'pending' | 'applied' | 'undone'
    applied_version: int | None
    undo_of: int | None
    request_key: str | None = None  # the client's idempotency key, when it sent one


@dataclass(frozen=True)
class Decision:
    """One routing decision; `queue` is None when the item is held for review (`suggested` is the top queue).

    `decided_at` and `batch_id` are filled in by `Store.record_batch` when left None.
    """

    item_id: str
    model_version: int | None
    queue: str | None
    suggested: str | None
    confidence: float
    held: bool
    runner_up: str | None = None
    evidence: list[dict[str, Any]] = field(default_factory=list)
    decided_at: str | None = None
    batch_id: int | None = None
    held_by: str | None = None  # why it was held (a HeldBy value); None when routed or stored before it was kept
    reason: str = ""
    runner_up_confidence: float = 0.0


@dataclass(frozen=True)
class Batch:
    """One routing run: where the items came from, when, how many, and its summary figures."""

    id: int
    source: str
    at: str
    n_items: int
    summary: dict[str, Any]


@dataclass(frozen=True)
class ModelVersion:
    """An immutable model snapshot's bookkeeping; the counts themselves live in the `artifact` file."""

    version: int
    parent: int | None
    created_at: str
    kind: str  # 'train' | 'correction' | 'adopt'
    config: dict[str, Any]
    fingerprint: str
    scorecard: dict[str, Any] | None
    artifact: str
    active: bool
    note: str


def utc_now() -> str:
    """Current time as UTC ISO 8601 text with microseconds (sorts as text in time order)."""
    return datetime.now(UTC).isoformat(timespec="microseconds")


def json_default(value: Any) -> Any:
    """Turn array-library scalars (anything with `.item()`) into plain Python numbers for JSON."""
    item = getattr(value, "item", None)
    if callable(item):
        return item()
    raise TypeError(f"cannot store a {type(value).__name__} as JSON")


def dumps(value: Any) -> str:
    """Canonical JSON: sorted keys, so equal dicts give equal text and compare equal in SQL."""
    return json.dumps(value, sort_keys=True, ensure_ascii=False, separators=(",", ":"), default=json_default)





CORRECTION_COLS = (
    "id, item_id, from_queue, to_queue, actor, at, base_version, status, applied_version, undo_of, request_key"
)
DECISION_COLS = ("item_id, model_version, queue, suggested, confidence, held, runner_up, evidence_json, decided_at,"
                  " batch_id, held_by, reason, runner_up_confidence")
VERSION_COLS = (
    "version, parent, created_at, kind, config_json, fingerprint, scorecard_json, artifact, active, note"
)


def item_from_row(row: tuple[Any, ...]) -> ItemRecord:
    item_id, fields_json, label, arrived_at = row
    return ItemRecord(item_id=item_id, fields=json.loads(fields_json), label=label, arrived_at=arrived_at)


def decision_from_row(row: tuple[Any, ...]) -> Decision:
    (item_id, version, queue, suggested, confidence, held, runner_up, evidence, decided_at, batch_id, held_by,
     reason, runner_conf) = row
    return Decision(
        item_id=item_id,
        model_version=version,
        queue=queue,
        suggested=suggested,
        confidence=float(confidence),
        held=bool(held),
        runner_up=runner_up,
        evidence=json.loads(evidence),
        decided_at=decided_at,
        batch_id=batch_id,
        held_by=held_by,
        reason=reason,
        runner_up_confidence=float(runner_conf or 0.0),
    )


def batch_from_row(row: tuple[Any, ...]) -> Batch:
    batch_id, source, at, n_items, summary = row
    return Batch(id=batch_id, source=source, at=at, n_items=int(n_items), summary=json.loads(summary))


def version_from_row(row: tuple[Any, ...]) -> ModelVersion:
    version, parent, created_at, kind, config, fingerprint, scorecard, artifact, active, note = row
    return ModelVersion(
        version=version,
        parent=parent,
        created_at=created_at,
        kind=kind,
        config=json.loads(config),
        fingerprint=fingerprint,
        scorecard=None if scorecard is None else json.loads(scorecard),
        artifact=artifact,
        active=bool(active),
        note=note,
    )
