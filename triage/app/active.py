"""The active model: loading a version (its artifact plus journaled corrections, replayed exactly), learning a
correction, and committing a new version safely against other processes.

A `train` version has its own artifact folder. A `correction` version is its parent's artifact plus the ordered
list of journaled corrections learned on top of it, replayed on load; this keeps every version without writing
megabytes per correction. Every `SNAPSHOT_EVERY` corrections a full artifact is written so loading stays fast.
"""

from __future__ import annotations

import logging
import time
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import TYPE_CHECKING, Any

from triage.app.errors import Conflict, NoModel, UnknownItem, WorkspaceError
from triage.core.counts import CountError
from triage.core.model import NaiveBayes
from triage.core.routing import RoutingPolicy
from triage.store import Correction, ModelVersion, StoreError
from triage.store.artifacts import ArtifactError, clean_models_dir, load_model, save_model

log = logging.getLogger(__name__)

if TYPE_CHECKING:
    from triage.app.workspace import Workspace

MODELS_DIR = "models"
SNAPSHOT_EVERY = 200
COMMIT_ATTEMPTS = 20  # another process may commit versions quickly (a busy service): retry, with a short wait
# what can go wrong loading a stored version: its files lost or damaged, a journal entry that does not replay
LOAD_ERRORS = (ArtifactError, StoreError, WorkspaceError, CountError, ValueError, OSError)


@dataclass(frozen=True)
class LoadProblem:
    """The store's active version cannot be loaded; `serving` is the version loaded instead (None: none)."""

    version: int
    why: str
    serving: int | None

    def message(self) -> str:
        instead = f"version {self.serving} is served instead" if self.serving is not None else "no model is loaded"
        return (f"the active model version {self.version} cannot be loaded ({self.why}); {instead}. Roll back "
                "with `triage models activate N` or run `triage train`")


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
        if ws.load_problem is not None:
            raise NoModel(f"{ws.root}: {ws.load_problem.message()}")
        raise NoModel(f"{ws.root}: no model yet; run `triage train` first")
    return ws._active


def require_writable_model(ws: Workspace) -> ActiveModel:
    """The active model, for a change that builds a new version on it: refused while the store's active
    version cannot be loaded (a version built on a stand-in would silently drop the broken one)."""
    if ws.load_problem is not None:
        raise Conflict(f"{ws.root}: {ws.load_problem.message()}; nothing was changed")
    return require_model(ws)


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
        if parent is not ON_CURRENT and active_now != parent:
            raise StaleVersion
        if inside is not None:
            inside()
        # the new version's parent is the active one in both cases (asked for by name, or whichever is active)
        mv = ws.store.add_model_version(active_now, kind, config, fingerprint, artifact, scorecard=scorecard, note=note)
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
    """Load the store's active version. One whose files are lost or damaged never locks anyone out: the
    problem is kept in `ws.load_problem` (commands that need the model say it; rollback and train work), and
    with `ws.serve_last_good` the newest other version that loads is served in its place (the service)."""
    mv = ws.store.active_model()
    ws.load_problem = None
    if mv is None:
        ws._active = None
        return
    try:
        ws._active = load_version(ws, mv)
        return
    except LOAD_ERRORS as exc:
        why = str(exc).replace(f"{ws.root}/", "")
        log.error("model version %d cannot be loaded: %s", mv.version, why)
    ws._active = None
    if ws.serve_last_good:
        for other in sorted(ws.store.model_versions(), key=lambda v: v.version, reverse=True):
            if other.version == mv.version:
                continue
            try:
                ws._active = load_version(ws, other)
                break
            except LOAD_ERRORS:
                continue
    ws.load_problem = LoadProblem(mv.version, why, ws._active.version.version if ws._active else None)


def lost_versions(ws: Workspace) -> list[int]:
    """Versions whose artifact folder is gone (deleted or never finished): they cannot be loaded."""
    return [mv.version for mv in ws.store.model_versions()
            if not (ws.root / mv.config.get("base_artifact", mv.artifact) / "manifest.json").exists()]


def clean_models(ws: Workspace) -> None:
    """Remove old temporary folders of interrupted saves and model folders no version names."""
    referenced = {Path(mv.config.get("base_artifact", mv.artifact)).name for mv in ws.store.model_versions()}
    referenced |= {Path(mv.artifact).name for mv in ws.store.model_versions()}
    for gone in clean_models_dir(ws.root / MODELS_DIR, referenced):
        log.info("removed %s (an interrupted save or a model no version names)", gone)


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

    for attempt in range(COMMIT_ATTEMPTS):
        active = require_writable_model(ws)
        parent = active.version
        try:
            learn_correction(ws, active, c)
            mv = commit_version(ws, parent.version, "correction", version_config(active), parent.fingerprint,
                                active.base_artifact, scorecard=parent.scorecard,
                                note=f"correction {c.id}: {c.item_id} -> {c.to_queue}", inside=still_pending,
                                after=lambda v: ws.store.apply_correction(c.id, v.version))
        except StaleVersion:
            time.sleep(0.005 * attempt)
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
    try:
        save_model(active.model, ws.root / name, fingerprint=fp,
                   extra={"policy": active.policy.to_dict(), "trained_ids": ids, "trained_labels": labels})
    except ArtifactError as exc:  # e.g. a full disk: the correction is committed; the snapshot waits
        log.warning("snapshot of the corrections not written (tried again after the next correction): %s", exc)
        return
    config = dict(active.version.config)
    config.update({"corrections": [], "base_artifact": name})
    try:
        mv = commit_version(ws, active.version.version, "correction", config, fp, name,
                            scorecard=active.version.scorecard, note="snapshot of corrections")
    except StaleVersion:
        return  # another process moved on; its version is loaded at the next refresh, the snapshot is unused
    except StoreError as exc:  # the folder is an orphan now, removed by a later open
        log.warning("snapshot of the corrections not recorded: %s", exc)
        return
    active.version, active.base_artifact, active.corrections = mv, name, []


def replay_pending(ws: Workspace) -> None:
    """Finish corrections journaled before a crash: they are learned now, none is lost or doubled."""
    pending = ws.store.pending_corrections()
    if not pending:
        return
    if ws._active is None:
        return  # no model yet: they stay journaled and are learned once a model exists and the workspace opens
    if ws.load_problem is not None:
        return  # they wait for a model that loads (rollback or train); nothing is lost, they stay journaled
    with ws.lock:
        for c in pending:
            if ws.store.get_correction(c.id).status != "pending":  # another process may have finished it
                continue
            try:
                commit_correction(ws, c)
            except (Conflict, StoreError) as exc:
                # another process (the one that journaled it, or another replayer) holds the store or keeps
                # moving the model: it stays journaled and is finished by that process or the next open
                log.warning("correction %d left pending for now: %s", c.id, exc)
                return
