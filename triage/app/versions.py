"""Model versions: listing them, activating one (rollback or forward), and adopting other cutoffs as a new
version of the same counts."""

from __future__ import annotations

from dataclasses import replace
from typing import TYPE_CHECKING, Any

from triage.app.active import (
    StaleVersion,
    commit_version,
    load_version,
    require_writable_model,
    version_config,
)
from triage.app.errors import BadInput, Conflict, UnknownQueue
from triage.app.measuring import measure
from triage.store import Correction, ModelVersion

if TYPE_CHECKING:
    from triage.app.workspace import Workspace


def models(ws: Workspace) -> list[ModelVersion]:
    return ws.store.model_versions()


def corrections_missing_from(ws: Workspace, version: int) -> list[Correction]:
    """The corrections in effect (applied, not undone, not an undo) that model version `version` has not
    learned, oldest first: made against it or a later version, or applied into a later one. What activating it
    leaves out of the model (they stay in the journal and the labels, and the next training learns them)."""
    return [c for c in ws.store.corrections(since_version=version) if c.status == "applied" and c.undo_of is None]


def activate(ws: Workspace, version: int) -> ModelVersion:
    """Roll back (or forward) to a stored version; it is loaded and checked before it is activated."""
    with ws.lock:
        mv = ws.store.get_model_version(version)
        loaded = load_version(ws, mv)
        mv = ws.store.activate_model(version)
        loaded.version = mv
        ws._active = loaded
        ws.load_problem = None
    return mv


def set_cutoffs(ws: Workspace, cutoffs: dict[str, float | None], by: str = "operator",
                scorecard: dict[str, Any] | None = None) -> ModelVersion:
    """Adopt other cutoffs as a new model version (same counts, new routing policy); rollback restores.

    A never-auto queue keeps no cutoff whatever is asked: a person sees every item predicted there."""
    with ws.lock:
        active = require_writable_model(ws)
        unknown = set(cutoffs) - set(active.model.queues)
        if unknown:
            raise UnknownQueue(f"unknown queue(s): {', '.join(sorted(unknown))}")
        for q, c in cutoffs.items():
            if c is not None and not 0.0 <= float(c) <= 1.0:
                raise BadInput(f"cutoff for {q!r} must be between 0 and 1, got {c}")
            if q in active.policy.never_auto and c is not None:
                raise BadInput(f"{q!r} is a never-auto queue: a person reviews every item, it takes no cutoff")
        if scorecard is None:  # the new version's scorecard: the test rows decided as it will decide
            meas = measure(ws, active.model.spec)
            merged = {**dict(meas.policy.cutoffs), **dict(active.policy.cutoffs), **cutoffs}
            scorecard = meas.score_under(replace(active.policy, cutoffs=merged)).to_dict()
        changed = ", ".join(f"{q} {'none' if c is None else f'{c:.3f}'}" for q, c in sorted(cutoffs.items()))
        for _attempt in range(5):
            ws.refresh_if_changed()  # build on the newest version, whoever made it
            active = require_writable_model(ws)
            merged = dict(active.policy.cutoffs)
            merged.update({q: None if c is None else float(c) for q, c in cutoffs.items()})
            policy = replace(active.policy, cutoffs=merged)
            try:
                mv = commit_version(ws, active.version.version, "adopt",
                                    version_config(active, policy=policy.to_dict()), active.version.fingerprint,
                                    active.base_artifact, scorecard=scorecard, note=f"cutoffs set by {by}: {changed}")
            except StaleVersion:
                continue
            active.version, active.policy = mv, policy
            return mv
        raise Conflict("the active model kept changing; the cutoffs were not set, try again")
