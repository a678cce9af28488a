"""Read models the front ends show: the review worklist, the explanation of one item, the overview."""

from __future__ import annotations

from dataclasses import dataclass, replace
from enum import StrEnum
from typing import TYPE_CHECKING, Any

import numpy as np

from triage.app.active import lost_versions, require_model
from triage.app.errors import UnknownItem
from triage.app.routing import layer_waits, verdicts_for, watch_word_hits
from triage.core.evidence import explain as explain_item
from triage.core.routing import HeldBy, decide

if TYPE_CHECKING:
    from triage.app.workspace import Workspace


REVIEW_LIMIT = 500
# a labelled item is listed as a likely misroute when the model gives another queue at least this calibrated
# confidence (the routing confidence shown everywhere; a rule of thumb, common practice, no source)
MISROUTE_CONFIDENCE = 0.9
SCAN_CHUNK = 2000


class ReviewReason(StrEnum):
    """Why an item is on the review worklist."""

    PERSON = "person must review"  # suggested for a never-auto queue: a person gives it a queue
    MISROUTE = "likely misroute"  # labelled, and a confident model disagrees with the label
    HELD = "held"  # held by its stored decision (below its cutoff, no cutoff, a watch rule)


@dataclass(frozen=True)
class WorkItem:
    """One line of the review worklist."""

    item_id: str
    why: ReviewReason
    suggested: str
    confidence: float
    runner_up: str | None
    runner_up_confidence: float
    label: str | None
    score: float  # higher first
    held_by: HeldBy | None = None  # the stored decision's reason to hold (None for a misroute)
    model_version: int | None = None  # the version that made the stored decision, or the current one


def _held_by(value: str | None) -> HeldBy | None:
    try:
        return HeldBy(value) if value else None
    except ValueError:  # a value a newer version stored: still held, reason unknown here
        return None


def worklist(ws: Workspace, limit: int = REVIEW_LIMIT) -> list[WorkItem]:
    """Held items and likely misroutes, most useful first.

    Held items come from the stored decisions: an unlabelled item whose latest stored decision held it stays
    on the list until a person gives it a queue or it is routed again (and stored), never because the
    current model would decide otherwise. First the items a person must review (suggested for a never-auto
    queue, by the stored decision or by the config now), then labelled items whose label the current model
    contradicts with a routing confidence of at least MISROUTE_CONFIDENCE (highest first), then the other
    held items, closest calls first (runner-up's confidence descending).
    """
    if ws.model is None:
        return []
    never = ws.config.never_auto()
    out: list[WorkItem] = []
    offset = 0
    while chunk := ws.store.open_held(limit=SCAN_CHUNK, offset=offset):
        offset += len(chunk)
        for d in chunk:
            held_by = _held_by(d.held_by)
            person = held_by is HeldBy.NEVER_AUTO or d.suggested in never
            why = ReviewReason.PERSON if person else ReviewReason.HELD
            score = 3.0 + d.confidence if person else d.runner_up_confidence
            out.append(WorkItem(d.item_id, why, d.suggested or "", d.confidence, d.runner_up,
                                d.runner_up_confidence, None, score, held_by, d.model_version))
    labelled = ws.store.labelled_items()
    version = ws.active_version.version if ws.active_version else None
    for rec, v in zip(labelled, verdicts_for(ws, labelled), strict=True):
        if v.suggested != rec.label and v.confidence >= MISROUTE_CONFIDENCE:
            out.append(WorkItem(rec.item_id, ReviewReason.MISROUTE, v.suggested, v.confidence, v.runner_up,
                                v.runner_up_confidence, rec.label, 1.0 + v.confidence, None, version))
    out.sort(key=lambda w: -w.score)
    return out[:limit]


@dataclass(frozen=True)
class IncomingRow:
    """One stored decision of the latest routing run, as the Incoming list shows it."""

    item_id: str
    suggested: str | None
    confidence: float
    held: bool
    runner_up: str | None
    queue: str | None
    held_by: HeldBy | None = None


def incoming_queues(ws: Workspace) -> list[str]:
    """The queues the incoming page can filter by: the active model's (the ones a decision can suggest), or,
    with no model yet, the labelled items'; sorted."""
    return sorted(ws.model.queues if ws.model else ()) or sorted(ws.store.queue_counts())


def incoming(ws: Workspace, queue: str | None = None, held: bool | None = None,
             text: str = "") -> tuple[int | None, list[IncomingRow]]:
    """The latest run's stored decisions (its id, or None when nothing was routed yet), filtered: suggested
    for `queue`, only held (True) or only routed (False), and `text` in any field value (case-folded)."""
    run = ws.store.latest_batch()
    if run is None:
        return None, []
    text = text.strip().casefold()
    rows: list[IncomingRow] = []
    offset = 0
    while chunk := ws.store.decisions(batch_id=run.id, held=held, limit=SCAN_CHUNK, offset=offset):
        offset += len(chunk)
        keep = [d for d in chunk if queue is None or d.suggested == queue]
        if text and keep:
            items = {r.item_id: r for r in ws.store.get_items([d.item_id for d in keep])}
            keep = [d for d in keep if any(text in str(v).casefold() for v in items[d.item_id].fields.values())]
        rows.extend(IncomingRow(d.item_id, d.suggested, d.confidence, d.held, d.runner_up, d.queue,
                                _held_by(d.held_by)) for d in keep)
    return run.id, rows


@dataclass(frozen=True)
class FieldTable:
    """One category or number field of the active model: items per value and queue, and the smoothed
    P(value | queue) the model uses (the unseen bucket last; count columns it never filled are 0)."""

    name: str
    role: str
    values: list[str]
    queues: list[str]
    counts: list[list[int]]  # [queue][value]
    probabilities: list[list[float]]  # [queue][value]
    alpha: float


def field_table(ws: Workspace, k: int) -> FieldTable | None:
    """The k-th value field's table, or None without a model or for an index past the last field."""
    model = ws.model
    if model is None or not 0 <= k < len(model.encoder.schema.value_fields):
        return None
    f = model.encoder.schema.value_fields[k]
    values = model.encoder.field_labels(f)
    counts = model.counts.field_count_[k]
    probs = np.exp(model.field_log_[k])
    return FieldTable(f.name, f.role.value, list(values), list(model.queues),
                      [[int(counts[i, j]) if j < counts.shape[1] else 0 for j in range(len(values))]
                       for i in range(len(model.queues))],
                      [[float(p) for p in probs[i]] for i in range(len(model.queues))], float(model.spec.alpha_fields))


def explain(ws: Workspace, item_id: str, n: int = 10) -> dict[str, Any]:
    """The whole evidence behind the active model's decision on one stored item."""
    with ws.lock:
        active = require_model(ws)
        rec = ws.store.get_item(item_id)
        if rec is None:
            raise UnknownItem(f"{ws.store.path}: no item with id {item_id!r}")
        batch = active.model.encoder.transform([rec.fields], allow_missing=True, keep_unknown=True)
        enc = replace(batch.row(0), unknown_tokens=(batch.unknown or ((),))[0])
        jll = active.model.joint_log_likelihood_one(enc)
        probs = active.policy.calibrated(jll)
        watch = active.model.watch_probabilities(batch)
        verdict = layer_waits(decide(probs, active.model.queues, active.policy, watch_word_hits(ws, [rec]),
                                     watch), active.model)[0]
        ev = explain_item(active.model, enc, verdict.top_index, verdict.runner_up_index)
        version = active.version.version
    return {
        "id": item_id, "label": rec.label, "fields": rec.fields, "queue": verdict.queue,
        "suggested": verdict.suggested, "confidence": verdict.confidence, "held": verdict.held,
        "reason": verdict.reason, "runner_up": verdict.runner_up,
        "runner_up_confidence": verdict.runner_up_confidence, "log_odds_gap": ev.gap,
        "for": [t.to_dict() for t in ev.for_top(n)], "against": [t.to_dict() for t in ev.against_top(n)],
        "terms_total": ev.total(), "n_terms": len(ev.terms), "unseen_words": list(enc.unknown_tokens),
        "temperature": active.policy.temperature, "model_version": version,
        **_stored(ws, item_id, version),
    }


def _stored(ws: Workspace, item_id: str, version: int) -> dict[str, Any]:
    """The item's latest stored decision, and a note when a model version other than the explaining one made
    it (the explanation above is the current model's; the stored decision is what routing did)."""
    d = ws.store.latest_decision(item_id)
    if d is None:
        return {"stored": None, "stored_note": None}
    stored = {"model_version": d.model_version, "queue": d.queue, "suggested": d.suggested,
              "confidence": d.confidence, "held": d.held, "held_by": d.held_by, "reason": d.reason,
              "decided_at": d.decided_at}
    note = None
    if d.model_version != version:
        outcome = f"held ({d.reason or d.held_by or 'reason not stored'})" if d.held else f"routed to {d.queue}"
        note = (f"stored decision: {outcome} by model version {d.model_version}; the evidence shown is "
                f"version {version}'s")
    return {"stored": stored, "stored_note": note}


def _summary(card: dict[str, Any]) -> dict[str, Any]:
    return {k: card.get(k) for k in ("n", "accuracy", "macro_f1", "coverage", "held_share", "auto_precision")}


def overview(ws: Workspace) -> dict[str, Any]:
    """Figures for a dashboard: items, queues, the active version and its scorecard summary, drift."""
    active = ws._active
    since = len(active.corrections) if active is not None else 0
    card = active.version.scorecard if active else None
    run = ws.store.latest_batch()
    return {
        "workspace": str(ws.root), "items": ws.store.count_items(),
        "labelled": ws.store.count_items(labelled=True), "queues": ws.store.queue_counts(),
        "active_version": active.version.version if active else None,
        "text_model": active.model.spec.text_model if active else None,
        "scorecard": _summary(card) if card else None,
        "corrections_since_training": since,
        "never_auto": sorted(ws.config.never_auto()),
        "latest_batch": {"id": run.id, "source": run.source, **run.summary} if run else None,
        # versions whose files are gone, and why the active one is not loaded (None when it is)
        "lost_versions": lost_versions(ws),
        "model_problem": ws.load_problem.message() if ws.load_problem is not None else None,
    }
