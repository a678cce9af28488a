"""The active model: loading a version (its artifact plus journaled corrections, replayed exactly), learning a
correction, and committing a new version safely against other processes.

A `train` version has its own artifact folder. A `correction` version is its parent's artifact plus the ordered
list of journaled corrections learned on top of it, replayed on load; this keeps every version without writing
megabytes per correction. Every `SNAPSHOT_EVERY` corrections a full artifact is written so loading stays fast.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any

from triage.app.errors import Conflict, NoModel, UnknownItem
from triage.core.model import NaiveBayes
from triage.core.routing import RoutingPolicy
from triage.store import Correction, ModelVersion
from triage.store.artifacts import load_model, save_model

if TYPE_CHECKING:
    from triage.app.workspace import Workspace

MODELS_DIR = "models"
SNAPSHOT_EVERY = 200


class StaleVersion(Exception):
    """Another process activated a model version while a new one was being committed."""


class _AlreadyApplied(Exception):
    """Another process applied the correction first."""


@dataclass
class ActiveModel:
    """The active model with the routing policy and the item -> queue map it learned."""

    version: ModelVersion
    model: NaiveBayes
    policy: RoutingPolicy
    labels: dict[str, str]
    base_artifact: str
    corrections: list[int] = field(default_factory=list)


def require_model(ws: Workspace) -> ActiveModel:
    if ws._active is None:
        raise NoModel(f"{ws.root}: no model yet; run `triage train` first")
    return ws._active


def artifact_name(fingerprint: str, suffix: str = "") -> str:
    """A new artifact folder name: time-ordered, with the training set's fingerprint."""
    return f"{MODELS_DIR}/m{int(time.time() * 1000):x}-{fingerprint[:8]}{suffix}"


# commit_version's parent for a version that replaces whatever is active (a training run)
ON_CURRENT = object()


def commit_version(ws: Workspace, parent: int | None | object, kind: str, config: dict[str, Any],
                   fingerprint: str, artifact: str, *, scorecard: dict[str, Any] | None, note: str,
                   inside: Callable[[], None] | None = None,
                   after: Callable[[ModelVersion], None] | None = None) -> ModelVersion:
    """The one way a new model version is recorded: inside one write transaction, the version it is built on
    (`parent`) must still be the active one (else `StaleVersion`; `ON_CURRENT` builds on whichever is active);
    `inside` runs first in the same transaction (more checks, or completing `config`), `after` once the
    version exists (journal bookkeeping)."""
    with ws.store.transaction():
        current = ws.store.active_model()
        active_now = current.version if current else None
        if parent is ON_CURRENT:
            parent = active_now
        elif active_now != parent:
            raise StaleVersion
        if inside is not None:
            inside()
        assert parent is None or isinstance(parent, int)
        mv = ws.store.add_model_version(parent, kind, config, fingerprint, artifact, scorecard=scorecard, note=note)
        if after is not None:
            after(mv)
    return mv


def version_config(active: ActiveModel, **updates: Any) -> dict[str, Any]:
    """The stored config of a version derived from `active` (same artifact, its corrections so far)."""
    config = dict(active.version.config)
    config.update({"corrections": list(active.corrections), "base_artifact": active.base_artifact})
    config.update(updates)
    return config


def load_active(ws: Workspace) -> None:
    mv = ws.store.active_model()
    ws._active = load_version(ws, mv) if mv else None


def load_version(ws: Workspace, mv: ModelVersion) -> ActiveModel:
    base = mv.config.get("base_artifact", mv.artifact)
    model, manifest = load_model(ws.root / base)
    extra = manifest.get("extra", {})
    labels = dict(zip(extra.get("trained_ids", []), extra.get("trained_labels", []), strict=True))
    policy = RoutingPolicy.from_dict(mv.config.get("policy", extra.get("policy", {})))
    # the config's never-auto queues always apply, even to a version trained before a queue was marked so
    policy = replace(policy, never_auto=policy.never_auto | ws.config.never_auto())
    active = ActiveModel(mv, model, policy, labels, base, [])
    for cid in mv.config.get("corrections", []):
        learn_correction(ws, active, ws.store.get_correction(cid))
    return active


def learn_correction(ws: Workspace, active: ActiveModel, c: Correction) -> None:
    """Apply one journaled correction to the in-memory model, exactly and idempotently."""
    rec = ws.store.get_item(c.item_id)
    if rec is None:
        raise UnknownItem(f"correction {c.id}: item {c.item_id!r} is not in the store")
    old = active.labels.get(c.item_id)
    new = c.to_queue
    if old == new:
        pass
    elif old is None:
        active.model.learn(rec.fields, new)
    elif new is None:
        active.model.forget(rec.fields, old)
    else:
        active.model.relabel(rec.fields, old, new)
    if new is None:
        active.labels.pop(c.item_id, None)
    else:
        active.labels[c.item_id] = new
    active.corrections.append(c.id)


def commit_correction(ws: Workspace, c: Correction) -> ModelVersion:
    """Learn a journaled correction and record the corrected version, safely against other processes.

    Inside the write transaction the store must still have our parent version active and the correction
    still pending; if another process activated a version meanwhile, the newest one is loaded and the
    correction learned on it instead; if another process already applied it, its version is taken. Any
    failure puts back the parent model, so memory never holds a correction the store lacks."""
    def still_pending() -> None:
        if ws.store.get_correction(c.id).status != "pending":
            raise _AlreadyApplied

    for _attempt in range(5):
        active = require_model(ws)
        parent = active.version
        try:
            learn_correction(ws, active, c)
            mv = commit_version(ws, parent.version, "correction", version_config(active), parent.fingerprint,
                                active.base_artifact, scorecard=parent.scorecard,
                                note=f"correction {c.id}: {c.item_id} -> {c.to_queue}", inside=still_pending,
                                after=lambda v: ws.store.apply_correction(c.id, v.version))
        except StaleVersion:
            load_active(ws)
            continue
        except _AlreadyApplied:
            load_active(ws)
            return require_model(ws).version
        except BaseException:
            ws._active = load_version(ws, parent)
            raise
        active.version = mv
        if len(active.corrections) >= SNAPSHOT_EVERY:
            snapshot(ws, active)
        return active.version
    raise Conflict("the active model kept changing under this correction; it stays journaled and "
                   "is learned the next time the workspace opens")


def snapshot(ws: Workspace, active: ActiveModel) -> None:
    """Write the corrected model as a full artifact so loading does not replay a long journal."""
    fp = active.version.fingerprint
    name = artifact_name(fp, "-s")
    ids, labels = list(active.labels), list(active.labels.values())
    save_model(active.model, ws.root / name, fingerprint=fp,
               extra={"policy": active.policy.to_dict(), "trained_ids": ids, "trained_labels": labels})
    config = dict(active.version.config)
    config.update({"corrections": [], "base_artifact": name})
    try:
        mv = commit_version(ws, active.version.version, "correction", config, fp, name,
                            scorecard=active.version.scorecard, note="snapshot of corrections")
    except StaleVersion:
        return  # another process moved on; its version is loaded at the next refresh, the snapshot is unused
    active.version, active.base_artifact, active.corrections = mv, name, []


def replay_pending(ws: Workspace) -> None:
    """Finish corrections journaled before a crash: they are learned now, none is lost or doubled."""
    pending = ws.store.pending_corrections()
    if not pending:
        return
    if ws._active is None:
        return  # no model yet: they stay journaled and are learned once a model exists and the workspace opens
    with ws.lock:
        for c in pending:
            if ws.store.get_correction(c.id).status == "pending":  # another process may have finished it
                commit_correction(ws, c)
