"""The review desk's work order: what a person looks at first, and why, said in words.

1. Safety-related held items: suggested for a never-auto queue, mentioning one of its watch words, or giving
   a never-auto queue a real chance. The most likely never-auto ones first; the reason reads like
   "mentions 'smok' · safety 14%" (the never-auto queue's probability now).
2. The other held items, closest to a decision first: the smallest distance from the routing confidence to
   the cutoff of its suggested queue (a queue without a cutoff counts from certainty).
3. Only when asked: stored labels the model disagrees with (confidently), most confident first. Accepting one
   relabels history, so the front ends ask first.

Held items come from the stored decisions (`Store.open_held`), never from re-deciding them, so an item stays
until a person decides it or it is routed again.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from enum import StrEnum
from typing import TYPE_CHECKING

import numpy as np

from triage.app.review import ReviewReason, WorkItem, _held_by, worklist
from triage.app.routing import watch_word_hits
from triage.core.routing import HeldBy

if TYPE_CHECKING:
    from triage.app.workspace import Workspace

SCAN_CHUNK = 2000
SAFETY_HOLDS = (HeldBy.NEVER_AUTO, HeldBy.WATCH_WORD, HeldBy.WATCH_PROBABILITY)


class Group(StrEnum):
    """The three parts of the work order, in order."""

    SAFETY = "safety"
    HELD = "held"
    DISAGREES = "label disagrees"


@dataclass(frozen=True)
class WorkEntry:
    """One line of the work order: the item, its group, the reason in words and the sort key within it."""

    item: WorkItem
    group: Group
    why: str
    key: float  # ascending within the group
    never_auto: dict[str, float] = field(default_factory=dict)  # never-auto queue -> its probability now


@dataclass(frozen=True)
class WorkOrder:
    entries: list[WorkEntry]
    to_review: int  # held items waiting for a person (safety included; disagreements are not counted)
    safety: int
    with_disagreements: bool


def _pct(p: float) -> str:
    return f"{100 * p:.0f}%"


def _held_entries(ws: Workspace) -> list[WorkEntry]:
    model, policy = ws.model, ws.policy
    if model is None or policy is None:
        return []
    never = set(ws.config.never_auto()) | set(policy.never_auto)
    never_idx = [(i, q) for i, q in enumerate(model.queues) if q in never]
    out: list[WorkEntry] = []
    offset = 0
    while chunk := ws.store.open_held(limit=SCAN_CHUNK, offset=offset):
        offset += len(chunk)
        recs = {r.item_id: r for r in ws.store.get_items([d.item_id for d in chunk])}
        ordered = [recs[d.item_id] for d in chunk]
        with ws.lock:
            batch = model.encoder.transform([r.fields for r in ordered], allow_missing=True)
            probs = policy.calibrated(model.joint_log_likelihood(batch))
            # as routing reads it: a never-auto queue's chance is the larger of the layer's and the model's own
            if (own := model.watch_probabilities(batch)) is not None:
                probs = np.maximum(probs, own)
        hits = watch_word_hits(ws, ordered) or [[] for _ in ordered]
        for n, d in enumerate(chunk):
            held_by = _held_by(d.held_by)
            chances = {q: float(probs[n, i]) for i, q in never_idx}
            words = [h.split(": ", 1)[-1] for h in hits[n]]
            top_never = max(chances.items(), key=lambda kv: kv[1]) if chances else None
            safety = (held_by in SAFETY_HOLDS or d.suggested in never or bool(words)
                      or (top_never is not None and top_never[1] >= policy.watch_probability))
            item = WorkItem(d.item_id, ReviewReason.PERSON if safety else ReviewReason.HELD, d.suggested or "",
                            d.confidence, d.runner_up, d.runner_up_confidence, None, 0.0, held_by, d.model_version)
            if safety:
                parts = []
                if words:
                    parts.append("mentions " + ", ".join(f"'{w}'" for w in words))
                if top_never is not None:
                    parts.append(f"{top_never[0]} {_pct(top_never[1])}"
                                 + (", never auto-routed" if d.suggested == top_never[0] and not words else ""))
                out.append(WorkEntry(item, Group.SAFETY, " · ".join(parts) or "held by a safety rule",
                                     -(top_never[1] if top_never else 1.0), chances))
                continue
            cut = policy.cutoff(d.suggested) if d.suggested else None
            if cut is None:
                gap = 1.0 - d.confidence
                why = f"no cutoff for {d.suggested} yet; confidence {_pct(d.confidence)}"
            else:
                gap = max(0.0, cut - d.confidence)
                why = f"{100 * gap:.0f} points below the {d.suggested} cutoff ({_pct(d.confidence)} of {_pct(cut)})"
            out.append(WorkEntry(item, Group.HELD, why, gap, chances))
    return out


def work_order(ws: Workspace, disagreements: bool = False, limit: int = 1000) -> WorkOrder:
    """The work order (see the module's docstring); `limit` caps the entries, not the counts."""
    held = _held_entries(ws)
    safety = sorted((e for e in held if e.group is Group.SAFETY), key=lambda e: (e.key, e.item.item_id))
    rest = sorted((e for e in held if e.group is Group.HELD), key=lambda e: (e.key, e.item.item_id))
    entries = safety + rest
    if disagreements:
        mis = [w for w in worklist(ws, limit=10**9) if w.why is ReviewReason.MISROUTE]
        entries += [WorkEntry(w, Group.DISAGREES, f"labelled {w.label}; the model says {w.suggested} "
                              f"{_pct(w.confidence)}", -w.confidence) for w in mis]
    return WorkOrder(entries[:limit], len(held), len(safety), disagreements)
