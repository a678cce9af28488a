"""Typed records the application layer hands to front ends: a routing decision, and reports of a run."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from triage.core.measure import Measurement
from triage.core.routing import HeldBy
from triage.ingest import IngestResult
from triage.store import Correction, ModelVersion


@dataclass(frozen=True)
class RoutingDecision:
    """One decision about one item: the queue (None when held), why it was held, the evidence behind it.

    `held_by` is decided once, in `triage.core.routing.decide`, and stored with the decision; `held` and
    `flag` derive from it. `to_dict()` is the JSON record every front end shows."""

    id: str
    suggested: str
    confidence: float
    runner_up: str | None
    runner_up_confidence: float
    held_by: HeldBy | None
    reason: str
    watch: tuple[str, ...]  # what a safeguard hold is about: watch-word hits or never-auto queues
    evidence: list[dict[str, Any]]
    unseen_words: list[str]
    model_version: int

    @property
    def held(self) -> bool:
        return self.held_by is not None

    @property
    def queue(self) -> str | None:
        return None if self.held else self.suggested

    @property
    def flag(self) -> str | None:
        """"never_auto": the top queue is one a person always sees; "watch": such a queue has a real chance."""
        if self.held_by is HeldBy.NEVER_AUTO:
            return "never_auto"
        return "watch" if self.held_by is not None and self.held_by.safeguard else None

    def to_dict(self) -> dict[str, Any]:
        return {"id": self.id, "queue": self.queue, "suggested": self.suggested, "confidence": self.confidence,
                "held": self.held, "held_by": self.held_by.value if self.held_by else None, "reason": self.reason,
                "runner_up": self.runner_up, "runner_up_confidence": self.runner_up_confidence,
                "flag": self.flag, "watch": list(self.watch), "evidence": self.evidence,
                "unseen_words": self.unseen_words, "model_version": self.model_version}


@dataclass
class TrainReport:
    """What one training run made: the activated version, its measurement and the settings compared."""

    version: ModelVersion
    measurement: Measurement
    selection: list[dict[str, Any]]
    n_items: int
    seconds: float
    warnings: list[str] = field(default_factory=list)


@dataclass
class ImportReport:
    """One import of a labelled export: the reader's result and what the store kept."""

    result: IngestResult
    added: int
    unchanged: int
    conflicts: list[Any]


@dataclass
class CorrectionReport:
    """One correction (or undo): the journal entry, the version it made and the item's queue before/after."""

    correction: Correction
    version: ModelVersion
    before: str | None
    after: str | None
    decision: dict[str, Any] | None = None
