"""Read models the front ends show: the explanation of one item, the overview of the workspace."""

from __future__ import annotations

from dataclasses import replace
from typing import TYPE_CHECKING, Any

from triage.app.active import require_model
from triage.app.errors import UnknownItem
from triage.app.routing import watch_word_hits
from triage.core.evidence import explain as explain_item
from triage.core.routing import decide

if TYPE_CHECKING:
    from triage.app.workspace import Workspace


def explain(ws: Workspace, item_id: str, n: int = 10) -> dict[str, Any]:
    """The whole evidence behind the active model's decision on one stored item."""
    with ws._lock:
        active = require_model(ws)
        rec = ws.store.get_item(item_id)
        if rec is None:
            raise UnknownItem(f"{ws.store.path}: no item with id {item_id!r}")
        batch = active.model.encoder.transform([rec.fields], allow_missing=True, keep_unknown=True)
        enc = replace(batch.row(0), unknown_tokens=(batch.unknown or ((),))[0])
        jll = active.model.joint_log_likelihood_one(enc)
        probs = active.policy.calibrated(jll)
        verdict = decide(probs, active.model.queues, active.policy, watch_word_hits(ws, [rec]))[0]
        ev = explain_item(active.model, enc, verdict.top_index, verdict.runner_up_index)
    return {
        "id": item_id, "label": rec.label, "fields": rec.fields, "queue": verdict.queue,
        "suggested": verdict.suggested, "confidence": verdict.confidence, "held": verdict.held,
        "reason": verdict.reason, "runner_up": verdict.runner_up,
        "runner_up_confidence": verdict.runner_up_confidence, "log_odds_gap": ev.gap,
        "for": [t.to_dict() for t in ev.for_top(n)], "against": [t.to_dict() for t in ev.against_top(n)],
        "terms_total": ev.total(), "n_terms": len(ev.terms), "unseen_words": list(enc.unknown_tokens),
        "temperature": active.policy.temperature, "model_version": active.version.version,
    }


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
    }
